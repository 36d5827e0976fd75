using System.Text.Json;
using Json.Schema;

namespace Scorer.ModelFile.Tests;

/// <summary>The loader validates against the schema published in docs/, not a copy of it.</summary>
public sealed class EmbeddedSchemaTests
{
    [Fact]
    public void Embedded_schema_is_the_text_of_docs_model_file_schema_json()
    {
        var published = File.ReadAllText(Path.Combine(Repository.Root, "docs", "model-file.schema.json"));

        Assert.Equal(published, ModelFileReader.SchemaText);
    }

    [Fact]
    public void Schema_is_draft_2020_12_and_fixes_the_format_of_version_1()
    {
        using var schema = JsonDocument.Parse(ModelFileReader.SchemaText);
        var root = schema.RootElement;

        Assert.Equal("https://json-schema.org/draft/2020-12/schema", root.GetProperty("$schema").GetString());
        Assert.Equal(ModelDocument.FormatV1, root.GetProperty("properties").GetProperty("format").GetProperty("const").GetString());
    }

    [Fact]
    public void Loader_works_when_another_component_registers_the_same_schema()
    {
        // Someone else building the published schema into the global registry must not break the loader, nor the reverse.
        var elsewhere = JsonSchema.FromText(ModelFileReader.SchemaText);

        Problems.None(ModelFiles.Read(ModelFiles.Minimal));
        Assert.True(elsewhere.Evaluate(JsonDocument.Parse(ModelFiles.Minimal).RootElement).IsValid);
    }
}
