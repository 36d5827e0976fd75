using System.Diagnostics;

namespace Scorer.Server.Tests;

/// <summary>
/// A test that stops and starts a PostgreSQL server of its own (<see cref="StoppablePostgres"/>, never the shared one
/// that <c>SCORER_TEST_POSTGRES</c> names): skipped with the reason where PostgreSQL 15 is not installed, except under
/// CI (<c>CI=true</c>), where it runs and fails saying what is missing.
/// </summary>
public sealed class StoppablePostgresFactAttribute : FactAttribute
{
    public StoppablePostgresFactAttribute()
    {
        if (!File.Exists(StoppablePostgres.PgCtl) && !StoppablePostgres.IsCi)
        {
            Skip = $"PostgreSQL 15 is not installed ({StoppablePostgres.PgCtl} is missing): apt-get install postgresql-15.";
        }
    }
}

/// <summary>
/// A throwaway PostgreSQL 15 server in a folder of its own (scripts/postgres.sh), reached over loopback TCP, that a
/// test stops (fast shutdown: every connection is cut) and starts again on the same port.
/// </summary>
internal sealed class StoppablePostgres : IAsyncDisposable
{
    public const string PgCtl = "/usr/lib/postgresql/15/bin/pg_ctl";

    private readonly string _folder;

    private StoppablePostgres(string folder, string connectionString)
    {
        _folder = folder;
        ConnectionString = connectionString;
    }

    public static bool IsCi => string.Equals(Environment.GetEnvironmentVariable("CI"), "true", StringComparison.OrdinalIgnoreCase);

    /// <summary>Npgsql's connection string, over 127.0.0.1.</summary>
    public string ConnectionString { get; }

    public bool Running { get; private set; }

    public static async Task<StoppablePostgres> StartAsync()
    {
        if (!File.Exists(PgCtl))
        {
            throw new InvalidOperationException($"CI=true but {PgCtl} is missing: CI must install postgresql-15 for the store outage tests.");
        }

        // Short, under /tmp: the server's socket path must fit in 107 bytes.
        var folder = Directory.CreateTempSubdirectory("scorer-pg-").FullName;
        await ScriptAsync("start", folder);
        var server = new StoppablePostgres(folder, (await File.ReadAllTextAsync(Path.Combine(folder, "connection-string-tcp"))).Trim()) { Running = true };
        return server;
    }

    /// <summary>Stops the server and returns once it is down (pg_ctl waits for it).</summary>
    public async Task StopAsync()
    {
        await ScriptAsync("stop", _folder);
        Running = false;
    }

    /// <summary>Starts the server again on its port and returns once it accepts connections.</summary>
    public async Task RestartAsync()
    {
        await ScriptAsync("restart", _folder);
        Running = true;
    }

    public async ValueTask DisposeAsync()
    {
        if (Running)
        {
            await StopAsync();
        }

        try
        {
            Directory.Delete(_folder, recursive: true);
        }
        catch (IOException)
        {
        }
        catch (UnauthorizedAccessException)
        {
        }
    }

    private static async Task ScriptAsync(string action, string folder)
    {
        var start = new ProcessStartInfo("bash") { RedirectStandardOutput = true, RedirectStandardError = true, UseShellExecute = false };
        start.ArgumentList.Add(Path.Combine(Scorer.Testing.TestRepository.Root, "scripts", "postgres.sh"));
        start.ArgumentList.Add(action);
        start.ArgumentList.Add(folder);
        using var process = Process.Start(start)!;
        var output = process.StandardOutput.ReadToEndAsync();
        var errors = process.StandardError.ReadToEndAsync();
        await process.WaitForExitAsync();
        if (process.ExitCode != 0)
        {
            throw new InvalidOperationException($"scripts/postgres.sh {action} failed ({process.ExitCode}):\n{await output}\n{await errors}");
        }
    }
}
