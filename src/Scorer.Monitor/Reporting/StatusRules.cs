using System.Globalization;
using Scorer.Statistics;

namespace Scorer.Monitor.Reporting;

/// <summary>
/// Where a model version stands, in the four words used everywhere: the report's <c>status</c>, the
/// <c>scorer_monitor_status</c> gauge (the numeric value), the alerts, the webhook, the event streams, the log and the page.
/// </summary>
public enum MonitorStatus
{
    /// <summary>"fine": nothing the rules look at is amiss (or too little is known to say otherwise).</summary>
    Fine = 0,

    /// <summary>"watch": something moved (a chart signalled, a moderate shift, an interval away from 1), within the tolerances.</summary>
    Watch = 1,

    /// <summary>"recalibrate": calibration broke a rule beyond its tolerance while the ranking held.</summary>
    Recalibrate = 2,

    /// <summary>"refit-due": discrimination fell below its floor or the inputs moved a lot: recalibrating would not do.</summary>
    RefitDue = 3,
}

/// <summary>What to do about a status, for machines: one value per status.</summary>
public enum MonitorAction
{
    /// <summary>"none".</summary>
    None = 0,

    /// <summary>"watch": look again; nothing to change yet.</summary>
    Watch = 1,

    /// <summary>"recalibrate": request a recalibrated candidate and compare it in shadow.</summary>
    Recalibrate = 2,

    /// <summary>"refit": export the labelled rows and fit again.</summary>
    Refit = 3,
}

/// <summary>The status with its reasons (sentences a person reads) and what to do, as a value and as a sentence.</summary>
public sealed record StatusJudgement(MonitorStatus Status, IReadOnlyList<string> Reasons, string Advice)
{
    public string Name => StatusRules.Name(Status);

    public MonitorAction Action => StatusRules.ActionOf(Status);

    public string ActionName => StatusRules.Name(Action);
}

/// <summary>
/// The rules that turn a version's statistics into its status. Each rule that applies adds a sentence naming the
/// statistic, its value and the rule; thresholds come from <see cref="MonitorOptions"/> (docs/monitoring.md).
/// </summary>
public static class StatusRules
{
    /// <summary>Every status name, by its numeric code (the gauge's value).</summary>
    public static IReadOnlyList<string> Names { get; } = ["fine", "watch", "recalibrate", "refit-due"];

    public static string Name(MonitorStatus status) => Names[(int)status];

    public static string Name(MonitorAction action) => action switch
    {
        MonitorAction.None => "none",
        MonitorAction.Watch => "watch",
        MonitorAction.Recalibrate => "recalibrate",
        _ => "refit",
    };

    public static MonitorAction ActionOf(MonitorStatus status) => status switch
    {
        MonitorStatus.Fine => MonitorAction.None,
        MonitorStatus.Watch => MonitorAction.Watch,
        MonitorStatus.Recalibrate => MonitorAction.Recalibrate,
        _ => MonitorAction.Refit,
    };

