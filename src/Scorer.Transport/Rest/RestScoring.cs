using System.Buffers;
using System.Diagnostics;
using System.Globalization;
using System.IO.Pipelines;
using System.Text;
using System.Text.Encodings.Web;
using System.Text.Json;
using Grpc.Core;
using Microsoft.AspNetCore.Http;
using Scorer.Engine;
using Scorer.Engine.Scoring;
using Scorer.Store;
using Scorer.Application.Scoring;

namespace Scorer.Transport.Rest;

/// <summary>
/// <c>POST /v1/models/{model}/score</c> read and written directly with <see cref="Utf8JsonReader"/> and
/// <see cref="Utf8JsonWriter"/>, in front of the transcoded endpoint of the same route (the busiest REST call; the
/// generic transcoder costs several times the scoring). The contract is <c>scorer.v1.Scoring/Score</c>: for every
/// request the transcoder accepts, the response is the same JSON, field for field (tests compare the two). Where the
/// transcoder gives one vague message for a malformed body, this reader names the field and the reason, and a row
/// that is not an object, or that names a feature twice, fails that row only.
/// </summary>
public sealed class RestScoring(ScoringPipeline pipeline)
{
    public const string Method = "/scorer.v1.Scoring/Score";

    private const string FieldList = "rows, level, version, keys, contributions";

    private static readonly JsonWriterOptions WriterOptions = new() { Encoder = JavaScriptEncoder.UnsafeRelaxedJsonEscaping, SkipValidation = true };

    private static readonly JsonReaderOptions ReaderOptions = new() { CommentHandling = JsonCommentHandling.Disallow, MaxDepth = 64 };

    private readonly Prometheus.Histogram.Child _callsOk = pipeline.Metrics.Calls.WithLabels("Scoring/Score", "OK");

    /// <summary>Answers the request: a score response, or the error in the transcoder's JSON shape.</summary>
    public async Task HandleAsync(HttpContext context, string model)
    {
        var started = Stopwatch.GetTimestamp();
        var status = StatusCode.OK;
        var reader = context.Request.BodyReader;
        ReadResult read = default;
        var holding = false; // a read result not yet handed back to the body reader
        try
        {
            CheckContentType(context.Request.ContentType);
            while (true)
            {
                read = await reader.ReadAsync(context.RequestAborted).ConfigureAwait(false);
                holding = true;
                if (read.IsCompleted)
                {
                    break;
                }

                reader.AdvanceTo(read.Buffer.Start, read.Buffer.End);
                holding = false;
            }

            Answer(context, model, read.Buffer);
        }
        catch (RpcException ex)
        {
            status = ex.StatusCode;
            WriteError(context.Response, ex);
        }
        catch (Microsoft.AspNetCore.Http.BadHttpRequestException ex)
        {
            // The body could not be read: over the size limit (413), or cut off or malformed in its framing (400).
            var tooLarge = ex.StatusCode == StatusCodes.Status413PayloadTooLarge;
            status = tooLarge ? StatusCode.ResourceExhausted : StatusCode.InvalidArgument;
            context.Response.StatusCode = tooLarge ? StatusCodes.Status413PayloadTooLarge : StatusCodes.Status400BadRequest;
            WriteStatus(context.Response, status, "body: " + ex.Message, null);
        }
        catch (Exception ex) when (ex is IOException or OperationCanceledException && context.RequestAborted.IsCancellationRequested)
        {
            status = StatusCode.Cancelled; // the caller went away while sending; nobody is left to answer
            return;
        }
        finally
        {
            if (holding)
            {
                reader.AdvanceTo(read.Buffer.End);
            }

            (status == StatusCode.OK ? _callsOk : pipeline.Metrics.Calls.WithLabels("Scoring/Score", status.ToString())).Observe(Stopwatch.GetElapsedTime(started).TotalSeconds);
        }

        await context.Response.BodyWriter.FlushAsync(context.RequestAborted).ConfigureAwait(false);
    }

