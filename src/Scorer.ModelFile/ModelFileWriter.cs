using System.Collections.Immutable;
using System.Text.Json;

namespace Scorer.ModelFile;

/// <summary>Writes a <see cref="ModelDocument"/> as a model file; numbers in shortest round-trip form.</summary>
public static class ModelFileWriter
{
    public static void Write(ModelDocument doc, Stream stream, bool indented = true)
    {
        using var w = new Utf8JsonWriter(stream, new JsonWriterOptions { Indented = indented });
        Write(doc, w);
    }

    public static string WriteToString(ModelDocument doc, bool indented = true)
    {
        using var ms = new MemoryStream();
        Write(doc, ms, indented);
        return System.Text.Encoding.UTF8.GetString(ms.ToArray());
    }

    public static void WriteFile(ModelDocument doc, string path)
    {
        using var stream = File.Create(path);
        Write(doc, stream);
        stream.WriteByte((byte)'\n');
    }

    public static void Write(ModelDocument doc, Utf8JsonWriter w)
    {
        w.WriteStartObject();
        w.WriteString("format", doc.Format);
        w.WriteString("model", doc.Model);
        w.WriteString("version", doc.Version);
        if (doc.Description is not null)
        {
            w.WriteString("description", doc.Description);
        }

        w.WriteString("link", LinkName(doc.Link));
        w.WriteStartObject("outcome");
        w.WriteString("name", doc.Outcome.Name);
        w.WriteString("positive", doc.Outcome.Positive);
        w.WriteString("horizon", doc.Outcome.Horizon);
        w.WriteString("negatives", doc.Outcome.Negatives == NegativesPolicy.Implicit ? "implicit" : "explicit");
        w.WriteEndObject();

        w.WriteStartArray("features");
        foreach (var f in doc.Features)
        {
            WriteFeature(w, f);
        }

        w.WriteEndArray();

        w.WriteStartArray("terms");
        foreach (var t in doc.Terms)
        {
            w.WriteStartObject();
            w.WriteString("name", t.Name);
            w.WriteNumber("coefficient", t.Coefficient);
            w.WriteStartArray("factors");
            foreach (var f in t.Factors)
            {
                WriteFactor(w, f);
            }

            w.WriteEndArray();
            w.WriteEndObject();
        }

        w.WriteEndArray();

        if (doc.Covariance is { } cov)
        {
            w.WriteStartArray("covariance");
            foreach (var row in cov)
            {
                w.WriteStartArray();
                foreach (var v in row)
                {
                    w.WriteNumberValue(v);
                }

                w.WriteEndArray();
            }

            w.WriteEndArray();
        }

        if (doc.Threshold is { } threshold)
        {
            w.WriteNumber("threshold", threshold);
        }

        if (doc.Sampling is { } s)
        {
            w.WriteStartObject("sampling");
            w.WriteNumber("training_event_rate", s.TrainingEventRate);
            w.WriteNumber("population_event_rate", s.PopulationEventRate);
            w.WriteEndObject();
        }

        if (doc.Baseline is { } b)
        {
            WriteBaseline(w, b, doc.Terms);
        }

        if (doc.Fit is { } fit)
        {
            w.WritePropertyName("fit");
            fit.WriteTo(w);
        }

        foreach (var (name, value) in doc.Extensions.OrderBy(e => e.Key, StringComparer.Ordinal))
        {
            w.WritePropertyName(name);
            value.WriteTo(w);
        }

        w.WriteEndObject();
        w.Flush();
    }

    public static string LinkName(LinkKind link) => link switch
    {
        LinkKind.Logit => "logit",
        LinkKind.Probit => "probit",
        LinkKind.CLogLog => "cloglog",
        _ => throw new ArgumentOutOfRangeException(nameof(link), link, "Unexpected link"),
    };

    public static string TransformName(TransformKind t) => t switch
    {
        TransformKind.Identity => "identity",
        TransformKind.Log => "log",
        TransformKind.Log1P => "log1p",
        TransformKind.Sqrt => "sqrt",
        _ => throw new ArgumentOutOfRangeException(nameof(t), t, "Unexpected transform"),
    };

