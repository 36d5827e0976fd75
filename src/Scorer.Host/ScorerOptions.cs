using System.Net;
using Scorer.Store;
using Scorer.Transport;

namespace Scorer.Host;

/// <summary>The service's settings, bound from the <c>Scorer</c> section (appsettings.json, SCORER__… variables, flags).</summary>
public sealed class ScorerOptions
{
    /// <summary>Folder of model files. Default <c>models</c> (seeded with the demo models when missing).</summary>
    public string ModelsPath { get; set; } = "models";

    /// <summary>Where the durable state is kept: SQLite (default, <c>data/scorer.db</c>) or PostgreSQL.</summary>
    public StoreOptions Store { get; set; } = new();

    /// <summary>REST (HTTP/1.1 and HTTP/2) and the page. Default <c>127.0.0.1:8080</c>.</summary>
    public string Http { get; set; } = "127.0.0.1:8080";

    /// <summary>gRPC over HTTP/2 without TLS (h2c). Default <c>127.0.0.1:8081</c>.</summary>
    public string Grpc { get; set; } = "127.0.0.1:8081";

    /// <summary>Copy the demo models into the models folder when it does not exist. Default true.</summary>
    public bool SeedDemoModels { get; set; } = true;

    /// <summary>Largest request body, in bytes. Default 8 MiB.</summary>
    public long MaxRequestBodyBytes { get; set; } = 8L * 1024 * 1024;

    /// <summary>How often the models folder is rescanned. Default 1 s.</summary>
    public TimeSpan RescanInterval { get; set; } = TimeSpan.FromSeconds(1);

    /// <summary>Bounds on one model file: its bytes and its terms (<c>Scorer:ModelFiles:…</c>).</summary>
    public ModelFileSettings ModelFiles { get; set; } = new();

    /// <summary>Requests per second per client address (0 = no limit). Default 0.</summary>
    public int RateLimitPerSecond { get; set; }

    /// <summary>
    /// Reads REST score requests with Scorer's own JSON reader (same contract, several times faster, more specific
    /// errors for malformed bodies). False sends them through the generic gRPC JSON transcoder instead. Default true.
    /// </summary>
    public bool DirectRestScoring { get; set; } = true;

    public List<ApiKey> Keys { get; set; } = [];

    /// <summary><c>auto</c> (readable text on a terminal, compact JSON otherwise), <c>text</c> or <c>json</c>. Default auto.</summary>
    public string LogFormat { get; set; } = "auto";

    /// <summary>Least level logged: Verbose, Debug, Information, Warning, Error, Fatal. Default Information.</summary>
    public string LogLevel { get; set; } = "Information";

    /// <summary>Limits on requests, on open streams and on what the process keeps in memory (docs/operations.md, "Memory bounds").</summary>
    public ScoringLimits Limits { get; set; } = new();

    public PredictionLogOptions PredictionLog { get; set; } = new();

    /// <summary>The calibration monitor: windows, the status rules' thresholds, the charts (docs/monitoring.md).</summary>
    public Scorer.Monitor.Reporting.MonitorOptions Monitor { get; set; } = new();

    /// <summary>How outcomes are taken in: the conflict policy and the reports per request.</summary>
    public Scorer.Application.Outcomes.OutcomeSettings Outcomes { get; set; } = new();

