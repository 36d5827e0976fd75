using System.Diagnostics;
using System.Globalization;

namespace Scorer.Bench;

/// <summary>
/// `--quick`: each scoring path and the ceiling, interleaved, in rounds of about 0.2 s each; prints the median rows/s of
/// each and its ratio to the best ceiling measured in the same run. Fast to run, for iterating; BenchmarkDotNet gives
/// the figures for docs/performance.md.
/// </summary>
internal static class QuickRun
{
    public static void Run(int rounds)
    {
        var results = new List<(string Name, double RowsPerSecond, double Ratio)>();
        foreach (var band in new[] { true, false })
        {
            var b = new ScoringBenchmarks { Band = band };
            b.Setup();
            var cases = new (string Name, Action Body, int Threads)[]
            {
                ("ceiling scalar", b.CeilingScalar, 1),
                ("ceiling SIMD, by columns of L", b.CeilingSimd, 1),
                ("ceiling SIMD, by rows of Lᵀ", b.CeilingSimdRows, 1),
                ("named rows", b.NamedRows, 1),
                ("dense batch", b.DenseBatch, 1),
                ("named rows, 2 threads", b.NamedRowsParallel, 2),
                ("dense batch, 2 threads", b.DenseBatchParallel, 2),
            };
            var samples = cases.Select(_ => new List<double>()).ToArray();
            for (var round = 0; round < rounds; round++)
            {
                for (var c = 0; c < cases.Length; c++)
                {
                    samples[c].Add(Measure(cases[c].Body));
                }
            }

            var medians = samples.Select(Median).ToArray();
            var ceiling = Math.Max(medians[0], Math.Max(medians[1], medians[2]));
            for (var c = 0; c < cases.Length; c++)
            {
                var perCore = medians[c] / cases[c].Threads;
                results.Add(($"{cases[c].Name} ({(band ? "band" : "point")})", medians[c], perCore / ceiling));
            }
        }

        Console.WriteLine("| path | rows/s (median) | per core ÷ best ceiling |");
        Console.WriteLine("| --- | ---: | ---: |");
        foreach (var (name, rps, ratio) in results)
        {
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"| {name} | {rps:N0} | {ratio:P0} |"));
        }
    }

    private static double Measure(Action body)
    {
        body();
        var sw = Stopwatch.StartNew();
        long calls = 0;
        while (sw.ElapsedMilliseconds < 200)
        {
            body();
            calls++;
        }

        return calls * BenchModel.Rows / sw.Elapsed.TotalSeconds;
    }

    private static double Median(List<double> xs)
    {
        var s = xs.Order().ToArray();
        return s.Length % 2 == 1 ? s[s.Length / 2] : 0.5 * (s[(s.Length / 2) - 1] + s[s.Length / 2]);
    }
}
