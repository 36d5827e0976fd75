namespace Scorer.ModelFile;

/// <summary>
/// The reader's bounds and tolerances. The bounds limit what one file can cost to read: the bytes read, and the terms
/// (which bound the coefficients and, through the covariance, the terms² numbers and the work on them).
/// </summary>
public sealed record ModelFileReaderOptions
{
    /// <summary>Largest model file accepted, in bytes. Default 32 MiB (a 500-term covariance in full precision takes about 5 MiB).</summary>
    public long MaxBytes { get; init; } = 32L * 1024 * 1024;

    /// <summary>
    /// Most terms accepted from a file, and so most rows and entries per row of its covariance. Default 500. Checked
    /// before the schema and before any matrix is built. Documents built in code (a fit, a recalibration) are not held to it.
    /// </summary>
    public int MaxTerms { get; init; } = 500;

    /// <summary>How a problem names the setting that raises <see cref="MaxBytes"/> (a host names its own configuration key).</summary>
    public string MaxBytesSetting { get; init; } = "ModelFileReaderOptions.MaxBytes";

    /// <summary>How a problem names the setting that raises <see cref="MaxTerms"/>.</summary>
    public string MaxTermsSetting { get; init; } = "ModelFileReaderOptions.MaxTerms";

    /// <summary>Relative tolerance of the covariance symmetry check. Default 1e-8.</summary>
    public double SymmetryTolerance { get; init; } = 1e-8;

    /// <summary>Eigenvalues down to -tolerance × largest eigenvalue count as zero in the semi-definiteness check. Default 1e-10.</summary>
    public double DefinitenessTolerance { get; init; } = 1e-10;

    public static ModelFileReaderOptions Default { get; } = new();
}
