using System.Collections.Immutable;
using System.Security.Cryptography;
using Microsoft.Extensions.Logging;
using Scorer.Engine;
using Scorer.ModelFile;
using Scorer.Store;

namespace Scorer.Registry;

/// <summary>Where the registry finds model files.</summary>
public sealed record RegistryOptions
{
    /// <summary>The folder searched (with its subfolders) for <c>*.json</c> model files.</summary>
    public required string ModelsPath { get; init; }

    public ModelFileReaderOptions Reader { get; init; } = ModelFileReaderOptions.Default;
}

/// <summary>A request the registry refuses: unknown model or version, or a stage change that cannot be made.</summary>
public sealed class RegistryException(string field, string reason, bool notFound = false) : Exception($"{field}: {reason}")
{
    public string Field { get; } = field;
    public string Reason { get; } = reason;
    public bool NotFound { get; } = notFound;
}

/// <summary>
/// Loads every model file under a folder into compiled versions, keeps their stages in the store, and publishes
/// immutable snapshots. A version never changes once loaded: a changed file with the same version is refused and
/// listed with the reason; a file that fails validation is listed with its problems and replaces nothing.
/// </summary>
public sealed class ModelRegistry(RegistryOptions options, IScorerStore store, TimeProvider time, ILogger<ModelRegistry> logger)
{
    public const string SystemActor = "registry";

    private readonly SemaphoreSlim _gate = new(1, 1);
    // What each file held when last read (a failure, or null when it loaded), and the versions loaded, by (model, version).
    // A version stays loaded when its file changes or goes: versions are immutable.
    private readonly Dictionary<string, (string Sha256, LoadFailure? Failure)> _files = new(StringComparer.Ordinal);
    private readonly Dictionary<(string Model, string Version), LoadedVersion> _versions = [];
    private Dictionary<(string Model, string Version), Stage> _stages = [];
    private bool _stagesRead;
    private RegistrySnapshot _current = RegistrySnapshot.Empty;

    /// <summary>The snapshot being served. Read it once per request.</summary>
    public RegistrySnapshot Current => Volatile.Read(ref _current);

    /// <summary>Raised after a new snapshot is published.</summary>
    public event Action<RegistrySnapshot>? Changed;

