using Scorer.Monitor.Reporting;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Application.Models;

/// <summary>
/// The one place a call's model and version names are resolved against what is loaded, with one set of messages for
/// every transport: an empty name, an unknown model (listing the loaded ones), an unknown version (listing the
/// model's), a model without a live version. Stage names are read and written here too.
/// </summary>
public sealed class ModelCatalog(ModelRegistry registry, MonitorOptions monitor)
{
    /// <summary>What is loaded now (one snapshot per call: read it once).</summary>
    public RegistrySnapshot Current => registry.Current;

    /// <summary>The loaded model named <paramref name="model"/>, or the error naming the field "model".</summary>
    public ModelEntry Model(string? model) => Model(registry.Current, model);

    /// <summary>The named version of the model (the version is required), or the error naming "model" or "version".</summary>
    public LoadedVersion Version(string? model, string? version)
    {
        var entry = Model(model);
        if (string.IsNullOrEmpty(version))
        {
            throw Errors.Invalid("version", $"name the version of model '{entry.Name}' ({Loaded(entry)})");
        }

        return Named(entry, version);
    }

    /// <summary>The named version, or the live one when <paramref name="version"/> is empty.</summary>
    public LoadedVersion LiveOrNamed(string? model, string? version) => LiveOrNamed(model, version, out _);

    /// <summary>The named version, or the live one when <paramref name="version"/> is empty; with its model's entry.</summary>
    public LoadedVersion LiveOrNamed(string? model, string? version, out ModelEntry entry)
    {
        entry = Model(model);
        if (string.IsNullOrEmpty(version))
        {
            return entry.Live ?? throw Errors.Precondition("version",
                $"model '{entry.Name}' has no live version; name a version ({Loaded(entry)}) or promote one");
        }

        return Named(entry, version);
    }

    /// <summary>
    /// The version and window a monitor call names (the live version when none is named; <paramref name="defaultWindow"/>,
    /// else Scorer:Monitor:DefaultWindow, when no window is), or the error naming the field.
    /// </summary>
    public (LoadedVersion Version, string Window) Monitored(string? model, string? version, string? window, string? defaultWindow = null)
    {
        var resolved = LiveOrNamed(model, version);
        var w = string.IsNullOrEmpty(window) ? defaultWindow ?? monitor.DefaultWindow : window;
        if (!monitor.Windows.ContainsKey(w))
        {
            throw Errors.Invalid("window", $"'{Errors.Echo(w)}' is not a window; use one of {string.Join(", ", monitor.Windows.Keys)}");
        }

        return (resolved, w);
    }

    /// <summary>The named version of a loaded model, when one is named; an unknown one is the error naming "version".</summary>
    public LoadedVersion? Optional(ModelEntry entry, string? version) => string.IsNullOrEmpty(version) ? null : Named(entry, version);

    private static ModelEntry Model(RegistrySnapshot snapshot, string? model)
    {
        if (string.IsNullOrEmpty(model))
        {
            throw Errors.Invalid("model", "name the model");
        }

        return snapshot.Find(model) ?? throw Errors.NotFound("model",
            $"no model '{Errors.Echo(model)}' is loaded" + (snapshot.Models.Count > 0 ? $" (loaded: {Errors.Echo(string.Join(", ", snapshot.Models.Keys), 400)})" : ""));
    }

    private static LoadedVersion Named(ModelEntry entry, string version) => entry.Find(version) ?? throw Errors.NotFound("version",
        $"model '{entry.Name}' has no version '{Errors.Echo(version)}' ({Loaded(entry)})");

    private static string Loaded(ModelEntry entry) => "loaded: " + Errors.Echo(string.Join(", ", entry.Versions.Select(v => v.Version)), 400);

    /// <summary>A stage as the API writes it: live, shadow or retired.</summary>
    public static string StageName(Stage stage) => stage switch
    {
        Stage.Live => "live",
        Stage.Shadow => "shadow",
        _ => "retired",
    };

    /// <summary>A stage as the API reads it, or the error naming <paramref name="field"/>.</summary>
    public static Stage ParseStage(string? text, string field = "stage") => text switch
    {
        "live" => Stage.Live,
        "shadow" => Stage.Shadow,
        "retired" => Stage.Retired,
        _ => throw Errors.Invalid(field, $"'{Errors.Echo(text)}' is not a stage; give live, shadow or retired"),
    };
}
