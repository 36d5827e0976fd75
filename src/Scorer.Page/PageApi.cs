using Scorer.Application.Models;
using System.Buffers;
using System.Net.ServerSentEvents;
using System.Runtime.CompilerServices;
using Scorer.Transport;
using Scorer.Transport.Rest;
using System.Globalization;
using System.Text;
using System.Text.Json;
using System.Threading.Channels;
using Grpc.Core;
using Microsoft.AspNetCore.Builder;
using Microsoft.AspNetCore.Http;
using Microsoft.AspNetCore.Routing;
using Scorer.Monitor.Reporting;
using Scorer.Statistics;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Transport.Services;
using Scorer.Transport.V1;

namespace Scorer.Page;

/// <summary>A version's last change of status as this process saw it: when, from what (null for its first judgement since start), to what, and why.</summary>
public sealed record StatusChange(DateTimeOffset At, string? From, string To, string Action, IReadOnlyList<string> Reasons, string Advice);

/// <summary>
/// The JSON the monitor page reads beside the monitor API (docs/page.md), role <c>score</c> like every read:
/// <list type="bullet">
/// <item><c>GET /v1/overview</c>: every model with its versions, stage, status, reasons, the last status change, rows
/// scored, labelled predictions and events;</item>
/// <item><c>GET /v1/overview/events</c>: the same as Server-Sent Events (<c>event: overview</c> after each round of the
/// monitor, <c>event: status</c> when a status changes);</item>
/// <item><c>GET /v1/models/{model}/monitor/trend?version=&amp;window=&amp;buckets=</c>: calibration intercept, slope and
/// AUC per bucket of prediction time;</item>
/// <item><c>GET /v1/models/{model}/monitor/cusum?version=&amp;window=&amp;points=</c>: the paths of the CUSUM charts.</item>
/// </list>
/// It also serves the page itself (<see cref="PageFiles"/>).
/// </summary>
public sealed class PageApi
{
    /// <summary>Messages as the JSON transcoder writes them (default values included).</summary>
    private static readonly Google.Protobuf.JsonFormatter ApiJson = new(Google.Protobuf.JsonFormatter.Settings.Default.WithFormatDefaultValues(true));

    private static readonly JsonWriterOptions WriterOptions = new() { Encoder = System.Text.Encodings.Web.JavaScriptEncoder.UnsafeRelaxedJsonEscaping };

    private readonly ModelRegistry _registry;
    private readonly ModelCatalog _catalog;
    private readonly MonitorReporter _reporter;
    private readonly MonitorLoop _loop;
    private readonly TrendReporter _trends;
    private readonly IPredictionLogStore _store;
    private readonly TimeProvider _time;
    private readonly EventSubscribers _subscribers;
    private readonly PageFiles _files = new();
    private readonly Lock _lock = new();
    private readonly Dictionary<(string Model, string Version), StatusChange> _changes = [];

    public PageApi(ModelRegistry registry, ModelCatalog catalog, MonitorReporter reporter, MonitorLoop loop, TrendReporter trends, IPredictionLogStore store,
        TimeProvider time, EventSubscribers subscribers)
    {
        _subscribers = subscribers;
        _registry = registry;
        _catalog = catalog;
        _reporter = reporter;
        _loop = loop;
        _trends = trends;
        _store = store;
        _time = time;
        reporter.StatusChanged += OnStatusChanged;
        loop.Updated += _ => Updated?.Invoke(false);
    }

    /// <summary>Raised after each new snapshot (false) and each change of status (true).</summary>
    private event Action<bool>? Updated;

    /// <summary>The last change of status of a version, if its status has been judged since start.</summary>
    public StatusChange? LastChange(string model, string version)
    {
        lock (_lock)
        {
            return _changes.GetValueOrDefault((model, version));
        }
    }

    /// <summary>The page's assets under <c>/page/</c>, through the static file middleware: call before routing.</summary>
    public void UseAssets(IApplicationBuilder app) => _files.UseAssets(app);

    /// <summary>Maps the page (<c>/</c>, <c>/models/{model}</c>) and its JSON endpoints.</summary>
    public void Map(IEndpointRouteBuilder app)
    {
        _files.Map(app);
        // Reads, like every read of the API: the score role (Roles).
        app.MapGet("/v1/overview", (HttpContext context) => Guarded(context, WriteOverviewAsync)).RequireAuthorization(Roles.Score);
        app.MapGet("/v1/overview/events", (HttpContext context) => Guarded(context, StreamOverviewAsync)).RequireAuthorization(Roles.Score);
        app.MapGet("/v1/models/{model}/monitor/trend", (HttpContext context, string model) => Guarded(context, c => WriteTrendAsync(c, model))).RequireAuthorization(Roles.Score);
        app.MapGet("/v1/models/{model}/monitor/cusum", (HttpContext context, string model) => Guarded(context, c => WriteCusumAsync(c, model))).RequireAuthorization(Roles.Score);
    }

