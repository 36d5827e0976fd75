namespace Scorer.ModelFile;

public sealed record ModelFileReaderOptions
{
    /// <summary>Largest model file accepted, in bytes. Default 32 MiB (a 1,000-term covariance needs about 20 MiB).</summary>
    public long MaxBytes { get; init; } = 32L * 1024 * 1024;

    /// <summary>Relative tolerance of the covariance symmetry check. Default 1e-8.</summary>
    public double SymmetryTolerance { get; init; } = 1e-8;

    /// <summary>Eigenvalues down to -tolerance × largest eigenvalue count as zero in the semi-definiteness check. Default 1e-10.</summary>
    public double DefinitenessTolerance { get; init; } = 1e-10;

    public static ModelFileReaderOptions Default { get; } = new();
}
