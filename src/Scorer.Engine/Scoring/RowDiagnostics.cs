using System.Globalization;

namespace Scorer.Engine.Scoring;

public enum RowWarningKind : byte
{
    /// <summary>A numeric value below the training minimum.</summary>
    BelowTrainingRange,

    /// <summary>A numeric value above the training maximum.</summary>
    AboveTrainingRange,

    /// <summary>An unknown level scored as the reference level, as the model file says.</summary>
    UnknownLevelAsReference,

    /// <summary>A missing value replaced by the training mean, as the model file says.</summary>
    MissingImputed,

    /// <summary>The standard error of η is above the largest seen in training: an unusual combination of values.</summary>
    HiddenExtrapolation,
}

/// <summary>A warning about one row. <see cref="Feature"/> is the model's feature index, or -1.</summary>
public readonly record struct RowWarning(RowWarningKind Kind, int Feature, double Value, double Limit, string? Level = null);

public enum RowErrorKind : byte
{
    None,
    MissingValue,
    UnknownLevel,
    NotFinite,
    OutsideTransformDomain,
    ExpectedNumber,
    ExpectedLevel,
    DuplicateFeature,

    /// <summary>η or its standard error overflows double precision: a value far beyond any the model can mean.</summary>
    Overflow,
}

/// <summary>Why a row could not be scored. <see cref="Feature"/> is the model's feature index.</summary>
public readonly record struct RowError(RowErrorKind Kind, int Feature, double Value = double.NaN, string? Text = null)
{
    public bool IsError => Kind != RowErrorKind.None;
}

/// <summary>Turns warnings and errors into sentences naming the feature; only called when a result is written out.</summary>
public static class RowMessages
{
    public static string Describe(CompiledModel model, in RowWarning w)
    {
        var name = w.Feature >= 0 ? model.FeatureNames[w.Feature] : "";
        return w.Kind switch
        {
            RowWarningKind.BelowTrainingRange => $"{name}={F(w.Value)} is below the training minimum {F(w.Limit)} (extrapolation)",
            RowWarningKind.AboveTrainingRange => $"{name}={F(w.Value)} is above the training maximum {F(w.Limit)} (extrapolation)",
            RowWarningKind.UnknownLevelAsReference => $"{name}='{w.Level}' is not a known level; scored as the reference level '{model.ReferenceLevel(w.Feature)}'",
            RowWarningKind.MissingImputed => $"{name} is missing; the training mean {F(w.Value)} was used",
            RowWarningKind.HiddenExtrapolation => $"se={F(w.Value)} is above the largest seen in training ({F(w.Limit)}): an unusual combination of values",
            _ => w.Kind.ToString(),
        };
    }

    /// <summary>A short code for a warning, stable for machines.</summary>
    public static string Code(RowWarningKind kind) => kind switch
    {
        RowWarningKind.BelowTrainingRange => "below_training_range",
        RowWarningKind.AboveTrainingRange => "above_training_range",
        RowWarningKind.UnknownLevelAsReference => "unknown_level_as_reference",
        RowWarningKind.MissingImputed => "missing_imputed",
        RowWarningKind.HiddenExtrapolation => "hidden_extrapolation",
        _ => kind.ToString(),
    };

    /// <summary>
    /// A short code for an error, stable for machines: the row error's <c>code</c> in every answer and the <c>kind</c>
    /// label of <c>scorer_row_errors_total</c>.
    /// </summary>
    public static string Code(RowErrorKind kind) => kind switch
    {
        RowErrorKind.MissingValue => "missing_value",
        RowErrorKind.UnknownLevel => "unknown_level",
        RowErrorKind.NotFinite => "not_finite",
        RowErrorKind.OutsideTransformDomain => "outside_transform_domain",
        RowErrorKind.ExpectedNumber => "expected_number",
        RowErrorKind.ExpectedLevel => "expected_level",
        RowErrorKind.DuplicateFeature => "duplicate_feature",
        RowErrorKind.Overflow => "overflow",
        _ => "other",
    };

    /// <summary>The code of a row the transport could not read into values (not an object, too many fields, a value of the wrong JSON type).</summary>
    public const string BadValueCode = "bad_value";

    /// <summary>The code of a row whose business key the service refuses (too long).</summary>
    public const string BadKeyCode = "bad_key";

    public static string Field(CompiledModel model, in RowError e) => e.Feature >= 0 ? model.FeatureNames[e.Feature] : "";

    public static string Describe(CompiledModel model, in RowError e)
    {
        if (e.Feature < 0)
        {
            return e.Kind == RowErrorKind.Overflow ? "the linear predictor or its standard error overflows double precision" : e.Kind.ToString();
        }

        var f = e.Feature;
        return e.Kind switch
        {
            RowErrorKind.MissingValue => "the value is missing and the model file says to reject such rows",
            RowErrorKind.UnknownLevel => $"'{e.Text}' is not a level of this feature ({string.Join(", ", model.Levels(f))}) and the model file says to reject unknown levels",
            RowErrorKind.NotFinite => $"the value {F(e.Value)} is not a finite number",
            RowErrorKind.OutsideTransformDomain => $"the value {F(e.Value)} is outside the domain of the transform ({e.Text})",
            RowErrorKind.ExpectedNumber => $"expects a number, got '{e.Text}'",
            RowErrorKind.ExpectedLevel => $"expects a level ({string.Join(", ", model.Levels(f))}), got {e.Text ?? F(e.Value)}",
            RowErrorKind.DuplicateFeature => "the feature is given twice in the row",
            RowErrorKind.Overflow => $"the value {F(e.Value)} is so far out of range that the linear predictor or its standard error overflows double precision",
            _ => e.Kind.ToString(),
        };
    }

    private static string F(double v) => v.ToString("R", CultureInfo.InvariantCulture);
}
