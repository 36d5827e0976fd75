namespace Scorer.ModelFile.Tests;

/// <summary>Files of the repository the tests compare with.</summary>
internal static class Repository
{
    public static string Root => Scorer.Testing.TestRepository.Root;

    public static string ReadText(params string[] relative) => File.ReadAllText(Path.Combine([Root, .. relative]));
}
