namespace Scorer.ModelFile.Tests;

/// <summary>Files of the repository the tests compare with.</summary>
internal static class Repository
{
    /// <summary>The folder holding Scorer.sln, found by walking up from the test binaries.</summary>
    public static string Root { get; } = FindRoot();

    public static string ReadText(params string[] relative) => File.ReadAllText(Path.Combine([Root, .. relative]));

    private static string FindRoot()
    {
        for (var dir = new DirectoryInfo(AppContext.BaseDirectory); dir is not null; dir = dir.Parent)
        {
            if (File.Exists(Path.Combine(dir.FullName, "Scorer.sln")))
            {
                return dir.FullName;
            }
        }

        throw new InvalidOperationException("Scorer.sln not found above " + AppContext.BaseDirectory);
    }
}
