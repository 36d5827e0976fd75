using System.Buffers;
using System.Globalization;
using System.Text.Json;
using Google.Protobuf.Reflection;
using Grpc.Core;
using Microsoft.AspNetCore.Grpc.JsonTranscoding;
using Microsoft.AspNetCore.Http;

namespace Scorer.Transport.Rest;

/// <summary>
/// Checks a REST call of a transcoded route against its request message before the transcoder reads it, as strictly
/// as the direct score reader: every query parameter and every body field must be a field of the message, of the
/// right JSON type, in range, and valid Unicode text; a list holds no nulls; no field is named twice. A call that
/// breaks a rule is refused with 400 in the one error shape, naming the parameter or the JSON path of the field
/// (<c>outcomes[2].outcome</c>) and the reason, where the transcoder would say only that the payload "is not correctly
/// formatted", or would silently drop what it does not know (a misspelt <c>?windw=</c> falling back to the default).
/// </summary>
/// <remarks>
/// The rules are protobuf's JSON mapping (https://protobuf.dev/programming-guides/json/): integers as numbers or
/// strings of digits, 64-bit ones too; doubles as numbers or "NaN", "Infinity", "-Infinity"; enums by name or number;
/// bytes as base64; google.protobuf.Timestamp as RFC 3339 text; Struct, Value and ListValue as any JSON of their kind;
/// a field by its JSON name or its proto name; null for a singular field means "not given".
/// </remarks>
public sealed class TranscodedRequestCheck(long maxBodyBytes)
{
    private static readonly JsonReaderOptions ReaderOptions = new() { CommentHandling = JsonCommentHandling.Disallow, MaxDepth = 64 };

    /// <summary>The middleware: checks transcoded calls, passes everything else on untouched.</summary>
    public async Task InvokeAsync(HttpContext context, RequestDelegate next)
    {
        ArgumentNullException.ThrowIfNull(context);
        ArgumentNullException.ThrowIfNull(next);
        if (context.GetEndpoint()?.Metadata.GetMetadata<GrpcJsonTranscodingMetadata>() is not { } transcoded
            || context.Request.ContentType?.StartsWith("application/grpc", StringComparison.OrdinalIgnoreCase) == true)
        {
            await next(context).ConfigureAwait(false);
            return;
        }

        try
        {
            var input = transcoded.MethodDescriptor.InputType;
            var body = transcoded.HttpRule.Body;
            CheckQuery(context.Request, input, body);
            if (!string.IsNullOrEmpty(body))
            {
                await CheckBodyAsync(context, input, body).ConfigureAwait(false);
            }
        }
        catch (RpcException ex)
        {
            await RestScoring.WriteErrorAsync(context.Response, ex).ConfigureAwait(false);
            return;
        }
        catch (BadHttpRequestException ex)
        {
            var tooLarge = ex.StatusCode == StatusCodes.Status413PayloadTooLarge;
            await RestScoring.WriteErrorAsync(context.Response, tooLarge ? Errors.TooMuch("body", ex.Message) : Errors.Invalid("body", ex.Message))
                .ConfigureAwait(false);
            return;
        }
        catch (Exception ex) when (ex is IOException or OperationCanceledException && context.RequestAborted.IsCancellationRequested)
        {
            return; // the caller went away while sending
        }

        await next(context).ConfigureAwait(false);
    }

    // ---- the query string ------------------------------------------------------------------------------------------

    private static void CheckQuery(HttpRequest request, MessageDescriptor input, string body)
    {
        foreach (var (name, values) in request.Query)
        {
            if (request.RouteValues.ContainsKey(name))
            {
                continue; // bound from the path (the transcoder ignores a query parameter of the same name)
            }

            var field = ResolvePath(input, name, out var problem);
            if (field is null)
            {
                throw Errors.Invalid(Errors.Echo(name), problem ?? "not a parameter of this call" + (body == "*"
                    ? " (it takes none: its fields go in the JSON body)"
                    : $"; parameters: {string.Join(", ", Parameters(input, request, body))}"));
            }

            if (body == "*" || (body.Length > 0 && Matches(input.FindFieldByName(body), name.Split('.')[0])))
            {
                throw Errors.Invalid(Errors.Echo(name), "goes in the JSON body, not in the query string");
            }

            if (!field.IsRepeated && values.Count > 1)
            {
                throw Errors.Invalid(Errors.Echo(name), $"given {values.Count} times; give it once");
            }

            foreach (var value in values)
            {
                CheckQueryValue(field, value ?? "", Errors.Echo(name));
            }
        }
    }

