using System.Collections.Immutable;
using System.Globalization;
using System.Security.Cryptography;
using Microsoft.Extensions.Logging;
using Scorer.Engine;
using Scorer.ModelFile;
using Scorer.Store;

namespace Scorer.Registry;

/// <summary>Where the registry finds model files, and the reader's bounds on each.</summary>
public sealed record RegistryOptions
{
    /// <summary>The folder searched (with its subfolders) for <c>*.json</c> model files.</summary>
    public required string ModelsPath { get; init; }

    /// <summary>The reader's bounds (<see cref="ModelFileReaderOptions.MaxBytes"/> is also checked from a file's length before it is read).</summary>
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
/// immutable snapshots. A version never changes once loaded, in this process or any other sharing the store: a file
/// whose SHA-256 differs from the one the store recorded for its (model, version) is refused and listed with the
/// reason. A file that fails validation, or is no regular file, or is over the reader's bounds, is listed with its
/// problems and replaces nothing.
/// </summary>
/// <remarks>
/// A scan reads, validates and compiles without the lock that stage changes take; it takes that lock only to add the
/// compiled versions and publish. A file is read again only when its length, times or inode change.
/// </remarks>
public sealed partial class ModelRegistry(RegistryOptions options, IStageStore store, TimeProvider time, ILogger<ModelRegistry> logger)
{
    public const string SystemActor = "registry";

    // One scan at a time; it owns _files.
    private readonly SemaphoreSlim _scan = new(1, 1);

    // The versions, the stages, the failures published and the snapshot: held for store calls and swaps, never for a
    // file's read or compilation.
    private readonly SemaphoreSlim _gate = new(1, 1);

    // What each path held when last read, and what came of it. A version stays loaded when its file changes or goes:
    // versions are immutable.
    private readonly Dictionary<string, FileState> _files = new(StringComparer.Ordinal);
    private readonly Dictionary<(string Model, string Version), LoadedVersion> _versions = [];
    private Dictionary<(string Model, string Version), Stage> _stages = [];
    private ImmutableArray<LoadFailure> _failures = [];
    private bool _stagesRead;
    private long _fileReads;
    private RegistrySnapshot _current = RegistrySnapshot.Empty;

    /// <summary>The snapshot being served. Read it once per request.</summary>
    public RegistrySnapshot Current => Volatile.Read(ref _current);

    /// <summary>Files read (and hashed) since start; an unchanged file is not read again.</summary>
    public long FileReads => Interlocked.Read(ref _fileReads);

    /// <summary>Raised after a new snapshot is published.</summary>
    public event Action<RegistrySnapshot>? Changed;

    /// <summary>
    /// Scans the folder and publishes what changed. Safe to call at any time; scans are serialised, and stage changes
    /// do not wait for them except while compiled versions are added. One file never makes the scan throw.
    /// </summary>
    public async Task<RegistrySnapshot> ReloadAsync(CancellationToken cancellationToken = default)
    {
        await _scan.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            if (!_stagesRead)
            {
                await WithGateAsync(async () =>
                {
                    _stages = (await store.GetVersionsAsync(cancellationToken).ConfigureAwait(false)).ToDictionary(v => (v.Model, v.Version), v => v.Stage);
                    _stagesRead = true;
                }, cancellationToken).ConfigureAwait(false);
            }

            var changed = await ScanAsync(cancellationToken).ConfigureAwait(false);
            var pending = _files.Where(f => f.Value.Pending is not null).Select(f => (File: f.Key, State: f.Value)).ToList();
            if (changed || pending.Count > 0 || Current.Generation == 0)
            {
                await WithGateAsync(() => CommitAsync(pending, cancellationToken), cancellationToken).ConfigureAwait(false);
            }

            return Current;
        }
        finally
        {
            _scan.Release();
        }
    }