    /// <summary>Scans the folder and publishes what changed. Safe to call at any time; calls are serialised.</summary>
    public async Task<RegistrySnapshot> ReloadAsync(CancellationToken cancellationToken = default)
    {
        await _gate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            if (!_stagesRead)
            {
                _stages = (await store.GetVersionsAsync(cancellationToken).ConfigureAwait(false)).ToDictionary(v => (v.Model, v.Version), v => v.Stage);
                _stagesRead = true;
            }

            var changed = false;
            var seen = new HashSet<string>(StringComparer.Ordinal);
            var files = Directory.Exists(options.ModelsPath)
                ? Directory.EnumerateFiles(options.ModelsPath, "*.json", SearchOption.AllDirectories).Order(StringComparer.Ordinal).ToList()
                : [];
            var fresh = new List<(string File, string Sha, ModelDocument Doc, byte[] Bytes)>();
            foreach (var file in files)
            {
                seen.Add(file);
                byte[] bytes;
                try
                {
                    bytes = await File.ReadAllBytesAsync(file, cancellationToken).ConfigureAwait(false);
                }
                catch (IOException)
                {
                    continue; // being written; the next scan takes it
                }

                var sha = Convert.ToHexStringLower(SHA256.HashData(bytes));
                if (_files.TryGetValue(file, out var known) && known.Sha256 == sha)
                {
                    continue;
                }

                changed = true;
                var result = ModelFileReader.Read(bytes, options.Reader);
                if (result.Document is not { } doc)
                {
                    Fail(file, sha, [.. result.Errors]);
                    continue;
                }

                fresh.Add((file, sha, doc, bytes));
            }

            foreach (var gone in _files.Keys.Where(f => !seen.Contains(f)).ToList())
            {
                // A removed file's version keeps serving (versions are immutable); only its failure entry goes.
                if (_files[gone].Failure is not null)
                {
                    _files.Remove(gone);
                    changed = true;
                }
            }

            var loaded = _versions.Values.ToList();
            foreach (var (file, sha, doc, bytes) in fresh.OrderBy(f => f.Doc.Model, StringComparer.Ordinal).ThenBy(f => f.Doc.Version, StringComparer.Ordinal))
            {
                var existing = loaded.FirstOrDefault(v => v.Model == doc.Model && v.Version == doc.Version);
                if (existing is not null)
                {
                    if (existing.Sha256 == sha)
                    {
                        _files[file] = (sha, null); // the same content under another name
                        continue;
                    }

                    Fail(file, sha, [new ModelFileProblem("$.version",
                        $"version '{doc.Version}' of model '{doc.Model}' is already loaded from {Path.GetFileName(existing.File)} with different content; a version never changes once loaded",
                        ProblemSeverity.Error, "give the changed file a new version")]);
                    continue;
                }

                CompiledModel compiled;
                try
                {
                    compiled = CompiledModel.Compile(doc);
                }
                catch (ModelFileException ex)
                {
                    Fail(file, sha, ex.Problems);
                    continue;
                }

                var key = (doc.Model, doc.Version);
                if (!_stages.TryGetValue(key, out var stage))
                {
                    var hasLive = loaded.Any(v => v.Model == doc.Model && v.Stage == Stage.Live)
                        || _stages.Any(s => s.Key.Model == doc.Model && s.Value == Stage.Live && loaded.Any(v => v.Model == s.Key.Model && v.Version == s.Key.Version));
                    stage = hasLive ? Stage.Shadow : Stage.Live;
                }

                var now = time.GetUtcNow();
                var record = await store.AddVersionAsync(new ModelVersionRecord(doc.Model, doc.Version, sha, now, stage), SystemActor, cancellationToken).ConfigureAwait(false);
                _stages[key] = record.Stage;
                var version = new LoadedVersion(doc.Model, doc.Version, record.Stage, compiled, file, sha, now, bytes);
                _files[file] = (sha, null);
                _versions[key] = version;
                loaded.Add(version);
                logger.LogInformation("Loaded {Model} {Version} ({Stage}) from {File}", doc.Model, doc.Version, record.Stage, file);
            }

            if (changed || _current.Generation == 0)
            {
                Publish();
            }

            return Current;
        }
        finally
        {
            _gate.Release();
        }
    }

    /// <summary>
    /// Reads the stages from the store, where another process sharing it may have changed them, and publishes a new
    /// snapshot when any loaded version's stage differs. Returns whether it did.
    /// </summary>
    public async Task<bool> RefreshStagesAsync(CancellationToken cancellationToken = default)
    {
        await _gate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            var changed = await ApplyStoredStagesAsync(cancellationToken).ConfigureAwait(false);
            if (changed)
            {
                Publish();
            }

            return changed;
        }
        finally
        {
            _gate.Release();
        }
    }

    /// <summary>Takes the store's stages (under the gate); true when a loaded version's stage changed.</summary>
    private async Task<bool> ApplyStoredStagesAsync(CancellationToken cancellationToken)
    {
        var stored = await store.GetVersionsAsync(cancellationToken).ConfigureAwait(false);
        var changed = false;
        foreach (var record in stored)
        {
            var key = (record.Model, record.Version);
            _stages[key] = record.Stage;
            if (_versions.TryGetValue(key, out var loaded) && loaded.Stage != record.Stage)
            {
                logger.LogInformation("Stage of {Model} {Version}: {From} -> {To} (changed by another process sharing the store)", record.Model, record.Version,
                    loaded.Stage, record.Stage);
                _versions[key] = loaded with { Stage = record.Stage };
                changed = true;
            }
        }

        return changed;
    }

    /// <summary>Moves a version to a stage; promoting to live retires the previous live version. Returns the changes made.</summary>
    public async Task<IReadOnlyList<StageChange>> SetStageAsync(string model, string version, Stage stage, string actor, CancellationToken cancellationToken = default)
    {
        await _gate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            // Start from the stored stages: another process sharing the store may have moved a version since.
            if (await ApplyStoredStagesAsync(cancellationToken).ConfigureAwait(false))
            {
                Publish();
            }

            var entry = Current.Find(model) ?? throw new RegistryException("model", $"no model '{model}' is loaded", notFound: true);
            var target = entry.Find(version) ?? throw new RegistryException("version",
                $"model '{model}' has no version '{version}' (loaded: {string.Join(", ", entry.Versions.Select(v => v.Version))})", notFound: true);
            if (target.Stage == stage)
            {
                return [];
            }

            var now = time.GetUtcNow();
            var changes = new List<StageChange>();
            if (stage == Stage.Live && entry.Live is { } live)
            {
                changes.Add(new StageChange(model, live.Version, Stage.Live, Stage.Retired, actor, now));
            }

            changes.Add(new StageChange(model, version, target.Stage, stage, actor, now));
            await store.ChangeStagesAsync(changes, cancellationToken).ConfigureAwait(false);
            foreach (var c in changes)
            {
                _stages[(c.Model, c.Version)] = c.To;
            }

            foreach (var (key, v) in _versions.ToList())
            {
                if (_stages.TryGetValue(key, out var s) && s != v.Stage)
                {
                    _versions[key] = v with { Stage = s };
                }
            }

            Publish();
            foreach (var c in changes)
            {
                logger.LogInformation("Stage of {Model} {Version}: {From} -> {To} by {Actor}", c.Model, c.Version, c.From, c.To, c.Actor);
            }

            return changes;
        }
        finally
        {
            _gate.Release();
        }
    }

    /// <summary>Restores the version that was live before the current one; the current one is retired.</summary>
    public async Task<IReadOnlyList<StageChange>> RollbackAsync(string model, string actor, CancellationToken cancellationToken = default)
    {
        var entry = Current.Find(model) ?? throw new RegistryException("model", $"no model '{model}' is loaded", notFound: true);
        var history = await store.GetHistoryAsync(model, cancellationToken).ConfigureAwait(false);
        var current = entry.Live?.Version;
        var previous = history.Reverse()
            .Where(c => c.From == Stage.Live && c.Version != current && entry.Find(c.Version) is not null)
            .Select(c => c.Version)
            .FirstOrDefault()
            ?? throw new RegistryException("model", $"model '{model}' has no earlier live version to roll back to");
        return await SetStageAsync(model, previous, Stage.Live, actor, cancellationToken).ConfigureAwait(false);
    }

    private void Fail(string file, string sha, IReadOnlyList<ModelFileProblem> problems)
    {
        _files[file] = (sha, new LoadFailure(file, problems, time.GetUtcNow()));
        logger.LogWarning("Could not load {File}: {Problems}", file, string.Join("; ", problems));
    }

    private void Publish()
    {
        var versions = _versions.Values
            .GroupBy(v => v.Model, StringComparer.Ordinal)
            .ToImmutableSortedDictionary(g => g.Key, g => new ModelEntry(g.Key, [.. g.OrderBy(v => v.Version, StringComparer.Ordinal)]), StringComparer.Ordinal);
        var failures = _files.Values.Where(f => f.Failure is not null).Select(f => f.Failure!).OrderBy(f => f.File, StringComparer.Ordinal).ToImmutableArray();
        var snapshot = new RegistrySnapshot(versions, failures, _current.Generation + 1);
        Volatile.Write(ref _current, snapshot);
        Changed?.Invoke(snapshot);
    }
}
