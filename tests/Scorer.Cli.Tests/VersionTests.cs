using System.Xml.Linq;

namespace Scorer.Cli.Tests;

/// <summary><c>--version</c> means the tool's version, as every command-line user expects; a new model's version is <c>--new-version</c>.</summary>
public sealed class VersionTests
{
    [Fact]
    public void Scorer_dash_dash_version_prints_the_repositorys_version_and_exits_0()
    {
        var expected = XDocument.Load(Path.Combine(CliRunner.RepositoryRoot, "Directory.Build.props")).Descendants("Version").Single().Value;
        using var cli = new CliRunner();
        var (exit, stdout, stderr) = cli.Run("--version");
        Assert.Equal(0, exit);
        Assert.Equal(expected, stdout.Trim());
        Assert.Empty(stderr);
    }

    [Theory]
    [InlineData("fit")]
    [InlineData("recalibrate")]
    public void The_new_models_version_is_asked_for_as_new_version(string command)
    {
        using var cli = new CliRunner();
        var (exit, stdout, _) = cli.Run(command, "--help");
        Assert.Equal(0, exit);
        Assert.Contains("--new-version", stdout, StringComparison.Ordinal);
        Assert.DoesNotMatch(@"(?m)^\s*--version\b", stdout);
    }
}