    /// <summary>Reads, validates and compiles what is new in the folder, without the gate. True when a file's outcome changed.</summary>
    private async Task<bool> ScanAsync(CancellationToken cancellationToken)
    {
        var changed = false;
        var seen = new HashSet<string>(StringComparer.Ordinal);
        Dictionary<(string, string), ModelVersionRecord>? stored = null;
        foreach (var file in ListFiles())
        {
            cancellationToken.ThrowIfCancellationRequested();
            seen.Add(file);
            _files.TryGetValue(file, out var known);
            FileState? next;
            try
            {
                next = await ExamineAsync(file, known, () => StoredAsync(cancellationToken), cancellationToken).ConfigureAwait(false);
            }
            catch (OperationCanceledException) when (cancellationToken.IsCancellationRequested)
            {
                throw;
            }
#pragma warning disable CA1031 // one file must not stop the scan: whatever it throws is its load error
            catch (Exception ex)
#pragma warning restore CA1031
            {
                LogLoadException(logger, ex, file);
                next = new FileState(default, null, Failure(file, LoadFailureKind.Error, [new ModelFileProblem("$", "loading the file failed: " + ex.Message)]), null);
            }

            if (next is null)
            {
                continue; // unchanged, or being written (the next turn takes it)
            }

            if (next.Failure is { } failure && known?.Failure?.Problems.SequenceEqual(failure.Problems) != true)
            {
                LogCouldNotLoad(logger, file, LoadFailure.KindName(failure.Kind), string.Join("; ", failure.Problems));
            }

            changed |= known is null || known.Failure != next.Failure || known.Pending != next.Pending || known.Sha256 != next.Sha256;
            _files[file] = next;
        }

        foreach (var gone in _files.Keys.Where(f => !seen.Contains(f)).ToList())
        {
            // A removed file's version keeps serving (versions are immutable); its entry, failure or pending load goes.
            changed |= _files[gone].Failure is not null || _files[gone].Pending is not null;
            _files.Remove(gone);
        }

        return changed;

        async Task<Dictionary<(string, string), ModelVersionRecord>> StoredAsync(CancellationToken ct) =>
            stored ??= (await store.GetVersionsAsync(ct).ConfigureAwait(false)).ToDictionary(v => (v.Model, v.Version));
    }

