using System.Collections.Immutable;
using System.Text.Json;
using Scorer.ModelFile.Validation;

namespace Scorer.ModelFile;

/// <summary>
/// Reads a model file: size limit, JSON syntax, the JSON Schema, then the cross-field rules, reporting every problem of
/// the file at once with its JSON path.
/// </summary>
public static class ModelFileReader
{
    private static readonly JsonDocumentOptions DocumentOptions = new()
    {
        AllowTrailingCommas = false,
        CommentHandling = JsonCommentHandling.Disallow,
        AllowDuplicateProperties = false,
        MaxDepth = 16,
    };

    // Documents this reader produced and found valid; a copy made with `with` is a new object and is checked again.
    private static readonly System.Runtime.CompilerServices.ConditionalWeakTable<ModelDocument, object> Validated = new();
    private static readonly object Sentinel = new();

    /// <summary>The JSON Schema the files are validated against (the text of docs/model-file.schema.json).</summary>
    public static string SchemaText => SchemaValidator.SchemaText;

    public static ModelFileLoadResult ReadFile(string path, ModelFileReaderOptions? options = null)
    {
        using var stream = File.OpenRead(path);
        return Read(stream, options);
    }

    public static ModelFileLoadResult Read(Stream stream, ModelFileReaderOptions? options = null)
    {
        options ??= ModelFileReaderOptions.Default;
        using var buffer = new MemoryStream();
        var chunk = new byte[81920];
        int read;
        while ((read = stream.Read(chunk, 0, chunk.Length)) > 0)
        {
            buffer.Write(chunk, 0, read);
            if (buffer.Length > options.MaxBytes)
            {
                return Failed(JsonPath.Root, $"the file is larger than the limit of {options.MaxBytes} bytes",
                    "raise ModelFileReaderOptions.MaxBytes if the model really is this large");
            }
        }

        return Read(buffer.GetBuffer().AsMemory(0, (int)buffer.Length), options);
    }

    public static ModelFileLoadResult Read(ReadOnlyMemory<byte> utf8Json, ModelFileReaderOptions? options = null)
    {
        options ??= ModelFileReaderOptions.Default;
        if (utf8Json.Length > options.MaxBytes)
        {
            return Failed(JsonPath.Root, $"the file is larger than the limit of {options.MaxBytes} bytes",
                "raise ModelFileReaderOptions.MaxBytes if the model really is this large");
        }

        // A UTF-8 byte order mark before the text is skipped (RFC 8259 section 8.1 lets a parser ignore it); some Windows editors write one.
        if (utf8Json.Span.StartsWith("\uFEFF"u8))
        {
            utf8Json = utf8Json[3..];
        }

        JsonDocument json;
        try
        {
            json = JsonDocument.Parse(utf8Json, DocumentOptions);
        }
        catch (JsonException ex)
        {
            var where = ex.LineNumber is { } line ? $" at line {line + 1}, position {ex.BytePositionInLine + 1}" : "";
            return Failed(JsonPath.Root, "not valid JSON" + where + ": " + FirstSentence(ex.Message));
        }

        using (json)
        {
            var problems = new List<ModelFileProblem>();
            var root = json.RootElement;
            CheckNumbers(root, JsonPath.Root, problems);
            if (root.ValueKind == JsonValueKind.Object && root.TryGetProperty("format", out var format)
                && format.ValueKind == JsonValueKind.String && format.GetString() != ModelDocument.FormatV1)
            {
                // Another format: the schema of v1 says nothing useful about it.
                problems.Add(new ModelFileProblem("$.format", $"unknown format '{format.GetString()}'; this version of Scorer reads '{ModelDocument.FormatV1}'"));
                return new ModelFileLoadResult(null, problems);
            }

            SchemaValidator.Validate(root, problems);
            var document = root.ValueKind == JsonValueKind.Object ? new SemanticReader(options, problems).Read(root) : null;
            var ok = document is not null && !problems.Any(p => p.Severity == ProblemSeverity.Error);
            if (ok)
            {
                Validated.AddOrUpdate(document!, Sentinel);
            }

            return new ModelFileLoadResult(ok ? document : null, problems);
        }
    }

    /// <summary>Reads a file that must be valid; throws <see cref="ModelFileException"/> listing every error otherwise.</summary>
    public static ModelDocument ReadValid(Stream stream, ModelFileReaderOptions? options = null)
    {
        var result = Read(stream, options);
        return result.Document ?? throw new ModelFileException(result.Errors.ToList());
    }

    public static ModelDocument ReadValidFile(string path, ModelFileReaderOptions? options = null)
    {
        var result = ReadFile(path, options);
        return result.Document ?? throw new ModelFileException(result.Errors.ToList());
    }

    /// <summary>
    /// Checks a document built in code (not read from a file) by every rule a file is checked by; returns the problems.
    /// A document this reader returned is known to be valid and is not checked again.
    /// </summary>
    public static IReadOnlyList<ModelFileProblem> Validate(ModelDocument document, ModelFileReaderOptions? options = null)
    {
        if (Validated.TryGetValue(document, out _))
        {
            return [];
        }

        using var ms = new MemoryStream();
        try
        {
            ModelFileWriter.Write(document, ms, indented: false);
        }
        catch (ArgumentException ex)
        {
            // NaN or an infinity (Utf8JsonWriter refuses them), an undefined enum value: nothing a file could hold.
            return [new ModelFileProblem(JsonPath.Root, "the document cannot be written as a model file: " + FirstSentence(ex.Message))];
        }

        var result = Read(ms.GetBuffer().AsMemory(0, (int)ms.Length), options);
        if (result.IsValid)
        {
            Validated.AddOrUpdate(document, Sentinel);
        }

        return result.Problems;
    }

    /// <summary>Throws <see cref="ModelFileException"/> listing every error when <paramref name="document"/> breaks a rule.</summary>
    public static void EnsureValid(ModelDocument document, ModelFileReaderOptions? options = null)
    {
        var errors = Validate(document, options).Where(p => p.Severity == ProblemSeverity.Error).ToList();
        if (errors.Count > 0)
        {
            throw new ModelFileException(errors);
        }
    }

    private static ModelFileLoadResult Failed(string path, string reason, string? hint = null) =>
        new(null, [new ModelFileProblem(path, reason, ProblemSeverity.Error, hint)]);

    private static string FirstSentence(string message)
    {
        var i = message.IndexOf(". ", StringComparison.Ordinal);
        return i > 0 ? message[..i] : message.TrimEnd('.');
    }

    /// <summary>Every number in the file must fit a finite double (JSON has no NaN; 1e400 would become infinity).</summary>
    private static void CheckNumbers(JsonElement element, string path, List<ModelFileProblem> problems)
    {
        switch (element.ValueKind)
        {
            case JsonValueKind.Number:
                if (!element.TryGetDouble(out var d) || !double.IsFinite(d))
                {
                    problems.Add(new ModelFileProblem(path, $"the number {element.GetRawText()} does not fit a finite double"));
                }

                break;
            case JsonValueKind.Object:
                foreach (var p in element.EnumerateObject())
                {
                    CheckNumbers(p.Value, JsonPath.Property(path, p.Name), problems);
                }

                break;
            case JsonValueKind.Array:
                var i = 0;
                foreach (var item in element.EnumerateArray())
                {
                    CheckNumbers(item, JsonPath.Index(path, i++), problems);
                }

                break;
            default:
                break;
        }
    }
}
