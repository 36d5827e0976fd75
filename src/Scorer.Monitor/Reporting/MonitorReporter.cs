using System.Collections.Concurrent;
using Microsoft.Extensions.Logging;
using Scorer.ModelFile;
using Scorer.Statistics;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Monitor.Reporting;

/// <summary>A version's report over one window of prediction time, with the version's status.</summary>
public sealed record MonitorSnapshot(
    LoadedVersion Version,
    string Window,
    DateTimeOffset From,
    DateTimeOffset To,
    long Immature,
    bool Provisional,
    CalibrationReport Calibration,
    DriftView Drift,
    ChartsView? Charts,
    StatusJudgement Status,
    double Level,
    IReadOnlyList<ShadowComparisonView> Shadows,
    string Method = MonitorReporter.Exact,
    DateTimeOffset? SummarisedFrom = null);

/// <summary>
/// Builds reports: the window's labelled predictions from the <see cref="LabelledCache"/> (kept up to date from the
/// store's change feed) for the calibration and discrimination statistics, computed exactly over the window's rows and
/// reused while those rows and their outcomes stay the same, the per-minute prediction counts for what is still immature, the per-hour drift counts
/// for the PSI, and the charts from the <see cref="ChartRunner"/>. The status is judged over
/// <see cref="MonitorOptions.JudgedWindow"/>; a change of status is logged.
/// </summary>
public sealed class MonitorReporter(ModelRegistry registry, IPredictionLogStore predictionLog, IDriftCountStore driftCounts, ILabelledStore labelledStore, LabelledCache labelled,
    SummaryReader summaries, ChartRunner charts, MonitorOptions options, TimeProvider time, ILogger<MonitorReporter> logger)
{
    /// <summary>The report's method when computed over the window's rows.</summary>
    public const string Exact = "exact";

    /// <summary>The report's method when merged from the stored summaries.</summary>
    public const string Summarised = "summarised";

    private readonly Dictionary<(string, string), MonitorStatus> _lastStatus = [];
    private readonly ConcurrentDictionary<(string Model, string Version, string Window), ((long, int, ulong) Fingerprint, CalibrationReport Report)> _computed = new();
    private readonly Lock _lock = new();

    /// <summary>Raised when a version's status changes: model, version, the new judgement.</summary>
    public event Action<string, string, StatusJudgement>? StatusChanged;

    public MonitorOptions Options => options;

    /// <summary>The report of a version over a window (a name of <see cref="MonitorOptions.Windows"/>).</summary>
    public async Task<MonitorSnapshot> ReportAsync(LoadedVersion version, string window, CancellationToken cancellationToken = default)
    {
        var now = time.GetUtcNow();
        var part = await WindowAsync(version, window, now, cancellationToken).ConfigureAwait(false);
        var judged = window == options.JudgedWindow ? part : await WindowAsync(version, options.JudgedWindow, now, cancellationToken).ConfigureAwait(false);
        var chartView = charts.View(version.Model, version.Version);
        var status = StatusRules.Judge(version.Model, options.JudgedWindow, judged.Calibration, judged.Drift, chartView, judged.From, options);
        Remember(version, status);
        var shadows = new List<ShadowComparisonView>();
        if (version.Stage == Stage.Live && registry.Current.Find(version.Model) is { } entry)
        {
            foreach (var shadow in entry.Versions.Where(v => v.Version != version.Version && v.Stage == Stage.Shadow))
            {
                // One more than the bound: whether the window held more pairs than the comparison uses.
                var pairs = await labelledStore.GetPairedAsync(version.Model, version.Version, shadow.Version, part.From, part.To, options.ShadowPairs + 1,
                    cancellationToken).ConfigureAwait(false);
                var capped = pairs.Count > options.ShadowPairs;
                shadows.Add(ShadowComparisonView.Compare(shadow.Version, capped ? pairs.Skip(1).ToList() : pairs, options.Level, options.MinEvents, capped));
            }
        }

        return new MonitorSnapshot(version, window, part.From, part.To, part.Immature, part.Provisional, part.Calibration, part.Drift, chartView, status,
            options.Level, shadows, part.Method, part.SummarisedFrom);
    }

    /// <summary>The status alone (judged window), e.g. for metrics and the overview.</summary>
    public async Task<StatusJudgement> JudgeAsync(LoadedVersion version, CancellationToken cancellationToken = default)
    {
        var judged = await WindowAsync(version, options.JudgedWindow, time.GetUtcNow(), cancellationToken).ConfigureAwait(false);
        var status = StatusRules.Judge(version.Model, options.JudgedWindow, judged.Calibration, judged.Drift, charts.View(version.Model, version.Version),
            judged.From, options);
        Remember(version, status);
        return status;
    }

    private void Remember(LoadedVersion version, StatusJudgement status)
    {
        bool changed;
        lock (_lock)
        {
            changed = !_lastStatus.TryGetValue((version.Model, version.Version), out var last) || last != status.Status;
            _lastStatus[(version.Model, version.Version)] = status.Status;
        }

        if (changed)
        {
            MonitorReporterEvents.StatusChanged(logger, version.Model, version.Version, status.Name, status.ActionName, string.Join(" ", status.Reasons));
            StatusChanged?.Invoke(version.Model, version.Version, status);
        }
    }

    /// <summary>Forgets the memo of versions no longer reported on (retired or unloaded).</summary>
    public void Retain(Func<string, string, bool> keep)
    {
        foreach (var key in _computed.Keys)
        {
            if (!keep(key.Model, key.Version))
            {
                _computed.TryRemove(key, out _);
            }
        }

        summaries.Retain(keep);
        lock (_lock)
        {
            foreach (var key in _lastStatus.Keys.Where(k => !keep(k.Item1, k.Item2)).ToList())
            {
                _lastStatus.Remove(key);
            }
        }
    }

    private sealed record WindowPart(DateTimeOffset From, DateTimeOffset To, long Immature, bool Provisional, CalibrationReport Calibration, DriftView Drift,
        string Method, DateTimeOffset? SummarisedFrom);

    private async Task<WindowPart> WindowAsync(LoadedVersion version, string window, DateTimeOffset now, CancellationToken cancellationToken)
    {
        var span = options.Windows.TryGetValue(window, out var s) ? s : throw new ArgumentException($"'{window}' is not a window", nameof(window));
        var from = span is { } length ? now - length : DateTimeOffset.UnixEpoch;
        var to = now.AddMinutes(1); // the minute being scored belongs to the window
        CalibrationReport? calibration = null;
        var method = Exact;
        DateTimeOffset? summarisedFrom = null;
        using (var rows = await labelled.WindowAsync(version.Model, version.Version, from, to, cancellationToken).ConfigureAwait(false))
        {
            // A window the row cache holds whole is computed over its rows; the same rows with the same outcomes as
            // last time give the same statistics, so they are reused.
            var key = (version.Model, version.Version, window);
            if (!rows.Complete)
            {
                _computed.TryRemove(key, out _);
            }
            else if (_computed.TryGetValue(key, out var last) && last.Fingerprint == rows.Fingerprint)
            {
                calibration = last.Report;
            }
            else
            {
                calibration = CalibrationStatistics.ComputeSorted(rows.Probability, rows.Outcome, options.Level);
                _computed[key] = (rows.Fingerprint, calibration);
            }
        }

        if (calibration is null)
        {
            var summarised = await summaries.WindowAsync(version.Model, version.Version, from, to, options.Level, cancellationToken).ConfigureAwait(false);
            calibration = summarised.Report;
            method = Summarised;
            summarisedFrom = summarised.From;
        }

        var predictions = await predictionLog.CountPredictionsByMinuteAsync(version.Model, version.Version, from, to, cancellationToken).ConfigureAwait(false);
        var immature = Math.Max(0, predictions - calibration.Labelled);
        var horizon = version.Document.Outcome.HorizonSpan;
        // A window stays provisional while any of its predictions may still get an outcome: some have none yet, or (with
        // implicit negatives) some are younger than the horizon.
        var provisional = immature > 0 || (version.Document.Outcome.Negatives == NegativesPolicy.Implicit && now - horizon < to);
        var counts = await driftCounts.GetDriftCountsAsync(version.Model, version.Version, from, to, cancellationToken).ConfigureAwait(false);
        return new WindowPart(from, to, immature, provisional, calibration, DriftTracker.Psi(version, counts), method, summarisedFrom);
    }
}

/// <summary>The log events of this file, with their event ids (docs/operations.md lists them).</summary>
internal static partial class MonitorReporterEvents
{
    [LoggerMessage(EventId = 3401, Level = LogLevel.Information, Message = "Status of {Model} {Version} is now {Status} (action {Action}): {Reasons}")]
    public static partial void StatusChanged(ILogger logger, string model, string version, string status, string action, string reasons);
}
