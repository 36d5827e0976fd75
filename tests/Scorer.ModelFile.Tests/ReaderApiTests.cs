using System.Text;

namespace Scorer.ModelFile.Tests;

/// <summary>The entry points of the reader and the shape of what they return.</summary>
public sealed class ReaderApiTests
{
    [Fact]
    public void ReadValid_returns_the_document_of_a_valid_stream()
    {
        using var stream = new MemoryStream(Encoding.UTF8.GetBytes(ModelFiles.Minimal));

        Assert.Equal("pump_bearing_30d", ModelFileReader.ReadValid(stream).Model);
    }

    [Fact]
    public void ReadValid_throws_for_a_file_with_errors_but_not_for_warnings()
    {
        var warnsOnly = ModelFiles.Changed(root => root.Remove("baseline"));
        var broken = ModelFiles.Changed(root => root["link"] = "identity");

        Assert.NotNull(ModelFileReader.ReadValid(new MemoryStream(Encoding.UTF8.GetBytes(warnsOnly))));
        var ex = Assert.Throws<ModelFileException>(() => ModelFileReader.ReadValid(new MemoryStream(Encoding.UTF8.GetBytes(broken))));
        Assert.All(ex.Problems, p => Assert.Equal(ProblemSeverity.Error, p.Severity));
    }

    [Fact]
    public void ReadValidFile_of_a_missing_file_throws_file_not_found()
    {
        Assert.Throws<FileNotFoundException>(() => ModelFileReader.ReadValidFile(Path.Combine(Path.GetTempPath(), $"scorer-none-{Guid.NewGuid():N}.json")));
    }

    [Fact]
    public void File_with_a_byte_order_mark_is_read()
    {
        var bytes = Encoding.UTF8.GetPreamble().Concat(Encoding.UTF8.GetBytes(ModelFiles.Minimal)).ToArray();

        Problems.None(ModelFileReader.Read(bytes));
    }

    [Fact]
    public void Problem_is_written_as_severity_path_reason_and_hint()
    {
        Assert.Equal("error $.link: bad (try logit)", new ModelFileProblem("$.link", "bad", ProblemSeverity.Error, "try logit").ToString());
        Assert.Equal("warning $: no baseline", new ModelFileProblem("$", "no baseline", ProblemSeverity.Warning).ToString());
    }

    [Fact]
    public void Errors_and_warnings_partition_the_problems()
    {
        var result = ModelFiles.ReadChanged(root =>
        {
            root.Remove("covariance");
            root["link"] = "identity";
        });

        Assert.Equal(result.Problems.Count, result.Errors.Count() + result.Warnings.Count());
        Assert.NotEmpty(result.Errors);
        Assert.NotEmpty(result.Warnings);
        Assert.False(result.IsValid);
    }
}
