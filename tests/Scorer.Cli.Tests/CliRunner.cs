namespace Scorer.Cli.Tests;

/// <summary>Runs the scorer command line in process with captured output, in a temporary folder of its own.</summary>
internal sealed class CliRunner : IDisposable
{
    public CliRunner()
    {
        Folder = Directory.CreateTempSubdirectory("scorer-cli-").FullName;
    }

    public string Folder { get; }

    public static string RepositoryRoot { get; } = FindRoot();

    public static string Reference(string file)
    {
        var path = Path.Combine(RepositoryRoot, "tests", "reference", "out", file);
        return File.Exists(path) ? path : throw new InvalidOperationException(
            $"{path} is missing. Run scripts/test.sh, or: Rscript tests/reference/scoring-reference.R tests/reference/out");
    }

    public string Write(string name, string content)
    {
        var path = Path.Combine(Folder, name);
        File.WriteAllText(path, content);
        return path;
    }

    public (int Exit, string Out, string Err) Run(params string[] args)
    {
        var stdout = new StringWriter();
        var stderr = new StringWriter();
        var exit = Program.Run(args, stdout, stderr);
        return (exit, stdout.ToString(), stderr.ToString());
    }

    public void Dispose() => Directory.Delete(Folder, recursive: true);

    private static string FindRoot()
    {
        var dir = new DirectoryInfo(AppContext.BaseDirectory);
        while (dir is not null && !File.Exists(Path.Combine(dir.FullName, "Scorer.sln")))
        {
            dir = dir.Parent;
        }

        return dir?.FullName ?? throw new InvalidOperationException("Scorer.sln not found");
    }
}