    private void Answer(HttpContext context, string modelName, ReadOnlySequence<byte> body)
    {
        byte[]? copy = null;
        try
        {
            ReadOnlySpan<byte> json;
            if (body.IsSingleSegment)
            {
                json = body.FirstSpan;
            }
            else
            {
                copy = ArrayPool<byte>.Shared.Rent((int)body.Length);
                body.CopyTo(copy);
                json = copy.AsSpan(0, (int)body.Length);
            }

            var request = ReadRequest(json, modelName);
            var call = pipeline.Prepare(modelName, request.Version, request.Rows.Count, request.Keys, request.Level, request.Contributions);
            if (WantsCsv(context.Request.Headers.Accept))
            {
                AnswerCsv(context, json, request, call);
                return;
            }

            context.Response.StatusCode = StatusCodes.Status200OK;
            context.Response.ContentType = "application/json; charset=utf-8";
            using var w = new Utf8JsonWriter(context.Response.BodyWriter, WriterOptions);
            w.WriteStartObject();
            w.WriteString("model"u8, call.Version.Model);
            w.WriteString("version"u8, call.Version.Version);
            w.WriteStartArray("results"u8);
            var rows = new JsonRows(json, request, pipeline.Limits);
            var writer = new JsonResultWriter(w);
            pipeline.Score(call, ref rows, ref writer);
            w.WriteEndArray();
            w.WriteEndObject();
        }
        finally
        {
            if (copy is not null)
            {
                ArrayPool<byte>.Shared.Return(copy);
            }
        }
    }

    /// <summary>The columns of a CSV score response (docs/api.md), one record per row in request order.</summary>
    public static readonly string[] CsvColumns =
        ["id", "key", "eta", "se", "probability", "lower", "upper", "flag", "warnings", "contributions", "error_code", "error_field", "error_reason"];

    /// <summary>True when the caller asks for CSV (<c>Accept: text/csv</c>) rather than JSON.</summary>
    private static bool WantsCsv(Microsoft.Extensions.Primitives.StringValues accept)
    {
        foreach (var value in accept)
        {
            // Each media range of the header, without its parameters; no allocation (the header comes with every call).
            foreach (var range in value.AsSpan().Split(','))
            {
                var type = value.AsSpan()[range];
                var semicolon = type.IndexOf(';');
                if ((semicolon < 0 ? type : type[..semicolon]).Trim().Equals("text/csv", StringComparison.OrdinalIgnoreCase))
                {
                    return true;
                }
            }
        }

        return false;
    }

    private void AnswerCsv(HttpContext context, ReadOnlySpan<byte> json, ParsedRequest request, ScoreCall call)
    {
        var text = new StringWriter(CultureInfo.InvariantCulture);
        var csv = new Scorer.Tabular.CsvWriter(text);
        foreach (var column in CsvColumns)
        {
            csv.Field(column);
        }

        csv.EndRecord();
        var rows = new JsonRows(json, request, pipeline.Limits);
        var writer = new CsvResultWriter(csv);
        pipeline.Score(call, ref rows, ref writer);
        context.Response.StatusCode = StatusCodes.Status200OK;
        context.Response.ContentType = "text/csv; charset=utf-8";
        context.Response.Headers["X-Scorer-Model"] = call.Version.Model;
        context.Response.Headers["X-Scorer-Version"] = call.Version.Version;
        var bytes = Encoding.UTF8.GetBytes(text.ToString());
        context.Response.ContentLength = bytes.Length;
        context.Response.BodyWriter.Write(bytes);
    }