    private void OnStatusChanged(string model, string version, StatusJudgement judgement)
    {
        lock (_lock)
        {
            var from = _changes.TryGetValue((model, version), out var last) ? last.To : null;
            _changes[(model, version)] = new StatusChange(_time.GetUtcNow(), from, judgement.Name, judgement.ActionName, judgement.Reasons, judgement.Advice);
        }

        Updated?.Invoke(true);
    }

    /// <summary>Answers; a bad request becomes the API's JSON error.</summary>
    private static async Task Guarded(HttpContext context, Func<HttpContext, Task> answer)
    {
        context.Response.Headers.XContentTypeOptions = "nosniff";
        try
        {
            await answer(context).ConfigureAwait(false);
        }
        catch (RpcException ex) when (!context.Response.HasStarted)
        {
            await RestScoring.WriteErrorAsync(context.Response, ex).ConfigureAwait(false);
        }
    }

    private async Task WriteOverviewAsync(HttpContext context)
    {
        var json = await OverviewAsync(context.RequestAborted).ConfigureAwait(false);
        context.Response.ContentType = "application/json; charset=utf-8";
        context.Response.Headers.CacheControl = "no-store";
        await context.Response.Body.WriteAsync(json, context.RequestAborted).ConfigureAwait(false);
    }

    /// <summary>The overview as JSON: models, versions, status and counts over the judged window, traffic, the last change.</summary>
    public async Task<byte[]> OverviewAsync(CancellationToken cancellationToken = default)
    {
        var options = _reporter.Options;
        var now = _time.GetUtcNow();
        var snapshot = _registry.Current;
        var buffer = new ArrayBufferWriter<byte>(4096);
        using var w = new Utf8JsonWriter(buffer, WriterOptions);
        w.WriteStartObject();
        w.WriteString("at", now);
        w.WriteNumber("reportIntervalSeconds", options.ReportInterval.TotalSeconds);
        w.WriteString("judgedWindow", options.JudgedWindow);
        w.WriteString("defaultWindow", options.DefaultWindow);
        w.WriteStartArray("windows");
        foreach (var name in options.Windows.Keys)
        {
            w.WriteStringValue(name);
        }

        w.WriteEndArray();
        w.WriteNumber("level", options.Level);
        w.WriteNumber("psiModerate", options.PsiModerate);
        w.WriteNumber("psiLarge", options.PsiLarge);
        w.WriteStartArray("models");
        foreach (var entry in snapshot.Models.Values)
        {
            var document = (entry.Live ?? entry.Versions[^1]).Document;
            w.WriteStartObject();
            w.WriteString("model", entry.Name);
            w.WriteString("description", document.Description);
            w.WriteString("link", Scorer.ModelFile.ModelFileWriter.LinkName(document.Link));
            w.WriteString("outcome", document.Outcome.Positive);
            w.WriteString("horizon", document.Outcome.Horizon);
            w.WriteString("live", entry.Live?.Version);
            w.WriteNumber("aucFloor", options.AucFloorOf(entry.Name));
            w.WriteStartArray("versions");
            foreach (var version in entry.Versions.OrderBy(v => v.Stage).ThenByDescending(v => v.LoadedAt))
            {
                w.WriteStartObject();
                w.WriteString("version", version.Version);
                w.WriteString("stage", Scorer.Application.Models.ModelCatalog.StageName(version.Stage));
                w.WriteString("loadedAt", version.LoadedAt);
                w.WriteString("file", Path.GetFileName(version.File));
                w.WriteNumber("scoredLastHour", await _store.CountPredictionsByMinuteAsync(entry.Name, version.Version, now.AddHours(-1), now.AddMinutes(1),
                    cancellationToken).ConfigureAwait(false));
                w.WriteNumber("scored24h", await _store.CountPredictionsByMinuteAsync(entry.Name, version.Version, now.AddHours(-24), now.AddMinutes(1),
                    cancellationToken).ConfigureAwait(false));
                if (version.Stage != Stage.Retired)
                {
                    var report = _loop.Find(entry.Name, version.Version, options.JudgedWindow)
                        ?? await _reporter.ReportAsync(version, options.JudgedWindow, cancellationToken).ConfigureAwait(false);
                    w.WriteString("window", report.Window);
                    w.WriteString("status", report.Status.Name);
                    w.WriteString("action", report.Status.ActionName);
                    Strings(w, "reasons", report.Status.Reasons);
                    w.WriteString("advice", report.Status.Advice);
                    w.WriteNumber("labelled", report.Calibration.Labelled);
                    w.WriteNumber("events", report.Calibration.Events);
                    Number(w, "expected", report.Calibration.Expected);
                    w.WriteNumber("immature", report.Immature);
                    w.WriteBoolean("provisional", report.Provisional);
                    w.WriteString("method", report.Method);
                    w.WriteString("reportedAt", report.To.AddMinutes(-1));
                }

                if (LastChange(entry.Name, version.Version) is { } change)
                {
                    w.WriteStartObject("lastChange");
                    w.WriteString("at", change.At);
                    w.WriteString("from", change.From);
                    w.WriteString("to", change.To);
                    w.WriteString("action", change.Action);
                    Strings(w, "reasons", change.Reasons);
                    w.WriteString("advice", change.Advice);
                    w.WriteEndObject();
                }

                w.WriteEndObject();
            }

            w.WriteEndArray();
            w.WriteEndObject();
        }

        w.WriteEndArray();
        w.WriteStartArray("loadErrors");
        foreach (var failure in snapshot.Failures)
        {
            // Exactly what GET /v1/models gives (the LoadError message as JSON).
            using var error = JsonDocument.Parse(ApiJson.Format(Scorer.Transport.Services.ModelsService.LoadErrorOf(failure)));
            error.WriteTo(w);
        }

        w.WriteEndArray();
        w.WriteEndObject();
        w.Flush();
        return buffer.WrittenSpan.ToArray();
    }

