using System.Diagnostics;
using System.Globalization;
using Npgsql;
using Scorer.Store;
using Scorer.Store.Postgres;
using static Scorer.Bench.OutcomeIngestion;

namespace Scorer.Bench;

/// <summary>
/// `--postgres CONNECTION PREDICTIONS [BATCH]`: the PostgreSQL store's prediction-log writes (binary COPY) and outcome
/// ingestion, through <see cref="IScorerStore"/>, on the server CONNECTION names (an Npgsql connection string, e.g. the
/// one `scripts/postgres.sh start DIR` prints; keep its durability settings: fsync and synchronous_commit on).
/// </summary>
/// <remarks>
/// The invented log of <c>--outcomes</c> (<see cref="InventedLog"/>: PREDICTIONS rows over seven days, seeded, each
/// with the key "WO-n"), each run in a fresh schema of its own, dropped after:
/// 1. prediction writes in batches of 2,000 (the prediction log's default batch), without keys and with keys;
/// 2. outcome reports for every prediction in batches of BATCH (default 1,000), by id in a seeded shuffled order, by id
///    in scoring order, and by key shuffled; ConflictPolicy.KeepFirst; each after VACUUM ANALYZE of the freshly
///    written log (as autovacuum would have run by the time outcomes come back).
/// An untimed warm-up (40,000 rows written and labelled in a schema of its own) comes first.
/// Each call is timed alone; prints the median batch rate (p10, p90) and the overall rate of each, and the CPU time
/// each phase cost: the client process's, and the server's (the store's backend processes, found by application name
/// in pg_stat_activity and read from /proc, so the server must run on this machine), as rows per CPU second. On a
/// shared machine the wall rates depend on what else runs; the CPU rates much less.
/// </remarks>
internal static class PostgresWrites
{
    private const int WriteBatch = 2_000;

    private const string ApplicationName = "scorer-bench";

    public static async Task RunAsync(string connectionString, int predictions, int batchSize)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(predictions, WriteBatch);
        ArgumentOutOfRangeException.ThrowIfLessThan(batchSize, 1);
        connectionString = new NpgsqlConnectionStringBuilder(connectionString) { ApplicationName = ApplicationName }.ConnectionString;
        var data = new InventedLog(predictions, 20261203);
        await using (var probe = new NpgsqlConnection(connectionString))
        {
            await probe.OpenAsync();
            await using var settings = new NpgsqlCommand(
                "SELECT version(), current_setting('fsync'), current_setting('synchronous_commit'), current_setting('shared_buffers')", probe);
            await using var reader = await settings.ExecuteReaderAsync();
            await reader.ReadAsync();
            Console.WriteLine($"{reader.GetString(0)}; fsync {reader.GetString(1)}, synchronous_commit {reader.GetString(2)}, shared_buffers {reader.GetString(3)}");
        }

