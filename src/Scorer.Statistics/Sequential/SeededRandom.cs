namespace Scorer.Statistics.Sequential;

/// <summary>
/// A small seeded generator for the run-length simulations, so that a seed gives the same numbers on every .NET
/// version: xoshiro256** (Blackman &amp; Vigna 2018), its state filled from the seed by SplitMix64. Not for anything
/// that needs unpredictability.
/// </summary>
internal sealed class SeededRandom
{
    private ulong _s0;
    private ulong _s1;
    private ulong _s2;
    private ulong _s3;

    public SeededRandom(long seed)
    {
        var x = unchecked((ulong)seed);
        _s0 = SplitMix(ref x);
        _s1 = SplitMix(ref x);
        _s2 = SplitMix(ref x);
        _s3 = SplitMix(ref x);
    }

    /// <summary>The next 64 random bits.</summary>
    public ulong NextBits()
    {
        var result = ulong.RotateLeft(_s1 * 5, 7) * 9;
        var t = _s1 << 17;
        _s2 ^= _s0;
        _s3 ^= _s1;
        _s1 ^= _s2;
        _s0 ^= _s3;
        _s2 ^= t;
        _s3 = ulong.RotateLeft(_s3, 45);
        return result;
    }

    /// <summary>A uniform double in [0, 1) with 53 random bits.</summary>
    public double NextDouble() => (NextBits() >> 11) * (1.0 / (1UL << 53));

    /// <summary>A uniform integer in [0, <paramref name="count"/>), without modulo bias (Lemire's multiply-and-reject).</summary>
    public int NextIndex(int count)
    {
        var bound = (ulong)count;
        var high = Math.BigMul(NextBits(), bound, out var low);
        if (low < bound)
        {
            var rejectBelow = (0UL - bound) % bound;
            while (low < rejectBelow)
            {
                high = Math.BigMul(NextBits(), bound, out low);
            }
        }

        return (int)high;
    }

    private static ulong SplitMix(ref ulong x)
    {
        x += 0x9E3779B97F4A7C15UL;
        var z = x;
        z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9UL;
        z = (z ^ (z >> 27)) * 0x94D049BB133111EBUL;
        return z ^ (z >> 31);
    }
}
