using System.Collections.Immutable;
using System.Globalization;
using System.Text.Json;
using System.Text.RegularExpressions;
using Scorer.ModelFile;

namespace Scorer.Statistics.Recalibration;

public static partial class Recalibrator
{
    private const int MaxDescription = 4000;

    /// <summary>The fit section may nest at most this deep inside the file (whose top level counts 1, `fit` 2).</summary>
    private const int MaxNesting = 16;

    /// <summary>
    /// The recalibrated model: a new document with the same model name, features, terms, outcome, threshold, extension
    /// fields and baseline, a new version, and coefficients β_new = b·β_old for every term, the intercept term then
    /// + a, so that the new linear predictor is η_new = a + b·η_old for every row. An offset term (coefficient 1 with
    /// zero variance) is scaled like every other term, to b. A <c>sampling</c> prior correction is folded into the
    /// intercept and left out (η_old already included it and the outcomes are the population's). The covariance, when
    /// the model has one, is propagated by the delta method with (a, b) independent of β̂_old:
    /// V_new = b²·V_old + J·Σ_ab·Jᵀ, J = [e₀, β_old] (e₀ the intercept's unit vector, β_old prior-corrected). The
    /// baseline's linear-predictor bins are mapped by η ↦ a + b·η (their proportions unchanged); its <c>max_se</c> is
    /// left out, because the training rows' largest se(η_new) cannot be had from the file. The description says what
    /// was done, and the <c>fit</c> section holds the recalibration's statistics (with the original fit as
    /// <c>original_fit</c>). The result is checked by every rule of the model file.
    /// </summary>
    /// <exception cref="ArgumentException">
    /// The model has no intercept term; the fit used another link; the fit's numbers are not finite; the new version is
    /// empty, not a valid version string, or the model's own version.
    /// </exception>
    /// <exception cref="ModelFileException">The result breaks a rule of the model file (for example, an invalid input document).</exception>
    public static ModelDocument Apply(ModelDocument model, RecalibrationFit fit, string newVersion)
    {
        ArgumentNullException.ThrowIfNull(model);
        ArgumentNullException.ThrowIfNull(fit);
        ArgumentNullException.ThrowIfNull(newVersion);
        var intercept = -1;
        for (var t = 0; t < model.Terms.Length; t++)
        {
            if (model.Terms[t].IsIntercept)
            {
                intercept = t;
                break;
            }
        }

        if (intercept < 0)
        {
            throw new ArgumentException(
                $"model '{model.Model}' version '{model.Version}' has no intercept term (a term with no factors): recalibration " +
                "adds a to the intercept, and the model file cannot gain one without changing the design; refit the model with an intercept",
                nameof(model));
        }

        if (fit.Link != model.Link)
        {
            throw new ArgumentException(
                $"the fit used the {ModelFileWriter.LinkName(fit.Link)} link but model '{model.Model}' uses {ModelFileWriter.LinkName(model.Link)}; " +
                "fit with the model's own link", nameof(fit));
        }

        if (!Enum.IsDefined(fit.Kind))
        {
            throw new ArgumentException($"fit.Kind = {fit.Kind} is not a recalibration kind", nameof(fit));
        }

        var (a, b) = (fit.Intercept, fit.Kind == RecalibrationKind.InTheLarge ? 1.0 : fit.Slope);
        if (!double.IsFinite(a) || !double.IsFinite(b) || !double.IsFinite(fit.InterceptSe) || !double.IsFinite(fit.SlopeSe) || !double.IsFinite(fit.Covariance))
        {
            throw new ArgumentException("the fit's intercept, slope, standard errors and covariance must all be finite", nameof(fit));
        }

        CheckVersion(model, newVersion);

        // β_old as scored: the intercept prior-corrected when the file has a sampling section.
        var correction = model.Sampling is { } s ? PriorCorrection(s) : 0.0;
        var k = model.Terms.Length;
        var beta = new double[k];
        for (var t = 0; t < k; t++)
        {
            beta[t] = model.Terms[t].Coefficient;
        }

        beta[intercept] += correction;

        var terms = ImmutableArray.CreateBuilder<TermSpec>(k);
        for (var t = 0; t < k; t++)
        {
            var coefficient = t == intercept ? a + b * beta[t] : b * beta[t];
            terms.Add(model.Terms[t] with { Coefficient = coefficient });
        }

        var notes = new List<string>();
        if (correction != 0.0)
        {
            notes.Add(string.Create(CultureInfo.InvariantCulture,
                $"the sampling prior correction ({correction:R}) of the original is folded into the intercept; the sampling section is left out"));
        }

        ImmutableArray<ImmutableArray<double>>? covariance = null;
        if (model.Covariance is { } v)
        {
            covariance = Propagate(v, beta, intercept, b, fit);
        }
        else
        {
            notes.Add("the original has no covariance, so neither has the recalibrated model");
        }

        var baseline = model.Baseline;
        if (baseline is not null)
        {
            var mapped = MapBins(baseline.LinearPredictor, a, b);
            if (baseline.LinearPredictor is not null)
            {
                notes.Add(mapped is null
                    ? "baseline.linear_predictor is left out: the slope maps its edges onto fewer than two distinct values"
                    : "baseline.linear_predictor edges are mapped by a + b*eta, the proportions kept");
            }

            if (baseline.MaxSe is not null)
            {
                notes.Add("baseline.max_se is left out: the largest se of the new linear predictor over the training rows cannot be had from the file");
            }

            baseline = baseline with { LinearPredictor = mapped, MaxSe = null };
        }

        var result = model with
        {
            Version = newVersion,
            Description = Describe(model, fit, a, b),
            Terms = terms.MoveToImmutable(),
            Covariance = covariance,
            Sampling = null,
            Baseline = baseline,
            Fit = FitSection(model, fit, a, b, notes),
        };
        ModelFileReader.EnsureValid(result);
        return result;
    }