    private static IEnumerable<string> Parameters(MessageDescriptor input, HttpRequest request, string body) =>
        input.Fields.InFieldNumberOrder()
            .Where(f => f.FieldType != FieldType.Message && !request.RouteValues.ContainsKey(f.JsonName) && !request.RouteValues.ContainsKey(f.Name) && f.Name != body)
            .Select(f => f.JsonName);

    private static bool Matches(FieldDescriptor? field, string name) => field is not null && (field.Name == name || field.JsonName == name);

    /// <summary>The leaf field a dotted query name names, or null with the reason.</summary>
    private static FieldDescriptor? ResolvePath(MessageDescriptor message, string path, out string? problem)
    {
        problem = null;
        var parts = path.Split('.');
        FieldDescriptor? field = null;
        var current = message;
        for (var i = 0; i < parts.Length; i++)
        {
            field = Find(current, parts[i]);
            if (field is null)
            {
                return null;
            }

            if (i < parts.Length - 1)
            {
                if (field.FieldType != FieldType.Message || field.IsMap || field.IsRepeated)
                {
                    return null;
                }

                current = field.MessageType;
            }
        }

        if (field is { FieldType: FieldType.Message } && !IsTextLike(field.MessageType))
        {
            problem = "a message, which a query parameter cannot give; name one of its fields";
            return null;
        }

        return field;
    }

    private static void CheckQueryValue(FieldDescriptor field, string value, string name)
    {
        var ok = field.FieldType switch
        {
            FieldType.String => StoreText(value, name),
            FieldType.Bool => value is "true" or "false",
            FieldType.Double or FieldType.Float => value is "NaN" or "Infinity" or "-Infinity"
                || double.TryParse(value, NumberStyles.Float, CultureInfo.InvariantCulture, out _),
            FieldType.Enum => field.EnumType.FindValueByName(value) is not null || int.TryParse(value, NumberStyles.AllowLeadingSign, CultureInfo.InvariantCulture, out _),
            FieldType.Message when IsTextLike(field.MessageType) => ReadsAs(field.MessageType, value),
            FieldType.Message => true, // a wrapper given as text: the transcoder parses it
            _ => IntegerText(field.FieldType, value),
        };
        if (!ok)
        {
            throw Errors.Invalid(name, $"'{Errors.Echo(value)}' is not {Expected(field)}");
        }
    }

    private static bool StoreText(string value, string name) =>
        Scorer.Store.StoreRules.Unstorable(value) is not { } reason ? true : throw Errors.Invalid(name, reason);

    // ---- the JSON body ---------------------------------------------------------------------------------------------

    private async Task CheckBodyAsync(HttpContext context, MessageDescriptor input, string body)
    {
        var request = context.Request;
        request.EnableBuffering(bufferThreshold: 1024 * 1024, bufferLimit: maxBodyBytes);
        using var copy = new MemoryStream(request.ContentLength is { } length and > 0 and <= 64 * 1024 * 1024 ? (int)length : 4096);
        await request.Body.CopyToAsync(copy, context.RequestAborted).ConfigureAwait(false);
        request.Body.Position = 0; // the transcoder reads the body again from the start
        Check(new ReadOnlySequence<byte>(copy.GetBuffer(), 0, (int)copy.Length), input, body);
    }

