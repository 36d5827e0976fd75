using System.Globalization;
using System.Reflection;

namespace Scorer.Store;

/// <summary>
/// What every store driver checks and names the same way: a prediction's fields, a version to add, stage changes,
/// text the stores cannot keep, and stages as text. The outcome reports' checks and rules are <see cref="OutcomeRules"/>.
/// </summary>
public static class StoreRules
{
    /// <summary>
    /// Checks row <paramref name="index"/> of a batch of predictions: present, with a model and a version, a finite η
    /// and probability, a feature object and a stage; throws <see cref="ArgumentException"/> naming the row and field.
    /// </summary>
    public static void CheckPrediction(PredictionRecord? row, int index)
    {
        if (row is null)
        {
            throw new ArgumentException($"batch[{index}] is null.", "batch");
        }

        if (string.IsNullOrEmpty(row.Model) || string.IsNullOrEmpty(row.Version))
        {
            throw new ArgumentException($"batch[{index}] (id {row.Id}) has no Model or no Version.", "batch");
        }

        if (!double.IsFinite(row.Eta))
        {
            throw new ArgumentException($"batch[{index}] (id {row.Id}) has Eta = {row.Eta.ToString(CultureInfo.InvariantCulture)}; Eta must be finite.", "batch");
        }

        if (!double.IsFinite(row.Probability))
        {
            throw new ArgumentException(
                $"batch[{index}] (id {row.Id}) has Probability = {row.Probability.ToString(CultureInfo.InvariantCulture)}; Probability must be finite.", "batch");
        }

        if (row.FeaturesJson is null)
        {
            throw new ArgumentException($"batch[{index}] (id {row.Id}) has no FeaturesJson.", "batch");
        }

        if (!Enum.IsDefined(row.Stage))
        {
            throw new ArgumentException($"batch[{index}] (id {row.Id}) has Stage = {(int)row.Stage}, which is not a stage.", "batch");
        }
    }

    /// <summary>
    /// Checks a version to add: present, with a model, a version and a file hash, a defined stage, and an actor; throws
    /// <see cref="ArgumentException"/> naming the field.
    /// </summary>
    public static void CheckVersion(ModelVersionRecord version, string actor)
    {
        ArgumentNullException.ThrowIfNull(version);
        ArgumentException.ThrowIfNullOrEmpty(version.Model, nameof(version));
        ArgumentException.ThrowIfNullOrEmpty(version.Version, nameof(version));
        ArgumentNullException.ThrowIfNull(version.FileSha256, nameof(version));
        ArgumentNullException.ThrowIfNull(actor);
        _ = ToText(version.Stage);
    }

    /// <summary>
    /// Checks a list of stage changes: no null entry, each with a model, a version, an actor and defined stages; throws
    /// <see cref="ArgumentException"/> naming the list (and the entry).
    /// </summary>
    public static void CheckStageChanges(IReadOnlyList<StageChange> changes)
    {
        ArgumentNullException.ThrowIfNull(changes);
        for (var i = 0; i < changes.Count; i++)
        {
            var change = changes[i] ?? throw new ArgumentException($"changes[{i}] is null.", nameof(changes));
            ArgumentException.ThrowIfNullOrEmpty(change.Model, nameof(changes));
            ArgumentException.ThrowIfNullOrEmpty(change.Version, nameof(changes));
            ArgumentNullException.ThrowIfNull(change.Actor, nameof(changes));
            _ = ToText(change.To);
            if (change.From is { } from)
            {
                _ = ToText(from);
            }
        }
    }

