using Microsoft.AspNetCore.Authorization;
using Google.Protobuf.WellKnownTypes;
using Grpc.Core;
using Scorer.Statistics.Recalibration;
using Scorer.Monitor.Reporting;
using Scorer.Statistics;
using Scorer.Application;
using Scorer.Application.Models;
using Scorer.Application.Monitoring;
using Scorer.Transport.V1;

namespace Scorer.Transport.Services;

/// <summary>The monitor's reports over gRPC (and REST through transcoding).</summary>
[Authorize(Policy = Roles.Score)]
public sealed class MonitorService(MonitorReporter reporter, MonitorWatch watch, ModelCatalog catalog, Recalibration recalibration, EventSubscribers subscribers) : V1.Monitor.MonitorBase
{
    [Authorize(Policy = Roles.Admin)]
    public override async Task<RecalibrateResponse> Recalibrate(RecalibrateRequest request, ServerCallContext context)
    {
        var result = await recalibration.RunAsync(request.Model, request.Version, request.Window, request.Kind, request.NewVersion, context.CancellationToken)
            .ConfigureAwait(false);
        var response = new RecalibrateResponse { Reason = result.Outcome.Reason, Rows = result.Rows, Events = result.Events, NewVersion = result.NewVersion };
        if (result is not { File: { } file, Outcome.Fit: { } fit })
        {
            return response;
        }

        response.Written = true;
        response.File = file;
        response.Kind = Recalibrator.KindName(fit.Kind);
        var z = Scorer.Engine.Numerics.Quantiles.TwoSidedZ(reporter.Options.Level);
        response.Intercept = Wald(fit.Intercept, fit.InterceptSe, z);
        response.Slope = Wald(fit.Slope, fit.SlopeSe, z);
        return response;
    }

    public override async Task WatchReports(MonitorRequest request, IServerStreamWriter<MonitorEvent> responseStream, ServerCallContext context)
    {
        var (version, window) = catalog.Monitored(request.Model, request.Version, request.Window);
        using var lease = subscribers.Enter();
        await foreach (var e in watch.WatchAsync(version, window, context.CancellationToken).ConfigureAwait(false))
        {
            await responseStream.WriteAsync(e, context.CancellationToken).ConfigureAwait(false);
        }
    }

    public override async Task<MonitorReport> GetReport(MonitorRequest request, ServerCallContext context)
    {
        var (version, window) = catalog.Monitored(request.Model, request.Version, request.Window);
        var snapshot = await reporter.ReportAsync(version, window, context.CancellationToken).ConfigureAwait(false);
        return ToMessage(snapshot);
    }

