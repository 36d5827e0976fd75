using System.Buffers.Binary;
using System.Globalization;
using Scorer.Engine.Numerics;

namespace Scorer.Statistics.Summaries;

/// <summary>
/// A mergeable summary of labelled predictions (p, y): the sums every report statistic is made of, so that the report
/// of any set of buckets is the report of their merged summary (<see cref="SummaryStatistics.Compute"/>). Exact parts:
/// the counts, Σy, Σp, Σ(y − p)², the log-loss sum, Spiegelhalter's numerator and variance, the 10 reliability bins and
/// the 10 Murphy bins (count, events, Σp). Approximate part: a fine two-class histogram of η = logit(p) (the calibration
/// fits' covariate; for a logit model its linear predictor), <see cref="Bins"/> bins of width <see cref="Width"/> over
/// [<see cref="Low"/>, −<see cref="Low"/>] (η beyond goes to the end bins), each bin holding, over its rows, the
/// non-events and events, Σd, Σd² and Σ_{y=1} d of d = η − the bin's centre, Σp, and the least and greatest p. The AUC
/// and its DeLong variance, the calibration intercept and slope, and the Hosmer–Lemeshow groups come from the bins.
/// </summary>
/// <remarks>
/// This class accumulates (<see cref="Add(double, byte)"/>, <see cref="Add(LabelledSummary)"/>) into dense bins, 80
/// bytes each, allocated when first used; <see cref="Write"/> stores only the occupied bins (68 bytes each), and
/// <see cref="Read"/> reads them back into a summary that merges with others. Not thread-safe.
/// </remarks>
public sealed class LabelledSummary
{
    /// <summary>The bins of η: 5120, of width 1/128 over [−20, 20] (docs/monitoring.md argues the choice).</summary>
    public const int Bins = 5120;

    /// <summary>The width of an η bin.</summary>
    public const double Width = 1.0 / 128.0;

    /// <summary>The lower end of the binned range of η; the range is symmetric.</summary>
    public const double Low = -20.0;

    /// <summary>The reliability and Murphy bins of p: 10, as the exact report's.</summary>
    public const int ProbabilityBins = 10;

    private const byte FormatVersion = 1;

    private long[]? _controls;
    private long[]? _cases;
    private double[]? _sumD;
    private double[]? _sumD2;
    private double[]? _sumDCases;
    private double[]? _binSumP;
    private double[]? _minP;
    private double[]? _maxP;
    private int _lowest = Bins;
    private int _highest = -1;

    /// <summary>The number of rows n.</summary>
    public long Count { get; private set; }

    /// <summary>The number of events Σy.</summary>
    public long Events { get; private set; }

    /// <summary>Σp.</summary>
    public double SumP => _sumP.Value;

    private CompensatedSum _sumP;

    /// <summary>Σ(y − p)².</summary>
    public double SumSquaredError => _sumSquaredError.Value;

    private CompensatedSum _sumSquaredError;

    /// <summary>−Σ(y ln p + (1 − y) ln(1 − p)), p clipped as <see cref="CalibrationStatistics.LogLossClip"/> says.</summary>
    public double SumLogLoss => _sumLogLoss.Value;

    private CompensatedSum _sumLogLoss;

    /// <summary>Σ(y − p)(1 − 2p).</summary>
    public double SpiegelhalterNumerator => _spiegelhalterNumerator.Value;

    private CompensatedSum _spiegelhalterNumerator;

    /// <summary>Σ(1 − 2p)² p(1 − p).</summary>
    public double SpiegelhalterVariance => _spiegelhalterVariance.Value;

    private CompensatedSum _spiegelhalterVariance;

    internal long[] ReliabilityCount { get; } = new long[ProbabilityBins];

    internal long[] ReliabilityEvents { get; } = new long[ProbabilityBins];

    internal double[] ReliabilitySum => [.. _reliabilitySum.Select(v => v.Value)];

    private readonly CompensatedSum[] _reliabilitySum = new CompensatedSum[ProbabilityBins];

    internal long[] MurphyCount { get; } = new long[ProbabilityBins];

    internal long[] MurphyEvents { get; } = new long[ProbabilityBins];

    internal double[] MurphySum => [.. _murphySum.Select(v => v.Value)];