    /// <summary>β₀* = β₀ − ln[((1 − τ)/τ)·(ȳ/(1 − ȳ))], as the engine applies it (King &amp; Zeng 2001; docs/model-file.md).</summary>
    private static double PriorCorrection(SamplingSpec s)
    {
        var tau = s.PopulationEventRate;
        var ybar = s.TrainingEventRate;
        return -Math.Log((1 - tau) / tau * (ybar / (1 - ybar)));
    }

    private static void CheckVersion(ModelDocument model, string newVersion)
    {
        if (newVersion.Length == 0)
        {
            throw new ArgumentException("the new version is empty; give the recalibrated model a version of its own", nameof(newVersion));
        }

        if (string.Equals(newVersion, model.Version, StringComparison.Ordinal))
        {
            throw new ArgumentException(
                $"the new version '{newVersion}' is the original's own; the recalibrated model needs a version of its own", nameof(newVersion));
        }

        if (newVersion.Length > 64 || !VersionPattern().IsMatch(newVersion))
        {
            throw new ArgumentException(
                $"'{newVersion}' is not a version: 1 to 64 characters, a letter or digit first, then letters, digits, '.', '_', '+' or '-'",
                nameof(newVersion));
        }
    }

    /// <summary>V_new[i][j] = b²·V[i][j] + Σaa·e_i·e_j + Σab·(e_i·β_j + β_i·e_j) + Σbb·β_i·β_j, exactly symmetric.</summary>
    private static ImmutableArray<ImmutableArray<double>> Propagate(
        ImmutableArray<ImmutableArray<double>> v, double[] beta, int intercept, double b, RecalibrationFit fit)
    {
        var k = beta.Length;
        double saa = fit.InterceptSe * fit.InterceptSe, sab = 0.0, sbb = 0.0;
        if (fit.Kind == RecalibrationKind.InterceptAndSlope)
        {
            sab = fit.Covariance;
            sbb = fit.SlopeSe * fit.SlopeSe;
        }

        var rows = new double[k][];
        for (var i = 0; i < k; i++)
        {
            rows[i] = new double[k];
        }

        var b2 = b * b;
        for (var i = 0; i < k; i++)
        {
            var ei = i == intercept ? 1.0 : 0.0;
            for (var j = 0; j <= i; j++)
            {
                var ej = j == intercept ? 1.0 : 0.0;
                var value = b2 * v[i][j] + saa * ei * ej + sab * (ei * beta[j] + beta[i] * ej) + sbb * beta[i] * beta[j];
                rows[i][j] = value;
                rows[j][i] = value;
            }
        }

        return [.. rows.Select(r => ImmutableArray.Create(r))];
    }

    /// <summary>Bins of η_old mapped to η_new = a + b·η_old: edges a + b·e (reversed with the proportions when b &lt; 0).</summary>
    private static BinnedBaseline? MapBins(BinnedBaseline? bins, double a, double b)
    {
        if (bins is null)
        {
            return null;
        }

        var edges = bins.Edges.Select(e => a + b * e).ToList();
        var proportions = bins.Proportions.ToList();
        if (b < 0)
        {
            edges.Reverse();
            proportions.Reverse();
        }

        for (var i = 1; i < edges.Count; i++)
        {
            if (!(edges[i] > edges[i - 1]))
            {
                return null;
            }
        }

        return new BinnedBaseline([.. edges], [.. proportions]);
    }