    /// <summary>Every problem of the settings at once, each naming the setting.</summary>
    public IReadOnlyList<string> Validate()
    {
        var problems = new List<string>(Monitor.Validate());
        var http = ParseEndpoint(Http, "Scorer:Http", problems);
        var grpc = ParseEndpoint(Grpc, "Scorer:Grpc", problems);
        if (http is not null && grpc is not null && http.Port == grpc.Port && http.Port != 0)
        {
            problems.Add($"Scorer:Http and Scorer:Grpc both use port {http.Port}; give them different ports");
        }

        if (string.IsNullOrWhiteSpace(ModelsPath))
        {
            problems.Add("Scorer:ModelsPath is empty; name the folder of model files");
        }

        problems.AddRange(Store.Validate());
        problems.AddRange(ModelFiles.Validate());
        problems.AddRange(Limits.Validate());

        if (LogFormat is not ("auto" or "text" or "json"))
        {
            problems.Add($"Scorer:LogFormat is '{LogFormat}'; give auto, text or json");
        }

        if (!Enum.TryParse<Serilog.Events.LogEventLevel>(LogLevel, ignoreCase: true, out _))
        {
            problems.Add($"Scorer:LogLevel is '{LogLevel}'; give Verbose, Debug, Information, Warning, Error or Fatal");
        }

        if (MaxRequestBodyBytes < 1024)
        {
            problems.Add($"Scorer:MaxRequestBodyBytes is {MaxRequestBodyBytes}; give at least 1024");
        }

        if (PredictionLog.Capacity < 1 || PredictionLog.MaxBatch < 1)
        {
            problems.Add("Scorer:PredictionLog:Capacity and Scorer:PredictionLog:MaxBatch must be at least 1");
        }

        for (var i = 0; i < Keys.Count; i++)
        {
            var k = Keys[i];
            if (string.IsNullOrWhiteSpace(k.Name) || string.IsNullOrWhiteSpace(k.Key))
            {
                problems.Add($"Scorer:Keys:{i} needs a Name and a Key");
            }
            else if (k.Key.Length < 16)
            {
                problems.Add($"Scorer:Keys:{i} ({k.Name}): the key is shorter than 16 characters");
            }

            foreach (var role in k.Roles.Where(r => r is not ("score" or "outcomes" or "admin")))
            {
                problems.Add($"Scorer:Keys:{i} ({k.Name}): unknown role '{role}' (roles: score, outcomes, admin)");
            }
        }

        foreach (var dup in Keys.GroupBy(k => k.Name, StringComparer.Ordinal).Where(g => g.Count() > 1))
        {
            problems.Add($"Scorer:Keys: the name '{dup.Key}' is used twice");
        }

        if (Keys.Count == 0)
        {
            foreach (var (name, endpoint) in new[] { ("Scorer:Http", http), ("Scorer:Grpc", grpc) })
            {
                if (endpoint is not null && !IPAddress.IsLoopback(endpoint.Address))
                {
                    problems.Add($"{name} binds {endpoint} beyond this machine but no API keys are configured (Scorer:Keys); configure keys or bind 127.0.0.1");
                }
            }
        }

        return problems;
    }

    internal static IPEndPoint? ParseEndpoint(string text, string name, List<string>? problems = null)
    {
        var colon = text.LastIndexOf(':');
        if (colon > 0 && int.TryParse(text[(colon + 1)..], System.Globalization.CultureInfo.InvariantCulture, out var port) && port is >= 0 and <= 65535)
        {
            var host = text[..colon].Trim('[', ']');
            if (host is "localhost")
            {
                return new IPEndPoint(IPAddress.Loopback, port);
            }

            if (IPAddress.TryParse(host, out var address))
            {
                return new IPEndPoint(address, port);
            }
        }

        problems?.Add($"{name} is '{text}'; give HOST:PORT with an IP address, e.g. 127.0.0.1:8080 or 0.0.0.0:8080");
        return null;
    }
}

/// <summary>
/// Bounds on one model file (<c>Scorer:ModelFiles</c>), so that one file costs a bounded time and memory to load: the
/// registry refuses a file over them, listed under <c>loadErrors</c> and counted in <c>scorer_model_files_refused</c>.
/// </summary>
public sealed class ModelFileSettings
{
    /// <summary>The largest file read, in bytes; a larger one is refused from its length, unread. Default 32 MiB.</summary>
    public long MaxBytes { get; set; } = Scorer.ModelFile.ModelFileReaderOptions.Default.MaxBytes;

