using System.Diagnostics;
using System.Globalization;
using Microsoft.Data.Sqlite;
using Scorer.Store;
using Scorer.Store.Sqlite;
using SQLitePCL;

namespace Scorer.Bench;

/// <summary>
/// `--outcomes FILE PREDICTIONS BATCH`: outcome ingestion into the SQLite store. Writes PREDICTIONS invented predictions
/// (seeded generator; each with the key "WO-n"), then records an outcome for every one of them with
/// <see cref="IScorerStore.RecordOutcomesAsync"/> in batches of BATCH, in a seeded shuffled order (outcomes do not come
/// back in the order the rows were scored): once by id into FILE, once by key into a second fresh store beside it.
/// Prints the median batch rate and the overall rate of each mode.
/// </summary>
/// <remarks>
/// Then, on copies of the by-id database as the store left it half-way (no store involved: raw SQL over
/// Microsoft.Data.Sqlite and SQLitePCLRaw), the store's per-report statements taken apart and the candidate changes,
/// each over the same next reports of the same order (a few untimed batches first, to warm the page cache), in
/// interleaved rounds on fresh copies; the same-run baseline is the replica of the store's own SQL (A by id, K by key).
/// Rates are given per wall second and per thread-CPU second (the machine is shared), with SQLite's page-cache
/// counters. FILE and its siblings (FILE.bykey, and FILE.pristine, FILE.exp while running; e.g. /tmp/o.db gives
/// /tmp/o.bykey.db) are deleted and recreated.
/// </remarks>
internal static class OutcomeIngestion
{
    internal const string Model = "pump-bearing-failure";
    internal const string Version = "2026.11.1";
    private const int Rounds = 5;
    private const int ExperimentBatches = 10;
    private const int WarmBatches = 5;

    internal static readonly DateTimeOffset Start = new(2026, 12, 2, 0, 0, 0, TimeSpan.Zero);
    internal static readonly DateTimeOffset RecordedAt = new(2026, 12, 9, 0, 0, 0, TimeSpan.Zero);