    private static void Check(ReadOnlySequence<byte> json, MessageDescriptor input, string body)
    {
        var reader = new Utf8JsonReader(json, ReaderOptions);
        try
        {
            if (!reader.Read())
            {
                if (body == "*")
                {
                    return; // an empty body is an empty message
                }

                throw Errors.Invalid(body, "the body is empty");
            }

            if (body == "*")
            {
                CheckMessage(ref reader, input, "");
            }
            else
            {
                var field = input.FindFieldByName(body) ?? throw new InvalidOperationException($"The route's body field '{body}' is not a field of {input.FullName}.");
                CheckValue(ref reader, field, field.JsonName);
            }

            if (reader.Read())
            {
                throw Errors.Invalid("body", "more than one JSON value");
            }
        }
        catch (JsonException ex)
        {
            throw Errors.Invalid("body", $"not well-formed JSON at line {(ex.LineNumber ?? 0) + 1}, byte {(ex.BytePositionInLine ?? 0) + 1}: {FirstSentence(ex.Message)}");
        }
    }

    private static void CheckMessage(ref Utf8JsonReader reader, MessageDescriptor message, string path)
    {
        if (IsOpen(message))
        {
            reader.Skip(); // Struct, Value, ListValue, Any: any JSON of their kind (the transcoder checks the kind)
            return;
        }

        if (reader.TokenType != JsonTokenType.StartObject)
        {
            throw Errors.Invalid(Name(path, "body"), $"{Describe(ref reader)}; expected an object ({message.Name})");
        }

        var seen = new HashSet<int>();
        while (reader.Read() && reader.TokenType == JsonTokenType.PropertyName)
        {
            var name = Text(ref reader, Name(path, "body"));
            var field = Find(message, name);
            var at = Join(path, field?.JsonName ?? Errors.Echo(name));
            if (field is null)
            {
                throw Errors.Invalid(at, $"not a field of {message.Name} (fields: {string.Join(", ", message.Fields.InFieldNumberOrder().Select(f => f.JsonName))})");
            }

            if (!seen.Add(field.FieldNumber))
            {
                throw Errors.Invalid(at, "named twice; give each field once");
            }

            reader.Read();
            CheckValue(ref reader, field, at);
        }
    }

    private static void CheckValue(ref Utf8JsonReader reader, FieldDescriptor field, string path)
    {
        if (reader.TokenType == JsonTokenType.Null && !(field.FieldType == FieldType.Message && field.MessageType.FullName == "google.protobuf.Value"))
        {
            return; // not given
        }

        if (field.IsMap)
        {
            Expect(ref reader, JsonTokenType.StartObject, path, "an object");
            var valueField = field.MessageType.FindFieldByNumber(2);
            while (reader.Read() && reader.TokenType == JsonTokenType.PropertyName)
            {
                var key = Text(ref reader, path);
                reader.Read();
                CheckSingle(ref reader, valueField, $"{path}[{Errors.Echo(key, 40)}]");
            }

            return;
        }

        if (field.IsRepeated)
        {
            Expect(ref reader, JsonTokenType.StartArray, path, "a list");
            var i = 0;
            while (reader.Read() && reader.TokenType != JsonTokenType.EndArray)
            {
                var item = $"{path}[{i++}]";
                if (reader.TokenType == JsonTokenType.Null)
                {
                    throw Errors.Invalid(item, $"null; a list holds {Expected(field)} in every place");
                }

                CheckSingle(ref reader, field, item);
            }

            return;
        }

        CheckSingle(ref reader, field, path);
    }

