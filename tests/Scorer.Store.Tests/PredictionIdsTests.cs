using System.Collections.Concurrent;

namespace Scorer.Store.Tests;

public sealed class PredictionIdsTests
{
    [Fact]
    public void Ids_have_the_uuid_version_7_layout_of_the_runtime_with_the_same_time_prefix()
    {
        // RFC 9562 §5.7, as .NET's own Guid.CreateVersion7 implements it: version 7, variant 10xx, Unix ms in bits 0-47.
        var at = new DateTimeOffset(2026, 12, 2, 1, 30, 15, 123, TimeSpan.Zero);
        var ours = PredictionIds.Next(at);
        var runtime = Guid.CreateVersion7(at);
        Assert.Equal(7, ours.Version);
        Assert.Equal(runtime.Variant & 0b1100, ours.Variant & 0b1100); // the top two bits, 10: the RFC 9562 variant
        Assert.Equal(0b1000, ours.Variant & 0b1100);
        Assert.Equal(runtime.ToString()[..13], ours.ToString()[..13]); // the 48-bit time prefix, as text "xxxxxxxx-xxxx"
    }

    [Fact]
    public void Ids_sort_by_time_across_milliseconds()
    {
        var at = new DateTimeOffset(2026, 12, 2, 1, 30, 15, 0, TimeSpan.Zero);
        var ids = Enumerable.Range(0, 1000).Select(i => PredictionIds.Next(at.AddMilliseconds(i))).ToList();
        Assert.Equal(ids, ids.OrderBy(id => id.ToString(), StringComparer.Ordinal));
    }

    [Fact]
    public void A_million_ids_from_four_threads_in_one_millisecond_are_all_distinct()
    {
        var at = DateTimeOffset.UnixEpoch.AddDays(20_000);
        var seen = new ConcurrentDictionary<Guid, byte>();
        Parallel.For(0, 4, _ =>
        {
            for (var i = 0; i < 250_000; i++)
            {
                Assert.True(seen.TryAdd(PredictionIds.Next(at), 0));
            }
        });
        Assert.Equal(1_000_000, seen.Count);
    }
}
