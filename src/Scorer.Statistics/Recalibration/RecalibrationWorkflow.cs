using Scorer.ModelFile;

namespace Scorer.Statistics.Recalibration;

/// <summary>
/// A recalibration the workflow refused: <see cref="Field"/> names what is wrong in the workflow's own words (kind,
/// newVersion, version, data), which the endpoint reports as the field and the command line maps to its option.
/// </summary>
public sealed class RecalibrationRefused(string field, string reason) : Exception($"{field}: {reason}")
{
    public string Field { get; } = field;

    public string Reason { get; } = reason;
}

/// <summary>
/// What a recalibration decided. <see cref="Choice"/> is the closed test (null when the slope cannot be fitted and the
/// kind asked for was in the large); <see cref="Fit"/> the fit applied (null: keep the model, nothing to write);
/// <see cref="Document"/> the recalibrated model file (null with <see cref="Fit"/>); <see cref="Reason"/> one sentence.
/// </summary>
public sealed record RecalibrationOutcome(RecalibrationChoice? Choice, RecalibrationFit? Fit, ModelDocument? Document, string Reason, string? NoTest);

/// <summary>
/// The one recalibration workflow, for the monitor's endpoint (on the store's labelled predictions) and for
/// <c>scorer recalibrate</c> (on a CSV): the kind read, the new version checked, the closed test run, the fit chosen
/// (the kind asked for, or the test's recommendation), and the recalibrated model file made. Pure: it reads nothing
/// and writes nothing.
/// </summary>
public static class RecalibrationWorkflow
{
    /// <summary>The kinds as the API and the command line spell them.</summary>
    public const string Kinds = "auto, in-the-large or intercept-and-slope";

    /// <summary>A kind as given (null or "auto": the closed test decides), or <see cref="RecalibrationRefused"/> naming "kind".</summary>
    public static RecalibrationKind? ParseKind(string? text) => text switch
    {
        null or "" or "auto" => null,
        "in-the-large" => RecalibrationKind.InTheLarge,
        "intercept-and-slope" => RecalibrationKind.InterceptAndSlope,
        _ => throw new RecalibrationRefused("kind", $"'{text}' is not {Kinds}"),
    };

    /// <summary>Checks the version the recalibrated model will carry: its own, and a valid version name.</summary>
    public static void CheckNewVersion(ModelDocument model, string newVersion)
    {
        ArgumentNullException.ThrowIfNull(model);
        if (string.Equals(newVersion, model.Version, StringComparison.Ordinal))
        {
            throw new RecalibrationRefused("newVersion", $"'{newVersion}' is the version of {model.Model} itself; the recalibrated model needs a version of its own");
        }

        if (newVersion.Length is 0 or > 64 || !char.IsAsciiLetterOrDigit(newVersion[0])
            || !newVersion.All(c => char.IsAsciiLetterOrDigit(c) || c is '.' or '_' or '+' or '-'))
        {
            throw new RecalibrationRefused("newVersion",
                $"'{newVersion}' is not a version: 1 to 64 characters, a letter or digit first, then letters, digits, '.', '_', '+' or '-'");
        }
    }

    /// <summary>
    /// Runs the closed test on (η, y) and applies the kind asked for, or the test's recommendation; returns what was
    /// decided with the recalibrated model file. Refused (<see cref="RecalibrationRefused"/>, field "version" or "data")
    /// when the model has no intercept or the data cannot be fitted.
    /// </summary>
    public static RecalibrationOutcome Run(ModelDocument model, ReadOnlySpan<double> eta, ReadOnlySpan<byte> outcome, RecalibrationKind? kind, string newVersion,
        double alpha = 0.05)
    {
        ArgumentNullException.ThrowIfNull(model);
        CheckNewVersion(model, newVersion);
        if (!model.Terms.Any(t => t.IsIntercept))
        {
            throw new RecalibrationRefused("version", $"{model.Model} {model.Version} has no intercept term (a term with no factors): recalibration adds a to the "
                + "intercept, which this model does not have; refit it with an intercept");
        }

        RecalibrationChoice? choice = null;
        RecalibrationFit? fit;
        string reason;
        string? noTest = null;
        try
        {
            choice = Recalibrator.Choose(eta, outcome, model.Link, alpha);
            var chosen = kind ?? choice.Recommended;
            fit = chosen switch
            {
                null => null,
                RecalibrationKind.InTheLarge => choice.InTheLarge,
                _ => choice.InterceptAndSlope,
            };
            reason = kind is { } k ? $"{Recalibrator.KindName(k)} asked for; fitted on {eta.Length} labelled predictions." : choice.Reason;
        }
        catch (Exception ex) when (ex is ArgumentException or InvalidOperationException)
        {
            if (kind != RecalibrationKind.InTheLarge)
            {
                throw new RecalibrationRefused("data", $"the recalibration cannot be fitted: {ex.Message}");
            }

            // The slope cannot be fitted (a constant or separating eta), so there is no closed test; in the large may still be.
            try
            {
                fit = Recalibrator.Fit(eta, outcome, model.Link, RecalibrationKind.InTheLarge);
            }
            catch (Exception inner) when (inner is ArgumentException or InvalidOperationException)
            {
                throw new RecalibrationRefused("data", $"the recalibration cannot be fitted: {inner.Message}");
            }

            noTest = ex.Message;
            reason = $"in the large asked for; no closed test ({ex.Message}); fitted on {eta.Length} labelled predictions.";
        }

        if (fit is null)
        {
            return new RecalibrationOutcome(choice, null, null, reason, noTest);
        }

        try
        {
            return new RecalibrationOutcome(choice, fit, Recalibrator.Apply(model, fit, newVersion), reason, noTest);
        }
        catch (ArgumentException ex)
        {
            throw new RecalibrationRefused("version", ex.Message);
        }
        catch (ModelFileException ex)
        {
            throw new RecalibrationRefused("version", "the recalibrated model would not be a valid model file: " + string.Join("; ", ex.Problems.Select(p => p.ToString())));
        }
    }
}
