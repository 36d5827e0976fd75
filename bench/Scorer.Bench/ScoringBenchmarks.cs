using BenchmarkDotNet.Attributes;
using Scorer.Engine;
using Scorer.Engine.Scoring;

namespace Scorer.Bench;

/// <summary>
/// Rows per second of the scoring paths, with and without the band, single-threaded and batch-parallel, against the
/// ceiling: a bare scalar and a bare SIMD loop doing the same arithmetic on pre-built design rows. One operation = one
/// row (OperationsPerInvoke), so BenchmarkDotNet's "Mean" is the time per row.
/// </summary>
[MemoryDiagnoser]
public class ScoringBenchmarks
{
    private CompiledModel _model = null!;
    private NamedValue[][] _named = null!;
    private double[] _dense = null!;
    private double[] _design = null!;
    private ScoredRow[] _results = null!;
    private Ceiling _ceiling = null!;
    private double[] _eta = null!;
    private double[] _se = null!;

    [Params(true, false)]
    public bool Band { get; set; }

    private ScoreSettings Settings => Band ? ScoreSettings.Default : ScoreSettings.PointOnly;

    [GlobalSetup]
    public void Setup()
    {
        _model = CompiledModel.Compile(BenchModel.Document());
        (_named, _dense, _design) = BenchModel.Data(_model);
        _results = new ScoredRow[BenchModel.Rows];
        _ceiling = new Ceiling(_model);
        _eta = new double[BenchModel.Rows];
        _se = new double[BenchModel.Rows];
    }

    [Benchmark(OperationsPerInvoke = BenchModel.Rows)]
    public void NamedRows()
    {
        var settings = Settings;
        for (var r = 0; r < _named.Length; r++)
        {
            _results[r] = _model.Score(_named[r], settings);
        }
    }

    [Benchmark(OperationsPerInvoke = BenchModel.Rows)]
    public void NamedRowsParallel()
    {
        var settings = Settings;
        Parallel.For(0, 2, part =>
        {
            var half = _named.Length / 2;
            for (var r = part * half; r < (part + 1) * half; r++)
            {
                _results[r] = _model.Score(_named[r], settings);
            }
        });
    }

    [Benchmark(OperationsPerInvoke = BenchModel.Rows)]
    public void DenseBatch() => _model.ScoreBatch(_dense, _results, Settings);

    [Benchmark(OperationsPerInvoke = BenchModel.Rows)]
    public void DenseBatchParallel()
    {
        var settings = Settings;
        Parallel.For(0, 2, part =>
        {
            var half = BenchModel.Rows / 2;
            var f = _model.FeatureCount;
            _model.ScoreBatch(_dense.AsSpan(part * half * f, half * f), _results.AsSpan(part * half, half), settings);
        });
    }

    [Benchmark(OperationsPerInvoke = BenchModel.Rows)]
    public void CeilingScalar() => _ceiling.Scalar(_design, _eta, _se, Band);

    [Benchmark(OperationsPerInvoke = BenchModel.Rows)]
    public void CeilingSimd() => _ceiling.Simd(_design, _eta, _se, Band);

    [Benchmark(OperationsPerInvoke = BenchModel.Rows)]
    public void CeilingSimdRows() => _ceiling.SimdRows(_design, _eta, _se, Band);
}