    private static void CheckSingle(ref Utf8JsonReader reader, FieldDescriptor field, string path)
    {
        switch (field.FieldType)
        {
            case FieldType.Message when IsTextLike(field.MessageType):
                Expect(ref reader, JsonTokenType.String, path, Expected(field));
                var text = Text(ref reader, path);
                if (!ReadsAs(field.MessageType, text))
                {
                    throw Errors.Invalid(path, $"'{Errors.Echo(text, 40)}' is not {Expected(field)}");
                }

                break;
            case FieldType.Message when Wrapped(field.MessageType) is { } inner:
                CheckSingle(ref reader, inner, path);
                break;
            case FieldType.Message:
                CheckMessage(ref reader, field.MessageType, path);
                break;
            case FieldType.String:
                Expect(ref reader, JsonTokenType.String, path, "a string");
                Text(ref reader, path);
                break;
            case FieldType.Bytes:
                Expect(ref reader, JsonTokenType.String, path, "base64 text");
                if (!reader.TryGetBytesFromBase64(out _))
                {
                    throw Errors.Invalid(path, "not base64 text");
                }

                break;
            case FieldType.Bool:
                if (reader.TokenType is not (JsonTokenType.True or JsonTokenType.False))
                {
                    throw Errors.Invalid(path, $"{Describe(ref reader)}; expected true or false");
                }

                break;
            case FieldType.Double or FieldType.Float:
                if (reader.TokenType == JsonTokenType.Number)
                {
                    if (!reader.TryGetDouble(out var d) || (field.FieldType == FieldType.Float && !float.IsFinite((float)d)))
                    {
                        throw Errors.Invalid(path, $"{Describe(ref reader)} is out of range");
                    }
                }
                else if (reader.TokenType != JsonTokenType.String
                    || Text(ref reader, path) is not ("NaN" or "Infinity" or "-Infinity") && !double.TryParse(reader.GetString(), NumberStyles.Float, CultureInfo.InvariantCulture, out _))
                {
                    throw Errors.Invalid(path, $"{Describe(ref reader)}; expected a number");
                }

                break;
            case FieldType.Enum:
                if (reader.TokenType == JsonTokenType.String)
                {
                    var name = Text(ref reader, path);
                    if (field.EnumType.FindValueByName(name) is null)
                    {
                        throw Errors.Invalid(path, $"'{Errors.Echo(name)}' is not one of {string.Join(", ", field.EnumType.Values.Select(v => v.Name))}");
                    }
                }
                else if (reader.TokenType != JsonTokenType.Number || !reader.TryGetInt32(out _))
                {
                    throw Errors.Invalid(path, $"{Describe(ref reader)}; expected one of {string.Join(", ", field.EnumType.Values.Select(v => v.Name))}");
                }

                break;
            default:
                CheckInteger(ref reader, field, path);
                break;
        }
    }

