using System.Buffers.Binary;
using System.Numerics;
using System.Security.Cryptography;

namespace Scorer.Store;

/// <summary>
/// Prediction ids: UUID version 7 (RFC 9562 §5.7), the scoring time's Unix milliseconds in the first 48 bits, then 74
/// random bits. <see cref="Guid.CreateVersion7(DateTimeOffset)"/> makes the same layout but asks the operating system
/// for fresh random bytes on every call (a system call per id, measured on the dense path); here each thread draws
/// from its own xoshiro256** generator, seeded once from the cryptographic generator. The ids are not secrets; they
/// need only be unique, which 74 random bits per millisecond give with a negligible chance of collision.
/// </summary>
public static class PredictionIds
{
    [ThreadStatic]
    private static Xoshiro? _random;

    /// <summary>A new id for a prediction scored at <paramref name="scoredAt"/>.</summary>
    public static Guid Next(DateTimeOffset scoredAt)
    {
        var random = _random ??= new Xoshiro();
        var ms = (ulong)scoredAt.ToUnixTimeMilliseconds();
        var a = random.Next();
        var b = random.Next();
        Span<byte> bytes = stackalloc byte[16];
        BinaryPrimitives.WriteUInt64BigEndian(bytes, (ms << 16) | 0x7000UL | (a & 0x0FFFUL));
        BinaryPrimitives.WriteUInt64BigEndian(bytes[8..], (b & 0x3FFF_FFFF_FFFF_FFFFUL) | 0x8000_0000_0000_0000UL);
        return new Guid(bytes, bigEndian: true);
    }

    /// <summary>xoshiro256** (Blackman &amp; Vigna, 2018).</summary>
    private sealed class Xoshiro
    {
        private ulong _s0, _s1, _s2, _s3;

        public Xoshiro()
        {
            Span<ulong> seed = stackalloc ulong[4];
            do
            {
                RandomNumberGenerator.Fill(System.Runtime.InteropServices.MemoryMarshal.AsBytes(seed));
            }
            while ((seed[0] | seed[1] | seed[2] | seed[3]) == 0);

            (_s0, _s1, _s2, _s3) = (seed[0], seed[1], seed[2], seed[3]);
        }

        public ulong Next()
        {
            var result = BitOperations.RotateLeft(_s1 * 5, 7) * 9;
            var t = _s1 << 17;
            _s2 ^= _s0;
            _s3 ^= _s1;
            _s1 ^= _s2;
            _s0 ^= _s3;
            _s2 ^= t;
            _s3 = BitOperations.RotateLeft(_s3, 45);
            return result;
        }
    }
}
