using System.Diagnostics;
using System.Globalization;
using Grpc.Net.Client;
using Scorer.Transport.V1;

namespace Scorer.Bench;

/// <summary>
/// `--grpc-dense URL SECONDS [ROWS]`: drives one ScoreDenseStream with messages of ROWS (default 1,000) seeded pump
/// snapshots, up to 8 messages in flight, for SECONDS, and prints the rows per second answered. Loopback only.
/// </summary>
internal static class DenseStreamLoad
{
    public static async Task RunAsync(string url, double seconds, int rowsPerMessage)
    {
        using var channel = GrpcChannel.ForAddress(url);
        var client = new Scoring.ScoringClient(channel);
        var random = new Random(5);
        var message = new DenseScoreRequest { Model = "pump-bearing-failure", Features = { "vibration_rms", "bearing_temp_c", "hours_since_service", "site" } };
        for (var r = 0; r < rowsPerMessage; r++)
        {
            message.Values.Add(1 + (6 * random.NextDouble()));
            message.Values.Add(40 + (30 * random.NextDouble()));
            message.Values.Add(Math.Round(7000 * random.NextDouble()));
            message.Values.Add(random.Next(3));
        }

        using var call = client.ScoreDenseStream();
        using var window = new SemaphoreSlim(8);
        long answered = 0;
        var clock = Stopwatch.StartNew();
        var reader = Task.Run(async () =>
        {
            while (await call.ResponseStream.MoveNext(CancellationToken.None))
            {
                Interlocked.Add(ref answered, call.ResponseStream.Current.Eta.Count);
                window.Release();
            }
        });
        while (clock.Elapsed.TotalSeconds < seconds)
        {
            await window.WaitAsync();
            await call.RequestStream.WriteAsync(message);
        }

        await call.RequestStream.CompleteAsync();
        await reader;
        var elapsed = clock.Elapsed.TotalSeconds;
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture, $"{Interlocked.Read(ref answered) / elapsed:F0} rows/s ({answered} rows in {elapsed:F1} s, {rowsPerMessage} rows per message)"));
    }
}