    /// <summary>
    /// The new state of one path, or null when there is nothing new (same stamp) or it cannot be read now. Never opens
    /// what is not a regular file, never reads what is over the byte limit, never reads again what has the same stamp.
    /// </summary>
    private async Task<FileState?> ExamineAsync(string file, FileState? known, Func<Task<Dictionary<(string, string), ModelVersionRecord>>> stored,
        CancellationToken cancellationToken)
    {
        FileStamp stamp;
        try
        {
            stamp = FileProbe.Of(file);
        }
        catch (UnauthorizedAccessException ex)
        {
            return new FileState(default, null, Failure(file, LoadFailureKind.Unreadable, [new ModelFileProblem("$", "the file cannot be read: " + ex.Message)]), null);
        }

        if (stamp.Kind == FileKind.Missing || (known is not null && known.Stamp == stamp))
        {
            return null;
        }

        if (stamp.Kind != FileKind.Regular)
        {
            return new FileState(stamp, null, Failure(file, LoadFailureKind.NotARegularFile, [new ModelFileProblem("$",
                $"not a regular file: {Relative(file)} is {FileProbe.Describe(stamp.Kind)}; it is not opened",
                ProblemSeverity.Error, "remove it from the models folder, or replace it with the model file")]), null);
        }

        var reader = options.Reader;
        if (stamp.Length > reader.MaxBytes)
        {
            return new FileState(stamp, null, Failure(file, LoadFailureKind.TooLarge, [ModelFileReader.TooLargeProblem(reader, stamp.Length)]), null);
        }

        byte[]? bytes;
        try
        {
            bytes = await ReadBoundedAsync(file, stamp.Length, reader.MaxBytes, cancellationToken).ConfigureAwait(false);
        }
        catch (UnauthorizedAccessException ex)
        {
            return new FileState(stamp, null, Failure(file, LoadFailureKind.Unreadable, [new ModelFileProblem("$", "the file cannot be read: " + ex.Message)]), null);
        }
        catch (IOException)
        {
            return null; // being written, or gone: the next turn takes it
        }

        Interlocked.Increment(ref _fileReads);
        if (bytes is null)
        {
            return new FileState(stamp, null, Failure(file, LoadFailureKind.TooLarge, [ModelFileReader.TooLargeProblem(reader, null)]), null);
        }

        var sha = Convert.ToHexStringLower(SHA256.HashData(bytes));
        if (known is not null && known.Sha256 == sha)
        {
            return known with { Stamp = stamp }; // touched, not changed
        }

        LogReading(logger, file, bytes.Length);
        var result = ModelFileReader.Read(bytes, reader);
        if (result.Document is not { } doc)
        {
            var kind = result.Limit switch
            {
                ModelFileLimit.Bytes => LoadFailureKind.TooLarge,
                ModelFileLimit.Terms => LoadFailureKind.TooManyTerms,
                _ => LoadFailureKind.Invalid,
            };
            return new FileState(stamp, sha, Failure(file, kind, [.. result.Errors]), null);
        }

        // Known already, here or to the store (first loaded by this process before a restart, or by another process
        // sharing it): the same content loads as that version, other content is refused before it is compiled.
        if (Current.Find(doc.Model)?.Find(doc.Version) is { } loaded)
        {
            return loaded.Sha256 == sha
                ? new FileState(stamp, sha, null, null) // the same content under another name (a ConfigMap's link and its target)
                : new FileState(stamp, sha, ChangedVersion(file, doc, sha, loaded.Sha256, $"from {Relative(loaded.File)}, in this process"), null);
        }

        if ((await stored().ConfigureAwait(false)).TryGetValue((doc.Model, doc.Version), out var record) && record.FileSha256 != sha)
        {
            return new FileState(stamp, sha, ChangedVersion(file, doc, sha, record.FileSha256, RecordedAt(record)), null);
        }

        CompiledModel compiled;
        try
        {
            compiled = CompiledModel.Compile(doc);
        }
        catch (ModelFileException ex)
        {
            return new FileState(stamp, sha, Failure(file, LoadFailureKind.Invalid, ex.Problems), null);
        }

        return new FileState(stamp, sha, null, new Candidate(doc, compiled, bytes));
    }

