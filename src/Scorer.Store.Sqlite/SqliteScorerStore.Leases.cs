using Microsoft.Data.Sqlite;

namespace Scorer.Store.Sqlite;

/// <summary>Leases held in the file (a row per lease with its holder and the end of its hold) and the charts' saved state.</summary>
public sealed partial class SqliteScorerStore
{
    /// <inheritdoc />
    /// <remarks>
    /// <para>
    /// A lease is a row of the file's <c>leases</c> table naming its holder (this instance: <see cref="LeaseHolder"/>)
    /// and when the hold runs out. Each try, in one write transaction (so tries and saves of every process on the file
    /// take turns): takes the row when there is none, renews it (by <see cref="SqliteStoreOptions.LeaseDuration"/> from
    /// now) when this instance holds it, takes it over when another instance's hold ran out before now, and otherwise
    /// leaves it and returns false. Times are read from the store's clock.
    /// </para>
    /// <para>
    /// So at most one instance holds a lease at a time; a holder that stops renewing (it died, or it hung for longer
    /// than the lease duration) loses it to the next instance that tries after its hold ran out, and then its own saves
    /// under it are refused. Release and disposal delete the row, and the next try of any instance takes it at once.
    /// The guarantee rests on the processes' clocks agreeing to well within the lease duration, as clocks of one
    /// machine do (a SQLite file is shared by processes of one machine only: SQLite's locks do not hold over network
    /// file systems).
    /// </para>
    /// </remarks>
    public Task<bool> TryHoldLeaseAsync(string name, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(name);
        ObjectDisposedException.ThrowIf(_disposed, this);
        var now = StoreTime.ToUnixMicroseconds(_clock.GetUtcNow());
        return WriteAsync(
            (connection, transaction) =>
            {
                using var take = Command(connection, transaction,
                    "INSERT INTO leases (name, holder, expires_at) VALUES ($name, $holder, $expires) "
                    + "ON CONFLICT (name) DO UPDATE SET holder = excluded.holder, expires_at = excluded.expires_at "
                    + "WHERE leases.holder = excluded.holder OR leases.expires_at <= $now;");
                take.Parameters.AddWithValue("$name", name);
                take.Parameters.AddWithValue("$holder", LeaseHolder);
                take.Parameters.AddWithValue("$expires", now + _leaseMicroseconds);
                take.Parameters.AddWithValue("$now", now);
                var held = take.ExecuteNonQuery() == 1;
                _leasesTaken |= held;
                return held;
            },
            cancellationToken);
    }

    /// <inheritdoc />
    /// <remarks>Deletes the lease's row if this instance holds it; another instance's hold is left alone.</remarks>
    public Task ReleaseLeaseAsync(string name, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(name);
        return WriteAsync(
            (connection, transaction) =>
            {
                using var release = Command(connection, transaction, "DELETE FROM leases WHERE name = $name AND holder = $holder;");
                release.Parameters.AddWithValue("$name", name);
                release.Parameters.AddWithValue("$holder", LeaseHolder);
                return release.ExecuteNonQuery();
            },
            cancellationToken);
    }

    /// <inheritdoc />
    /// <remarks>
    /// In one write transaction with the check of the lease: written only while the lease's row names this instance
    /// (which also renews the hold: the holder is at work); otherwise <see cref="LeaseLostException"/> and nothing is
    /// written. A hold that ran out but that no other instance took over is still this instance's.
    /// </remarks>
    public Task SaveChartStateAsync(string model, string version, string state, string lease, CancellationToken cancellationToken = default)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentException.ThrowIfNullOrEmpty(version);
        ArgumentNullException.ThrowIfNull(state);
        ArgumentException.ThrowIfNullOrEmpty(lease);
        ObjectDisposedException.ThrowIf(_disposed, this);
        var now = StoreTime.ToUnixMicroseconds(_clock.GetUtcNow());
        return WriteAsync(
            (connection, transaction) =>
            {
                RenewOrThrow(connection, transaction, lease, now);

                using var save = Command(connection, transaction,
                    "INSERT INTO chart_states (model, version, state, saved_at) VALUES ($model, $version, $state, $now) "
                    + "ON CONFLICT (model, version) DO UPDATE SET state = excluded.state, saved_at = excluded.saved_at;");
                save.Parameters.AddWithValue("$model", model);
                save.Parameters.AddWithValue("$version", version);
                save.Parameters.AddWithValue("$state", state);
                save.Parameters.AddWithValue("$now", now);
                return save.ExecuteNonQuery();
            },
            cancellationToken);
    }

    /// <summary>
    /// Renews this instance's hold of <paramref name="lease"/> inside a write transaction, or throws
    /// <see cref="LeaseLostException"/> (the transaction is then rolled back: nothing written), for saves fenced by a lease.
    /// </summary>
    private void RenewOrThrow(SqliteConnection connection, SqliteTransaction transaction, string lease, long now)
    {
        using var renew = Command(connection, transaction, "UPDATE leases SET expires_at = $expires WHERE name = $lease AND holder = $holder;");
        renew.Parameters.AddWithValue("$lease", lease);
        renew.Parameters.AddWithValue("$holder", LeaseHolder);
        renew.Parameters.AddWithValue("$expires", now + _leaseMicroseconds);
        if (renew.ExecuteNonQuery() != 1)
        {
            throw new LeaseLostException(lease);
        }
    }

    /// <inheritdoc />
    public async Task<string?> GetChartStateAsync(string model, string version, CancellationToken cancellationToken = default)
    {
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null, "SELECT state FROM chart_states WHERE model = $model AND version = $version;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        return command.ExecuteScalar() as string;
    }

    /// <summary>Deletes the rows of the leases this instance holds (on disposal): another instance's next try takes them at once.</summary>
    private async Task ReleaseAllLeasesAsync()
    {
        if (!_leasesTaken)
        {
            return;
        }

        try
        {
            await WriteAsync(
                (connection, transaction) =>
                {
                    using var release = Command(connection, transaction, "DELETE FROM leases WHERE holder = $holder;");
                    release.Parameters.AddWithValue("$holder", LeaseHolder);
                    return release.ExecuteNonQuery();
                },
                CancellationToken.None).ConfigureAwait(false);
        }
        catch (Exception ex) when (ex is SqliteException or IOException)
        {
            // Not migrated yet (no leases table), or the file cannot be written: any hold runs out after the lease duration.
        }
    }
}