    /// <summary>The most terms (and so covariance rows and entries per row) of one model. Default 500.</summary>
    public int MaxTerms { get; set; } = Scorer.ModelFile.ModelFileReaderOptions.Default.MaxTerms;

    /// <summary>The reader's options with these bounds, its problems naming these settings.</summary>
    public Scorer.ModelFile.ModelFileReaderOptions ToReaderOptions() => Scorer.ModelFile.ModelFileReaderOptions.Default with
    {
        MaxBytes = MaxBytes,
        MaxTerms = MaxTerms,
        MaxBytesSetting = "Scorer:ModelFiles:MaxBytes",
        MaxTermsSetting = "Scorer:ModelFiles:MaxTerms",
    };

    public IEnumerable<string> Validate()
    {
        if (MaxBytes is < 1024 or > MaxBytesCeiling)
        {
            yield return $"Scorer:ModelFiles:MaxBytes is {MaxBytes}; give 1024 to {MaxBytesCeiling} (1 GiB)";
        }

        if (MaxTerms is < 1 or > MaxTermsCeiling)
        {
            yield return $"Scorer:ModelFiles:MaxTerms is {MaxTerms}; give 1 to {MaxTermsCeiling} (the format's own limit)";
        }
    }

    private const long MaxBytesCeiling = 1L << 30;
    private const int MaxTermsCeiling = 10_000;
}

/// <summary>The store's settings (<c>Scorer:Store</c>).</summary>
public sealed class StoreOptions
{
    /// <summary><c>sqlite</c> (default: one process, a file) or <c>postgres</c> (replicas sharing one database).</summary>
    public string Kind { get; set; } = "sqlite";

    /// <summary>The SQLite file. Default <c>data/scorer.db</c>.</summary>
    public string Path { get; set; } = System.IO.Path.Combine("data", "scorer.db");

    /// <summary>The PostgreSQL connection string (Npgsql form: <c>Host=…;Port=…;Username=…;Password=…;Database=…</c>).</summary>
    public string? ConnectionString { get; set; }

    /// <summary>PostgreSQL: the schema of the store's tables (default: the connection's search path, normally <c>public</c>).</summary>
    public string? Schema { get; set; }

    /// <summary>
    /// How long logged predictions are kept (default: forever), SQLite and PostgreSQL. Older ones are deleted at each
    /// pass (<see cref="PruneInterval"/>) once their outcome is recorded or no longer expected; the rest are kept and
    /// counted in the log (PostgreSQL drops whole days: see docs/operations.md).
    /// </summary>
    public TimeSpan? PredictionRetention { get; set; }

    /// <summary>
    /// How long outcomes and outcome conflicts are kept (default: forever); when set, at least
    /// <see cref="PredictionRetention"/>. An outcome never goes before its prediction.
    /// </summary>
    public TimeSpan? OutcomeRetention { get; set; }

    /// <summary>How often the retention runs (default: hourly), in the one process holding the retention lease.</summary>
    public TimeSpan PruneInterval { get; set; } = RetentionRules.DefaultPruneInterval;

    /// <summary>SQLite: the most rows one retention transaction deletes (default 5,000), so that writers wait for one batch at most.</summary>
    public int PruneBatchSize { get; set; } = Scorer.Store.Sqlite.SqliteStoreOptions.DefaultPruneBatchSize;

    /// <summary>
    /// SQLite: the most the file may grow to, in MiB (default: as far as the disk allows). Writes beyond are refused as
    /// on a full disk, and readiness says so, so the store cannot fill a disk it shares with the system.
    /// </summary>
    public long? MaxSizeMegabytes { get; set; }

    /// <summary>SQLite: the page cache of the connection that writes, in MiB (default 64); it speeds outcomes arriving in random order.</summary>
    public int WriteCacheMegabytes { get; set; } = (int)(Scorer.Store.Sqlite.SqliteStoreOptions.DefaultWriteCacheBytes >> 20);

