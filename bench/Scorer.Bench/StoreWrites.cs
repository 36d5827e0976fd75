using System.Diagnostics;
using System.Globalization;
using Scorer.Store;
using Scorer.Store.Sqlite;

namespace Scorer.Bench;

/// <summary>
/// Prediction-log writes straight into a store: seeded rows (a pump snapshot's features as JSON, a key per row when
/// asked), written in batches as the log writer does, timed per batch; prints the median batch rate and the overall rate.
/// </summary>
internal static class StoreWrites
{
    public static async Task RunAsync(string store, int rows, int batchSize, bool keyed)
    {
        await using var target = SqliteScorerStore.ForFile(store);
        await target.MigrateAsync();
        var random = new Random(20261202);
        var start = new DateTimeOffset(2026, 12, 2, 0, 0, 0, TimeSpan.Zero);
        var batch = new List<PredictionRecord>(batchSize);
        var rates = new List<double>();
        var total = Stopwatch.StartNew();
        for (var written = 0; written < rows; written += batchSize)
        {
            batch.Clear();
            for (var i = 0; i < batchSize; i++)
            {
                var at = start.AddTicks((written + i) * 10L);
                var vibration = 1 + (4 * random.NextDouble());
                var features = string.Create(CultureInfo.InvariantCulture,
                    $"{{\"vibration_rms\":{vibration:R},\"bearing_temp_c\":{50 + (20 * random.NextDouble()):R},\"hours_since_service\":{random.Next(0, 6000)},\"site\":\"river\"}}");
                batch.Add(new PredictionRecord(Guid.CreateVersion7(at), "pump-bearing-failure", "2026.11.1", Stage.Live, at,
                    keyed ? "WO-" + random.Next().ToString(CultureInfo.InvariantCulture) : null, -1.4 + random.NextDouble(), 0.2, features));
            }

            var timer = Stopwatch.StartNew();
            await target.WritePredictionsAsync(batch);
            rates.Add(batchSize / timer.Elapsed.TotalSeconds);
        }

        rates.Sort();
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"{rows:N0} rows in batches of {batchSize:N0} ({(keyed ? "random keys" : "no keys")}): median batch {rates[rates.Count / 2]:N0} rows/s, overall {rows / total.Elapsed.TotalSeconds:N0} rows/s (row building included)"));
    }
}