    private static void WriteFeature(Utf8JsonWriter w, FeatureSpec f)
    {
        w.WriteStartObject();
        w.WriteString("name", f.Name);
        w.WriteString("type", f.Kind == FeatureKind.Numeric ? "numeric" : "categorical");
        if (f.Description is not null)
        {
            w.WriteString("description", f.Description);
        }

        if (f.Kind == FeatureKind.Numeric)
        {
            if (f.Min is { } min)
            {
                w.WriteNumber("min", min);
            }

            if (f.Max is { } max)
            {
                w.WriteNumber("max", max);
            }

            w.WriteString("missing", f.Missing == MissingPolicy.Mean ? "mean" : "reject");
            if (f.Mean is { } mean)
            {
                w.WriteNumber("mean", mean);
            }
        }
        else
        {
            w.WriteStartArray("levels");
            foreach (var l in f.Levels)
            {
                w.WriteStringValue(l);
            }

            w.WriteEndArray();
            w.WriteString("reference", f.Reference);
            w.WriteString("missing", "reject");
            w.WriteString("unknown", f.Unknown == UnknownLevelPolicy.Reference ? "reference" : "reject");
        }

        w.WriteEndObject();
    }

    private static void WriteFactor(Utf8JsonWriter w, FactorSpec f)
    {
        w.WriteStartObject();
        w.WriteString("feature", f.Feature);
        if (f.Level is not null)
        {
            w.WriteString("level", f.Level);
        }
        else
        {
            if (f.Transform != TransformKind.Identity)
            {
                w.WriteString("transform", TransformName(f.Transform));
            }

            if (f.Center != 0)
            {
                w.WriteNumber("center", f.Center);
            }

            if (f.Scale != 1)
            {
                w.WriteNumber("scale", f.Scale);
            }
        }

        w.WriteEndObject();
    }

    private static void WriteBins(Utf8JsonWriter w, BinnedBaseline bins)
    {
        w.WriteStartObject();
        w.WriteStartArray("edges");
        foreach (var e in bins.Edges)
        {
            w.WriteNumberValue(e);
        }

        w.WriteEndArray();
        w.WriteStartArray("proportions");
        foreach (var p in bins.Proportions)
        {
            w.WriteNumberValue(p);
        }

        w.WriteEndArray();
        w.WriteEndObject();
    }

    private static void WriteBaseline(Utf8JsonWriter w, BaselineSpec b, ImmutableArray<TermSpec> terms)
    {
        w.WriteStartObject("baseline");
        w.WriteNumber("n", b.N);
        w.WriteNumber("events", b.Events);
        if (b.LinearPredictor is { } lp)
        {
            w.WritePropertyName("linear_predictor");
            WriteBins(w, lp);
        }

        if (b.MaxSe is { } maxSe)
        {
            w.WriteNumber("max_se", maxSe);
        }

        if (b.TermMeans.Count > 0)
        {
            w.WriteStartObject("term_means");
            foreach (var term in terms.Where(t => b.TermMeans.ContainsKey(t.Name)))
            {
                w.WriteNumber(term.Name, b.TermMeans[term.Name]);
            }

            w.WriteEndObject();
        }

        if (b.Numeric.Count > 0 || b.Levels.Count > 0)
        {
            w.WriteStartObject("features");
            foreach (var (name, bins) in b.Numeric.OrderBy(e => e.Key, StringComparer.Ordinal))
            {
                w.WritePropertyName(name);
                WriteBins(w, bins);
            }

            foreach (var (name, levels) in b.Levels.OrderBy(e => e.Key, StringComparer.Ordinal))
            {
                w.WriteStartObject(name);
                w.WriteStartObject("levels");
                foreach (var (level, p) in levels.OrderBy(e => e.Key, StringComparer.Ordinal))
                {
                    w.WriteNumber(level, p);
                }

                w.WriteEndObject();
                w.WriteEndObject();
            }

            w.WriteEndObject();
        }

        w.WriteEndObject();
    }
}