    private readonly CompensatedSum[] _murphySum = new CompensatedSum[ProbabilityBins];

    /// <summary>The number of occupied η bins.</summary>
    public int OccupiedBins
    {
        get
        {
            var occupied = 0;
            for (var b = _lowest; b <= _highest; b++)
            {
                occupied += _controls![b] + _cases![b] > 0 ? 1 : 0;
            }

            return occupied;
        }
    }

    /// <summary>The bin of η: ⌊(η − Low)/Width⌋ within [0, Bins − 1].</summary>
    public static int BinOf(double eta)
    {
        var position = (eta - Low) * 128.0;
        return position <= 0 ? 0 : position >= Bins ? Bins - 1 : (int)position;
    }

    /// <summary>The centre of η bin <paramref name="bin"/>.</summary>
    public static double Centre(int bin) => Low + (bin + 0.5) * Width;

    /// <summary>Adds one labelled prediction.</summary>
    /// <exception cref="ArgumentException">p is NaN or outside [0, 1], or y is not 0 or 1.</exception>
    public void Add(double p, byte y)
    {
        if (!(p >= 0.0 && p <= 1.0))
        {
            throw new ArgumentException(string.Create(CultureInfo.InvariantCulture, $"p = {p} is not a probability in [0, 1]."), nameof(p));
        }

        if (y > 1)
        {
            throw new ArgumentException(string.Create(CultureInfo.InvariantCulture, $"y = {y}; an outcome is 0 or 1."), nameof(y));
        }

        Count++;
        Events += y;
        _sumP.Add(p);
        var residual = y - p;
        _sumSquaredError.Add(residual * residual);
        var clipped = Math.Clamp(p, CalibrationStatistics.LogLossClip, 1.0 - CalibrationStatistics.LogLossClip);
        _sumLogLoss.Add(-(y == 1 ? Math.Log(clipped) : Elementary.Log1P(-clipped)));
        var oneMinusTwoP = 1.0 - 2.0 * p;
        _spiegelhalterNumerator.Add(residual * oneMinusTwoP);
        _spiegelhalterVariance.Add(oneMinusTwoP * oneMinusTwoP * p * (1.0 - p));
        var r = ReliabilityTable.BinIndex(p, ProbabilityBins);
        ReliabilityCount[r]++;
        ReliabilityEvents[r] += y;
        _reliabilitySum[r].Add(p);
        var m = Math.Min((int)Math.Floor(ProbabilityBins * p), ProbabilityBins - 1);
        MurphyCount[m]++;
        MurphyEvents[m] += y;
        _murphySum[m].Add(p);

        var eta = LogisticFit.Logit(p);
        var b = BinOf(eta);
        Allocate();
        Touch(b);
        var d = eta - Centre(b);
        if (y == 1)
        {
            _cases![b]++;
            _sumDCases![b] += d;
        }
        else
        {
            _controls![b]++;
        }

        _sumD![b] += d;
        _sumD2![b] += d * d;
        _binSumP![b] += p;
        _minP![b] = Math.Min(_minP[b], p);
        _maxP![b] = Math.Max(_maxP[b], p);
    }

    /// <summary>Adds every row of <paramref name="other"/> (which is left unchanged).</summary>
    public void Add(LabelledSummary other)
    {
        ArgumentNullException.ThrowIfNull(other);
        Count += other.Count;
        Events += other.Events;
        _sumP.Add(other._sumP);
        _sumSquaredError.Add(other._sumSquaredError);
        _sumLogLoss.Add(other._sumLogLoss);
        _spiegelhalterNumerator.Add(other._spiegelhalterNumerator);
        _spiegelhalterVariance.Add(other._spiegelhalterVariance);
        for (var k = 0; k < ProbabilityBins; k++)
        {
            ReliabilityCount[k] += other.ReliabilityCount[k];
            ReliabilityEvents[k] += other.ReliabilityEvents[k];
            _reliabilitySum[k].Add(other._reliabilitySum[k]);
            MurphyCount[k] += other.MurphyCount[k];
            MurphyEvents[k] += other.MurphyEvents[k];
            _murphySum[k].Add(other._murphySum[k]);
        }

        if (other._highest < 0)
        {
            return;
        }

        Allocate();
        for (var b = other._lowest; b <= other._highest; b++)
        {
            if (other._controls![b] + other._cases![b] == 0)
            {
                continue;
            }

            Touch(b);
            _controls![b] += other._controls[b];
            _cases![b] += other._cases[b];
            _sumD![b] += other._sumD![b];
            _sumD2![b] += other._sumD2![b];
            _sumDCases![b] += other._sumDCases![b];
            _binSumP![b] += other._binSumP![b];
            _minP![b] = Math.Min(_minP[b], other._minP![b]);
            _maxP![b] = Math.Max(_maxP[b], other._maxP![b]);
        }
    }

