namespace Scorer.Cli.Tests;

/// <summary>Runs the scorer command line in process with captured output, in a temporary folder of its own.</summary>
internal sealed class CliRunner : IDisposable
{
    public CliRunner()
    {
        Folder = Directory.CreateTempSubdirectory("scorer-cli-").FullName;
    }

    public string Folder { get; }

    public static string RepositoryRoot => Scorer.Testing.TestRepository.Root;

    public static string Reference(string file) => Scorer.Testing.TestRepository.ReferenceFile(file);

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
}
