using Scorer.Application.Models;
using System.Buffers;
using System.Globalization;
using System.IO.Pipelines;
using System.Text;
using System.Text.Json;
using Grpc.Core;
using Microsoft.AspNetCore.Http;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Tabular;

namespace Scorer.Transport.Rest;

/// <summary>
/// <c>GET /v1/models/{model}/labelled?since=&amp;until=&amp;version=</c> (admin): the logged rows that have an outcome,
/// as CSV, streamed in prediction-time order. Columns: <c>prediction_id, version, stage, scored_at, key, eta,
/// probability, outcome, implicit</c>, then every feature of the model's versions in model-file order, so the file is
/// ready for <c>scorer fit --like MODEL --data FILE --outcome outcome</c>. <c>since</c>/<c>until</c> are ISO 8601
/// times bounding the prediction time (default: everything).
/// </summary>
/// <remarks>
/// The rows are read from the store in pages of <see cref="PageRows"/> and each page is written with asynchronous
/// writes before the next is read, so memory stays at about a page whatever the size of the export. The first page is
/// read before the status line: a store that does not answer then gets the 503 of every other route (the host's
/// REST error mapping, RestErrorHandler). A store that fails after the status line was sent aborts the response (no last
/// chunk; HTTP/2: a reset stream), so a client never takes a cut-off file for a whole one.
/// </remarks>
public sealed class LabelledExport(ModelCatalog catalog, ILabelledStore store)
{

    /// <summary>Rows read from the store at a time, and written out before the next read.</summary>
    public const int PageRows = 5_000;

    private static readonly string[] Columns = ["prediction_id", "version", "stage", "scored_at", "key", "eta", "probability", "outcome", "implicit"];

    public async Task HandleAsync(HttpContext context, string model)
    {
        ModelEntry entry;
        DateTimeOffset since, until;
        string? version;
        try
        {
            entry = catalog.Model(model);
            since = Time(context.Request.Query["since"].ToString(), "since", DateTimeOffset.UnixEpoch);
            until = Time(context.Request.Query["until"].ToString(), "until", DateTimeOffset.MaxValue.AddYears(-1));
            version = context.Request.Query["version"].ToString() is { Length: > 0 } v ? v : null;
            catalog.Optional(entry, version);

            if (until <= since)
            {
                throw Errors.Invalid("until", "must be later than since");
            }
        }
        catch (RpcException ex)
        {
            await RestScoring.WriteErrorAsync(context.Response, ex).ConfigureAwait(false);
            return;
        }

        var aborted = context.RequestAborted;
        // Before anything of the response: a store failure here is answered as on every other route.
        var page = await store.GetLabelledRowsAsync(model, version, since, until, null, PageRows, aborted).ConfigureAwait(false);

        var features = entry.Versions.SelectMany(v => v.Document.Features.Select(f => f.Name)).Distinct(StringComparer.Ordinal).ToList();
        context.Response.ContentType = "text/csv; charset=utf-8";
        context.Response.Headers.ContentDisposition = $"attachment; filename=\"{model}-labelled.csv\"";
        var body = context.Response.BodyWriter;
        using var file = new CsvFile(features);
        while (true)
        {
            file.Write(page);
            var last = page.Count < PageRows;
            file.MoveTo(body, last);
            await body.FlushAsync(aborted).ConfigureAwait(false);
            if (last)
            {
                return;
            }

            page = await store.GetLabelledRowsAsync(model, version, since, until, page[^1].Position, PageRows, aborted).ConfigureAwait(false);
        }
    }

    /// <summary>
    /// The file as it is made: rows written as CSV text into a buffer of about a page, which <see cref="MoveTo"/> hands
    /// to the response as UTF-8 (the caller then flushes it with an asynchronous write).
    /// </summary>
    private sealed class CsvFile : IDisposable
    {
        private const string TimeFormat = "yyyy-MM-ddTHH:mm:ss.ffffffZ";

        private readonly StringBuilder _text = new(1 << 20);
        private readonly StringWriter _buffer;
        private readonly CsvWriter _csv;
        private readonly Encoder _encoder = new UTF8Encoding(false).GetEncoder();
        private readonly Dictionary<string, int> _column;
        private readonly Cell[] _cells;
        private readonly ArrayBufferWriter<byte> _json = new(1024);

        public CsvFile(List<string> features)
        {
            _buffer = new StringWriter(_text, CultureInfo.InvariantCulture);
            _csv = new CsvWriter(_buffer);
            _column = features.Select((name, i) => (name, i)).ToDictionary(p => p.name, p => p.i, StringComparer.Ordinal);
            _cells = new Cell[features.Count];
            foreach (var name in Columns.Concat(features))
            {
                _csv.Field(name);
            }

            _csv.EndRecord();
        }