    /// <summary>The occupied η bins in ascending order, for the statistics.</summary>
    internal IEnumerable<EtaBin> OccupiedEtaBins()
    {
        for (var b = _lowest; b <= _highest; b++)
        {
            var n = _controls![b] + _cases![b];
            if (n > 0)
            {
                yield return new EtaBin(b, _controls[b], _cases[b], _sumD![b], _sumD2![b], _sumDCases![b], _binSumP![b], _minP![b], _maxP![b]);
            }
        }
    }

    /// <summary>The summary in its stored form (little-endian, only the occupied bins): docs/monitoring.md gives the layout.</summary>
    public byte[] Write()
    {
        var occupied = OccupiedBins;
        var size = 1 + 8 * 2 + 8 * 5 + ProbabilityBins * 6 * 8 + 4 + occupied * BinBytes;
        var bytes = new byte[size];
        bytes[0] = FormatVersion;
        var at = 1;
        void Long(long v)
        {
            BinaryPrimitives.WriteInt64LittleEndian(bytes.AsSpan(at), v);
            at += 8;
        }

        void Double(double v)
        {
            BinaryPrimitives.WriteDoubleLittleEndian(bytes.AsSpan(at), v);
            at += 8;
        }

        Long(Count);
        Long(Events);
        Double(SumP);
        Double(SumSquaredError);
        Double(SumLogLoss);
        Double(SpiegelhalterNumerator);
        Double(SpiegelhalterVariance);
        for (var k = 0; k < ProbabilityBins; k++)
        {
            Long(ReliabilityCount[k]);
            Long(ReliabilityEvents[k]);
            Double(_reliabilitySum[k].Value);
            Long(MurphyCount[k]);
            Long(MurphyEvents[k]);
            Double(_murphySum[k].Value);
        }

        BinaryPrimitives.WriteInt32LittleEndian(bytes.AsSpan(at), occupied);
        at += 4;
        for (var b = _lowest; b <= _highest; b++)
        {
            if (_controls![b] + _cases![b] == 0)
            {
                continue;
            }

            BinaryPrimitives.WriteInt32LittleEndian(bytes.AsSpan(at), b);
            at += 4;
            Long(_controls[b]);
            Long(_cases[b]);
            Double(_sumD![b]);
            Double(_sumD2![b]);
            Double(_sumDCases![b]);
            Double(_binSumP![b]);
            Double(_minP![b]);
            Double(_maxP![b]);
        }

        return bytes;
    }

    private const int BinBytes = 4 + 8 * 8;

    /// <summary>Reads a summary written by <see cref="Write"/>.</summary>
    /// <exception cref="FormatException">The bytes are not a summary of this format.</exception>
    public static LabelledSummary Read(ReadOnlySpan<byte> bytes)
    {
        var summary = new LabelledSummary();
        summary.AddStored(bytes);
        return summary;
    }