    /// <summary>
    /// Writes each row's result as one CSV record: numbers in shortest round-trip form, empty where a value does not
    /// apply; warnings as "code: message" joined by "; ", contributions as "term: value" joined by "; ".
    /// </summary>
    private readonly struct CsvResultWriter(Scorer.Tabular.CsvWriter csv) : IScoreWriter
    {
        public void Scored(int row, Guid id, string? key, in ScoredRow r, CompiledModel model, ReadOnlySpan<int> order, ReadOnlySpan<double> contributions,
            ReadOnlySpan<RowWarning> warnings)
        {
            csv.Field(id.ToString());
            csv.Field(key);
            csv.Number(r.Eta);
            csv.Number(r.Se);
            csv.Number(r.Probability);
            csv.Number(r.Lower);
            csv.Number(r.Upper);
            csv.Field(r.FlagValue is { } flag ? (flag ? "1" : "0") : null);
            var notes = new StringBuilder();
            foreach (var w in warnings)
            {
                notes.Append(notes.Length > 0 ? "; " : "").Append(RowMessages.Code(w.Kind)).Append(": ").Append(RowMessages.Describe(model, w));
            }

            csv.Field(notes.ToString());
            notes.Clear();
            foreach (var j in order)
            {
                notes.Append(notes.Length > 0 ? "; " : "").Append(model.TermNames[j]).Append(": ")
                    .Append(contributions[j].ToString("R", CultureInfo.InvariantCulture));
            }

            csv.Field(notes.ToString());
            csv.Field(null);
            csv.Field(null);
            csv.Field(null);
            csv.EndRecord();
        }

        public void Failed(int row, Guid id, string? key, string code, string field, string reason)
        {
            csv.Field(id.ToString());
            csv.Field(key);
            for (var i = 0; i < 8; i++)
            {
                csv.Field(null);
            }

            csv.Field(code);
            csv.Field(field);
            csv.Field(reason);
            csv.EndRecord();
        }
    }

    /// <summary>The rows of a score request body: each row's bytes read onto named values when the pipeline asks for it.</summary>
    private readonly ref struct JsonRows(ReadOnlySpan<byte> json, ParsedRequest request, Application.ScoringLimits limits) : IScoreRows
    {
        private readonly ReadOnlySpan<byte> _json = json;

        public int Count => request.Rows.Count;

        public string? Key(int row) => request.Keys is { } k ? k[row] : null;

        public bool TryBind(int row, CompiledModel model, Span<NamedValue> values, out int count, out string? field, out string? reason)
        {
            var (start, length) = request.Rows[row];
            return Bind(_json.Slice(start, length), row, model, values, limits, out count, out field, out reason);
        }
    }

    /// <summary>Writes each row's result as the transcoder writes a RowResult.</summary>
    private readonly struct JsonResultWriter(Utf8JsonWriter w) : IScoreWriter
    {
        public void Scored(int row, Guid id, string? key, in ScoredRow r, CompiledModel model, ReadOnlySpan<int> order, ReadOnlySpan<double> contributions,
            ReadOnlySpan<RowWarning> warnings)
        {
            w.WriteStartObject();
            w.WriteString("id"u8, id);
            WriteDouble(w, "eta"u8, r.Eta);
            if (!double.IsNaN(r.Se))
            {
                WriteDouble(w, "se"u8, r.Se);
                WriteDouble(w, "probability"u8, r.Probability);
                WriteDouble(w, "lower"u8, r.Lower);
                WriteDouble(w, "upper"u8, r.Upper);
            }
            else
            {
                WriteDouble(w, "probability"u8, r.Probability);
            }

            if (r.FlagValue is { } flag)
            {
                w.WriteBoolean("flag"u8, flag);
            }

            w.WriteStartArray("contributions"u8);
            foreach (var j in order)
            {
                w.WriteStartObject();
                w.WriteString("term"u8, model.TermNames[j]);
                WriteDouble(w, "value"u8, contributions[j]);
                w.WriteEndObject();
            }

            w.WriteEndArray();
            w.WriteStartArray("warnings"u8);
            foreach (var warning in warnings)
            {
                w.WriteStartObject();
                w.WriteString("code"u8, RowMessages.Code(warning.Kind));
                w.WriteString("field"u8, warning.Feature >= 0 ? model.FeatureNames[warning.Feature] : "");
                w.WriteString("message"u8, RowMessages.Describe(model, warning));
                w.WriteEndObject();
            }

            w.WriteEndArray();
            w.WriteNull("error"u8);
            w.WriteString("key"u8, key ?? "");
            w.WriteEndObject();
        }

        public void Failed(int row, Guid id, string? key, string code, string field, string reason)
        {
            w.WriteStartObject();
            w.WriteString("id"u8, id);
            w.WriteStartArray("contributions"u8);
            w.WriteEndArray();
            w.WriteStartArray("warnings"u8);
            w.WriteEndArray();
            w.WriteStartObject("error"u8);
            w.WriteString("code"u8, code);
            w.WriteString("field"u8, field);
            w.WriteString("reason"u8, reason);
            w.WriteEndObject();
            w.WriteString("key"u8, key ?? "");
            w.WriteEndObject();
        }
    }

