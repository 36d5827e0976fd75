using Npgsql;
using NpgsqlTypes;

namespace Scorer.Store.Postgres;

/// <summary>Drift counts by model, version, hour, series and bin.</summary>
public sealed partial class PostgresScorerStore
{
    /// <inheritdoc />
    public async Task AddDriftCountsAsync(IReadOnlyList<DriftCount> counts, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(counts);
        if (counts.Count == 0)
        {
            return;
        }

        // Summed in memory first (one upsert may not touch a row twice), then upserted in key order (one lock order).
        var sums = new Dictionary<(string Model, string Version, long Hour, string Series, int Bin), long>();
        for (var i = 0; i < counts.Count; i++)
        {
            var c = counts[i] ?? throw new ArgumentException($"counts[{i}] is null.", nameof(counts));
            ArgumentNullException.ThrowIfNull(c.Model, nameof(counts));
            ArgumentNullException.ThrowIfNull(c.Version, nameof(counts));
            ArgumentNullException.ThrowIfNull(c.Series, nameof(counts));
            var key = (c.Model, c.Version, StoreTime.Hour(c.Hour), c.Series, c.Bin);
            sums[key] = sums.GetValueOrDefault(key) + c.Rows;
        }

        var sorted = sums
            .OrderBy(s => s.Key.Model, StringComparer.Ordinal)
            .ThenBy(s => s.Key.Version, StringComparer.Ordinal)
            .ThenBy(s => s.Key.Hour)
            .ThenBy(s => s.Key.Series, StringComparer.Ordinal)
            .ThenBy(s => s.Key.Bin)
            .ToArray();
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var upsert = Command(connection, null,
            "INSERT INTO drift_counts (model, version, hour, series, bin, \"rows\") "
            + "SELECT * FROM unnest($1::text[], $2::text[], $3::bigint[], $4::text[], $5::integer[], $6::bigint[]) "
            + "ON CONFLICT (model, version, hour, series, bin) DO UPDATE SET \"rows\" = drift_counts.\"rows\" + excluded.\"rows\"");
        upsert.Parameters.Add(TextArray([.. sorted.Select(s => s.Key.Model)]));
        upsert.Parameters.Add(TextArray([.. sorted.Select(s => s.Key.Version)]));
        upsert.Parameters.Add(new NpgsqlParameter<long[]> { TypedValue = [.. sorted.Select(s => s.Key.Hour)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Bigint });
        upsert.Parameters.Add(TextArray([.. sorted.Select(s => s.Key.Series)]));
        upsert.Parameters.Add(new NpgsqlParameter<int[]> { TypedValue = [.. sorted.Select(s => s.Key.Bin)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Integer });
        upsert.Parameters.Add(new NpgsqlParameter<long[]> { TypedValue = [.. sorted.Select(s => s.Value)], NpgsqlDbType = NpgsqlDbType.Array | NpgsqlDbType.Bigint });
        await upsert.ExecuteNonQueryAsync(cancellationToken).ConfigureAwait(false);
    }

    /// <inheritdoc />
    public async Task<IReadOnlyList<DriftCount>> GetDriftCountsAsync(string model, string version, DateTimeOffset from, DateTimeOffset to,
        CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(version);
        await using var connection = await OpenAsync(cancellationToken).ConfigureAwait(false);
        await using var command = Command(connection, null,
            "SELECT series, bin, sum(\"rows\")::bigint FROM drift_counts WHERE model = $1 AND version = $2 AND hour >= $3 AND hour < $4 "
            + "GROUP BY series, bin ORDER BY series, bin");
        command.Parameters.Add(Text(model));
        command.Parameters.Add(Text(version));
        command.Parameters.Add(Bigint(StoreTime.CeilingUnits(from, StoreTime.MicrosecondsPerHour)));
        command.Parameters.Add(Bigint(StoreTime.CeilingUnits(to, StoreTime.MicrosecondsPerHour)));
        await using var reader = await command.ExecuteReaderAsync(cancellationToken).ConfigureAwait(false);
        var counts = new List<DriftCount>();
        while (await reader.ReadAsync(cancellationToken).ConfigureAwait(false))
        {
            counts.Add(new DriftCount(model, version, from, reader.GetString(0), reader.GetInt32(1), reader.GetInt64(2)));
        }

        return counts;
    }
}