    /// <summary>Judges a version from its judged window's calibration report, drift and charts.</summary>
    public static StatusJudgement Judge(string model, string window, CalibrationReport report, DriftView drift, ChartsView? charts, DateTimeOffset windowStart,
        MonitorOptions options)
    {
        var reasons = new List<string>();
        var calibrationBroken = false;
        var discriminationFell = false;
        var inputsMoved = false;
        var watch = false;
        var level = Pct(options.Level);

        var nonEvents = report.Labelled - report.Events;
        var judgeable = report.Events >= options.MinEvents && nonEvents >= options.MinEvents;
        if (!judgeable)
        {
            reasons.Add($"Too few outcomes to judge calibration and discrimination over {window}: {report.Events} events and {nonEvents} non-events; "
                + $"at least {options.MinEvents} of each are needed (Scorer:Monitor:MinEvents).");
        }
        else
        {
            if (report.Auc is { } auc)
            {
                var floor = options.AucFloorOf(model);
                if (auc.Upper < floor)
                {
                    discriminationFell = true;
                    reasons.Add($"AUC {F(auc.Estimate)} ({level} interval {F(auc.Lower)}–{F(auc.Upper)}) lies below the floor {F(floor)}: "
                        + "the model no longer separates events from non-events as it should.");
                }
            }

            if (report.CalibrationSlope is { } slope)
            {
                var (lo, hi) = (1 - options.SlopeTolerance, 1 + options.SlopeTolerance);
                if (slope.Upper < lo || slope.Lower > hi)
                {
                    calibrationBroken = true;
                    reasons.Add($"Calibration slope {F(slope.Estimate)} ({level} interval {F(slope.Lower)}–{F(slope.Upper)}) lies wholly outside {F(lo)}–{F(hi)}: "
                        + (slope.Estimate < 1 ? "predictions are too extreme." : "predictions are too timid."));
                }
                else if (slope.Upper < 1 || slope.Lower > 1)
                {
                    // Practical tolerance first, evidence second: an interval wholly inside the tolerance shows the
                    // departure is too small to matter, however many outcomes made it narrow.
                    var inside = slope.Lower > lo && slope.Upper < hi;
                    watch |= !inside;
                    reasons.Add(inside
                        ? $"Calibration slope {F(slope.Estimate)} ({level} interval {F(slope.Lower)}–{F(slope.Upper)}) excludes 1 but lies wholly within {F(lo)}–{F(hi)}: a departure within the tolerance."
                        : $"Calibration slope {F(slope.Estimate)} ({level} interval {F(slope.Lower)}–{F(slope.Upper)}) excludes 1 and reaches the tolerance ±{F(options.SlopeTolerance)}: it may lie outside it.");
                }
            }

            if (report.ObservedExpected is { } oe)
            {
                var (lo, hi) = (1 - options.ObservedExpectedTolerance, 1 + options.ObservedExpectedTolerance);
                if (oe.Upper < lo || oe.Lower > hi)
                {
                    calibrationBroken = true;
                    reasons.Add($"Observed/expected {F(oe.Estimate)} ({level} interval {F(oe.Lower)}–{F(oe.Upper)}) lies wholly outside {F(lo)}–{F(hi)}: "
                        + (oe.Estimate > 1 ? "events are more frequent than predicted." : "events are rarer than predicted."));
                }
                else if (oe.Upper < 1 || oe.Lower > 1)
                {
                    var inside = oe.Lower > lo && oe.Upper < hi;
                    watch |= !inside;
                    reasons.Add(inside
                        ? $"Observed/expected {F(oe.Estimate)} ({level} interval {F(oe.Lower)}–{F(oe.Upper)}) excludes 1 but lies wholly within {F(lo)}–{F(hi)}: a departure within the tolerance."
                        : $"Observed/expected {F(oe.Estimate)} ({level} interval {F(oe.Lower)}–{F(oe.Upper)}) excludes 1 and reaches the tolerance ±{F(options.ObservedExpectedTolerance)}: it may lie outside it.");
                }
            }
        }

        if (charts is not null)
        {
            foreach (var (chart, name, meaning) in new[] { (charts.Up, "upward", "events more frequent than predicted"), (charts.Down, "downward", "events rarer than predicted") })
            {
                var recent = chart?.Signals.Where(s => s.Time >= windowStart).ToList() ?? [];
                if (recent.Count > 0)
                {
                    watch = true;
                    var last = recent[^1];
                    // The oldest kept signal inside the window while older ones were dropped: the count is a lower bound.
                    var atLeast = chart!.SignalCount > chart.Signals.Count && recent.Count == chart.Signals.Count ? "at least " : "";
                    reasons.Add($"The {name} CUSUM (odds ratio {F(chart.OddsRatio)}) signalled {atLeast}{recent.Count} time{(recent.Count == 1 ? "" : "s")} over {window}, last at outcome "
                        + $"{last.Index} ({last.Time:yyyy-MM-dd HH:mm} UTC, statistic {F(last.Statistic)} ≥ threshold {F(double.IsNaN(last.Threshold) ? chart.Threshold : last.Threshold)}): {meaning}.");
                }
            }

            if (charts.Ewma.OutOfControl)
            {
                watch = true;
                reasons.Add($"The EWMA of observed minus expected is {F(charts.Ewma.Value)}, beyond its control limit ±{F(charts.Ewma.Limit)}.");
            }
        }

        if (drift.Rows >= options.MinPsiRows)
        {
            foreach (var (name, psi) in Psis(drift))
            {
                if (psi > options.PsiLarge)
                {
                    inputsMoved = true;
                    reasons.Add($"PSI of {name} is {F(psi)} over {window}, above {F(options.PsiLarge)}: a large shift from the training baseline (common practice).");
                }
                else if (psi > options.PsiModerate)
                {
                    watch = true;
                    reasons.Add($"PSI of {name} is {F(psi)} over {window}, above {F(options.PsiModerate)}: a moderate shift from the training baseline (common practice).");
                }
            }
        }

        MonitorStatus status;
        string advice;
        if (discriminationFell || inputsMoved)
        {
            status = MonitorStatus.RefitDue;
            advice = "Refit due: " + (discriminationFell ? "discrimination fell" : "the inputs moved away from the training data")
                + "; recalibrating would not restore the ranking. Export the labelled rows and fit again.";
        }
        else if (calibrationBroken)
        {
            status = MonitorStatus.Recalibrate;
            advice = report.Auc is { } auc
                ? $"Recalibration may suffice: discrimination holds (AUC {F(auc.Estimate)}) but calibration does not. Request a recalibrated candidate and compare it in shadow."
                : "Recalibration may suffice: calibration does not hold. Request a recalibrated candidate and compare it in shadow.";
        }
        else if (watch)
        {
            status = MonitorStatus.Watch;
            advice = "Watch: something moved, not yet beyond the rules' tolerances.";
        }
        else
        {
            status = MonitorStatus.Fine;
            advice = "No action.";
            if (judgeable)
            {
                reasons.Add($"Calibration and discrimination hold over {window} ({report.Labelled} labelled predictions, {report.Events} events).");
            }
        }

        return new StatusJudgement(status, reasons, advice);
    }

    private static IEnumerable<(string Name, double Psi)> Psis(DriftView drift)
    {
        if (drift.Score is { } s)
        {
            yield return ("the linear predictor", s);
        }

        foreach (var (name, psi) in drift.Features)
        {
            yield return ($"feature {name}", psi);
        }
    }

    private static string F(double x) => x.ToString("0.###", CultureInfo.InvariantCulture);

    private static string Pct(double level) => (level * 100).ToString("0.#", CultureInfo.InvariantCulture) + "%";
}