    /// <summary>Binds one row object onto named values; false with the field and reason when the row cannot be read.</summary>
    private static bool Bind(ReadOnlySpan<byte> rowJson, int index, CompiledModel model, Span<NamedValue> values, Application.ScoringLimits limits, out int count,
        out string? field, out string? reason)
    {
        count = 0;
        field = null;
        reason = null;
        if (rowJson.Length == 0 || rowJson[0] != (byte)'{')
        {
            field = $"rows[{index}]";
            reason = "the row is not a JSON object";
            return false;
        }

        var reader = new Utf8JsonReader(rowJson, ReaderOptions);
        reader.Read(); // StartObject
        Span<char> nameBuffer = stackalloc char[256];
        while (reader.Read() && reader.TokenType == JsonTokenType.PropertyName)
        {
            if (count >= values.Length)
            {
                var total = count;
                do
                {
                    reader.Read();
                    reader.Skip();
                    total++;
                }
                while (reader.Read() && reader.TokenType == JsonTokenType.PropertyName);

                field = $"rows[{index}]";
                reason = $"{total} fields; at most {limits.MaxFeaturesPerRow}";
                return false;
            }

            var chars = reader.ValueSpan.Length <= nameBuffer.Length ? nameBuffer : new char[reader.ValueSpan.Length];
            if (!TryCopyText(ref reader, chars, out var nameLength))
            {
                field = $"rows[{index}]";
                reason = $"a field name {NotText} (byte {reader.TokenStartIndex + 1} of the row)";
                return false;
            }

            var name = chars[..nameLength];
            var f = model.FeatureIndexOf(name);
            var nameText = f >= 0 ? model.FeatureNames[f] : name.ToString();
            reader.Read();
            FeatureValue v;
            switch (reader.TokenType)
            {
                case JsonTokenType.Number:
                    v = FeatureValue.Of(reader.TryGetDouble(out var d) ? d : (reader.ValueSpan[0] == (byte)'-' ? double.NegativeInfinity : double.PositiveInfinity));
                    break;
                case JsonTokenType.String:
                    v = FeatureValue.Of(ReadLevel(ref reader, model, f, limits.MaxStringLength, out var tooLong, out var notText));
                    if (tooLong || notText)
                    {
                        field = nameText;
                        reason = notText ? $"the value {NotText}" : $"longer than {limits.MaxStringLength} characters";
                        return false;
                    }

                    break;
                case JsonTokenType.True:
                    v = FeatureValue.Of(1.0);
                    break;
                case JsonTokenType.False:
                    v = FeatureValue.Of(0.0);
                    break;
                case JsonTokenType.Null:
                    v = FeatureValue.Missing;
                    break;
                default:
                    field = nameText;
                    reason = "expects a number or a string, got " + (reader.TokenType == JsonTokenType.StartArray ? "a list" : "an object");
                    return false;
            }

            values[count++] = new NamedValue(nameText, v);
        }

        return true;
    }

    private const string NotText = "is not valid Unicode text (invalid UTF-8 bytes, or an escape such as \\ud800 that is half of a surrogate pair)";