    /// <summary>The report as the proto message (shared with the streams and the page).</summary>
    public static MonitorReport ToMessage(MonitorSnapshot s)
    {
        var c = s.Calibration;
        var report = new MonitorReport
        {
            Model = s.Version.Model,
            Version = s.Version.Version,
            Stage = Scorer.Application.Models.ModelCatalog.StageName(s.Version.Stage),
            Window = s.Window,
            From = Timestamp.FromDateTimeOffset(s.From),
            To = Timestamp.FromDateTimeOffset(s.To),
            Labelled = c.Labelled,
            Events = c.Events,
            Expected = c.Expected,
            Immature = s.Immature,
            Provisional = s.Provisional,
            Status = s.Status.Name,
            Action = s.Status.ActionName,
            Reasons = { s.Status.Reasons },
            Advice = s.Status.Advice,
            Level = s.Level,
            Method = s.Method,
        };
        if (s.SummarisedFrom is { } summarisedFrom)
        {
            report.SummarisedFrom = Timestamp.FromDateTimeOffset(summarisedFrom);
        }

        if (c.Labelled > 0)
        {
            report.Brier = c.Brier;
            report.LogLoss = c.LogLoss;
            report.Ece = c.Ece;
            report.Murphy = new Murphy
            {
                Reliability = c.Murphy.Reliability,
                Resolution = c.Murphy.Resolution,
                Uncertainty = c.Murphy.Uncertainty,
                WithinBin = c.Murphy.WithinBin,
            };
        }

        if (c.Auc is { } auc)
        {
            report.Auc = new Estimate { Estimate_ = auc.Estimate, Se = auc.Se, Lower = auc.Lower, Upper = auc.Upper };
        }

        if (c.ObservedExpected is { } oe)
        {
            report.ObservedExpected = new Estimate { Estimate_ = oe.Estimate, Lower = oe.Lower, Upper = oe.Upper };
        }

        if (c.CalibrationIntercept is { } a)
        {
            report.CalibrationIntercept = Fitted(a);
        }

        if (c.CalibrationSlope is { } b)
        {
            report.CalibrationSlope = Fitted(b);
        }

        if (c.Spiegelhalter is { } z)
        {
            report.Spiegelhalter = new V1.Spiegelhalter { Z = z.Z, P = z.P };
        }

        if (c.HosmerLemeshow is { } hl)
        {
            report.HosmerLemeshow = new V1.HosmerLemeshow
            {
                Statistic = hl.Statistic,
                Df = hl.Df,
                P = hl.P,
                Grouping = s.Method == Scorer.Monitor.Reporting.MonitorReporter.Summarised
                    ? "deciles of predicted probability in whole bins of logit(p) of width 1/128 (a decile's boundary moves to the nearer edge of its bin; docs/monitoring.md, Summaries); df = groups, for data the model was not fit on"
                    : "deciles of predicted probability (R quantile type 7, tied breaks merged); df = groups, for data the model was not fit on",
                Groups =
                {
                    hl.Groups.Select(g => new V1.RiskGroup
                    {
                        Count = g.Count, Observed = g.Observed, Expected = g.Expected, MinPredicted = g.MinPredicted, MaxPredicted = g.MaxPredicted,
                    }),
                },
            };
        }

        report.Reliability.AddRange(c.Reliability.Select(r => new V1.ReliabilityBin
        {
            Lower = r.Lower,
            Upper = r.Upper,
            Count = r.Count,
            Events = r.Events,
            MeanPredicted = r.MeanPredicted,
            ObservedRate = r.ObservedRate,
            ObservedLower = r.WilsonLower,
            ObservedUpper = r.WilsonUpper,
        }));

        report.Psi = new V1.Psi { Rows = s.Drift.Rows };
        if (s.Drift.Score is { } psi)
        {
            report.Psi.LinearPredictor = psi;
        }

        foreach (var (name, value) in s.Drift.Features)
        {
            report.Psi.Features[name] = value;
        }

        if (s.Charts is { } charts)
        {
            report.Cusum = new V1.Cusum();
            if (charts.Up is { } up)
            {
                report.Cusum.Up = Chart(up);
            }

            if (charts.Down is { } down)
            {
                report.Cusum.Down = Chart(down);
            }

            report.Ewma = new V1.Ewma { Value = charts.Ewma.Value, Limit = charts.Ewma.Limit, Lambda = charts.Ewma.Lambda, OutOfControl = charts.Ewma.OutOfControl };
        }

        foreach (var shadow in s.Shadows)
        {
            var comparison = new V1.ShadowComparison
            {
                Version = shadow.Version,
                Paired = shadow.Paired,
                Capped = shadow.Capped,
                Recommendation = shadow.Recommendation,
                Reason = shadow.Reason,
            };
            if (shadow.LogLoss is { } ll)
            {
                comparison.LogLoss = Difference(ll);
            }

            if (shadow.Brier is { } brier)
            {
                comparison.Brier = Difference(brier);
            }

            if (shadow.Auc is { } pairedAuc)
            {
                comparison.Auc = new PairedDifference { Live = pairedAuc.AucB, Shadow = pairedAuc.AucA, Difference = pairedAuc.Difference, Lower = pairedAuc.Lower, Upper = pairedAuc.Upper, P = pairedAuc.P };
            }

            report.Shadows.Add(comparison);
        }

        return report;
    }

    private static PairedDifference Difference(PairedLossComparison c) =>
        new() { Live = c.MeanA, Shadow = c.MeanB, Difference = c.Difference, Lower = c.Lower, Upper = c.Upper, P = c.P };

    private static CusumSignal Signal(ChartSignal x)
    {
        var signal = new CusumSignal { Index = x.Index, Time = Timestamp.FromDateTimeOffset(x.Time), Statistic = x.Statistic };
        if (!double.IsNaN(x.Threshold))
        {
            signal.Threshold = x.Threshold;
        }

        return signal;
    }

    private static Estimate Wald(double estimate, double se, double z) =>
        new() { Estimate_ = estimate, Se = se, Lower = estimate - (z * se), Upper = estimate + (z * se) };

    private static Estimate Fitted(FittedValue f) => new() { Estimate_ = f.Estimate, Se = f.Se, Lower = f.Lower, Upper = f.Upper };

    private static CusumChart Chart(CusumView v) => new()
    {
        OddsRatio = v.OddsRatio,
        Value = v.Value,
        Threshold = v.Threshold,
        InControlRunLength = v.InControlRunLength,
        DetectionDelay = v.DetectionDelay,
        Steps = v.Steps,
        Signals = { v.Signals.Select(Signal) },
        SignalCount = v.SignalCount,
    };
}