    /// <summary>The overview at once, then after each round of the monitor (coalesced) and at each change of status.</summary>
    private async Task StreamOverviewAsync(HttpContext context)
    {
        using var lease = _subscribers.Enter();
        try
        {
            await EventStreams.WriteAsync(context, OverviewEvents(context.RequestAborted), _time).ConfigureAwait(false);
        }
        catch (OperationCanceledException) when (context.RequestAborted.IsCancellationRequested)
        {
        }
    }

    private async IAsyncEnumerable<SseItem<string>> OverviewEvents([EnumeratorCancellation] CancellationToken cancellationToken)
    {
        var signals = Channel.CreateBounded<bool>(new BoundedChannelOptions(16) { FullMode = BoundedChannelFullMode.DropOldest });
        void OnUpdated(bool status) => signals.Writer.TryWrite(status);
        Updated += OnUpdated;
        try
        {
            yield return new SseItem<string>(Encoding.UTF8.GetString(await OverviewAsync(cancellationToken).ConfigureAwait(false)), "overview");
            while (true)
            {
                var status = await signals.Reader.ReadAsync(cancellationToken).ConfigureAwait(false);

                // A round of the monitor raises one update per version and window: let it finish, then send once.
                await Task.Delay(Coalesce, _time, cancellationToken).ConfigureAwait(false);
                while (signals.Reader.TryRead(out var more))
                {
                    status |= more;
                }

                yield return new SseItem<string>(Encoding.UTF8.GetString(await OverviewAsync(cancellationToken).ConfigureAwait(false)), status ? "status" : "overview");
            }
        }
        finally
        {
            Updated -= OnUpdated;
        }
    }

    /// <summary>How long the overview stream waits after an update for the rest of the monitor's round.</summary>
    private static readonly TimeSpan Coalesce = TimeSpan.FromMilliseconds(150);

    private (LoadedVersion Version, string Window) Resolve(HttpContext context, string model) => _catalog.Monitored(model,
        context.Request.Query["version"].ToString(), context.Request.Query["window"].ToString());

    /// <summary>An optional whole-number query parameter within [min, max], or the error naming it.</summary>
    private static int Count(HttpContext context, string name, int absent, int min, int max)
    {
        var text = context.Request.Query[name].ToString();
        if (text.Length == 0)
        {
            return absent;
        }

        return int.TryParse(text, NumberStyles.None, CultureInfo.InvariantCulture, out var value) && value >= min && value <= max
            ? value
            : throw Errors.Invalid(name, $"'{text}' is not a whole number from {min} to {max}");
    }