    public static async Task RunAsync(string file, int predictions, int batchSize, bool experiments = true)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(predictions, 1);
        ArgumentOutOfRangeException.ThrowIfLessThan(batchSize, 1);
        file = Path.GetFullPath(file);
        var byKeyFile = Sibling(file, "bykey");
        var pristine = Sibling(file, "pristine");
        var scratch = Sibling(file, "exp");
        var data = new InventedLog(predictions, 20261203);
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"{predictions:N0} invented predictions, {data.Events:N0} with outcome 1; outcomes reported in batches of {batchSize:N0}, shuffled order, ConflictPolicy.KeepFirst"));

        // 1. Through the store: by id, then by key on a second fresh store.
        // The experiments start from the database as the store left it half-way through (outcomes for the first half).
        await PrepareAsync(file, data);
        await IngestAsync(file, data, batchSize, byKey: false, halfway: pristine);
        await PrepareAsync(byKeyFile, data);
        await IngestAsync(byKeyFile, data, batchSize, byKey: true, halfway: null);

        // 2. Where the time goes, and what a change would gain: raw SQL on copies of the half-way database.
        if (experiments)
        {
            Experiments(pristine, scratch, data, batchSize);
        }

        DeleteDatabase(pristine);
        DeleteDatabase(scratch);
    }

    internal static async Task PrepareAsync(string file, InventedLog data)
    {
        DeleteDatabase(file);
        var timer = Stopwatch.StartNew();
        await using (var store = SqliteScorerStore.ForFile(file))
        {
            await store.MigrateAsync();
            const int writeBatch = 10_000;
            var batch = new List<PredictionRecord>(writeBatch);
            for (var from = 0; from < data.Count; from += writeBatch)
            {
                batch.Clear();
                for (var i = from; i < Math.Min(data.Count, from + writeBatch); i++)
                {
                    batch.Add(data.Record(i));
                }

                await store.WritePredictionsAsync(batch);
            }
        }

        Checkpoint(file);
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"  setup: {data.Count:N0} predictions written to {Path.GetFileName(file)} in {timer.Elapsed.TotalSeconds:F1} s"));
    }

    private static async Task IngestAsync(string file, InventedLog data, int batchSize, bool byKey, string? halfway)
    {
        await using var store = SqliteScorerStore.ForFile(file);
        var half = data.Count / 2 / batchSize * batchSize;
        var rates = new List<double>();
        var cpuRates = new List<double>();
        var reports = new List<OutcomeReport>(batchSize);
        int accepted = 0, duplicates = 0, unknown = 0, conflicts = 0;
        var total = Stopwatch.StartNew();
        var paused = TimeSpan.Zero;
        for (var from = 0; from < data.Count; from += batchSize)
        {
            if (from == half && halfway is not null)
            {
                var pause = Stopwatch.StartNew();
                CopyDatabase(file, halfway); // untimed; closes the store's pooled connections, which it reopens
                paused = pause.Elapsed;
            }

            reports.Clear();
            for (var k = from; k < Math.Min(data.Count, from + batchSize); k++)
            {
                var i = data.Order[k];
                reports.Add(byKey ? new OutcomeReport(null, data.Keys[i], data.Y[i]) : new OutcomeReport(data.Ids[i], null, data.Y[i]));
            }

            var thread = Environment.CurrentManagedThreadId;
            var cpu = ThreadCpuSeconds();
            var timer = Stopwatch.StartNew();
            var receipt = await store.RecordOutcomesAsync(Model, reports, ConflictPolicy.KeepFirst, RecordedAt);
            rates.Add(reports.Count / timer.Elapsed.TotalSeconds);
            if (thread == Environment.CurrentManagedThreadId)
            {
                cpuRates.Add(reports.Count / (ThreadCpuSeconds() - cpu)); // the call completed on this thread: its CPU time is the call's
            }

            accepted += receipt.Accepted;
            duplicates += receipt.Duplicates;
            unknown += receipt.Unknown.Count;
            conflicts += receipt.Conflicts.Count;
        }

        var overall = data.Count / (total.Elapsed - paused).TotalSeconds;
        var halfBatches = half / batchSize;
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"  store, by {(byKey ? "key" : "id ")}: median batch {Median(rates):N0} outcomes/s wall (p10 {Quantile(rates, 0.1):N0}, p90 {Quantile(rates, 0.9):N0}), {Median(cpuRates):N0}/s per thread-CPU second; overall {overall:N0} outcomes/s wall"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"    first half of the batches: median {Median(rates.Take(halfBatches).ToList()):N0} wall, {Median(cpuRates.Take(halfBatches).ToList()):N0} CPU; second half: {Median(rates.Skip(halfBatches).ToList()):N0} wall, {Median(cpuRates.Skip(halfBatches).ToList()):N0} CPU"));
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"    receipts: {accepted:N0} accepted, {duplicates} duplicates, {unknown} unknown, {conflicts} conflicts"));
    }

    // ---------------------------------------------------------------------------------------------------------------
    // Experiments: raw SQL on copies of the by-id database as the store left it half-way.
    // ---------------------------------------------------------------------------------------------------------------

    private delegate int BatchBody(SqliteConnection connection, SqliteTransaction transaction, InventedLog data, int[] batch);

    private const string BigCache = "PRAGMA cache_size = -262144;"; // 256 MiB of page cache (SQLite's default is 2 MiB)
    private const string Mmap = "PRAGMA mmap_size = 1073741824;"; // the database file read through a 1 GiB memory map

    /// <summary>
    /// The outcomes table rebuilt WITHOUT ROWID, clustered on prediction_id (same columns, checks and secondary indexes):
    /// one b-tree fewer per insert and per lookup. Nothing reads outcomes by rowid.
    /// </summary>
    private const string WithoutRowid =
        "CREATE TABLE outcomes_wr (prediction_id BLOB NOT NULL PRIMARY KEY, model TEXT NOT NULL, version TEXT NOT NULL, stage TEXT NOT NULL, "
        + "scored_at INTEGER NOT NULL, eta NOT NULL, probability NOT NULL, outcome INTEGER NOT NULL CHECK (outcome IN (0, 1)), observed_at INTEGER NULL, "
        + "recorded_at INTEGER NOT NULL, implicit INTEGER NOT NULL CHECK (implicit IN (0, 1)), live_id BLOB NULL) WITHOUT ROWID; "
        + "INSERT INTO outcomes_wr SELECT prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id FROM outcomes; "
        + "DROP TABLE outcomes; ALTER TABLE outcomes_wr RENAME TO outcomes; "
        + "CREATE INDEX outcomes_by_version_time ON outcomes (model, version, scored_at); "
        + "CREATE INDEX outcomes_by_live_id ON outcomes (live_id) WHERE live_id IS NOT NULL;";

    private sealed record Variant(string Name, BatchBody Body, bool ByKey, bool Sorted = false, string Pragmas = "", string Setup = "", bool InOrder = false);

    private static void Experiments(string pristine, string scratch, InventedLog data, int batchSize)
    {
        var half = data.Count / 2 / batchSize * batchSize;
        if (data.Count - half < (WarmBatches + ExperimentBatches) * batchSize)
        {
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"(No experiments: they need {2 * (WarmBatches + ExperimentBatches) * batchSize:N0} predictions or more.)"));
            return;
        }

        var variants = new Variant[]
        {
            new("A  by id: replica of the store (find with OR, existing-outcome select, insert)", ReplicaById, false),
            new("B  by id: find with (id = $id OR live_id = $id) only", (c, t, d, b) => FindOnly(c, t, d, b, orLiveId: true), false),
            new("C  by id: find with id = $id only", (c, t, d, b) => FindOnly(c, t, d, b, orLiveId: false), false),
            new("D  by id: find with OR + existing-outcome select", FindAndExisting, false),
            new("I  insert only (targets known, plain INSERT)", InsertOnly, false),
            new("E  by id: SqliteCommand, find id + find shadows, INSERT ON CONFLICT (no pre-select)", ProposedById, false),
            new("F  by id: INSERT..SELECT ON CONFLICT per report (+ one for shadows)", InsertSelectById, false),
            new("G  by id: E on raw prepared statements", RawProposedById, false),
            new("A+sort  A, batch stable-sorted by id first", ReplicaById, false, Sorted: true),
            new("A+cache  A, cache_size 256 MiB", ReplicaById, false, Pragmas: BigCache),
            new("A+sort+cache", ReplicaById, false, Sorted: true, Pragmas: BigCache),
            new("G+sort+cache", RawProposedById, false, Sorted: true, Pragmas: BigCache),
            new("A, in scoring order (not shuffled: the reports still without an outcome, oldest first)", ReplicaById, false, InOrder: true),
            new("G+sort+cache, outcomes WITHOUT ROWID", RawProposedById, false, Sorted: true, Pragmas: BigCache, Setup: WithoutRowid),
            new("S+sort+cache  set-based: temp table, 1 receipt query, 2 INSERT..SELECT", SetBasedById, false, Sorted: true, Pragmas: BigCache),
            new("K  by key: replica of the store", ReplicaByKey, true),
            new("K+sort+cache", ReplicaByKey, true, Sorted: true, Pragmas: BigCache),
            new("M+sort+cache  by key: raw prepared statements, INSERT ON CONFLICT (no pre-select)", RawProposedByKey, true, Sorted: true, Pragmas: BigCache),
            new("SK+sort+cache  by key, set-based as S", SetBasedByKey, true, Sorted: true, Pragmas: BigCache),
        };

        Console.WriteLine();
        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
            $"Experiments: raw SQL on copies of the by-id database as the store left it half-way ({half:N0} outcomes recorded); the next {(WarmBatches + ExperimentBatches) * batchSize:N0} reports of the same order in batches of {batchSize:N0}, the first {WarmBatches} untimed (they warm the connection's page cache, as the store's pooled connections stay warm); {Rounds} rounds interleaved, a fresh copy for each run:"));
        var runs = variants.Select(_ => new List<RunResult>()).ToArray();
        var pending = Enumerable.Range(half, data.Count - half).Select(k => data.Order[k]).Order().ToArray();
        for (var round = 0; round < Rounds; round++)
        {
            for (var v = 0; v < variants.Length; v++)
            {
                CopyDatabase(pristine, scratch);
                var result = RunVariant(scratch, data, batchSize, variants[v].InOrder ? pending : data.Order.AsSpan(half).ToArray(), variants[v]);
                if (result.Accepted != ExperimentBatches * batchSize && !variants[v].Name.Contains("only", StringComparison.Ordinal))
                {
                    throw new InvalidOperationException($"{variants[v].Name} accepted {result.Accepted} of {ExperimentBatches * batchSize} reports.");
                }

                runs[v].Add(result);
            }
        }

        var byKey = Array.FindIndex(variants, v => v.ByKey);
        Console.WriteLine("| variant | median batch /s, wall | round medians, wall | overall /s, wall | vs replica, wall | median batch /s per CPU s | CPU µs/report (system share) | vs replica, CPU | page-cache misses, hits, pages written per report |");
        Console.WriteLine("| --- | ---: | --- | ---: | ---: | ---: | ---: | ---: | --- |");
        for (var v = 0; v < variants.Length; v++)
        {
            var wall = Median(runs[v].SelectMany(r => r.Wall).ToList());
            var cpu = Median(runs[v].SelectMany(r => r.Cpu).ToList());
            var baseline = variants[v].ByKey ? byKey : 0;
            var baselineWall = Median(runs[baseline].SelectMany(r => r.Wall).ToList());
            var baselineCpu = Median(runs[baseline].SelectMany(r => r.Cpu).ToList());
            Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                $"| {variants[v].Name} | {wall:N0} | {string.Join(" / ", runs[v].Select(r => Median(r.Wall).ToString("N0", CultureInfo.InvariantCulture)))} | {Median(runs[v].Select(r => r.Overall).ToList()):N0} | {wall / baselineWall:F2}× | {cpu:N0} | {1e6 / cpu:F1} ({Median(runs[v].Select(r => r.SystemShare).ToList()):P0}) | {cpu / baselineCpu:F2}× | {Median(runs[v].Select(r => r.Misses).ToList()):F1}, {Median(runs[v].Select(r => r.Hits).ToList()):F1}, {Median(runs[v].Select(r => r.Writes).ToList()):F2} |"));
        }

        QueryPlans(pristine);
    }

    private sealed record RunResult(List<double> Wall, List<double> Cpu, double Overall, double SystemShare, double Misses, double Hits, double Writes, int Accepted);

    private static RunResult RunVariant(string file, InventedLog data, int batchSize, int[] order, Variant variant)
    {
        var wall = new List<double>();
        var cpuRates = new List<double>();
        var accepted = 0;
        using var connection = Open(file);
        if (variant.Setup.Length > 0)
        {
            using var setup = Command(connection, null, variant.Setup);
            setup.ExecuteNonQuery();
        }

        if (variant.Pragmas.Length > 0)
        {
            using var pragmas = Command(connection, null, variant.Pragmas);
            pragmas.ExecuteNonQuery();
        }

        var db = connection.Handle!;
        (double User, double System) start = default;
        var total = new Stopwatch();
        var timedReports = 0;
        for (var b = 0; b < WarmBatches + ExperimentBatches; b++)
        {
            if (b == WarmBatches)
            {
                // Counters from here: SQLITE_DBSTATUS_CACHE_HIT (7), _MISS (8), _WRITE (9), reset.
                _ = raw.sqlite3_db_status(db, 7, out _, out _, 1);
                _ = raw.sqlite3_db_status(db, 8, out _, out _, 1);
                _ = raw.sqlite3_db_status(db, 9, out _, out _, 1);
                start = ThreadTimes();
                total.Start();
            }

            var from = b * batchSize;
            var count = Math.Min(batchSize, order.Length - from);
            var cpu = ThreadCpuSeconds();
            var timer = Stopwatch.StartNew();
            var batch = order.AsSpan(from, count).ToArray();
            if (variant.Sorted)
            {
                // Stable (OrderBy), so reports about the same prediction keep their order: the batch's outcome is unchanged.
                batch = variant.ByKey
                    ? [.. batch.OrderBy(i => data.Keys[i], StringComparer.Ordinal)]
                    : [.. batch.OrderBy(i => data.IdBytes[i], ByteOrder.Instance)];
            }

            int labelled;
            using (var transaction = connection.BeginTransaction(deferred: false))
            {
                labelled = variant.Body(connection, transaction, data, batch);
                transaction.Commit();
            }

            if (b >= WarmBatches)
            {
                wall.Add(count / timer.Elapsed.TotalSeconds);
                cpuRates.Add(count / (ThreadCpuSeconds() - cpu));
                accepted += labelled;
                timedReports += count;
            }
        }

        total.Stop();
        var end = ThreadTimes();
        _ = raw.sqlite3_db_status(db, 7, out var hits, out _, 0);
        _ = raw.sqlite3_db_status(db, 8, out var misses, out _, 0);
        _ = raw.sqlite3_db_status(db, 9, out var writes, out _, 0);
        var system = end.System - start.System;
        return new RunResult(wall, cpuRates, timedReports / total.Elapsed.TotalSeconds, system / (end.User - start.User + system),
            (double)misses / timedReports, (double)hits / timedReports, (double)writes / timedReports, accepted);
    }

    private sealed class ByteOrder : IComparer<byte[]>
    {
        public static readonly ByteOrder Instance = new();

        public int Compare(byte[]? x, byte[]? y) => x.AsSpan().SequenceCompareTo(y);
    }

    /// <summary>
    /// S: the batch in one go: its reports into a temp table (in batch order, kept as seq), one query for the receipt
    /// (reports whose prediction is unknown or already has an outcome: the duplicates and conflicts), then one
    /// INSERT..SELECT joining the predictions by id and one by live_id (shadows), ON CONFLICT DO NOTHING, in seq order.
    /// (Not covered here: the receipt of a shadow's own earlier outcome, and a prediction reported twice in one batch,
    /// which would take a self-join of the temp table.)
    /// </summary>
    private static int SetBasedById(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch)
    {
        FillBatchTable(c, t, "BLOB", batch, (statement, i) => raw.sqlite3_bind_blob(statement, 1, d.IdBytes[i]), d);
        _ = Receipt(c, t, "LEFT JOIN predictions p ON p.id = r.target AND p.model = $model");
        var accepted = InsertFromBatch(c, t, "JOIN predictions p ON p.id = r.target");
        _ = InsertFromBatch(c, t, "JOIN predictions p ON p.live_id = r.target");
        return accepted;
    }

    /// <summary>SK: S for reports by key.</summary>
    private static int SetBasedByKey(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch)
    {
        FillBatchTable(c, t, "TEXT", batch, (statement, i) => raw.sqlite3_bind_text16(statement, 1, d.Keys[i].AsSpan()), d);
        _ = Receipt(c, t, "LEFT JOIN predictions p ON p.model = $model AND p.\"key\" = r.target");
        return InsertFromBatch(c, t, "JOIN predictions p ON p.model = $model AND p.\"key\" = r.target");
    }

    private static void FillBatchTable(SqliteConnection c, SqliteTransaction t, string type, int[] batch, Func<sqlite3_stmt, int, int> bind, InventedLog d)
    {
        using (var setup = Command(c, t,
            $"CREATE TEMP TABLE IF NOT EXISTS batch_reports (seq INTEGER PRIMARY KEY, target {type} NOT NULL, outcome INTEGER NOT NULL); DELETE FROM temp.batch_reports;"))
        {
            setup.ExecuteNonQuery();
        }

        var db = c.Handle!;
        _ = raw.sqlite3_prepare_v2(db, "INSERT INTO temp.batch_reports (target, outcome) VALUES (?1, ?2);", out var add);
        using (add)
        {
            foreach (var i in batch)
            {
                _ = bind(add, i);
                _ = raw.sqlite3_bind_int(add, 2, d.Y[i]);
                if (raw.sqlite3_step(add) != raw.SQLITE_DONE)
                {
                    SqliteException.ThrowExceptionForRC(raw.sqlite3_errcode(db), db);
                }

                _ = raw.sqlite3_reset(add);
            }
        }
    }

    /// <summary>The reports that will label nothing new: unknown, or whose prediction has an outcome (duplicate or conflict).</summary>
    private static int Receipt(SqliteConnection c, SqliteTransaction t, string join)
    {
        using var receipt = Command(c, t,
            $"SELECT r.seq, p.id IS NULL, o.outcome, o.implicit, r.outcome FROM temp.batch_reports r {join} "
            + "LEFT JOIN outcomes o ON o.prediction_id = p.id WHERE p.id IS NULL OR o.prediction_id IS NOT NULL ORDER BY r.seq;");
        receipt.Parameters.AddWithValue("$model", Model);
        using var reader = receipt.ExecuteReader();
        var rows = 0;
        while (reader.Read())
        {
            rows++;
        }

        return rows;
    }

    private static int InsertFromBatch(SqliteConnection c, SqliteTransaction t, string join)
    {
        using var insert = Command(c, t,
            "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id) "
            + $"SELECT p.id, p.model, p.version, p.stage, p.scored_at, p.eta, p.probability, r.outcome, NULL, $now, 0, p.live_id FROM temp.batch_reports r {join} "
            + "WHERE p.model = $model ORDER BY r.seq ON CONFLICT (prediction_id) DO NOTHING;");
        insert.Parameters.AddWithValue("$model", Model);
        insert.Parameters.AddWithValue("$now", StoreMicroseconds(RecordedAt));
        return insert.ExecuteNonQuery();
    }

    private const string TargetColumns = "id, version, stage, scored_at, eta, probability, live_id";

    private const string InsertSql =
        "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id) "
        + "VALUES ($id, $model, $version, $stage, $scoredAt, $eta, $p, $outcome, $observedAt, $now, 0, $liveId)";

    private readonly record struct Target(byte[] Id, string Version, string Stage, long ScoredAt, double Eta, double P, byte[]? LiveId);

    /// <summary>The outcome insert of the store, its parameters bound once per batch as the store does.</summary>
    private sealed class InsertCommand : IDisposable
    {
        private readonly SqliteCommand _command;
        private readonly SqliteParameter _id, _version, _stage, _scoredAt, _eta, _p, _outcome, _observed, _liveId;

        public InsertCommand(SqliteConnection connection, SqliteTransaction transaction, string suffix)
        {
            _command = Command(connection, transaction, InsertSql + suffix + ";");
            _id = _command.Parameters.Add("$id", SqliteType.Blob);
            _command.Parameters.AddWithValue("$model", Model);
            _version = _command.Parameters.Add("$version", SqliteType.Text);
            _stage = _command.Parameters.Add("$stage", SqliteType.Text);
            _scoredAt = _command.Parameters.Add("$scoredAt", SqliteType.Integer);
            _eta = _command.Parameters.Add("$eta", SqliteType.Real);
            _p = _command.Parameters.Add("$p", SqliteType.Real);
            _outcome = _command.Parameters.Add("$outcome", SqliteType.Integer);
            _observed = _command.Parameters.Add("$observedAt", SqliteType.Integer);
            _liveId = _command.Parameters.Add("$liveId", SqliteType.Blob);
            _command.Parameters.AddWithValue("$now", StoreMicroseconds(RecordedAt));
        }

        public int Run(Target t, byte outcome)
        {
            _id.Value = t.Id;
            _version.Value = t.Version;
            _stage.Value = t.Stage;
            _scoredAt.Value = t.ScoredAt;
            _eta.Value = t.Eta;
            _p.Value = t.P;
            _outcome.Value = (long)outcome;
            _observed.Value = DBNull.Value;
            _liveId.Value = t.LiveId is null ? DBNull.Value : t.LiveId;
            return _command.ExecuteNonQuery();
        }

        public void Dispose() => _command.Dispose();
    }

    private static void ReadTargets(SqliteCommand find, List<Target> targets)
    {
        targets.Clear();
        using var reader = find.ExecuteReader();
        while (reader.Read())
        {
            targets.Add(new Target(reader.GetFieldValue<byte[]>(0), reader.GetString(1), reader.GetString(2), reader.GetInt64(3), reader.GetDouble(4),
                reader.GetDouble(5), reader.IsDBNull(6) ? null : reader.GetFieldValue<byte[]>(6)));
        }
    }

    private static bool Existing(SqliteCommand existing, out long recorded)
    {
        using var reader = existing.ExecuteReader();
        if (reader.Read())
        {
            recorded = reader.GetInt64(0);
            return true;
        }

        recorded = 0;
        return false;
    }

    /// <summary>A: the store's statements and per-report logic (KeepFirst, no conflicts arise here).</summary>
    private static int ReplicaById(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch)
    {
        using var find = Command(c, t, $"SELECT {TargetColumns} FROM predictions WHERE model = $model AND (id = $id OR live_id = $id);");
        find.Parameters.AddWithValue("$model", Model);
        var id = find.Parameters.Add("$id", SqliteType.Blob);
        return ReplicaLoop(c, t, d, batch, find, k => id.Value = d.IdBytes[k]);
    }

    /// <summary>K: the store's key path.</summary>
    private static int ReplicaByKey(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch)
    {
        using var find = Command(c, t, $"SELECT {TargetColumns} FROM predictions WHERE model = $model AND \"key\" = $key;");
        find.Parameters.AddWithValue("$model", Model);
        var key = find.Parameters.Add("$key", SqliteType.Text);
        return ReplicaLoop(c, t, d, batch, find, k => key.Value = d.Keys[k]);
    }

    private static int ReplicaLoop(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch, SqliteCommand find, Action<int> bind)
    {
        using var existing = Command(c, t, "SELECT outcome, implicit FROM outcomes WHERE prediction_id = $id;");
        var existingId = existing.Parameters.Add("$id", SqliteType.Blob);
        using var insert = new InsertCommand(c, t, "");
        var targets = new List<Target>();
        var accepted = 0;
        foreach (var i in batch)
        {
            bind(i);
            ReadTargets(find, targets);
            var labelled = false;
            foreach (var target in targets)
            {
                existingId.Value = target.Id;
                if (!Existing(existing, out _))
                {
                    insert.Run(target, d.Y[i]);
                    labelled = true;
                }
            }

            accepted += labelled ? 1 : 0;
        }

        return accepted;
    }

    /// <summary>B, C: the find alone (nothing written; returns the targets found).</summary>
    private static int FindOnly(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch, bool orLiveId)
    {
        using var find = Command(c, t,
            $"SELECT {TargetColumns} FROM predictions WHERE model = $model AND {(orLiveId ? "(id = $id OR live_id = $id)" : "id = $id")};");
        find.Parameters.AddWithValue("$model", Model);
        var id = find.Parameters.Add("$id", SqliteType.Blob);
        var targets = new List<Target>();
        var found = 0;
        foreach (var i in batch)
        {
            id.Value = d.IdBytes[i];
            ReadTargets(find, targets);
            found += targets.Count;
        }

        return found;
    }

    /// <summary>D: the find and the existing-outcome select, no insert.</summary>
    private static int FindAndExisting(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch)
    {
        using var find = Command(c, t, $"SELECT {TargetColumns} FROM predictions WHERE model = $model AND (id = $id OR live_id = $id);");
        find.Parameters.AddWithValue("$model", Model);
        var id = find.Parameters.Add("$id", SqliteType.Blob);
        using var existing = Command(c, t, "SELECT outcome, implicit FROM outcomes WHERE prediction_id = $id;");
        var existingId = existing.Parameters.Add("$id", SqliteType.Blob);
        var targets = new List<Target>();
        var found = 0;
        foreach (var i in batch)
        {
            id.Value = d.IdBytes[i];
            ReadTargets(find, targets);
            foreach (var target in targets)
            {
                existingId.Value = target.Id;
                found += Existing(existing, out _) ? 0 : 1;
            }
        }

        return found;
    }

    /// <summary>I: the insert alone, with the target's values taken from memory (the b-tree writes and the statement).</summary>
    private static int InsertOnly(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch)
    {
        using var insert = new InsertCommand(c, t, "");
        var inserted = 0;
        foreach (var i in batch)
        {
            inserted += insert.Run(new Target(d.IdBytes[i], Version, "live", d.ScoredAtUs[i], d.Eta[i], d.P[i], null), d.Y[i]);
        }

        return inserted;
    }

    /// <summary>
    /// E: the proposal on SqliteCommand. Find by id alone (one primary-key seek) and the paired shadows by live_id (one
    /// partial-index seek, usually empty) instead of the OR; insert with ON CONFLICT DO NOTHING and read the recorded
    /// outcome only when nothing was inserted (the duplicate or conflict path), instead of a select before every insert.
    /// </summary>
    private static int ProposedById(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch)
    {
        using var find = Command(c, t, $"SELECT {TargetColumns} FROM predictions WHERE id = $id AND model = $model;");
        find.Parameters.AddWithValue("$model", Model);
        var id = find.Parameters.Add("$id", SqliteType.Blob);
        using var shadows = Command(c, t, $"SELECT {TargetColumns} FROM predictions WHERE live_id = $id AND model = $model;");
        shadows.Parameters.AddWithValue("$model", Model);
        var shadowId = shadows.Parameters.Add("$id", SqliteType.Blob);
        using var existing = Command(c, t, "SELECT outcome, implicit FROM outcomes WHERE prediction_id = $id;");
        var existingId = existing.Parameters.Add("$id", SqliteType.Blob);
        using var insert = new InsertCommand(c, t, " ON CONFLICT (prediction_id) DO NOTHING");
        var targets = new List<Target>();
        var shadowTargets = new List<Target>();
        var accepted = 0;
        foreach (var i in batch)
        {
            id.Value = d.IdBytes[i];
            shadowId.Value = d.IdBytes[i];
            ReadTargets(find, targets);
            ReadTargets(shadows, shadowTargets);
            targets.AddRange(shadowTargets);
            var labelled = false;
            foreach (var target in targets)
            {
                if (insert.Run(target, d.Y[i]) == 1)
                {
                    labelled = true;
                }
                else
                {
                    existingId.Value = target.Id;
                    _ = Existing(existing, out _); // duplicate or conflict: compared with the report as the store does
                }
            }

            accepted += labelled ? 1 : 0;
        }

        return accepted;
    }

    /// <summary>
    /// F: the find folded into the insert: INSERT..SELECT from the prediction by id, ON CONFLICT DO NOTHING, and one more
    /// for its shadows. (The changes count says whether it labelled; a report that labelled nothing then needs the
    /// find and the existing select to tell unknown from duplicate from conflict. An upper bound for one statement per report.)
    /// </summary>
    private static int InsertSelectById(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch)
    {
        const string select =
            "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id) "
            + "SELECT id, model, version, stage, scored_at, eta, probability, $outcome, NULL, $now, 0, live_id FROM predictions ";
        using var byId = Command(c, t, select + "WHERE id = $id AND model = $model ON CONFLICT (prediction_id) DO NOTHING;");
        using var byLive = Command(c, t, select + "WHERE live_id = $id AND model = $model ON CONFLICT (prediction_id) DO NOTHING;");
        var parameters = new[] { byId, byLive }.Select(command =>
        {
            command.Parameters.AddWithValue("$model", Model);
            command.Parameters.AddWithValue("$now", StoreMicroseconds(RecordedAt));
            return (Id: command.Parameters.Add("$id", SqliteType.Blob), Outcome: command.Parameters.Add("$outcome", SqliteType.Integer));
        }).ToArray();
        var accepted = 0;
        foreach (var i in batch)
        {
            foreach (var (idParameter, outcome) in parameters)
            {
                idParameter.Value = d.IdBytes[i];
                outcome.Value = (long)d.Y[i];
            }

            var labelled = byId.ExecuteNonQuery() + byLive.ExecuteNonQuery();
            accepted += labelled > 0 ? 1 : 0;
        }

        return accepted;
    }

    /// <summary>G: E on SQLitePCLRaw prepared statements (as PredictionBatchInsert writes the log).</summary>
    private static int RawProposedById(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch)
    {
        using var raw = new RawStatements(c);
        var accepted = 0;
        foreach (var i in batch)
        {
            var labelled = raw.LabelFrom(raw.FindById, d.IdBytes[i], d.Y[i]);
            labelled |= raw.LabelFrom(raw.FindShadows, d.IdBytes[i], d.Y[i]);
            accepted += labelled ? 1 : 0;
        }

        return accepted;
    }

    /// <summary>
    /// H: G, and the hourly aggregates of the report (ReportSpeed's proposal) kept in the same transaction: per hour
    /// touched, one upsert of the sums; per (hour, bin) touched, one upsert of the 10 reliability bins and of the 1,024
    /// bins of logit(p). The write-side cost of the proposal (starting from empty aggregate tables, filled by the warm-up).
    /// </summary>
    private static int RawProposedByIdWithAggregates(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch)
    {
        using var statements = new RawStatements(c) { Labelled = [] };
        var accepted = 0;
        foreach (var i in batch)
        {
            var labelled = statements.LabelFrom(statements.FindById, d.IdBytes[i], d.Y[i]);
            labelled |= statements.LabelFrom(statements.FindShadows, d.IdBytes[i], d.Y[i]);
            accepted += labelled ? 1 : 0;
        }

        const long microsecondsPerHour = 3_600_000_000;
        var hours = new Dictionary<long, double[]>();
        var bins = new Dictionary<(long Hour, int Kind, int Bin), double[]>();
        foreach (var (scoredAt, p, y) in statements.Labelled)
        {
            var hour = scoredAt / microsecondsPerHour;
            if (!hours.TryGetValue(hour, out var sums))
            {
                hours[hour] = sums = new double[7];
            }

            var residual = y - p;
            var clipped = Math.Clamp(p, 1e-15, 1.0 - 1e-15);
            var oneMinusTwoP = 1.0 - (2.0 * p);
            sums[0]++;
            sums[1] += y;
            sums[2] += p;
            sums[3] += residual * residual;
            sums[4] -= y == 1 ? Math.Log(clipped) : Scorer.Engine.Numerics.Elementary.Log1P(-clipped);
            sums[5] += residual * oneMinusTwoP;
            sums[6] += oneMinusTwoP * oneMinusTwoP * p * (1.0 - p);
            var q = Math.Clamp(p, 1.0 / 9007199254740992.0, 1.0 - (1.0 / 9007199254740992.0));
            var logit = Math.Log(q) - Scorer.Engine.Numerics.Elementary.Log1P(-q);
            foreach (var (kind, bin) in new[] { (0, Math.Clamp((int)(p * 10), 0, 9)), (1, Math.Clamp((int)((logit + 20.0) / 40.0 * 1024), 0, 1023)) })
            {
                if (!bins.TryGetValue((hour, kind, bin), out var cell))
                {
                    bins[(hour, kind, bin)] = cell = new double[4];
                }

                cell[0]++;
                cell[1] += y;
                cell[2] += p;
                cell[3] += logit;
            }
        }

        var db = c.Handle!;
        _ = raw.sqlite3_prepare_v2(db,
            "INSERT INTO outcome_hours VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10) ON CONFLICT (model, version, hour) DO UPDATE SET n = n + excluded.n, "
            + "events = events + excluded.events, expected = expected + excluded.expected, squared_error = squared_error + excluded.squared_error, "
            + "log_loss = log_loss + excluded.log_loss, spiegel_numerator = spiegel_numerator + excluded.spiegel_numerator, spiegel_variance = spiegel_variance + excluded.spiegel_variance;",
            out var upsertHour);
        _ = raw.sqlite3_prepare_v2(db,
            "INSERT INTO outcome_hour_bins VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9) ON CONFLICT (model, version, hour, kind, bin) DO UPDATE SET "
            + "count = count + excluded.count, events = events + excluded.events, sum_p = sum_p + excluded.sum_p, sum_logit = sum_logit + excluded.sum_logit;",
            out var upsertBin);
        using (upsertHour)
        using (upsertBin)
        {
            foreach (var statement in new[] { upsertHour, upsertBin })
            {
                _ = raw.sqlite3_bind_text16(statement, 1, Model.AsSpan());
                _ = raw.sqlite3_bind_text16(statement, 2, Version.AsSpan());
            }

            foreach (var (hour, sums) in hours)
            {
                _ = raw.sqlite3_bind_int64(upsertHour, 3, hour);
                _ = raw.sqlite3_bind_int64(upsertHour, 4, (long)sums[0]);
                _ = raw.sqlite3_bind_int64(upsertHour, 5, (long)sums[1]);
                for (var k = 2; k < 7; k++)
                {
                    _ = raw.sqlite3_bind_double(upsertHour, k + 4, sums[k]);
                }

                StepDone(db, upsertHour);
            }

            foreach (var ((hour, kind, bin), cell) in bins)
            {
                _ = raw.sqlite3_bind_int64(upsertBin, 3, hour);
                _ = raw.sqlite3_bind_int(upsertBin, 4, kind);
                _ = raw.sqlite3_bind_int(upsertBin, 5, bin);
                _ = raw.sqlite3_bind_int64(upsertBin, 6, (long)cell[0]);
                _ = raw.sqlite3_bind_int64(upsertBin, 7, (long)cell[1]);
                _ = raw.sqlite3_bind_double(upsertBin, 8, cell[2]);
                _ = raw.sqlite3_bind_double(upsertBin, 9, cell[3]);
                StepDone(db, upsertBin);
            }
        }

        return accepted;
    }

    private static void StepDone(sqlite3 db, sqlite3_stmt statement)
    {
        var rc = raw.sqlite3_step(statement);
        if (rc != raw.SQLITE_DONE)
        {
            SqliteException.ThrowExceptionForRC(rc, db);
        }

        _ = raw.sqlite3_reset(statement);
    }

    /// <summary>M: the key path on raw prepared statements, INSERT ON CONFLICT and the existing select only when nothing was inserted.</summary>
    private static int RawProposedByKey(SqliteConnection c, SqliteTransaction t, InventedLog d, int[] batch)
    {
        using var raw = new RawStatements(c);
        var accepted = 0;
        foreach (var i in batch)
        {
            accepted += raw.LabelFromKey(d.Keys[i], d.Y[i]) ? 1 : 0;
        }

        return accepted;
    }

    /// <summary>The proposed statements prepared once per batch on the connection's handle, rebound per report.</summary>
    private sealed class RawStatements : IDisposable
    {
        private readonly sqlite3 _db;
        private readonly sqlite3_stmt _findByKey;
        private readonly sqlite3_stmt _existing;
        private readonly sqlite3_stmt _insert;

        public RawStatements(SqliteConnection connection)
        {
            _db = connection.Handle ?? throw new InvalidOperationException("The connection is not open.");
            FindById = Prepare($"SELECT {TargetColumns} FROM predictions WHERE id = ?1 AND model = ?2;");
            FindShadows = Prepare($"SELECT {TargetColumns} FROM predictions WHERE live_id = ?1 AND model = ?2;");
            _findByKey = Prepare($"SELECT {TargetColumns} FROM predictions WHERE model = ?2 AND \"key\" = ?1;");
            _existing = Prepare("SELECT outcome, implicit FROM outcomes WHERE prediction_id = ?1;");
            _insert = Prepare(
                "INSERT INTO outcomes (prediction_id, model, version, stage, scored_at, eta, probability, outcome, observed_at, recorded_at, implicit, live_id) "
                + "VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, NULL, ?9, 0, ?10) ON CONFLICT (prediction_id) DO NOTHING;");
            foreach (var statement in new[] { FindById, FindShadows, _findByKey })
            {
                Check(raw.sqlite3_bind_text16(statement, 2, Model.AsSpan()));
            }

            Check(raw.sqlite3_bind_text16(_insert, 2, Model.AsSpan()));
            Check(raw.sqlite3_bind_int64(_insert, 9, StoreMicroseconds(RecordedAt)));
        }

        public sqlite3_stmt FindById { get; }

        /// <summary>When set, every newly labelled prediction's scoring time, p and outcome, for the aggregates.</summary>
        public List<(long ScoredAt, double P, byte Y)>? Labelled { get; set; }

        public sqlite3_stmt FindShadows { get; }

        public bool LabelFrom(sqlite3_stmt find, ReadOnlySpan<byte> id, byte outcome)
        {
            Check(raw.sqlite3_bind_blob(find, 1, id));
            return Label(find, outcome);
        }

        public bool LabelFromKey(string key, byte outcome)
        {
            Check(raw.sqlite3_bind_text16(_findByKey, 1, key.AsSpan()));
            return Label(_findByKey, outcome);
        }

        /// <summary>Steps the find; each target row is copied straight into the insert's bindings (text and blobs copied by SQLite).</summary>
        private bool Label(sqlite3_stmt find, byte outcome)
        {
            var labelled = false;
            int rc;
            while ((rc = raw.sqlite3_step(find)) == raw.SQLITE_ROW)
            {
                var id = raw.sqlite3_column_blob(find, 0);
                Check(raw.sqlite3_bind_blob(_insert, 1, id));
                Check(raw.sqlite3_bind_text(_insert, 3, raw.sqlite3_column_blob(find, 1)));
                Check(raw.sqlite3_bind_text(_insert, 4, raw.sqlite3_column_blob(find, 2)));
                Check(raw.sqlite3_bind_int64(_insert, 5, raw.sqlite3_column_int64(find, 3)));
                Check(raw.sqlite3_bind_double(_insert, 6, raw.sqlite3_column_double(find, 4)));
                Check(raw.sqlite3_bind_double(_insert, 7, raw.sqlite3_column_double(find, 5)));
                Check(raw.sqlite3_bind_int64(_insert, 8, outcome));
                Check(raw.sqlite3_column_type(find, 6) == raw.SQLITE_NULL
                    ? raw.sqlite3_bind_null(_insert, 10)
                    : raw.sqlite3_bind_blob(_insert, 10, raw.sqlite3_column_blob(find, 6)));
                Step(_insert, raw.SQLITE_DONE);
                Check(raw.sqlite3_reset(_insert));
                if (raw.sqlite3_changes(_db) == 1)
                {
                    labelled = true;
                    Labelled?.Add((raw.sqlite3_column_int64(find, 3), raw.sqlite3_column_double(find, 5), outcome));
                }
                else
                {
                    // Duplicate or conflict: the recorded outcome is read and compared, as the store does.
                    Check(raw.sqlite3_bind_blob(_existing, 1, raw.sqlite3_column_blob(find, 0)));
                    _ = raw.sqlite3_step(_existing);
                    Check(raw.sqlite3_reset(_existing));
                }
            }

            if (rc != raw.SQLITE_DONE)
            {
                SqliteException.ThrowExceptionForRC(rc, _db);
            }

            Check(raw.sqlite3_reset(find));
            return labelled;
        }

        public void Dispose()
        {
            FindById.Dispose();
            FindShadows.Dispose();
            _findByKey.Dispose();
            _existing.Dispose();
            _insert.Dispose();
        }

        private sqlite3_stmt Prepare(string sql)
        {
            Check(raw.sqlite3_prepare_v2(_db, sql, out var statement));
            return statement;
        }

        private void Step(sqlite3_stmt statement, int expected)
        {
            var rc = raw.sqlite3_step(statement);
            if (rc != expected)
            {
                SqliteException.ThrowExceptionForRC(rc, _db);
            }
        }

        private void Check(int rc)
        {
            if (rc != raw.SQLITE_OK)
            {
                SqliteException.ThrowExceptionForRC(rc, _db);
            }
        }
    }

    private static void QueryPlans(string file)
    {
        using var connection = Open(file);
        Console.WriteLine();
        Console.WriteLine("Query plans (bundled SQLite " + raw.sqlite3_libversion().utf8_to_string() + "):");
        foreach (var sql in new[]
        {
            $"SELECT {TargetColumns} FROM predictions WHERE model = $model AND (id = $id OR live_id = $id)",
            $"SELECT {TargetColumns} FROM predictions WHERE id = $id AND model = $model",
            $"SELECT {TargetColumns} FROM predictions WHERE live_id = $id AND model = $model",
            $"SELECT {TargetColumns} FROM predictions WHERE model = $model AND \"key\" = $key",
        })
        {
            using var command = Command(connection, null, "EXPLAIN QUERY PLAN " + sql);
            command.Parameters.AddWithValue("$model", Model);
            command.Parameters.AddWithValue("$id", new byte[16]);
            command.Parameters.AddWithValue("$key", "WO-1");
            using var reader = command.ExecuteReader();
            var steps = new List<string>();
            while (reader.Read())
            {
                steps.Add(reader.GetString(3));
            }

            Console.WriteLine($"  {sql[(sql.IndexOf("WHERE", StringComparison.Ordinal) + 6)..]}: {string.Join("; ", steps)}");
        }
    }

    // ---------------------------------------------------------------------------------------------------------------
    // Files and helpers.
    // ---------------------------------------------------------------------------------------------------------------

    internal static string Sibling(string file, string tag) => Path.Combine(
        Path.GetDirectoryName(file) ?? ".", Path.GetFileNameWithoutExtension(file) + "." + tag + Path.GetExtension(file));

    internal static void DeleteDatabase(string file)
    {
        SqliteConnection.ClearAllPools();
        foreach (var path in new[] { file, file + "-wal", file + "-shm", file + "-journal" })
        {
            File.Delete(path);
        }
    }

    /// <summary>Folds the WAL into the file so that the file alone is the database, then copies it.</summary>
    internal static void CopyDatabase(string from, string to)
    {
        Checkpoint(from);
        DeleteDatabase(to);
        File.Copy(from, to);
    }

    internal static void Checkpoint(string file)
    {
        SqliteConnection.ClearAllPools();
        using (var connection = Open(file, pooling: false))
        {
            using var command = Command(connection, null, "PRAGMA wal_checkpoint(TRUNCATE);");
            command.ExecuteNonQuery();
        }

        SqliteConnection.ClearAllPools();
    }

    /// <summary>A connection with the store's settings (WAL is the file's; synchronous, checkpoint interval, foreign keys).</summary>
    internal static SqliteConnection Open(string file, bool pooling = true)
    {
        var connection = new SqliteConnection(new SqliteConnectionStringBuilder
        {
            DataSource = file,
            Mode = SqliteOpenMode.ReadWrite,
            Pooling = pooling,
            ForeignKeys = true,
        }.ToString());
        connection.Open();
        // temp_store = MEMORY beyond the store's settings: SQLite's temp files would otherwise go to /var/tmp.
        using var pragmas = Command(connection, null,
            "PRAGMA synchronous = NORMAL; PRAGMA wal_autocheckpoint = 16384; PRAGMA busy_timeout = 30000; PRAGMA temp_store = MEMORY;");
        pragmas.ExecuteNonQuery();
        return connection;
    }

    internal static SqliteCommand Command(SqliteConnection connection, SqliteTransaction? transaction, string sql)
    {
        var command = connection.CreateCommand();
        command.Transaction = transaction;
        command.CommandText = sql;
        return command;
    }

    /// <summary>
    /// CPU time of the calling thread, user and system (getrusage RUSAGE_THREAD, in scheduler ticks: good over a whole
    /// run, for the system share). On this shared machine wall time includes waiting for a core; thread CPU time is
    /// close to what the work costs on an idle one (the store's calls run synchronously on the caller's thread).
    /// </summary>
    internal static (double User, double System) ThreadTimes()
    {
        if (!OperatingSystem.IsLinux() || NativeMethods.getrusage(1, out var usage) != 0)
        {
            return (double.NaN, double.NaN);
        }

        return (usage.UserSeconds + (usage.UserMicroseconds * 1e-6), usage.SystemSeconds + (usage.SystemMicroseconds * 1e-6));
    }

    /// <summary>
    /// CPU time of the calling thread, exact (clock_gettime CLOCK_THREAD_CPUTIME_ID; getrusage's thread times advance in
    /// scheduler ticks of 4 ms here, too coarse for one batch). NaN off Linux.
    /// </summary>
    internal static double ThreadCpuSeconds()
    {
        if (!OperatingSystem.IsLinux() || NativeMethods.clock_gettime(3, out var time) != 0)
        {
            return double.NaN;
        }

        return time.Seconds + (time.Nanoseconds * 1e-9);
    }

    [System.Runtime.InteropServices.StructLayout(System.Runtime.InteropServices.LayoutKind.Sequential)]
    private struct TimeSpec
    {
        public long Seconds;
        public long Nanoseconds;
    }

    private static class NativeMethods
    {
        [System.Runtime.InteropServices.DllImport("libc", EntryPoint = "clock_gettime")]
        [System.Runtime.InteropServices.DefaultDllImportSearchPaths(System.Runtime.InteropServices.DllImportSearchPath.SafeDirectories)]
        public static extern int clock_gettime(int clock, out TimeSpec time);

        [System.Runtime.InteropServices.DllImport("libc", EntryPoint = "getrusage")]
        [System.Runtime.InteropServices.DefaultDllImportSearchPaths(System.Runtime.InteropServices.DllImportSearchPath.SafeDirectories)]
        public static extern int getrusage(int who, out RUsage usage);
    }

    /// <summary>struct rusage on 64-bit Linux: two timevals, then 14 longs.</summary>
    [System.Runtime.InteropServices.StructLayout(System.Runtime.InteropServices.LayoutKind.Sequential)]
    private unsafe struct RUsage
    {
        public long UserSeconds;
        public long UserMicroseconds;
        public long SystemSeconds;
        public long SystemMicroseconds;
        public fixed long Rest[14];
    }

    internal static long StoreMicroseconds(DateTimeOffset time) => (time.UtcTicks - DateTimeOffset.UnixEpoch.UtcTicks) / 10;

    internal static double Median(IReadOnlyCollection<double> xs) => Quantile(xs, 0.5);

    internal static double Quantile(IReadOnlyCollection<double> xs, double q)
    {
        var s = xs.Order().ToArray();
        if (s.Length == 0)
        {
            return double.NaN;
        }

        var h = (s.Length - 1) * q;
        var lo = (int)Math.Floor(h);
        var hi = Math.Min(lo + 1, s.Length - 1);
        return s[lo] + ((h - lo) * (s[hi] - s[lo]));
    }

    /// <summary>
    /// An invented prediction log from a seeded generator: η ~ N(−1.7, 1), p = logistic(η), y ~ Bernoulli(p), scoring
    /// times spread evenly over seven days, ids of version-7 layout made from the time and seeded bytes, keys "WO-n".
    /// </summary>
    internal sealed class InventedLog
    {
        public InventedLog(int count, int seed)
        {
            Count = count;
            Ids = new Guid[count];
            IdBytes = new byte[count][];
            Keys = new string[count];
            Eta = new double[count];
            P = new double[count];
            Y = new byte[count];
            ScoredAt = new DateTimeOffset[count];
            ScoredAtUs = new long[count];
            Vibration = new double[count];
            Temperature = new double[count];
            Hours = new int[count];
            var random = new Random(seed);
            var step = TimeSpan.FromDays(7).Ticks / count;
            Span<byte> bytes = stackalloc byte[16];
            for (var i = 0; i < count; i++)
            {
                var at = Start.AddTicks(i * step);
                ScoredAt[i] = at;
                ScoredAtUs[i] = StoreMicroseconds(at);
                var ms = at.ToUnixTimeMilliseconds();
                for (var b = 0; b < 6; b++)
                {
                    bytes[b] = (byte)(ms >> (8 * (5 - b)));
                }

                random.NextBytes(bytes[6..]);
                bytes[6] = (byte)((bytes[6] & 0x0F) | 0x70);
                bytes[8] = (byte)((bytes[8] & 0x3F) | 0x80);
                Ids[i] = new Guid(bytes, bigEndian: true);
                IdBytes[i] = bytes.ToArray();
                Keys[i] = "WO-" + i.ToString(CultureInfo.InvariantCulture);
                var eta = -1.7 + Normal(random);
                Eta[i] = eta;
                P[i] = 1.0 / (1.0 + Math.Exp(-eta));
                Y[i] = random.NextDouble() < P[i] ? (byte)1 : (byte)0;
                Events += Y[i];
                Vibration[i] = 1 + (4 * random.NextDouble());
                Temperature[i] = 50 + (20 * random.NextDouble());
                Hours[i] = random.Next(0, 6000);
            }

            // The order outcomes come back in: a seeded shuffle.
            Order = Enumerable.Range(0, count).ToArray();
            random.Shuffle(Order);
        }

        public int Count { get; }

        public int Events { get; }

        public Guid[] Ids { get; }

        public byte[][] IdBytes { get; }

        public string[] Keys { get; }

        public double[] Eta { get; }

        public double[] P { get; }

        public byte[] Y { get; }

        public DateTimeOffset[] ScoredAt { get; }

        public long[] ScoredAtUs { get; }

        public double[] Vibration { get; }

        public double[] Temperature { get; }

        public int[] Hours { get; }

        public int[] Order { get; }

        /// <summary>The prediction as logged, its features (a pump snapshot, as in StoreWrites) as JSON.</summary>
        public PredictionRecord Record(int i) => new(Ids[i], Model, Version, Stage.Live, ScoredAt[i], Keys[i], Eta[i], P[i], string.Create(CultureInfo.InvariantCulture,
            $"{{\"vibration_rms\":{Vibration[i]:R},\"bearing_temp_c\":{Temperature[i]:R},\"hours_since_service\":{Hours[i]},\"site\":\"river\"}}"));

        private static double Normal(Random random)
        {
            // Box–Muller; 1 − U keeps the logarithm's argument in (0, 1].
            var u = 1.0 - random.NextDouble();
            var v = random.NextDouble();
            return Math.Sqrt(-2.0 * Math.Log(u)) * Math.Cos(2.0 * Math.PI * v);
        }
    }
}