    /// <summary>Copies the current string token's text; false when it is not valid text (bad UTF-8, an unpaired surrogate escape).</summary>
    private static bool TryCopyText(ref Utf8JsonReader reader, scoped Span<char> into, out int length)
    {
        try
        {
            length = reader.CopyString(into);
            return true;
        }
        catch (InvalidOperationException)
        {
            length = 0;
            return false;
        }
    }

    /// <summary>The current string token as text, or the request refused naming <paramref name="field"/>.</summary>
    private static string ReadText(ref Utf8JsonReader reader, string field)
    {
        try
        {
            return reader.GetString()!;
        }
        catch (InvalidOperationException)
        {
            throw Errors.Invalid(field, $"{NotText[3..]}, at byte {reader.TokenStartIndex + 1}");
        }
    }

    /// <summary>A string value: the model's own level string when it is one (no allocation), else a new string.</summary>
    private static string? ReadLevel(ref Utf8JsonReader reader, CompiledModel model, int feature, int maxLength, out bool tooLong, out bool notText)
    {
        var raw = reader.ValueSpan;
        Span<char> buffer = stackalloc char[256];
        var chars = raw.Length <= buffer.Length ? buffer : new char[raw.Length];
        tooLong = false;
        notText = !TryCopyText(ref reader, chars, out var length);
        if (notText)
        {
            return null;
        }

        var text = chars[..length];
        tooLong = text.Length > maxLength;
        if (tooLong)
        {
            return null;
        }

        if (feature >= 0 && model.FeatureKindOf(feature) == ModelFile.FeatureKind.Categorical && model.LevelName(feature, text) is { } level)
        {
            return level;
        }

        return text.ToString();
    }

    /// <summary>A double as protobuf's JSON mapping writes it: a number, or the strings NaN / Infinity / -Infinity.</summary>
    private static void WriteDouble(Utf8JsonWriter w, ReadOnlySpan<byte> name, double value)
    {
        if (double.IsFinite(value))
        {
            w.WriteNumber(name, value);
        }
        else
        {
            w.WriteString(name, double.IsNaN(value) ? "NaN" : value > 0 ? "Infinity" : "-Infinity");
        }
    }

    private static void CheckContentType(string? contentType)
    {
        var type = contentType is null ? "" : contentType.Split(';', 2)[0].Trim();
        if (!type.Equals("application/json", StringComparison.OrdinalIgnoreCase) && !type.EndsWith("+json", StringComparison.OrdinalIgnoreCase))
        {
            throw Errors.Invalid("content-type", $"'{contentType}' is not JSON; send 'Content-Type: application/json'");
        }
    }

    /// <summary>The request's fields, with each row kept as its byte range in the body.</summary>
    private readonly record struct ParsedRequest(List<(int Start, int Length)> Rows, double? Level, string? Version, List<string?>? Keys, int? Contributions);