    /// <summary>Adds the compiled versions in (model, version) order and publishes; under the gate.</summary>
    private async Task CommitAsync(List<(string File, FileState State)> pending, CancellationToken cancellationToken)
    {
        var added = false;
        foreach (var (file, state) in pending.OrderBy(p => p.State.Pending!.Document.Model, StringComparer.Ordinal)
                     .ThenBy(p => p.State.Pending!.Document.Version, StringComparer.Ordinal).ThenBy(p => p.File, StringComparer.Ordinal))
        {
            var doc = state.Pending!.Document;
            var sha = state.Sha256!;
            var key = (doc.Model, doc.Version);
            if (_versions.TryGetValue(key, out var existing))
            {
                // Loaded in this scan from another file: the same content under another name, or a change.
                _files[file] = existing.Sha256 == sha
                    ? state with { Pending = null }
                    : state with { Pending = null, Failure = ChangedVersion(file, doc, sha, existing.Sha256, $"from {Relative(existing.File)}, in this process") };
                continue;
            }

            if (!_stages.TryGetValue(key, out var stage))
            {
                var loaded = _versions.Values;
                var hasLive = loaded.Any(v => v.Model == doc.Model && v.Stage == Stage.Live)
                    || _stages.Any(s => s.Key.Model == doc.Model && s.Value == Stage.Live && _versions.ContainsKey(s.Key));
                stage = hasLive ? Stage.Shadow : Stage.Live;
            }

            var now = time.GetUtcNow();
            ModelVersionRecord record;
            try
            {
                record = await store.AddVersionAsync(new ModelVersionRecord(doc.Model, doc.Version, sha, now, stage), SystemActor, cancellationToken).ConfigureAwait(false);
            }
            catch (OperationCanceledException) when (cancellationToken.IsCancellationRequested)
            {
                throw;
            }
#pragma warning disable CA1031 // the store did not answer: the compiled version waits for the next turn, the others go on
            catch (Exception ex)
#pragma warning restore CA1031
            {
                LogStoreFailed(logger, ex, doc.Model, doc.Version, file);
                continue;
            }

            _stages[key] = record.Stage;
            if (record.FileSha256 != sha)
            {
                // Another process sharing the store recorded this version first, from other content.
                var failure = ChangedVersion(file, doc, sha, record.FileSha256, RecordedAt(record));
                LogCouldNotLoad(logger, file, LoadFailure.KindName(failure.Kind), string.Join("; ", failure.Problems));
                _files[file] = state with { Pending = null, Failure = failure };
                continue;
            }

            _versions[key] = new LoadedVersion(doc.Model, doc.Version, record.Stage, state.Pending.Compiled, file, sha, now, state.Pending.Bytes);
            _files[file] = state with { Pending = null };
            added = true;
            LogLoaded(logger, doc.Model, doc.Version, record.Stage, file);
        }

        var failures = _files.Values.Where(f => f.Failure is not null).Select(f => f.Failure!).OrderBy(f => f.File, StringComparer.Ordinal).ToImmutableArray();
        if (added || !failures.SequenceEqual(_failures) || _current.Generation == 0)
        {
            _failures = failures;
            Publish();
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
                LogStageFollowed(logger, record.Model, record.Version, loaded.Stage, record.Stage);
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
                LogStageChanged(logger, c.Model, c.Version, c.From, c.To, c.Actor);
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

    private async Task WithGateAsync(Func<Task> action, CancellationToken cancellationToken)
    {
        await _gate.WaitAsync(cancellationToken).ConfigureAwait(false);
        try
        {
            await action().ConfigureAwait(false);
        }
        finally
        {
            _gate.Release();
        }
    }

    /// <summary>The <c>*.json</c> entries under the folder, in ordinal order; FIFOs, devices and links are listed too (and looked at apart).</summary>
    private List<string> ListFiles()
    {
        if (!Directory.Exists(options.ModelsPath))
        {
            return [];
        }

        var enumeration = new EnumerationOptions { RecurseSubdirectories = true, IgnoreInaccessible = true, AttributesToSkip = 0 };
        return [.. Directory.EnumerateFiles(options.ModelsPath, "*.json", enumeration).Order(StringComparer.Ordinal)];
    }

    /// <summary>The file's bytes (following links), or null when it holds more than <paramref name="max"/> (it grew since its length was read).</summary>
    private static async Task<byte[]?> ReadBoundedAsync(string file, long expected, long max, CancellationToken cancellationToken)
    {
        var stream = new FileStream(file, FileMode.Open, FileAccess.Read, FileShare.Read, bufferSize: 1, FileOptions.Asynchronous | FileOptions.SequentialScan);
        await using (stream.ConfigureAwait(false))
        {
            var buffer = new byte[(int)Math.Min(Math.Max(expected, 0), max) + 1];
            var total = 0;
            while (true)
            {
                if (total == buffer.Length)
                {
                    if (total > max)
                    {
                        return null;
                    }

                    Array.Resize(ref buffer, (int)Math.Min((long)buffer.Length * 2, max + 1));
                }

                var read = await stream.ReadAsync(buffer.AsMemory(total), cancellationToken).ConfigureAwait(false);
                if (read == 0)
                {
                    break;
                }

                total += read;
            }

            if (total > max)
            {
                return null;
            }

            Array.Resize(ref buffer, total);
            return buffer;
        }
    }

    private LoadFailure Failure(string file, LoadFailureKind kind, IReadOnlyList<ModelFileProblem> problems) => new(file, problems, time.GetUtcNow(), kind);

    /// <summary>The refusal of a file that holds a known version with other content, naming both hashes.</summary>
    private LoadFailure ChangedVersion(string file, ModelDocument doc, string sha, string knownSha, string knownFrom) =>
        Failure(file, LoadFailureKind.ChangedVersion, [new ModelFileProblem("$.version",
            $"{Relative(file)} holds version '{doc.Version}' of model '{doc.Model}' with SHA-256 {Short(sha)}…, but that version was loaded with "
            + $"SHA-256 {Short(knownSha)}… ({knownFrom}); a version never changes once loaded",
            ProblemSeverity.Error, "give the changed file a new version")]);

    private static string RecordedAt(ModelVersionRecord record) =>
        "as the store recorded it at its first load, " + record.LoadedAt.UtcDateTime.ToString("yyyy-MM-dd HH:mm:ss 'UTC'", CultureInfo.InvariantCulture);

    private static string Short(string sha) => sha.Length > 12 ? sha[..12] : sha;

    private string Relative(string file) => Path.GetRelativePath(options.ModelsPath, file);

    private void Publish()
    {
        var versions = _versions.Values
            .GroupBy(v => v.Model, StringComparer.Ordinal)
            .ToImmutableSortedDictionary(g => g.Key, g => new ModelEntry(g.Key, [.. g.OrderBy(v => v.Version, StringComparer.Ordinal)]), StringComparer.Ordinal);
        var snapshot = new RegistrySnapshot(versions, _failures, _current.Generation + 1);
        Volatile.Write(ref _current, snapshot);
        Changed?.Invoke(snapshot);
    }

    /// <summary>A path's stamp when last read, its hash, and what came of it: a failure, a compiled version waiting to be added, or neither (loaded).</summary>
    private sealed record FileState(FileStamp Stamp, string? Sha256, LoadFailure? Failure, Candidate? Pending);

    private sealed record Candidate(ModelDocument Document, CompiledModel Compiled, byte[] Bytes);

    [LoggerMessage(EventId = 6101, Level = LogLevel.Information, Message = "Loaded {Model} {Version} ({Stage}) from {File}")]
    private static partial void LogLoaded(ILogger logger, string model, string version, Stage stage, string file);

    [LoggerMessage(EventId = 6102, Level = LogLevel.Warning, Message = "Could not load {File} ({Kind}): {Problems}")]
    private static partial void LogCouldNotLoad(ILogger logger, string file, string kind, string problems);

    /// <summary>Logged when a changed file is about to be validated and compiled, outside the lock stage changes take.</summary>
    [LoggerMessage(EventId = ReadingEventId, Level = LogLevel.Debug, Message = "Reading {File} ({Bytes} bytes)")]
    private static partial void LogReading(ILogger logger, string file, int bytes);

    [LoggerMessage(EventId = 6104, Level = LogLevel.Warning, Message = "Could not record {Model} {Version} from {File} in the store; retrying at the next turn")]
    private static partial void LogStoreFailed(ILogger logger, Exception exception, string model, string version, string file);

    [LoggerMessage(EventId = 6105, Level = LogLevel.Error, Message = "Loading {File} failed")]
    private static partial void LogLoadException(ILogger logger, Exception exception, string file);

    [LoggerMessage(EventId = 6106, Level = LogLevel.Information, Message = "Stage of {Model} {Version}: {From} -> {To} (changed by another process sharing the store)")]
    private static partial void LogStageFollowed(ILogger logger, string model, string version, Stage from, Stage to);

    [LoggerMessage(EventId = 6107, Level = LogLevel.Information, Message = "Stage of {Model} {Version}: {From} -> {To} by {Actor}")]
    private static partial void LogStageChanged(ILogger logger, string model, string version, Stage? from, Stage to, string actor);

    /// <summary>The event id of the "Reading {File}" debug message.</summary>
    public const int ReadingEventId = 6103;
}