    /// <summary>SQLite: the page cache of each connection that reads, in MiB (default 8); one per read running at once.</summary>
    public int ReadCacheMegabytes { get; set; } = (int)(Scorer.Store.Sqlite.SqliteStoreOptions.DefaultReadCacheBytes >> 20);

    public IEnumerable<string> Validate()
    {
        switch (Kind)
        {
            case "sqlite":
                if (string.IsNullOrWhiteSpace(Path))
                {
                    yield return "Scorer:Store:Path is empty; name the SQLite file";
                }
                else if (LooksLikeConnectionString(Path))
                {
                    // Never guess: a connection string taken as a file name would quietly serve from a new SQLite file.
                    yield return $"Scorer:Store:Path (--store) is '{Redacted(Path)}', which looks like a PostgreSQL connection string, not a SQLite file; "
                        + "for PostgreSQL set Scorer:Store:Kind=postgres and Scorer:Store:ConnectionString (on the command line: "
                        + "--store-kind postgres --store-connection '…')";
                }

                break;
            case "postgres":
                if (string.IsNullOrWhiteSpace(ConnectionString))
                {
                    yield return "Scorer:Store:ConnectionString is empty; Scorer:Store:Kind postgres needs a connection string";
                }

                break;
            default:
                yield return $"Scorer:Store:Kind is '{Kind}'; give sqlite or postgres";
                break;
        }

        if (MaxSizeMegabytes is { } size && (size < 1 || size > long.MaxValue >> 20))
        {
            yield return $"Scorer:Store:MaxSizeMegabytes is {size}; give a size in MiB of at least 1, or leave it out to let the file grow";
        }

        if (MaxSizeMegabytes is not null && Kind == "postgres")
        {
            yield return "Scorer:Store:MaxSizeMegabytes limits the SQLite file; with Scorer:Store:Kind postgres, limit the database's size on its server instead";
        }

        foreach (var problem in RetentionRules.Problems(PredictionRetention, OutcomeRetention, PruneInterval, "Scorer:Store:"))
        {
            yield return problem;
        }

        if (WriteCacheMegabytes is < 1 or > 4_096)
        {
            yield return $"Scorer:Store:WriteCacheMegabytes is {WriteCacheMegabytes}; give a page cache in MiB from 1 to 4,096";
        }

        if (ReadCacheMegabytes is < 1 or > 4_096)
        {
            yield return $"Scorer:Store:ReadCacheMegabytes is {ReadCacheMegabytes}; give a page cache in MiB from 1 to 4,096";
        }

        if (PruneBatchSize < 1)
        {
            yield return $"Scorer:Store:PruneBatchSize is {PruneBatchSize}; give at least 1 (the default is {Scorer.Store.Sqlite.SqliteStoreOptions.DefaultPruneBatchSize})";
        }
    }

    /// <summary>Key=value pairs separated by semicolons, with a key a connection string has (Host, Server, Database, …).</summary>
    private static bool LooksLikeConnectionString(string text) =>
        text.Contains('=', StringComparison.Ordinal) && text.Split(';', StringSplitOptions.RemoveEmptyEntries).Any(part =>
            part.Split('=', 2)[0].Trim().ToUpperInvariant() is "HOST" or "SERVER" or "DATABASE" or "USERNAME" or "USER ID" or "PASSWORD" or "PORT" or "DATA SOURCE");

    /// <summary>A connection string with its password hidden, for messages.</summary>
    private static string Redacted(string text) => System.Text.RegularExpressions.Regex.Replace(text, "(?i)(password\\s*=)[^;]*", "$1***");

    /// <summary>Where the store is, for the start-up log line (never the password).</summary>
    public string Describe() => Kind == "postgres"
        ? "PostgreSQL " + new Npgsql.NpgsqlConnectionStringBuilder(ConnectionString) { Password = null }.ConnectionString + (Schema is null ? "" : $", schema {Schema}")
        : "SQLite " + System.IO.Path.GetFullPath(Path);
}
