using Npgsql;

namespace Scorer.Store.Postgres;

/// <summary>Stage changes announced through LISTEN/NOTIFY (migration 0003's trigger on stage_changes).</summary>
public sealed partial class PostgresScorerStore : IStageChangeSignal
{
    private const string StageChannel = "scorer_stages";

    /// <inheritdoc />
    public async Task ListenForStageChangesAsync(Action<string?> changed, CancellationToken cancellationToken)
    {
        ArgumentNullException.ThrowIfNull(changed);
        var first = true;
        while (!cancellationToken.IsCancellationRequested)
        {
            try
            {
                await using var connection = await _dataSource.OpenConnectionAsync(cancellationToken).ConfigureAwait(false);
                string schema;
                await using (var which = new NpgsqlCommand("SELECT current_schema()", connection))
                {
                    schema = (string)(await which.ExecuteScalarAsync(cancellationToken).ConfigureAwait(false))!;
                }

                connection.Notification += (_, e) =>
                {
                    var space = e.Payload.IndexOf(' ', StringComparison.Ordinal);
                    if (space > 0 && e.Payload.AsSpan(0, space).SequenceEqual(schema))
                    {
                        changed(e.Payload[(space + 1)..]);
                    }
                };
                await using (var listen = new NpgsqlCommand($"LISTEN {StageChannel}", connection))
                {
                    await listen.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
                }

                if (!first)
                {
                    changed(null); // changes made while the connection was down were not announced to this process
                }

                first = false;
                while (true)
                {
                    await connection.WaitAsync(cancellationToken).ConfigureAwait(false);
                }
            }
            catch (OperationCanceledException) when (cancellationToken.IsCancellationRequested)
            {
                return;
            }
            catch (Exception ex) when (ex is NpgsqlException or System.IO.IOException or InvalidOperationException)
            {
                first = false;
                await Task.Delay(TimeSpan.FromSeconds(1), _clock, cancellationToken).ConfigureAwait(false);
            }
        }
    }
}