    /// <summary>
    /// Adds the rows of a summary written by <see cref="Write"/> straight from its bytes, so that a reader can keep
    /// stored summaries (68 bytes per occupied bin) and merge them without holding dense bins for each.
    /// </summary>
    /// <exception cref="FormatException">The bytes are not a summary of this format; nothing is added then.</exception>
    public void AddStored(ReadOnlySpan<byte> bytes)
    {
        const int fixedBytes = 1 + 8 * 2 + 8 * 5 + ProbabilityBins * 6 * 8 + 4;
        if (bytes.Length < fixedBytes || bytes[0] != FormatVersion)
        {
            throw new FormatException($"Not a labelled summary of format {FormatVersion} ({bytes.Length} bytes).");
        }

        var occupied = BinaryPrimitives.ReadInt32LittleEndian(bytes[(fixedBytes - 4)..]);
        if (occupied < 0 || occupied > Bins || bytes.Length != fixedBytes + (long)occupied * BinBytes)
        {
            throw new FormatException($"A labelled summary of {bytes.Length} bytes cannot hold {occupied} bins.");
        }

        var previous = -1;
        for (var i = 0; i < occupied; i++)
        {
            var b = BinaryPrimitives.ReadInt32LittleEndian(bytes[(fixedBytes + i * BinBytes)..]);
            if (b <= previous || b >= Bins)
            {
                throw new FormatException($"Bin {b} of a labelled summary is out of order or range.");
            }

            previous = b;
        }

        var at = 1;
        long Long(ReadOnlySpan<byte> s)
        {
            var v = BinaryPrimitives.ReadInt64LittleEndian(s[at..]);
            at += 8;
            return v;
        }

        double Double(ReadOnlySpan<byte> s)
        {
            var v = BinaryPrimitives.ReadDoubleLittleEndian(s[at..]);
            at += 8;
            return v;
        }

        Count += Long(bytes);
        Events += Long(bytes);
        _sumP.Add(Double(bytes));
        _sumSquaredError.Add(Double(bytes));
        _sumLogLoss.Add(Double(bytes));
        _spiegelhalterNumerator.Add(Double(bytes));
        _spiegelhalterVariance.Add(Double(bytes));
        for (var k = 0; k < ProbabilityBins; k++)
        {
            ReliabilityCount[k] += Long(bytes);
            ReliabilityEvents[k] += Long(bytes);
            _reliabilitySum[k].Add(Double(bytes));
            MurphyCount[k] += Long(bytes);
            MurphyEvents[k] += Long(bytes);
            _murphySum[k].Add(Double(bytes));
        }

        at += 4;
        if (occupied > 0)
        {
            Allocate();
        }

        for (var i = 0; i < occupied; i++)
        {
            var b = BinaryPrimitives.ReadInt32LittleEndian(bytes[at..]);
            at += 4;
            Touch(b);
            _controls![b] += Long(bytes);
            _cases![b] += Long(bytes);
            _sumD![b] += Double(bytes);
            _sumD2![b] += Double(bytes);
            _sumDCases![b] += Double(bytes);
            _binSumP![b] += Double(bytes);
            _minP![b] = Math.Min(_minP[b], Double(bytes));
            _maxP![b] = Math.Max(_maxP[b], Double(bytes));
        }
    }

    private void Allocate()
    {
        if (_controls is not null)
        {
            return;
        }

        _controls = new long[Bins];
        _cases = new long[Bins];
        _sumD = new double[Bins];
        _sumD2 = new double[Bins];
        _sumDCases = new double[Bins];
        _binSumP = new double[Bins];
        _minP = new double[Bins];
        _maxP = new double[Bins];
        _minP.AsSpan().Fill(double.PositiveInfinity);
        _maxP.AsSpan().Fill(double.NegativeInfinity);
    }

    private void Touch(int b)
    {
        if (b < _lowest)
        {
            _lowest = b;
        }

        if (b > _highest)
        {
            _highest = b;
        }
    }
}

/// <summary>
/// Neumaier's compensated sum (Neumaier 1974, an improvement of Kahan's): the rounding error of each addition is
/// kept and added back, so a sum of millions of terms is good to a few units in the last place whatever their order.
/// </summary>
internal struct CompensatedSum
{
    private double _sum;
    private double _compensation;

    public readonly double Value => _sum + _compensation;

    public void Add(double x)
    {
        var t = _sum + x;
        _compensation += Math.Abs(_sum) >= Math.Abs(x) ? (_sum - t) + x : (x - t) + _sum;
        _sum = t;
    }

    public void Add(CompensatedSum other)
    {
        Add(other._sum);
        Add(other._compensation);
    }
}

/// <summary>One occupied η bin of a <see cref="LabelledSummary"/>: d = η − the bin's centre.</summary>
internal readonly record struct EtaBin(int Bin, long Controls, long Cases, double SumD, double SumD2, double SumDCases, double SumP, double MinP, double MaxP)
{
    public long Count => Controls + Cases;
}
