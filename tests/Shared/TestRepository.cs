namespace Scorer.Testing;

/// <summary>Where the repository and the reference values are, for every test project (linked into each).</summary>
internal static class TestRepository
{
    /// <summary>The folder holding Scorer.sln, found by walking up from the test binaries.</summary>
    public static string Root { get; } = FindRoot();

    /// <summary>A file written by the reference scripts (tests/reference/*.R) into tests/reference/out.</summary>
    public static string ReferenceFile(string name)
    {
        var path = Path.Combine(Root, "tests", "reference", "out", name);
        return File.Exists(path) ? path : throw new InvalidOperationException(
            $"{path} is missing. Run scripts/test.sh, or the scripts in tests/reference/ with Rscript: Rscript tests/reference/scoring-reference.R tests/reference/out");
    }

    /// <summary>A file written by tests/reference/calibration/run.sh into tests/reference/calibration/out.</summary>
    public static string CalibrationFile(string name)
    {
        var path = Path.Combine(Root, "tests", "reference", "calibration", "out", name);
        return File.Exists(path) ? path : throw new InvalidOperationException(
            $"{path} is missing. Run scripts/test.sh, or tests/reference/calibration/run.sh");
    }

    private static string FindRoot()
    {
        var dir = new DirectoryInfo(AppContext.BaseDirectory);
        while (dir is not null && !File.Exists(Path.Combine(dir.FullName, "Scorer.sln")))
        {
            dir = dir.Parent;
        }

        return dir?.FullName ?? throw new InvalidOperationException("Scorer.sln not found above " + AppContext.BaseDirectory);
    }
}