    /// <summary>
    /// Why the stores cannot keep <paramref name="text"/> as it is, or null when they can: PostgreSQL text cannot hold
    /// the character U+0000, and half of a surrogate pair is not a character (UTF-8 cannot encode it). Callers check
    /// every string they will store (keys above all) at the edge, so that the request is refused naming the field.
    /// </summary>
    public static string? Unstorable(string? text)
    {
        if (string.IsNullOrEmpty(text))
        {
            return null;
        }

        var span = text.AsSpan();
        var at = span.IndexOf('\0');
        if (at >= 0)
        {
            return $"holds the character U+0000 (at character {at + 1}), which the store cannot keep; remove it";
        }

        var first = span.IndexOfAnyInRange('\uD800', '\uDFFF');
        for (var i = first < 0 ? span.Length : first; i < span.Length; i++)
        {
            if (char.IsHighSurrogate(span[i]) && i + 1 < span.Length && char.IsLowSurrogate(span[i + 1]))
            {
                i++;
            }
            else if (char.IsSurrogate(span[i]))
            {
                return $"holds half of a surrogate pair (U+{(int)span[i]:X4} at character {i + 1}), which is not a character; send valid Unicode text";
            }
        }

        return null;
    }

    /// <summary>A stage as the stores keep it: live, shadow or retired.</summary>
    public static string ToText(Stage stage) => stage switch
    {
        Stage.Live => "live",
        Stage.Shadow => "shadow",
        Stage.Retired => "retired",
        _ => throw new ArgumentOutOfRangeException(nameof(stage), stage, "Not a stage: expected Live, Shadow or Retired."),
    };

    /// <summary>A stage from its stored text; anything else means the database holds what no driver wrote.</summary>
    public static Stage ToStage(string text) => text switch
    {
        "live" => Stage.Live,
        "shadow" => Stage.Shadow,
        "retired" => Stage.Retired,
        _ => throw new InvalidOperationException($"The database holds an unknown stage '{text}'."),
    };
}

/// <summary>One numbered schema migration of a store driver: <c>Migrations/NNNN_name.sql</c>, embedded in the driver's assembly.</summary>
public sealed record NumberedMigration(int Version, string Name, string Sql)
{
    private const string Prefix = "Migrations/";

    /// <summary>Every migration embedded in <paramref name="assembly"/>, in version order; the versions must run 1, 2, 3, … without gaps.</summary>
    public static IReadOnlyList<NumberedMigration> Load(Assembly assembly)
    {
        ArgumentNullException.ThrowIfNull(assembly);
        var migrations = assembly.GetManifestResourceNames()
            .Where(name => name.StartsWith(Prefix, StringComparison.Ordinal) && name.EndsWith(".sql", StringComparison.Ordinal))
            .Select(name => Read(assembly, name))
            .OrderBy(m => m.Version)
            .ToArray();

        for (var i = 0; i < migrations.Length; i++)
        {
            if (migrations[i].Version != i + 1)
            {
                throw new InvalidOperationException(
                    $"Migration {migrations[i].Name} should be numbered {i + 1}: migrations are numbered 1, 2, 3, … with no gap or repeat.");
            }
        }

        return migrations;
    }

    private static NumberedMigration Read(Assembly assembly, string resourceName)
    {
        var fileName = resourceName[Prefix.Length..];
        var underscore = fileName.IndexOf('_', StringComparison.Ordinal);
        if (underscore <= 0 || !int.TryParse(fileName.AsSpan(0, underscore), NumberStyles.None, CultureInfo.InvariantCulture, out var version))
        {
            throw new InvalidOperationException($"Migration {fileName} should be named NNNN_name.sql.");
        }

        using var stream = assembly.GetManifestResourceStream(resourceName)
            ?? throw new InvalidOperationException($"Migration resource {resourceName} is missing.");
        using var reader = new StreamReader(stream);
        return new NumberedMigration(version, fileName, reader.ReadToEnd());
    }
}

/// <summary>
/// A batch of predictions the store refused because of what a row holds (its id is repeated or already stored);
/// writing the same rows again cannot succeed. Derives from <see cref="InvalidOperationException"/>, as the contract
/// names it.
/// </summary>
public sealed class PredictionRefusedException(string message, Exception? inner = null) : InvalidOperationException(message, inner);