    private static void CheckInteger(ref Utf8JsonReader reader, FieldDescriptor field, string path)
    {
        string text;
        if (reader.TokenType == JsonTokenType.Number)
        {
            text = System.Text.Encoding.UTF8.GetString(reader.HasValueSequence ? reader.ValueSequence.ToArray() : reader.ValueSpan);
        }
        else if (reader.TokenType == JsonTokenType.String)
        {
            text = Text(ref reader, path);
        }
        else
        {
            throw Errors.Invalid(path, $"{Describe(ref reader)}; expected {Expected(field)}");
        }

        if (!IntegerText(field.FieldType, text))
        {
            var whole = decimal.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out var number) && number == decimal.Truncate(number)
                && double.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out var asDouble) && asDouble == Math.Floor(asDouble);
            throw Errors.Invalid(path, whole || double.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out var d) && double.IsInfinity(d)
                ? $"{Errors.Echo(text, 40)} is out of range for {Expected(field)}"
                : $"{Errors.Echo(text, 40)} is not {Expected(field)}");
        }
    }

    /// <summary>Integer text in range for the type: digits, an optional sign, and (as protobuf allows) an exponent that leaves it whole.</summary>
    private static bool IntegerText(FieldType type, string text)
    {
        // The decimal keeps 28 digits and rounds what is smaller to 0 (5e-324 would read as a whole 0): the double must
        // be whole as well, as protobuf's own reader requires.
        if (!decimal.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out var value) || value != decimal.Truncate(value)
            || !double.TryParse(text, NumberStyles.Float, CultureInfo.InvariantCulture, out var d) || d != Math.Floor(d))
        {
            return false;
        }

        return type switch
        {
            FieldType.Int32 or FieldType.SInt32 or FieldType.SFixed32 => value is >= int.MinValue and <= int.MaxValue,
            FieldType.UInt32 or FieldType.Fixed32 => value is >= 0 and <= uint.MaxValue,
            FieldType.Int64 or FieldType.SInt64 or FieldType.SFixed64 => value is >= long.MinValue and <= long.MaxValue,
            FieldType.UInt64 or FieldType.Fixed64 => value is >= 0 and <= ulong.MaxValue,
            _ => false,
        };
    }

    // ---- helpers ---------------------------------------------------------------------------------------------------

    private static FieldDescriptor? Find(MessageDescriptor message, string name) =>
        message.Fields.InFieldNumberOrder().FirstOrDefault(f => f.JsonName == name) ?? message.FindFieldByName(name);

    private static bool IsOpen(MessageDescriptor message) => message.FullName is "google.protobuf.Struct" or "google.protobuf.Value"
        or "google.protobuf.ListValue" or "google.protobuf.Any";

    /// <summary>Whether protobuf's JSON reader takes the text as a Timestamp, Duration or FieldMask (the transcoder's own rule).</summary>
    private static bool ReadsAs(MessageDescriptor message, string text)
    {
        try
        {
            Google.Protobuf.JsonParser.Default.Parse(JsonSerializer.Serialize(text), message);
            return true;
        }
        catch (Exception e) when (e is Google.Protobuf.InvalidProtocolBufferException or Google.Protobuf.InvalidJsonException or FormatException)
        {
            return false;
        }
    }

    private static bool IsTextLike(MessageDescriptor message) => message.FullName is "google.protobuf.Timestamp" or "google.protobuf.Duration"
        or "google.protobuf.FieldMask";

    private static FieldDescriptor? Wrapped(MessageDescriptor message) =>
        message.File.Package == "google.protobuf" && message.Name.EndsWith("Value", StringComparison.Ordinal) && message.Fields.InFieldNumberOrder().Count == 1
            ? message.FindFieldByNumber(1)
            : null;

    private static string Expected(FieldDescriptor field) => field.FieldType switch
    {
        FieldType.String => "a string",
        FieldType.Bool => "true or false",
        FieldType.Double or FieldType.Float => "a number",
        FieldType.Enum => "one of " + string.Join(", ", field.EnumType.Values.Select(v => v.Name)),
        FieldType.Int32 or FieldType.SInt32 or FieldType.SFixed32 => "a whole number (32-bit)",
        FieldType.UInt32 or FieldType.Fixed32 => "a whole number from 0 (32-bit)",
        FieldType.Int64 or FieldType.SInt64 or FieldType.SFixed64 => "a whole number (64-bit)",
        FieldType.UInt64 or FieldType.Fixed64 => "a whole number from 0 (64-bit)",
        FieldType.Bytes => "base64 text",
        FieldType.Message when field.MessageType.FullName == "google.protobuf.Timestamp" => "a time in RFC 3339 form, e.g. 2026-12-01T08:30:00Z",
        FieldType.Message => "an object (" + field.MessageType.Name + ")",
        _ => field.FieldType.ToString(),
    };

    private static void Expect(ref Utf8JsonReader reader, JsonTokenType type, string path, string what)
    {
        if (reader.TokenType != type)
        {
            throw Errors.Invalid(path, $"{Describe(ref reader)}; expected {what}");
        }
    }

    /// <summary>The current string or property name as text; refused naming the path when it is not valid Unicode text.</summary>
    private static string Text(ref Utf8JsonReader reader, string path)
    {
        try
        {
            return reader.GetString()!;
        }
        catch (InvalidOperationException)
        {
            throw Errors.Invalid(path,
                $"not valid Unicode text (invalid UTF-8 bytes, or an escape such as \\ud800 that is half of a surrogate pair), at byte {reader.TokenStartIndex + 1}");
        }
    }

    private static string Describe(ref Utf8JsonReader reader) => reader.TokenType switch
    {
        JsonTokenType.StartObject => "an object",
        JsonTokenType.StartArray => "a list",
        JsonTokenType.String => "a string",
        JsonTokenType.Number => System.Text.Encoding.UTF8.GetString(reader.HasValueSequence ? reader.ValueSequence.ToArray() : reader.ValueSpan) is var n
            ? (n.Length > 40 ? "a number" : n) : "a number",
        JsonTokenType.True => "true",
        JsonTokenType.False => "false",
        JsonTokenType.Null => "null",
        _ => reader.TokenType.ToString(),
    };

    private static string Join(string path, string name) => path.Length == 0 ? name : path + "." + name;

    private static string Name(string path, string fallback) => path.Length == 0 ? fallback : path;

    private static string FirstSentence(string message)
    {
        var cut = message.IndexOf(" LineNumber:", StringComparison.Ordinal);
        return (cut > 0 ? message[..cut] : message).Trim();
    }
}
