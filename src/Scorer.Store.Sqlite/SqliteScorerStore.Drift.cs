using Microsoft.Data.Sqlite;

namespace Scorer.Store.Sqlite;

/// <summary>Drift counts by model, version, hour, series and bin.</summary>
public sealed partial class SqliteScorerStore
{
    /// <inheritdoc />
    public Task AddDriftCountsAsync(IReadOnlyList<DriftCount> counts, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(counts);
        if (counts.Count == 0)
        {
            return Task.CompletedTask;
        }

        return WriteAsync(
            (connection, transaction) =>
            {
                using var upsert = Command(connection, transaction,
                    "INSERT INTO drift_counts (model, version, hour, series, bin, rows) VALUES ($model, $version, $hour, $series, $bin, $rows) "
                    + "ON CONFLICT (model, version, hour, series, bin) DO UPDATE SET rows = rows + excluded.rows;");
                var model = upsert.Parameters.Add("$model", SqliteType.Text);
                var version = upsert.Parameters.Add("$version", SqliteType.Text);
                var hour = upsert.Parameters.Add("$hour", SqliteType.Integer);
                var series = upsert.Parameters.Add("$series", SqliteType.Text);
                var bin = upsert.Parameters.Add("$bin", SqliteType.Integer);
                var rows = upsert.Parameters.Add("$rows", SqliteType.Integer);
                foreach (var c in counts)
                {
                    model.Value = c.Model;
                    version.Value = c.Version;
                    hour.Value = StoreTime.Hour(c.Hour);
                    series.Value = c.Series;
                    bin.Value = c.Bin;
                    rows.Value = c.Rows;
                    upsert.ExecuteNonQuery();
                }

                return true;
            },
            cancellationToken);
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<DriftCount>> GetDriftCountsAsync(string model, string version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        using var command = Command(connection, null,
            "SELECT series, bin, sum(rows) FROM drift_counts WHERE model = $model AND version = $version AND hour >= $from AND hour < $to "
            + "GROUP BY series, bin ORDER BY series, bin;");
        command.Parameters.AddWithValue("$model", model);
        command.Parameters.AddWithValue("$version", version);
        command.Parameters.AddWithValue("$from", StoreTime.CeilingUnits(from, StoreTime.MicrosecondsPerHour));
        command.Parameters.AddWithValue("$to", StoreTime.CeilingUnits(to, StoreTime.MicrosecondsPerHour));
        using var reader = command.ExecuteReader();
        var counts = new List<DriftCount>();
        while (reader.Read())
        {
            counts.Add(new DriftCount(model, version, from, reader.GetString(0), reader.GetInt32(1), reader.GetInt64(2)));
        }

        return counts;
    }
}
