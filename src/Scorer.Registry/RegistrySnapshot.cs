using System.Collections.Immutable;
using Scorer.Engine;
using Scorer.ModelFile;
using Scorer.Store;

namespace Scorer.Registry;

/// <summary>A loaded model version: its compiled model, its file as loaded, and its stage. Immutable.</summary>
public sealed record LoadedVersion(
    string Model,
    string Version,
    Stage Stage,
    CompiledModel Compiled,
    string File,
    string Sha256,
    DateTimeOffset LoadedAt,
    ReadOnlyMemory<byte> FileBytes)
{
    public ModelDocument Document => Compiled.Document;
}

/// <summary>The versions of one model, with the live one and the shadows.</summary>
public sealed record ModelEntry(string Name, ImmutableArray<LoadedVersion> Versions)
{
    public LoadedVersion? Live { get; } = Versions.FirstOrDefault(v => v.Stage == Stage.Live);

    public ImmutableArray<LoadedVersion> Shadows { get; } = [.. Versions.Where(v => v.Stage == Stage.Shadow)];

    public LoadedVersion? Find(string version) => Versions.FirstOrDefault(v => v.Version == version);
}

/// <summary>Why a file was not loaded; each is a value of the <c>reason</c> label of <c>scorer_model_files_refused</c>.</summary>
public enum LoadFailureKind
{
    /// <summary>The file breaks a rule of the format (its problems say which).</summary>
    Invalid,

    /// <summary>Larger than the reader's byte limit; refused from its length, without being read.</summary>
    TooLarge,

    /// <summary>More terms (or covariance rows) than the reader's term limit.</summary>
    TooManyTerms,

    /// <summary>A FIFO, a device, a socket, or a link to one of them or to nothing: never opened.</summary>
    NotARegularFile,

    /// <summary>The file system refused to read it (permissions).</summary>
    Unreadable,

    /// <summary>A version already known (loaded here, or recorded in the store) with different content.</summary>
    ChangedVersion,

    /// <summary>Loading failed for a reason of its own (the log has the exception).</summary>
    Error,
}

/// <summary>A file that could not be loaded, with every problem found.</summary>
public sealed record LoadFailure(string File, IReadOnlyList<ModelFileProblem> Problems, DateTimeOffset At, LoadFailureKind Kind = LoadFailureKind.Invalid)
{
    /// <summary>Every kind, in the order of the enum.</summary>
    public static IReadOnlyList<LoadFailureKind> Kinds { get; } = Enum.GetValues<LoadFailureKind>();

    /// <summary>The kind as the API and the metrics name it: <c>changed_version</c>, <c>not_a_regular_file</c>, …</summary>
    public static string KindName(LoadFailureKind kind) => kind switch
    {
        LoadFailureKind.Invalid => "invalid",
        LoadFailureKind.TooLarge => "too_large",
        LoadFailureKind.TooManyTerms => "too_many_terms",
        LoadFailureKind.NotARegularFile => "not_a_regular_file",
        LoadFailureKind.Unreadable => "unreadable",
        LoadFailureKind.ChangedVersion => "changed_version",
        _ => "error",
    };
}

/// <summary>
/// Everything the registry serves at one moment. A request reads <see cref="ModelRegistry.Current"/> once and scores
/// wholly with what it got; the registry publishes a new snapshot with one reference swap.
/// </summary>
public sealed record RegistrySnapshot(ImmutableSortedDictionary<string, ModelEntry> Models, ImmutableArray<LoadFailure> Failures, long Generation)
{
    public static RegistrySnapshot Empty { get; } = new(ImmutableSortedDictionary<string, ModelEntry>.Empty.WithComparers(StringComparer.Ordinal), [], 0);

    public ModelEntry? Find(string model) => Models.GetValueOrDefault(model);
}
