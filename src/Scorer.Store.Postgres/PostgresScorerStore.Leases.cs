using Npgsql;

namespace Scorer.Store.Postgres;

/// <summary>Leases (work that runs in one process among all that share the database) and the charts' saved state.</summary>
public sealed partial class PostgresScorerStore
{
    /// <summary>Leases are session advisory locks keyed (this, hashtext(schema.name)).</summary>
    internal const int LeaseLockClass = 0x5C05E5A;

    private const string ChartStateUpsertSql =
        "INSERT INTO chart_states (model, version, state, saved_at) VALUES ($1, $2, $3, $4) "
        + "ON CONFLICT (model, version) DO UPDATE SET state = excluded.state, saved_at = excluded.saved_at";

    private readonly SemaphoreSlim _leaseGate = new(1, 1);
    private readonly Dictionary<string, NpgsqlConnection> _leases = new(StringComparer.Ordinal);
    private NpgsqlDataSource? _leaseSource;

    /// <inheritdoc />
    /// <remarks>
    /// A lease is a session-level advisory lock (pg_try_advisory_lock) held by a connection of its own, outside the
    /// pool, kept open while the lease is held: closing it (release, disposal) or losing it (the process dies, the
    /// network fails: the server's TCP keepalives, set to about 25 s on that session, notice a silent peer) ends the
    /// session, and PostgreSQL lets the lock go with it. Confirming a held lease checks that its connection still
    /// answers; when it does not, the lease is lost, and this call tries to take it anew.
    /// </remarks>
    public async Task<bool> TryHoldLeaseAsync(string name, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(name);
        ObjectDisposedException.ThrowIf(_disposed, this);
        await _leaseGate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            if (_leases.TryGetValue(name, out var held))
            {
                if (await AnswersAsync(held, cancellationToken).ConfigureAwait(false))
                {
                    return true;
                }

                _leases.Remove(name);
                await held.DisposeAsync().ConfigureAwait(false);
            }

            _leaseSource ??= LeaseSource();
            var connection = await _leaseSource.OpenConnectionAsync(cancellationToken).ConfigureAwait(false);
            try
            {
                await using var take = new NpgsqlBatch(connection)
                {
                    BatchCommands =
                    {
                        new NpgsqlBatchCommand("SET tcp_keepalives_idle = 10"),
                        new NpgsqlBatchCommand("SET tcp_keepalives_interval = 5"),
                        new NpgsqlBatchCommand("SET tcp_keepalives_count = 3"),
                        new NpgsqlBatchCommand($"SELECT pg_try_advisory_lock({LeaseLockClass}, hashtext(current_schema() || '.' || $1))") { Parameters = { Text(name) } },
                    },
                };
                if (await take.ExecuteScalarAsync(cancellationToken).ConfigureAwait(false) is true)
                {
                    _leases[name] = connection;
                    return true;
                }
            }
            catch
            {
                await connection.DisposeAsync().ConfigureAwait(false);
                throw;
            }

            await connection.DisposeAsync().ConfigureAwait(false);
            return false;
        }
        finally
        {
            _leaseGate.Release();
        }
    }

    /// <inheritdoc />
    public async Task ReleaseLeaseAsync(string name, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(name);
        await _leaseGate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            if (_leases.Remove(name, out var held))
            {
                await LetGoAsync(held, name).ConfigureAwait(false);
            }
        }
        finally
        {
            _leaseGate.Release();
        }
    }

    /// <inheritdoc />
    /// <remarks>
    /// Written through the lease's own connection: the session that holds the lock writes, so a save that commits was
    /// made under the lease (the lock cannot leave a live session), and a holder whose session has ended cannot write.
    /// </remarks>
    public async Task SaveChartStateAsync(string model, string version, string state, string lease, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        ArgumentNullException.ThrowIfNull(state);
        ArgumentException.ThrowIfNullOrEmpty(lease);
        ObjectDisposedException.ThrowIf(_disposed, this);
        await _leaseGate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            if (!_leases.TryGetValue(lease, out var held))
            {
                throw new LeaseLostException(lease);
            }

            await using var save = new NpgsqlCommand(ChartStateUpsertSql, held);
            save.Parameters.Add(Text(model));
            save.Parameters.Add(Text(version));
            save.Parameters.Add(Text(state));
            save.Parameters.Add(Timestamp(_clock.GetUtcNow()));
            try
            {
                await save.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
            }
            catch (NpgsqlException) when (held.FullState.HasFlag(System.Data.ConnectionState.Broken) || held.State != System.Data.ConnectionState.Open)
            {
                _leases.Remove(lease);
                await held.DisposeAsync().ConfigureAwait(false);
                throw new LeaseLostException(lease);
            }
        }
        finally
        {
            _leaseGate.Release();
        }
    }

    /// <inheritdoc />
    public async Task<string?> GetChartStateAsync(string model, string version, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null, "SELECT state FROM chart_states WHERE model = $1 AND version = $2");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Text(version));
        return await command.ExecuteScalarAsync(cancellationToken).ConfigureAwait(false) as string;
    }

    /// <summary>Closes the lease connections (letting their locks go).</summary>
    private async Task ReleaseAllLeasesAsync()
    {
        await _leaseGate.WaitAsync().ConfigureAwait(false);
        try
        {
            foreach (var (name, connection) in _leases)
            {
                await LetGoAsync(connection, name).ConfigureAwait(false);
            }

            _leases.Clear();
            if (_leaseSource is not null)
            {
                await _leaseSource.DisposeAsync().ConfigureAwait(false);
                _leaseSource = null;
            }
        }
        finally
        {
            _leaseGate.Release();
        }
    }

    /// <summary>Connections for leases: the store's settings, not pooled (closing one ends its session).</summary>
    private NpgsqlDataSource LeaseSource()
    {
        var builder = new NpgsqlConnectionStringBuilder(_connectionString) { Pooling = false };
        return NpgsqlDataSource.Create(builder);
    }

    /// <summary>
    /// Unlocks the lease, then closes its connection (not pooled: the session ends). The unlock comes first because a
    /// closed session lets its locks go only once the server has noticed, a moment later; another replica's next try
    /// should find the lease free.
    /// </summary>
    private static async Task LetGoAsync(NpgsqlConnection connection, string name)
    {
        try
        {
            await using var unlock = new NpgsqlCommand(
                $"SELECT pg_advisory_unlock({LeaseLockClass}, hashtext(current_schema() || '.' || $1))", connection);
            unlock.Parameters.Add(Text(name));
            await unlock.ExecuteNonQueryAsync().ConfigureAwait(false);
        }
        catch (NpgsqlException)
        {
            // The session is gone already, and its lock with it.
        }
        catch (InvalidOperationException)
        {
            // The connection is closed or broken: likewise.
        }
        finally
        {
            await connection.DisposeAsync().ConfigureAwait(false);
        }
    }

    private static async Task<bool> AnswersAsync(NpgsqlConnection connection, CancellationToken cancellationToken)
    {
        try
        {
            await using var ping = new NpgsqlCommand("SELECT 1", connection);
            await ping.ExecuteScalarAsync(cancellationToken).ConfigureAwait(false);
            return true;
        }
        catch (NpgsqlException)
        {
            return false;
        }
        catch (InvalidOperationException)
        {
            return false; // the connection is closed or broken
        }
    }
}
