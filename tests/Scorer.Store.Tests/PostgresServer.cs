using System.Net.Sockets;
using Npgsql;
using Testcontainers.PostgreSql;

namespace Scorer.Store.Tests;

/// <summary>
/// The PostgreSQL server the tests use: the one <c>SCORER_TEST_POSTGRES</c> names (an Npgsql connection string, as
/// <c>scripts/postgres.sh start DIR</c> prints), else one started once per test run with Testcontainers (postgres:15)
/// when a Docker engine is reachable; with neither, the PostgreSQL tests are reported as skipped with
/// <see cref="SkipReason"/>, except under CI (<c>CI=true</c>), where they run and fail saying what is missing.
/// Each test works in a schema of its own (<see cref="NewSchemaName"/>), dropped after it.
/// </summary>
internal static class PostgresServer
{
    public const string Variable = "SCORER_TEST_POSTGRES";

    private static readonly Lazy<Task<string>> Server = new(StartAsync, LazyThreadSafetyMode.ExecutionAndPublication);

    /// <summary>Why the PostgreSQL tests cannot run here, or null when they run (a server is named, Docker is reachable, or CI demands them).</summary>
    public static string? SkipReason
    {
        get
        {
            if (!string.IsNullOrWhiteSpace(Environment.GetEnvironmentVariable(Variable)) || IsCi || DockerReachable())
            {
                return null;
            }

            return $"No PostgreSQL server: set {Variable} to an Npgsql connection string (scripts/postgres.sh start DIR starts a server and prints one), "
                + "or make a Docker engine reachable for Testcontainers.";
        }
    }

    private static bool IsCi => string.Equals(Environment.GetEnvironmentVariable("CI"), "true", StringComparison.OrdinalIgnoreCase);

    /// <summary>The server's connection string (starting a container the first time, when that is the way).</summary>
    public static Task<string> ConnectionStringAsync() => Server.Value;

    /// <summary>A schema name no other test uses.</summary>
    public static string NewSchemaName() => "scorer_test_" + Guid.NewGuid().ToString("N");

    /// <summary>Drops a test's schema and everything in it (nothing when the server was never reached).</summary>
    public static async Task DropSchemaAsync(string schema)
    {
        if (!Server.IsValueCreated || !Server.Value.IsCompletedSuccessfully)
        {
            return;
        }

        await using var connection = new NpgsqlConnection(await Server.Value);
        await connection.OpenAsync();
        await using var drop = new NpgsqlCommand($"DROP SCHEMA IF EXISTS {schema} CASCADE", connection);
        await drop.ExecuteNonQueryAsync();
    }

    /// <summary>A connection (not pooled with the stores') whose search path is the test's schema, for looking at the tables.</summary>
    public static async Task<NpgsqlConnection> ConnectAsync(string schema)
    {
        var builder = new NpgsqlConnectionStringBuilder(await ConnectionStringAsync()) { SearchPath = schema, ApplicationName = "scorer-tests" };
        var connection = new NpgsqlConnection(builder.ConnectionString);
        await connection.OpenAsync();
        return connection;
    }

    private static async Task<string> StartAsync()
    {
        var named = Environment.GetEnvironmentVariable(Variable);
        if (!string.IsNullOrWhiteSpace(named))
        {
            return named;
        }

        if (IsCi && !DockerReachable())
        {
            throw new InvalidOperationException(
                $"CI=true but {Variable} is not set: CI must run the PostgreSQL tests against a real server (scripts/postgres.sh start DIR prints its connection string).");
        }

        // Testcontainers' resource reaper removes the container when the test process ends.
        var container = new PostgreSqlBuilder("postgres:15").Build();
        await container.StartAsync();
        return container.GetConnectionString();
    }

    /// <summary>DOCKER_HOST is set, or the default engine socket accepts a connection.</summary>
    private static bool DockerReachable()
    {
        if (!string.IsNullOrWhiteSpace(Environment.GetEnvironmentVariable("DOCKER_HOST")))
        {
            return true;
        }

        const string socket = "/var/run/docker.sock";
        if (!OperatingSystem.IsLinux() && !OperatingSystem.IsMacOS() || !File.Exists(socket))
        {
            return false;
        }

        try
        {
            using var probe = new Socket(AddressFamily.Unix, SocketType.Stream, ProtocolType.Unspecified);
            probe.Connect(new UnixDomainSocketEndPoint(socket));
            return true;
        }
        catch (SocketException)
        {
            return false;
        }
    }
}