    private async Task WriteTrendAsync(HttpContext context, string model)
    {
        var (version, window) = Resolve(context, model);
        var buckets = Count(context, "buckets", 30, 1, 500);
        var trend = await _trends.TrendAsync(version, window, buckets, context.RequestAborted).ConfigureAwait(false);
        var buffer = new ArrayBufferWriter<byte>(4096);
        using (var w = new Utf8JsonWriter(buffer, WriterOptions))
        {
            w.WriteStartObject();
            w.WriteString("model", version.Model);
            w.WriteString("version", version.Version);
            w.WriteString("window", trend.Window);
            w.WriteString("from", trend.From);
            w.WriteString("to", trend.To);
            w.WriteNumber("stepSeconds", trend.Step.TotalSeconds);
            w.WriteNumber("level", trend.Level);
            w.WriteNumber("aucFloor", _trends.Options.AucFloorOf(version.Model));
            w.WriteStartArray("buckets");
            foreach (var b in trend.Buckets)
            {
                w.WriteStartObject();
                w.WriteString("from", b.From);
                w.WriteString("to", b.To);
                w.WriteNumber("labelled", b.Labelled);
                w.WriteNumber("events", b.Events);
                Number(w, "expected", b.Expected);
                if (b.Intercept is { } a)
                {
                    Estimate(w, "calibrationIntercept", a.Estimate, a.Se, a.Lower, a.Upper);
                }

                if (b.Slope is { } s)
                {
                    Estimate(w, "calibrationSlope", s.Estimate, s.Se, s.Lower, s.Upper);
                }

                if (b.Auc is { } auc)
                {
                    Estimate(w, "auc", auc.Estimate, auc.Se, auc.Lower, auc.Upper);
                }

                w.WriteEndObject();
            }

            w.WriteEndArray();
            w.WriteEndObject();
        }

        context.Response.ContentType = "application/json; charset=utf-8";
        context.Response.Headers.CacheControl = "no-store";
        await context.Response.Body.WriteAsync(buffer.WrittenMemory, context.RequestAborted).ConfigureAwait(false);
    }

    private async Task WriteCusumAsync(HttpContext context, string model)
    {
        var (version, window) = Resolve(context, model);
        var points = Count(context, "points", 600, 8, 20_000);
        var paths = _trends.Cusum(version, window, points);
        var buffer = new ArrayBufferWriter<byte>(16384);
        using (var w = new Utf8JsonWriter(buffer, WriterOptions))
        {
            w.WriteStartObject();
            w.WriteString("model", version.Model);
            w.WriteString("version", version.Version);
            w.WriteString("window", paths.Window);
            w.WriteString("from", paths.From);
            w.WriteString("to", paths.To);
            w.WriteNumber("outcomes", paths.Outcomes);
            if (paths.Through is { } through)
            {
                w.WriteString("through", through);
            }

            if (paths.Waiting is { } waiting)
            {
                w.WriteString("waiting", waiting);
            }

            Path("up", paths.Up);
            Path("down", paths.Down);
            w.WriteEndObject();

            void Path(string name, CusumPath? path)
            {
                if (path is null)
                {
                    return;
                }

                w.WriteStartObject(name);
                w.WriteNumber("oddsRatio", path.OddsRatio);
                w.WriteNumber("threshold", path.Threshold);
                w.WriteNumber("steps", path.Steps);
                w.WriteNumber("value", path.Value);
                w.WriteStartArray("points");
                foreach (var p in path.Points)
                {
                    // [index, value]: compact, the page draws against the outcome's position.
                    w.WriteStartArray();
                    w.WriteNumberValue(p.Index);
                    w.WriteNumberValue(p.Value);
                    w.WriteEndArray();
                }

                w.WriteEndArray();
                w.WriteStartArray("signals");
                foreach (var s in path.Signals)
                {
                    w.WriteStartObject();
                    w.WriteNumber("index", s.Index);
                    w.WriteString("time", s.Time);
                    w.WriteNumber("statistic", s.Statistic);
                    if (!double.IsNaN(s.Threshold))
                    {
                        w.WriteNumber("threshold", s.Threshold); // in force when it signalled
                    }

                    w.WriteEndObject();
                }

                w.WriteEndArray();
                w.WriteEndObject();
            }
        }

        context.Response.ContentType = "application/json; charset=utf-8";
        context.Response.Headers.CacheControl = "no-store";
        await context.Response.Body.WriteAsync(buffer.WrittenMemory, context.RequestAborted).ConfigureAwait(false);
    }

    private static void Strings(Utf8JsonWriter w, string name, IReadOnlyList<string> values)
    {
        w.WriteStartArray(name);
        foreach (var value in values)
        {
            w.WriteStringValue(value);
        }

        w.WriteEndArray();
    }

    /// <summary>A number, or nothing when it is not finite (as the report leaves out what cannot be estimated).</summary>
    private static void Number(Utf8JsonWriter w, string name, double value)
    {
        if (double.IsFinite(value))
        {
            w.WriteNumber(name, value);
        }
    }

    private static void Estimate(Utf8JsonWriter w, string name, double estimate, double se, double lower, double upper)
    {
        w.WriteStartObject(name);
        Number(w, "estimate", estimate);
        Number(w, "se", se);
        Number(w, "lower", lower);
        Number(w, "upper", upper);
        w.WriteEndObject();
    }
}
