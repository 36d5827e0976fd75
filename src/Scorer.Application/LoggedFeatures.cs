using System.Buffers;
using System.Text.Json;
using Scorer.Engine;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;

namespace Scorer.Application;

/// <summary>
/// The features a prediction log record keeps: a JSON object of the values of the features the scoring model uses,
/// nothing else. Fields a request carried that the model ignores are not stored, so a record is bounded by the model
/// (its features, each value at most <see cref="ScoringLimits.MaxStringLength"/> characters), whatever the request held.
/// </summary>
public static class LoggedFeatures
{
    // Text stays readable in the store (quotes, backslashes and control characters are still escaped).
    private static readonly JsonWriterOptions Options = new() { Encoder = System.Text.Encodings.Web.JavaScriptEncoder.UnsafeRelaxedJsonEscaping };

    /// <summary>The model's features among <paramref name="row"/>'s named values, in the row's order.</summary>
    public static string Json(CompiledModel model, ReadOnlySpan<NamedValue> row)
    {
        ArgumentNullException.ThrowIfNull(model);
        var buffer = new ArrayBufferWriter<byte>(32 + (row.Length * 24));
        using (var w = new Utf8JsonWriter(buffer, Options))
        {
            w.WriteStartObject();
            foreach (var (name, value) in row)
            {
                var f = model.FeatureIndexOf(name);
                if (f < 0)
                {
                    continue;
                }

                var feature = model.FeatureNames[f];
                switch (value.Kind)
                {
                    case FeatureValueKind.Number when double.IsFinite(value.Number):
                        w.WriteNumber(feature, value.Number);
                        break;
                    case FeatureValueKind.Text:
                        w.WriteString(feature, value.Text);
                        break;
                    default:
                        w.WriteNull(feature);
                        break;
                }
            }

            w.WriteEndObject();
        }

        return System.Text.Encoding.UTF8.GetString(buffer.WrittenSpan);
    }

    /// <summary>A dense row (the model's feature order; categorical values as level codes) with its levels named.</summary>
    public static string Json(CompiledModel model, ReadOnlySpan<double> values)
    {
        ArgumentNullException.ThrowIfNull(model);
        var buffer = new ArrayBufferWriter<byte>(256);
        using (var w = new Utf8JsonWriter(buffer, Options))
        {
            w.WriteStartObject();
            for (var f = 0; f < values.Length; f++)
            {
                var v = values[f];
                if (model.FeatureKindOf(f) == FeatureKind.Categorical && v >= 0 && v < model.Levels(f).Count && v == Math.Floor(v))
                {
                    w.WriteString(model.FeatureNames[f], model.Levels(f)[(int)v]);
                }
                else if (double.IsFinite(v))
                {
                    w.WriteNumber(model.FeatureNames[f], v);
                }
                else
                {
                    w.WriteNull(model.FeatureNames[f]);
                }
            }

            w.WriteEndObject();
        }

        return System.Text.Encoding.UTF8.GetString(buffer.WrittenSpan);
    }
}