        public void Write(IReadOnlyList<LabelledRow> rows)
        {
            Span<char> formatted = stackalloc char[40];
            foreach (var row in rows)
            {
                var p = row.Prediction;
                _csv.Field(p.Id.TryFormat(formatted, out var n) ? formatted[..n] : p.Id.ToString());
                _csv.Field(p.Version);
                _csv.Field(Scorer.Application.Models.ModelCatalog.StageName(p.Stage));
                _csv.Field(p.ScoredAt.TryFormat(formatted, out n, TimeFormat, CultureInfo.InvariantCulture) ? formatted[..n] : p.ScoredAt.ToString(TimeFormat, CultureInfo.InvariantCulture));
                _csv.Field(row.Key);
                _csv.Number(p.Eta);
                _csv.Number(p.Probability);
                _csv.Number(p.Outcome);
                _csv.Number(p.Implicit ? 1 : 0);
                Spread(row.FeaturesJson, _column, _cells, _json);
                foreach (ref readonly var cell in _cells.AsSpan())
                {
                    if (cell.Kind == CellKind.Number)
                    {
                        _csv.Number(cell.Number);
                    }
                    else
                    {
                        _csv.Field(cell.Text);
                    }
                }

                _csv.EndRecord();
            }
        }

        /// <summary>Encodes what was written into <paramref name="body"/> and empties the buffer (the encoder keeps a split surrogate pair until <paramref name="last"/>).</summary>
        public void MoveTo(PipeWriter body, bool last)
        {
            foreach (var chunk in _text.GetChunks())
            {
                _encoder.Convert(chunk.Span, body, flush: false, out _, out _);
            }

            if (last)
            {
                _encoder.Convert(ReadOnlySpan<char>.Empty, body, flush: true, out _, out _);
            }

            _text.Clear();
        }

        public void Dispose() => _buffer.Dispose();
    }

    private enum CellKind : byte
    {
        Empty,
        Number,
        Text,
    }

    /// <summary>One feature's value in a row: a number (written in round-trip form), a text (a level as it was sent), or nothing.</summary>
    private struct Cell
    {
        public CellKind Kind;
        public double Number;
        public string? Text;
    }

    /// <summary>The row's values by column (booleans as 1 and 0; anything else, and features the row lacks, as nothing).</summary>
    private static void Spread(string featuresJson, Dictionary<string, int> column, Cell[] cells, ArrayBufferWriter<byte> json)
    {
        Array.Clear(cells);
        json.ResetWrittenCount();
        Encoding.UTF8.GetBytes(featuresJson.AsSpan(), json);
        var reader = new Utf8JsonReader(json.WrittenSpan);
        var lookup = column.GetAlternateLookup<ReadOnlySpan<char>>();
        Span<char> name = stackalloc char[128];
        reader.Read(); // the row's object
        while (reader.Read() && reader.TokenType == JsonTokenType.PropertyName)
        {
            var found = false;
            var i = 0;
            if (!reader.HasValueSequence && !reader.ValueIsEscaped && reader.ValueSpan.Length <= name.Length)
            {
                var length = Encoding.UTF8.GetChars(reader.ValueSpan, name);
                found = lookup.TryGetValue(name[..length], out i);
            }
            else
            {
                found = column.TryGetValue(reader.GetString()!, out i);
            }

            reader.Read();
            if (!found)
            {
                reader.Skip();
                continue;
            }

            cells[i] = reader.TokenType switch
            {
                JsonTokenType.Number => new Cell { Kind = CellKind.Number, Number = reader.GetDouble() },
                JsonTokenType.String => new Cell { Kind = CellKind.Text, Text = reader.GetString() },
                JsonTokenType.True => new Cell { Kind = CellKind.Number, Number = 1 },
                JsonTokenType.False => new Cell { Kind = CellKind.Number, Number = 0 },
                _ => default,
            };
            reader.Skip();
        }
    }

    private static DateTimeOffset Time(string text, string field, DateTimeOffset absent)
    {
        if (text.Length == 0)
        {
            return absent;
        }

        return DateTimeOffset.TryParse(text, CultureInfo.InvariantCulture, DateTimeStyles.AssumeUniversal, out var t)
            ? t.ToUniversalTime()
            : throw Errors.Invalid(field, $"'{text}' is not a time; give ISO 8601, e.g. 2026-11-01T00:00:00Z");
    }
}
