using System.Collections.Immutable;
using System.Text;
using System.Text.Json;

namespace Scorer.ModelFile.Tests;

/// <summary>What <see cref="ModelFileWriter"/> writes reads back as an equal document.</summary>
public sealed class RoundTripTests
{
    private static ModelDocument ReadBack(ModelDocument document, bool indented = true)
    {
        var text = ModelFileWriter.WriteToString(document, indented);
        var result = ModelFiles.Read(text);
        Assert.True(result.Problems.Count == 0, "written file has problems:" + Environment.NewLine + Problems.List(result) + Environment.NewLine + text);
        return result.Document!;
    }

    [Theory]
    [InlineData(true)]
    [InlineData(false)]
    public void Full_file_written_and_read_back_is_equal(bool indented)
    {
        var document = ModelFiles.Read(ModelFiles.Full).Document!;

        DocumentAssert.Equal(document, ReadBack(document, indented));
    }

    [Fact]
    public void Minimal_file_written_and_read_back_is_equal()
    {
        var document = ModelFiles.Read(ModelFiles.Minimal).Document!;

        DocumentAssert.Equal(document, ReadBack(document));
    }

    [Fact]
    public void Writing_is_stable()
    {
        var document = ModelFiles.Read(ModelFiles.Full).Document!;
        var once = ModelFileWriter.WriteToString(document);

        Assert.Equal(once, ModelFileWriter.WriteToString(ReadBack(document)));
    }

    [Fact]
    public void Document_built_in_code_written_and_read_back_is_equal()
    {
        var document = new ModelDocument
        {
            Format = ModelDocument.FormatV1,
            Model = "pump_bearing_30d",
            Version = "3.0.0-rc.1",
            Description = "built in code: quotes \" and non-ASCII ° survive",
            Link = LinkKind.CLogLog,
            Outcome = new OutcomeSpec("bearing_failure", "bearing failed", "PT720H", NegativesPolicy.Explicit),
            Features =
            [
                new FeatureSpec { Name = "vibration_rms", Kind = FeatureKind.Numeric, Min = 0.4, Max = 11.5 },
                new FeatureSpec { Name = "bearing_temp_c", Kind = FeatureKind.Numeric, Min = 18, Max = 95, Missing = MissingPolicy.Mean, Mean = 46.5 },
                new FeatureSpec { Name = "site", Kind = FeatureKind.Categorical, Levels = ["north", "east", "river"], Reference = "river", Unknown = UnknownLevelPolicy.Reference },
            ],
            Terms =
            [
                new TermSpec("(Intercept)", -2.75, []),
                new TermSpec("log1p(vibration_rms)", 0.1 + 0.2, [new FactorSpec { Feature = "vibration_rms", Transform = TransformKind.Log1P, Center = 1.25, Scale = 0.5 }]),
                new TermSpec("temp", -1e-300, [new FactorSpec { Feature = "bearing_temp_c" }]),
                new TermSpec("north", 5e-324, [new FactorSpec { Feature = "site", Level = "north" }]),
                new TermSpec("temp:east", double.MaxValue, [new FactorSpec { Feature = "bearing_temp_c" }, new FactorSpec { Feature = "site", Level = "east" }]),
            ],
            Covariance = null,
            Threshold = 1.0 / 3,
            Baseline = new BaselineSpec
            {
                N = 9_000_000_000,
                Events = 12,
                Levels = ImmutableDictionary<string, ImmutableDictionary<string, double>>.Empty
                    .Add("site", ImmutableDictionary<string, double>.Empty.Add("north", 0.25).Add("east", 0.25).Add("river", 0.5)),
            },
            Extensions = ImmutableDictionary<string, JsonElement>.Empty.Add("x-empty", JsonDocument.Parse("{}").RootElement.Clone()),
        };

        var text = ModelFileWriter.WriteToString(document);
        var result = ModelFiles.Read(text);

        Assert.Empty(result.Errors);
        Assert.Equal(["$"], result.Warnings.Select(w => w.Path)); // no covariance
        DocumentAssert.Equal(document, result.Document!);
    }

    [Fact]
    public void Written_file_round_trips_through_disk()
    {
        var document = ModelFiles.Read(ModelFiles.Full).Document!;
        var path = Path.Combine(Path.GetTempPath(), $"scorer-roundtrip-{Guid.NewGuid():N}.json");
        try
        {
            ModelFileWriter.WriteFile(document, path);

            DocumentAssert.Equal(document, ModelFileReader.ReadValidFile(path));
            Assert.EndsWith("}\n", File.ReadAllText(path), StringComparison.Ordinal);
        }
        finally
        {
            File.Delete(path);
        }
    }

    [Fact]
    public void Written_file_holds_no_field_the_document_does_not_have()
    {
        var document = ModelFiles.Read(ModelFiles.Minimal).Document!;

        using var written = JsonDocument.Parse(ModelFileWriter.WriteToString(document));
        var names = written.RootElement.EnumerateObject().Select(p => p.Name).ToArray();

        Assert.Equal(["format", "model", "version", "link", "outcome", "features", "terms", "covariance", "baseline"], names);
    }

    [Fact]
    public void Factor_defaults_are_left_out_when_written()
    {
        var document = ModelFiles.Read(ModelFiles.Minimal).Document!;

        var text = ModelFileWriter.WriteToString(document, indented: false);

        Assert.Contains("""{"feature":"vibration_rms","transform":"log"}""", text, StringComparison.Ordinal);
        Assert.DoesNotContain("\"center\"", text, StringComparison.Ordinal);
        Assert.DoesNotContain("\"scale\"", text, StringComparison.Ordinal);
    }

    [Fact]
    public void Written_stream_is_utf8_json()
    {
        var document = ModelFiles.Read(ModelFiles.Full).Document!;
        using var stream = new MemoryStream();

        ModelFileWriter.Write(document, stream);

        DocumentAssert.Equal(document, ModelFileReader.ReadValid(new MemoryStream(stream.ToArray())));
        Assert.Equal(ModelFileWriter.WriteToString(document), Encoding.UTF8.GetString(stream.ToArray()));
    }
}