    private static ParsedRequest ReadRequest(ReadOnlySpan<byte> json, string modelName)
    {
        var rows = new List<(int, int)>();
        double? level = null;
        string? version = null;
        List<string?>? keys = null;
        int? contributions = null;
        var reader = new Utf8JsonReader(json, ReaderOptions);
        try
        {
            if (json.Trim(" \t\r\n"u8).IsEmpty || !reader.Read())
            {
                throw Errors.Invalid("body", "empty; send a JSON object such as {\"rows\": [{\"feature\": 1.5}]}");
            }

            if (reader.TokenType != JsonTokenType.StartObject)
            {
                throw Errors.Invalid("body", $"expected a JSON object, got {Describe(reader.TokenType)}");
            }

            while (reader.Read() && reader.TokenType == JsonTokenType.PropertyName)
            {
                if (reader.ValueTextEquals("rows"u8))
                {
                    reader.Read();
                    if (reader.TokenType == JsonTokenType.Null)
                    {
                        continue;
                    }

                    Expect(ref reader, JsonTokenType.StartArray, "rows", "an array of row objects");
                    while (reader.Read() && reader.TokenType != JsonTokenType.EndArray)
                    {
                        var start = (int)reader.TokenStartIndex;
                        reader.Skip();
                        rows.Add((start, (int)reader.BytesConsumed - start));
                    }
                }
                else if (reader.ValueTextEquals("level"u8))
                {
                    reader.Read();
                    level = reader.TokenType switch
                    {
                        JsonTokenType.Null => null,
                        JsonTokenType.Number when reader.TryGetDouble(out var d) => d,
                        JsonTokenType.String => ParseDoubleString(ReadText(ref reader, "level"), "level"),
                        _ => throw Errors.Invalid("level", $"expected a number, got {Describe(reader.TokenType)}"),
                    };
                }
                else if (reader.ValueTextEquals("version"u8))
                {
                    reader.Read();
                    version = reader.TokenType switch
                    {
                        JsonTokenType.Null => null,
                        JsonTokenType.String => ReadText(ref reader, "version"),
                        _ => throw Errors.Invalid("version", $"expected a string, got {Describe(reader.TokenType)}"),
                    };
                }
                else if (reader.ValueTextEquals("keys"u8))
                {
                    reader.Read();
                    if (reader.TokenType == JsonTokenType.Null)
                    {
                        continue;
                    }

                    Expect(ref reader, JsonTokenType.StartArray, "keys", "an array of strings");
                    keys = [];
                    while (reader.Read() && reader.TokenType != JsonTokenType.EndArray)
                    {
                        Expect(ref reader, JsonTokenType.String, $"keys[{keys.Count}]", "a string");
                        keys.Add(ReadText(ref reader, $"keys[{keys.Count}]"));
                    }

                    if (keys.Count == 0)
                    {
                        keys = null;
                    }
                }
                else if (reader.ValueTextEquals("contributions"u8))
                {
                    reader.Read();
                    contributions = reader.TokenType switch
                    {
                        JsonTokenType.Null => null,
                        JsonTokenType.Number when reader.TryGetInt32(out var n) => n,
                        JsonTokenType.String when int.TryParse(ReadText(ref reader, "contributions"), NumberStyles.AllowLeadingSign, CultureInfo.InvariantCulture, out var n) => n,
                        _ => throw Errors.Invalid("contributions", "expected a whole number: how many of the largest contributions to return, 0 for all, -1 for none"),
                    };
                }
                else if (reader.ValueTextEquals("model"u8))
                {
                    reader.Read();
                    var named = reader.TokenType == JsonTokenType.String ? ReadText(ref reader, "model") : null;
                    if (!string.IsNullOrEmpty(named) && !string.Equals(named, modelName, StringComparison.Ordinal))
                    {
                        throw Errors.Invalid("model", $"the body names '{Errors.Echo(named)}' but the path names '{Errors.Echo(modelName)}'; leave it out of the body");
                    }
                }
                else
                {
                    var name = ReadText(ref reader, "body");
                    throw Errors.Invalid(Errors.Echo(name), $"not a field of a score request ({FieldList})");
                }
            }

            // Anything after the object is an error (the reader throws on it).
            if (reader.Read())
            {
                throw Errors.Invalid("body", "more than one JSON value");
            }
        }
        catch (InvalidOperationException)
        {
            // A field name compared while unescaped (ValueTextEquals) that is not valid text.
            throw Errors.Invalid("body", $"a field name is {NotText[3..]}, at byte {reader.TokenStartIndex + 1}");
        }
        catch (JsonException ex)
        {
            throw Errors.Invalid("body", $"not well-formed JSON at line {(ex.LineNumber ?? 0) + 1}, byte {(ex.BytePositionInLine ?? 0) + 1}: "
                + FirstSentence(ex.Message));
        }

        return new ParsedRequest(rows, level, version, keys, contributions);
    }

