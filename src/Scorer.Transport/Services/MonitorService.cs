using Google.Protobuf.WellKnownTypes;
using Grpc.Core;
using Scorer.Statistics.Recalibration;
using Scorer.Monitor.Reporting;
using Scorer.Statistics;
using Scorer.Registry;
using Scorer.Transport.V1;

namespace Scorer.Transport.Services;

/// <summary>The monitor's reports over gRPC (and REST through transcoding).</summary>
public sealed class MonitorService(ModelRegistry registry, MonitorReporter reporter, MonitorWatch watch, Scorer.Store.IScorerStore store, RegistryOptions folder,
    TimeProvider time, EventSubscribers subscribers) : V1.Monitor.MonitorBase
{
    public override async Task<RecalibrateResponse> Recalibrate(RecalibrateRequest request, ServerCallContext context)
    {
        var (version, window) = Resolve(registry, reporter.Options, new MonitorRequest
        {
            Model = request.Model,
            Version = request.Version,
            Window = string.IsNullOrEmpty(request.Window) ? reporter.Options.JudgedWindow : request.Window,
        });
        if (string.IsNullOrEmpty(request.Version))
        {
            throw Errors.Invalid("version", "name the version to recalibrate");
        }

        RecalibrationKind? kind = request.Kind switch
        {
            "" or "auto" => null,
            "in-the-large" => RecalibrationKind.InTheLarge,
            "intercept-and-slope" => RecalibrationKind.InterceptAndSlope,
            _ => throw Errors.Invalid("kind", $"'{request.Kind}' is not a kind; use auto, in-the-large or intercept-and-slope"),
        };
        var now = time.GetUtcNow();
        var newVersion = string.IsNullOrEmpty(request.NewVersion) ? $"{version.Version}-recal-{now:yyyyMMddHHmmss}" : request.NewVersion;
        if (registry.Current.Find(version.Model)?.Find(newVersion) is not null)
        {
            throw Errors.Invalid("newVersion", $"model '{version.Model}' already has a version '{newVersion}'");
        }

        var span = reporter.Options.Windows[window];
        var labelled = await store.GetLabelledAsync(version.Model, version.Version, span is { } w ? now - w : DateTimeOffset.UnixEpoch, now.AddMinutes(1),
            context.CancellationToken).ConfigureAwait(false);
        var eta = labelled.Select(l => l.Eta).ToArray();
        var y = labelled.Select(l => l.Outcome).ToArray();
        var events = y.Count(v => v == 1);
        var needed = Math.Max(1, reporter.Options.MinEvents);
        if (events < needed || y.Length - events < needed)
        {
            // Nothing is written: a candidate fitted on a handful of outcomes would only carry their noise.
            throw Errors.Precondition("window", $"the window {window} holds {y.Length} labelled predictions of {version.Model} {version.Version} "
                + $"({events} events, {y.Length - events} non-events); a recalibration needs at least {needed} of each (Scorer:Monitor:MinEvents): "
                + "wait for more outcomes or choose a longer window");
        }

        RecalibrationFit? fit;
        string reason;
        try
        {
            if (kind is { } k)
            {
                fit = Recalibrator.Fit(eta, y, version.Document.Link, k);
                reason = $"{Recalibrator.KindName(k)} asked for; fitted on {y.Length} labelled predictions over {window}.";
            }
            else
            {
                var choice = Recalibrator.Choose(eta, y, version.Document.Link);
                fit = choice.RecommendedFit;
                reason = choice.Reason;
            }
        }
        catch (ArgumentException ex)
        {
            throw Errors.Precondition("version", ex.Message);
        }

        var response = new RecalibrateResponse { Reason = reason, Rows = y.Length, Events = events, NewVersion = newVersion };
        if (fit is null)
        {
            return response;
        }

        ModelFile.ModelDocument document;
        try
        {
            document = Recalibrator.Apply(version.Document, fit, newVersion);
        }
        catch (ArgumentException ex)
        {
            throw Errors.Precondition("version", ex.Message);
        }

        var file = Path.Combine(folder.ModelsPath, $"{version.Model}-{newVersion}.json");
        if (File.Exists(file))
        {
            throw Errors.Invalid("newVersion", $"the file {Path.GetFileName(file)} exists already");
        }

        await using (var stream = new FileStream(file, FileMode.CreateNew))
        {
            ModelFile.ModelFileWriter.Write(document, stream);
        }

        await registry.ReloadAsync(context.CancellationToken).ConfigureAwait(false);
        response.Written = true;
        response.File = Path.GetFileName(file);
        response.Kind = Recalibrator.KindName(fit.Kind);
        var z = Scorer.Engine.Numerics.Quantiles.TwoSidedZ(reporter.Options.Level);
        response.Intercept = Wald(fit.Intercept, fit.InterceptSe, z);
        response.Slope = Wald(fit.Slope, fit.SlopeSe, z);
        return response;
    }

    public override async Task WatchReports(MonitorRequest request, IServerStreamWriter<MonitorEvent> responseStream, ServerCallContext context)
    {
        var (version, window) = Resolve(registry, reporter.Options, request);
        using var lease = subscribers.Enter();
        await foreach (var e in watch.WatchAsync(version, window, context.CancellationToken).ConfigureAwait(false))
        {
            await responseStream.WriteAsync(e, context.CancellationToken).ConfigureAwait(false);
        }
    }

    public override async Task<MonitorReport> GetReport(MonitorRequest request, ServerCallContext context)
    {
        var (version, window) = Resolve(registry, reporter.Options, request);
        var snapshot = await reporter.ReportAsync(version, window, context.CancellationToken).ConfigureAwait(false);
        return ToMessage(snapshot);
    }

    /// <summary>The version and window a request names, or the error naming the field.</summary>
    public static (LoadedVersion Version, string Window) Resolve(ModelRegistry registry, MonitorOptions options, MonitorRequest request)
    {
        if (string.IsNullOrEmpty(request.Model))
        {
            throw Errors.Invalid("model", "name the model");
        }

        var entry = registry.Current.Find(request.Model) ?? throw Errors.NotFound("model", $"no model '{request.Model}' is loaded");
        LoadedVersion version;
        if (string.IsNullOrEmpty(request.Version))
        {
            version = entry.Live ?? throw Errors.Precondition("version", $"model '{request.Model}' has no live version; name a version");
        }
        else
        {
            version = entry.Find(request.Version) ?? throw Errors.NotFound("version",
                $"model '{request.Model}' has no version '{request.Version}' (loaded: {string.Join(", ", entry.Versions.Select(v => v.Version))})");
        }

        var window = string.IsNullOrEmpty(request.Window) ? options.DefaultWindow : request.Window;
        if (!options.Windows.ContainsKey(window))
        {
            throw Errors.Invalid("window", $"'{window}' is not a window; use one of {string.Join(", ", options.Windows.Keys)}");
        }

        return (version, window);
    }

    /// <summary>The report as the proto message (shared with the streams and the page).</summary>
    public static MonitorReport ToMessage(MonitorSnapshot s)
    {
        var c = s.Calibration;
        var report = new MonitorReport
        {
            Model = s.Version.Model,
            Version = s.Version.Version,
            Stage = ModelsService.StageName(s.Version.Stage),
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
        };
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
                Grouping = "deciles of predicted probability (R quantile type 7, tied breaks merged); df = groups, for data the model was not fit on",
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
        Signals = { v.Signals.Select(x => new CusumSignal { Index = x.Index, Time = Timestamp.FromDateTimeOffset(x.Time), Statistic = x.Statistic }) },
    };
}