    private static string KindText(RecalibrationKind kind) =>
        kind == RecalibrationKind.InTheLarge ? "recalibration in the large (slope fixed at 1)" : "logistic recalibration of intercept and slope";

    /// <summary>The kind as the CLI and the fit section name it.</summary>
    public static string KindName(RecalibrationKind kind) => kind switch
    {
        RecalibrationKind.InTheLarge => "in-the-large",
        RecalibrationKind.InterceptAndSlope => "intercept-and-slope",
        _ => throw new ArgumentOutOfRangeException(nameof(kind), kind, "Unexpected recalibration kind"),
    };

    private static string Describe(ModelDocument model, RecalibrationFit fit, double a, double b)
    {
        var slope = fit.Kind == RecalibrationKind.InTheLarge
            ? "b = 1."
            : string.Create(CultureInfo.InvariantCulture, $"b = {b:R} (se {fit.SlopeSe:R}).");
        var note = string.Create(CultureInfo.InvariantCulture,
            $"Recalibrated from version {model.Version} by {KindText(fit.Kind)} on {fit.Rows} outcomes ({fit.Events} events), " +
            $"{ModelFileWriter.LinkName(model.Link)} link: eta = a + b*eta_old with a = {a:R} (se {fit.InterceptSe:R}), {slope}");
        if (model.Description is not { Length: > 0 } original)
        {
            return note.Length <= MaxDescription ? note : note[..MaxDescription];
        }

        const string Separator = " | ";
        var room = MaxDescription - note.Length - Separator.Length;
        if (room <= 1)
        {
            return note.Length <= MaxDescription ? note : note[..MaxDescription];
        }

        if (original.Length > room)
        {
            original = original[..(room - 1)] + "…";
        }

        return original + Separator + note;
    }

    private static JsonElement FitSection(ModelDocument model, RecalibrationFit fit, double a, double b, List<string> notes)
    {
        using var ms = new MemoryStream();
        using (var w = new Utf8JsonWriter(ms))
        {
            w.WriteStartObject();
            w.WriteString("method", "recalibration");
            w.WriteString("kind", KindName(fit.Kind));
            w.WriteString("link", ModelFileWriter.LinkName(fit.Link));
            w.WriteString("recalibrated_from", model.Version);
            w.WriteString("reference", "Steyerberg et al. 2004, Stat Med 23:2567; Vergouwe et al. 2017, Stat Med 36:4529");
            w.WriteNumber("n", fit.Rows);
            w.WriteNumber("events", fit.Events);
            w.WriteNumber("intercept", a);
            w.WriteNumber("intercept_se", fit.InterceptSe);
            w.WriteNumber("slope", b);
            w.WriteNumber("slope_se", fit.SlopeSe);
            w.WriteNumber("intercept_slope_covariance", fit.Covariance);
            w.WriteNumber("iterations", fit.Iterations);
            w.WriteBoolean("converged", true);
            w.WriteNumber("log_likelihood", fit.LogLikelihood);
            w.WriteNumber("deviance", -2.0 * fit.LogLikelihood);
            w.WriteNumber("null_log_likelihood", fit.NullLogLikelihood);
            w.WriteNumber("null_deviance", -2.0 * fit.NullLogLikelihood);
            if (model.Fit is { } original)
            {
                // The original fit nests one level deeper (top level 1, fit 2, original_fit 3): keep it when it fits.
                if (Depth(original) + 2 <= MaxNesting)
                {
                    w.WritePropertyName("original_fit");
                    original.WriteTo(w);
                }
                else
                {
                    notes.Add("the original fit section is left out: nested one level deeper it would exceed the file's nesting limit of 16");
                }
            }

            w.WriteStartArray("notes");
            foreach (var n in notes)
            {
                w.WriteStringValue(n);
            }

            w.WriteEndArray();
            w.WriteEndObject();
        }

        using var doc = JsonDocument.Parse(ms.ToArray());
        return doc.RootElement.Clone();
    }

    /// <summary>The nesting depth of a JSON value: 0 for a scalar, 1 for an object or array of scalars.</summary>
    private static int Depth(JsonElement e) => e.ValueKind switch
    {
        JsonValueKind.Object => 1 + e.EnumerateObject().Select(p => Depth(p.Value)).DefaultIfEmpty(0).Max(),
        JsonValueKind.Array => 1 + e.EnumerateArray().Select(Depth).DefaultIfEmpty(0).Max(),
        _ => 0,
    };

    [GeneratedRegex("^[A-Za-z0-9][A-Za-z0-9._+-]*$", RegexOptions.CultureInvariant)]
    private static partial Regex VersionPattern();
}
