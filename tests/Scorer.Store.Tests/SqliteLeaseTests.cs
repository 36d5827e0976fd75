using Microsoft.Extensions.Time.Testing;
using Scorer.Store.Sqlite;

namespace Scorer.Store.Tests;

/// <summary>
/// The SQLite store's leases across instances on one file, on a clock the test moves: a hold lasts the lease duration
/// from its last renewal, and another instance takes it over only after that.
/// </summary>
public sealed class SqliteLeaseTests : IAsyncLifetime
{
    private static readonly TimeSpan Duration = TimeSpan.FromSeconds(30);

    private readonly TempFolder _folder = new();
    private readonly FakeTimeProvider _clock = new(new DateTimeOffset(2025, 6, 1, 12, 0, 0, TimeSpan.Zero));
    private readonly List<SqliteScorerStore> _stores = [];

    public Task InitializeAsync() => Task.CompletedTask;

    public async Task DisposeAsync()
    {
        foreach (var store in _stores)
        {
            await store.DisposeAsync();
        }

        _folder.Dispose();
    }

    private async Task<SqliteScorerStore> OpenAsync()
    {
        var store = SqliteScorerStore.ForFile(Path.Combine(_folder.Path, "scorer.db"), new SqliteStoreOptions { LeaseDuration = Duration }, _clock);
        _stores.Add(store);
        await store.MigrateAsync();
        return store;
    }

    [Fact]
    public async Task A_hold_not_renewed_for_the_lease_duration_is_taken_over_and_the_old_holder_can_neither_save_nor_hold()
    {
        var first = await OpenAsync();
        var second = await OpenAsync();
        Assert.True(await first.TryHoldLeaseAsync("charts"));

        _clock.Advance(Duration - TimeSpan.FromMicroseconds(1));
        Assert.False(await second.TryHoldLeaseAsync("charts")); // one microsecond short of the end of the hold
        _clock.Advance(TimeSpan.FromMicroseconds(1));
        Assert.True(await second.TryHoldLeaseAsync("charts"));

        await Assert.ThrowsAsync<LeaseLostException>(() => first.SaveChartStateAsync("renewal", "1", "{\"by\":\"first\"}", "charts"));
        Assert.False(await first.TryHoldLeaseAsync("charts"));
        Assert.Null(await second.GetChartStateAsync("renewal", "1"));
    }

    [Fact]
    public async Task Each_try_and_each_save_renews_the_hold_so_a_working_holder_keeps_its_lease()
    {
        var first = await OpenAsync();
        var second = await OpenAsync();
        Assert.True(await first.TryHoldLeaseAsync("charts"));

        for (var round = 0; round < 5; round++)
        {
            _clock.Advance(Duration / 2);
            if (round % 2 == 0)
            {
                Assert.True(await first.TryHoldLeaseAsync("charts"));
            }
            else
            {
                await first.SaveChartStateAsync("renewal", "1", $"{{\"round\":{round}}}", "charts");
            }

            Assert.False(await second.TryHoldLeaseAsync("charts"));
        }

        Assert.Equal("{\"round\":3}", await second.GetChartStateAsync("renewal", "1"));
    }

    [Fact]
    public async Task A_hold_that_ran_out_but_that_nobody_took_over_is_still_the_holders()
    {
        var first = await OpenAsync();
        Assert.True(await first.TryHoldLeaseAsync("charts"));

        _clock.Advance(Duration * 3);

        await first.SaveChartStateAsync("renewal", "1", "{}", "charts");
        Assert.True(await first.TryHoldLeaseAsync("charts"));
        var second = await OpenAsync();
        Assert.False(await second.TryHoldLeaseAsync("charts")); // renewed by the save and the try just now
    }

    [Fact]
    public async Task The_leases_table_names_the_holder_and_the_end_of_its_hold_on_the_stores_clock()
    {
        var first = await OpenAsync();
        Assert.True(await first.TryHoldLeaseAsync("charts"));

        await using var connection = await first.OpenAsync(CancellationToken.None);
        using var command = connection.CreateCommand();
        command.CommandText = "SELECT holder, expires_at FROM leases WHERE name = 'charts';";
        using var reader = command.ExecuteReader();
        Assert.True(reader.Read());
        Assert.Equal(first.LeaseHolder, reader.GetString(0));
        Assert.Equal(StoreTime.ToUnixMicroseconds(_clock.GetUtcNow() + Duration), reader.GetInt64(1));
    }

    [Theory]
    [InlineData(0)]
    [InlineData(-1)]
    public void A_lease_duration_that_is_not_positive_is_refused_naming_it(int seconds)
    {
        var error = Assert.Throws<ArgumentOutOfRangeException>(() =>
            SqliteScorerStore.ForFile(Path.Combine(_folder.Path, "other.db"), new SqliteStoreOptions { LeaseDuration = TimeSpan.FromSeconds(seconds) }));

        Assert.Contains("LeaseDuration", error.Message, StringComparison.Ordinal);
    }
}
