using System.Runtime.CompilerServices;
using System.Runtime.InteropServices;
using System.Runtime.Intrinsics;

namespace Scorer.Engine.Numerics;

/// <summary>Small dense kernels on spans (Vector512 or Vector256 where the machine has them, scalar otherwise).</summary>
internal static class Kernels
{
    /// <summary>y[j] += a[j]·x for j &lt; a.Length.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static void MultiplyAdd(Span<double> y, ReadOnlySpan<double> a, double x)
    {
        var n = a.Length;
        ref var yr = ref MemoryMarshal.GetReference(y);
        ref var ar = ref MemoryMarshal.GetReference(a);
        if (y.Length < n)
        {
            throw new ArgumentException("y is shorter than a", nameof(y));
        }

        var j = 0;
        if (Vector512.IsHardwareAccelerated)
        {
            var xv = Vector512.Create(x);
            for (; j + 8 <= n; j += 8)
            {
                var r = Vector512.FusedMultiplyAdd(Vector512.LoadUnsafe(ref ar, (nuint)j), xv, Vector512.LoadUnsafe(ref yr, (nuint)j));
                r.StoreUnsafe(ref yr, (nuint)j);
            }
        }
        else if (Vector256.IsHardwareAccelerated)
        {
            var xv = Vector256.Create(x);
            for (; j + 4 <= n; j += 4)
            {
                var r = Vector256.FusedMultiplyAdd(Vector256.LoadUnsafe(ref ar, (nuint)j), xv, Vector256.LoadUnsafe(ref yr, (nuint)j));
                r.StoreUnsafe(ref yr, (nuint)j);
            }
        }

        for (; j < n; j++)
        {
            Unsafe.Add(ref yr, j) = Math.FusedMultiplyAdd(Unsafe.Add(ref ar, j), x, Unsafe.Add(ref yr, j));
        }
    }

    /// <summary>Σ a[j]·b[j] over a.Length entries, with four independent partial sums.</summary>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double Dot(ReadOnlySpan<double> a, ReadOnlySpan<double> b)
    {
        var n = a.Length;
        if (b.Length < n)
        {
            throw new ArgumentException("b is shorter than a", nameof(b));
        }

        double s0 = 0, s1 = 0, s2 = 0, s3 = 0;
        var j = 0;
        for (; j + 4 <= n; j += 4)
        {
            s0 += a[j] * b[j];
            s1 += a[j + 1] * b[j + 1];
            s2 += a[j + 2] * b[j + 2];
            s3 += a[j + 3] * b[j + 3];
        }

        for (; j < n; j++)
        {
            s0 += a[j] * b[j];
        }

        return (s0 + s1) + (s2 + s3);
    }

    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static double SumOfSquares(ReadOnlySpan<double> u) => Dot(u, u);
}