    private static double ParseDoubleString(string text, string field) => text switch
    {
        "NaN" => double.NaN,
        "Infinity" => double.PositiveInfinity,
        "-Infinity" => double.NegativeInfinity,
        _ when double.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out var d) => d,
        _ => throw Errors.Invalid(field, $"'{Errors.Echo(text)}' is not a number"),
    };

    private static void Expect(ref Utf8JsonReader reader, JsonTokenType type, string field, string what)
    {
        if (reader.TokenType != type)
        {
            throw Errors.Invalid(field, $"expected {what}, got {Describe(reader.TokenType)}");
        }
    }

    private static string Describe(JsonTokenType type) => type switch
    {
        JsonTokenType.StartObject => "an object",
        JsonTokenType.StartArray => "a list",
        JsonTokenType.String => "a string",
        JsonTokenType.Number => "a number",
        JsonTokenType.True or JsonTokenType.False => "a boolean",
        JsonTokenType.Null => "null",
        _ => type.ToString(),
    };

    private static string FirstSentence(string message)
    {
        var cut = message.IndexOf(" LineNumber:", StringComparison.Ordinal);
        return (cut > 0 ? message[..cut] : message).Trim();
    }

    /// <summary>Writes an error as the transcoder does, and flushes it (for handlers of other routes).</summary>
    public static async Task WriteErrorAsync(HttpResponse response, RpcException ex)
    {
        WriteError(response, ex);
        await response.BodyWriter.FlushAsync().ConfigureAwait(false);
    }

    /// <summary>Writes an error as the transcoder does: HTTP status from the gRPC code, a google.rpc.Status JSON body.</summary>
    private static void WriteError(HttpResponse response, RpcException ex)
    {
        var status = ex.GetRpcStatus();
        response.StatusCode = HttpStatus(ex.StatusCode);
        var violations = status?.Details.Where(d => d.Is(Google.Rpc.BadRequest.Descriptor)).Select(d => d.Unpack<Google.Rpc.BadRequest>()).ToList();
        WriteStatus(response, ex.StatusCode, status?.Message ?? ex.Status.Detail, violations);
    }

    private static void WriteStatus(HttpResponse response, StatusCode code, string message, List<Google.Rpc.BadRequest>? details)
    {
        response.ContentType = "application/json; charset=utf-8";
        using var w = new Utf8JsonWriter(response.BodyWriter, WriterOptions);
        w.WriteStartObject();
        w.WriteNumber("code"u8, (int)code);
        w.WriteString("message"u8, message);
        w.WriteStartArray("details"u8);
        foreach (var detail in details ?? [])
        {
            w.WriteStartObject();
            w.WriteString("@type"u8, "type.googleapis.com/" + Google.Rpc.BadRequest.Descriptor.FullName);
            w.WriteStartArray("fieldViolations"u8);
            foreach (var v in detail.FieldViolations)
            {
                w.WriteStartObject();
                w.WriteString("field"u8, v.Field);
                w.WriteString("description"u8, v.Description);
                w.WriteString("reason"u8, v.Reason);
                w.WriteEndObject();
            }

            w.WriteEndArray();
            w.WriteEndObject();
        }

        w.WriteEndArray();
        w.WriteEndObject();
    }

    /// <summary>The HTTP status JSON transcoding gives a gRPC status code (google.rpc.Code's documented mapping).</summary>
    public static int HttpStatus(StatusCode code) => code switch
    {
        StatusCode.OK => 200,
        StatusCode.Cancelled => 499,
        StatusCode.InvalidArgument or StatusCode.FailedPrecondition or StatusCode.OutOfRange => 400,
        StatusCode.Unauthenticated => 401,
        StatusCode.PermissionDenied => 403,
        StatusCode.NotFound => 404,
        StatusCode.AlreadyExists or StatusCode.Aborted => 409,
        StatusCode.ResourceExhausted => 429,
        StatusCode.Unimplemented => 501,
        StatusCode.Unavailable => 503,
        StatusCode.DeadlineExceeded => 504,
        _ => 500,
    };
}