        await using (var calibration = new NpgsqlConnection(connectionString))
        {
            // How fast this server's executor runs now, to compare runs on machines of different speed or load.
            await calibration.OpenAsync();
            await using var sum = new NpgsqlCommand("SELECT sum(i) FROM generate_series(1, 10000000) i", calibration);
            var timer = Stopwatch.StartNew();
            await sum.ExecuteScalarAsync();
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"calibration: SELECT sum(i) FROM generate_series(1, 10000000) took {timer.Elapsed.TotalSeconds:F2} s; load average {File.ReadAllText("/proc/loadavg").Split(' ')[0]} on {Environment.ProcessorCount} cores"));
        }

        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"{predictions:N0} invented predictions, {data.Events:N0} with outcome 1; writes in batches of {WriteBatch:N0}, outcomes in batches of {batchSize:N0}"));

        // Warm-up, untimed: the first batches pay for JIT compilation and the pool's connections.
        await InSchemaAsync(connectionString, async store =>
        {
            var warm = new InventedLog(20 * WriteBatch, 7);
            await WriteQuietlyAsync(store, warm);
            await IngestAsync(store, warm, warm.Order, batchSize, byKey: false, label: null);
        });

        await InSchemaAsync(connectionString, async store => await WriteAsync(store, data, keyed: false));

        var timeOrder = Enumerable.Range(0, data.Count).ToArray();
        foreach (var (label, order, byKey) in new[] { ("by id, shuffled", data.Order, false), ("by id, scoring order", timeOrder, false), ("by key, shuffled", data.Order, true) })
        {
            await InSchemaAsync(connectionString, async store =>
            {
                if (!byKey && order == data.Order)
                {
                    await WriteAsync(store, data, keyed: true);
                }
                else
                {
                    await WriteQuietlyAsync(store, data);
                }

                await IngestAsync(store, data, order, batchSize, byKey, label);
            });
        }
    }

    private static async Task InSchemaAsync(string connectionString, Func<PostgresScorerStore, Task> run)
    {
        var schema = "bench_" + Guid.NewGuid().ToString("N");
        try
        {
            await using var store = PostgresScorerStore.ForConnectionString(connectionString, new PostgresStoreOptions { Schema = schema });
            await store.MigrateAsync();
            await run(store);
        }
        finally
        {
            await using var connection = new NpgsqlConnection(connectionString);
            await connection.OpenAsync();
            await using var drop = new NpgsqlCommand($"DROP SCHEMA IF EXISTS {schema} CASCADE", connection);
            await drop.ExecuteNonQueryAsync();
        }
    }

    private static async Task WriteAsync(PostgresScorerStore store, InventedLog data, bool keyed)
    {
        var rates = new List<double>();
        var batch = new List<PredictionRecord>(WriteBatch);
        var cpu = await CpuMeter.StartAsync(store);
        var total = Stopwatch.StartNew();
        var building = TimeSpan.Zero;
        for (var from = 0; from < data.Count; from += WriteBatch)
        {
            var build = Stopwatch.StartNew();
            batch.Clear();
            for (var i = from; i < Math.Min(data.Count, from + WriteBatch); i++)
            {
                var record = data.Record(i);
                batch.Add(keyed ? record : record with { Key = null });
            }

            building += build.Elapsed;
            var timer = Stopwatch.StartNew();
            await store.WritePredictionsAsync(batch);
            rates.Add(batch.Count / timer.Elapsed.TotalSeconds);
        }

        var (client, server) = await cpu.StopAsync(building);
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"  writes ({(keyed ? "keyed" : "no keys")}), binary COPY: median batch {Median(rates):N0} rows/s (p10 {Quantile(rates, 0.1):N0}, p90 {Quantile(rates, 0.9):N0}); overall {data.Count / (total.Elapsed - building).TotalSeconds:N0} rows/s (row building excluded)"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"    CPU: server {data.Count / server:N0} rows per CPU second ({1e6 * server / data.Count:F1} µs/row), client {data.Count / client:N0} rows per CPU second ({1e6 * client / data.Count:F1} µs/row)"));
    }

    private static async Task WriteQuietlyAsync(IScorerStore store, InventedLog data)
    {
        var batch = new List<PredictionRecord>(WriteBatch);
        for (var from = 0; from < data.Count; from += WriteBatch)
        {
            batch.Clear();
            for (var i = from; i < Math.Min(data.Count, from + WriteBatch); i++)
            {
                batch.Add(data.Record(i));
            }

            await store.WritePredictionsAsync(batch);
        }
    }

    /// <summary>Reports an outcome for every prediction of <paramref name="data"/>, in <paramref name="order"/>; prints the rates unless <paramref name="label"/> is null.</summary>
    private static async Task IngestAsync(PostgresScorerStore store, InventedLog data, int[] order, int batchSize, bool byKey, string? label)
    {
        await using (var connection = await store.OpenAsync(CancellationToken.None))
        {
            await using var analyze = new NpgsqlCommand("VACUUM ANALYZE predictions", connection); // as autovacuum would have by now
            await analyze.ExecuteNonQueryAsync();
        }

        var rates = new List<double>();
        var reports = new List<OutcomeReport>(batchSize);
        int accepted = 0, duplicates = 0, unknown = 0, conflicts = 0;
        var cpu = await CpuMeter.StartAsync(store);
        var total = Stopwatch.StartNew();
        for (var from = 0; from < data.Count; from += batchSize)
        {
            reports.Clear();
            for (var k = from; k < Math.Min(data.Count, from + batchSize); k++)
            {
                var i = order[k];
                reports.Add(byKey ? new OutcomeReport(null, data.Keys[i], data.Y[i]) : new OutcomeReport(data.Ids[i], null, data.Y[i]));
            }

            var timer = Stopwatch.StartNew();
            var receipt = await store.RecordOutcomesAsync(Model, reports, ConflictPolicy.KeepFirst, RecordedAt);
            rates.Add(reports.Count / timer.Elapsed.TotalSeconds);
            accepted += receipt.Accepted;
            duplicates += receipt.Duplicates;
            unknown += receipt.Unknown.Count;
            conflicts += receipt.Conflicts.Count;
        }

        var elapsed = total.Elapsed;
        var (client, server) = await cpu.StopAsync(TimeSpan.Zero);
        if (label is null)
        {
            return;
        }

        var half = rates.Count / 2;
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"  outcomes {label}: median batch {Median(rates):N0} outcomes/s (p10 {Quantile(rates, 0.1):N0}, p90 {Quantile(rates, 0.9):N0}); overall {data.Count / elapsed.TotalSeconds:N0} outcomes/s; first half median {Median(rates.Take(half).ToList()):N0}, second half {Median(rates.Skip(half).ToList()):N0}"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"    CPU: server {data.Count / server:N0} outcomes per CPU second ({1e6 * server / data.Count:F1} µs each), client {data.Count / client:N0} per CPU second ({1e6 * client / data.Count:F1} µs each)"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"    receipts: {accepted:N0} accepted, {duplicates} duplicates, {unknown} unknown, {conflicts} conflicts"));
    }

    /// <summary>CPU seconds of this process and of the store's server backends between a start and a stop.</summary>
    private sealed class CpuMeter
    {
        private readonly PostgresScorerStore _store;
        private readonly TimeSpan _client;
        private readonly Dictionary<int, double> _server;

        private CpuMeter(PostgresScorerStore store, TimeSpan client, Dictionary<int, double> server)
        {
            _store = store;
            _client = client;
            _server = server;
        }

        public static async Task<CpuMeter> StartAsync(PostgresScorerStore store) =>
            new(store, Process.GetCurrentProcess().TotalProcessorTime, await BackendsAsync(store));

        /// <summary>Client and server CPU seconds since the start; <paramref name="exclude"/> is taken off the client's (row building).</summary>
        public async Task<(double Client, double Server)> StopAsync(TimeSpan exclude)
        {
            var client = (Process.GetCurrentProcess().TotalProcessorTime - _client - exclude).TotalSeconds;
            var server = 0.0;
            foreach (var (pid, seconds) in await BackendsAsync(_store))
            {
                server += seconds - _server.GetValueOrDefault(pid);
            }

            return (client, server);
        }

        /// <summary>CPU seconds so far of every backend serving this bench (utime + stime from /proc/PID/stat).</summary>
        private static async Task<Dictionary<int, double>> BackendsAsync(PostgresScorerStore store)
        {
            var pids = new List<int>();
            await using (var connection = await store.OpenAsync(CancellationToken.None))
            {
                await using var command = new NpgsqlCommand("SELECT pid FROM pg_stat_activity WHERE application_name = $1", connection);
                command.Parameters.Add(new NpgsqlParameter<string> { TypedValue = ApplicationName });
                await using var reader = await command.ExecuteReaderAsync();
                while (await reader.ReadAsync())
                {
                    pids.Add(reader.GetInt32(0));
                }
            }

            var ticks = 100.0; // USER_HZ on Linux
            var cpu = new Dictionary<int, double>();
            foreach (var pid in pids)
            {
                var path = $"/proc/{pid}/stat";
                if (!File.Exists(path))
                {
                    continue;
                }

                var stat = await File.ReadAllTextAsync(path);
                var fields = stat[(stat.LastIndexOf(')') + 2)..].Split(' ');
                cpu[pid] = (long.Parse(fields[11], CultureInfo.InvariantCulture) + long.Parse(fields[12], CultureInfo.InvariantCulture)) / ticks;
            }

            return cpu;
        }
    }
}
