using System.Globalization;
using System.Text;
using System.Text.Json;
using System.Text.Unicode;
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
                return TooLarge(options, null);
            }
        }

        return Read(buffer.GetBuffer().AsMemory(0, (int)buffer.Length), options);
    }

    public static ModelFileLoadResult Read(ReadOnlyMemory<byte> utf8Json, ModelFileReaderOptions? options = null)
    {
        options ??= ModelFileReaderOptions.Default;
        if (utf8Json.Length > options.MaxBytes)
        {
            return TooLarge(options, utf8Json.Length);
        }

        // A UTF-8 byte order mark before the text is skipped (RFC 8259 section 8.1 lets a parser ignore it); some Windows editors write one.
        if (utf8Json.Span.StartsWith("\uFEFF"u8))
        {
            utf8Json = utf8Json[3..];
        }

        // JSON text is UTF-8 (RFC 8259 section 8.1). The parser checks only what it reads as structure; the bytes inside
        // strings are decoded later, where invalid ones would throw instead of being reported.
        if (!Utf8.IsValid(utf8Json.Span))
        {
            return NotUtf8(utf8Json.Span);
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

            // The bounds first, before the schema and before any matrix: a file over them costs no more than its parse.
            if (CheckBounds(root, options, problems))
            {
                return new ModelFileLoadResult(null, problems) { Limit = ModelFileLimit.Terms };
            }

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

        // The term limit bounds what is read from files; a document built in code (a fit, a recalibration) is as large as
        // it was asked to be, and the host refuses its file when it reads it if it is over the host's limit.
        var result = Read(ms.GetBuffer().AsMemory(0, (int)ms.Length), (options ?? ModelFileReaderOptions.Default) with { MaxTerms = int.MaxValue });
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

    /// <summary>The problem of a file over <see cref="ModelFileReaderOptions.MaxBytes"/> (its length when known).</summary>
    public static ModelFileProblem TooLargeProblem(ModelFileReaderOptions options, long? length)
    {
        ArgumentNullException.ThrowIfNull(options);
        var size = length is { } n ? string.Create(CultureInfo.InvariantCulture, $" (it has {n})") : "";
        return new ModelFileProblem(JsonPath.Root,
            string.Create(CultureInfo.InvariantCulture, $"the file is larger than the limit of {options.MaxBytes} bytes{size}"),
            ProblemSeverity.Error, $"raise {options.MaxBytesSetting} if the model really is this large");
    }

    private static ModelFileLoadResult TooLarge(ModelFileReaderOptions options, long? length) =>
        new(null, [TooLargeProblem(options, length)]) { Limit = ModelFileLimit.Bytes };

    /// <summary>Names the first byte that is not UTF-8, with its line and its byte position in the line (1-based, as for JSON errors).</summary>
    private static ModelFileLoadResult NotUtf8(ReadOnlySpan<byte> text)
    {
        var at = 0;
        while (at < text.Length)
        {
            if (Rune.DecodeFromUtf8(text[at..], out _, out var consumed) != System.Buffers.OperationStatus.Done)
            {
                break;
            }

            at += consumed;
        }

        var before = text[..Math.Min(at, text.Length)];
        var line = before.Count((byte)'\n') + 1;
        var lineStart = before.LastIndexOf((byte)'\n') + 1;
        var bad = at < text.Length ? text[at] : (byte)0;
        return Failed(JsonPath.Root,
            string.Create(CultureInfo.InvariantCulture,
                $"not valid UTF-8: byte 0x{bad:X2} at line {line}, position {at - lineStart + 1} (offset {at}) is not part of a UTF-8 character"),
            "save the file as UTF-8; it may have been written as Latin-1 or Windows-1252");
    }

    /// <summary>
    /// The reader's bounds on one file, checked on the parsed tree before anything else is: at most
    /// <see cref="ModelFileReaderOptions.MaxTerms"/> terms, covariance rows and entries per covariance row. True when one is broken.
    /// </summary>
    private static bool CheckBounds(JsonElement root, ModelFileReaderOptions options, List<ModelFileProblem> problems)
    {
        if (root.ValueKind != JsonValueKind.Object)
        {
            return false;
        }

        var max = options.MaxTerms;
        var hint = $"raise {options.MaxTermsSetting} if the model really has this many terms; the covariance grows with the square of the terms";
        if (root.TryGetProperty("terms", out var terms) && terms.ValueKind == JsonValueKind.Array && terms.GetArrayLength() > max)
        {
            problems.Add(new ModelFileProblem("$.terms",
                string.Create(CultureInfo.InvariantCulture, $"{terms.GetArrayLength():N0} terms is over the limit of {max:N0} terms"), ProblemSeverity.Error, hint));
            return true; // the covariance, one row and column per term, is not looked at
        }

        if (root.TryGetProperty("covariance", out var covariance) && covariance.ValueKind == JsonValueKind.Array)
        {
            if (covariance.GetArrayLength() > max)
            {
                problems.Add(new ModelFileProblem("$.covariance",
                    string.Create(CultureInfo.InvariantCulture, $"{covariance.GetArrayLength():N0} rows is over the limit of {max:N0} (one row per term)"), ProblemSeverity.Error, hint));
            }
            else
            {
                var i = 0;
                foreach (var row in covariance.EnumerateArray())
                {
                    if (row.ValueKind == JsonValueKind.Array && row.GetArrayLength() > max)
                    {
                        problems.Add(new ModelFileProblem(JsonPath.Index("$.covariance", i),
                            string.Create(CultureInfo.InvariantCulture, $"{row.GetArrayLength():N0} entries is over the limit of {max:N0} (one entry per term)"), ProblemSeverity.Error, hint));
                    }

                    i++;
                }
            }
        }

        return problems.Count > 0;
    }

    private static string FirstSentence(string message)
    {
        var i = message.IndexOf(". ", StringComparison.Ordinal);
        return i > 0 ? message[..i] : message.TrimEnd('.');
    }

    /// <summary>
    /// Every number in the file must fit a finite double (JSON has no NaN; 1e400 would become infinity). A path is
    /// built only for a container or a number found wrong, not for each of the million numbers of a wide covariance.
    /// </summary>
    private static void CheckNumbers(JsonElement element, string path, List<ModelFileProblem> problems)
    {
        switch (element.ValueKind)
        {
            case JsonValueKind.Number:
                CheckNumber(element, path, problems);
                break;
            case JsonValueKind.Object:
                foreach (var p in element.EnumerateObject())
                {
                    if (p.Value.ValueKind is JsonValueKind.Number or JsonValueKind.Object or JsonValueKind.Array)
                    {
                        CheckNumbers(p.Value, JsonPath.Property(path, p.Name), problems);
                    }
                }

                break;
            case JsonValueKind.Array:
                var i = 0;
                foreach (var item in element.EnumerateArray())
                {
                    if (item.ValueKind == JsonValueKind.Number)
                    {
                        if (!IsFinite(item))
                        {
                            CheckNumber(item, JsonPath.Index(path, i), problems);
                        }
                    }
                    else if (item.ValueKind is JsonValueKind.Object or JsonValueKind.Array)
                    {
                        CheckNumbers(item, JsonPath.Index(path, i), problems);
                    }

                    i++;
                }

                break;
            default:
                break;
        }
    }

    private static bool IsFinite(JsonElement number) => number.TryGetDouble(out var d) && double.IsFinite(d);

    private static void CheckNumber(JsonElement number, string path, List<ModelFileProblem> problems)
    {
        if (!IsFinite(number))
        {
            problems.Add(new ModelFileProblem(path, $"the number {number.GetRawText()} does not fit a finite double"));
        }
    }
}
