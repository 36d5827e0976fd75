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

/// <summary>A file that could not be loaded, with every problem found.</summary>
public sealed record LoadFailure(string File, IReadOnlyList<ModelFileProblem> Problems, DateTimeOffset At);

/// <summary>
/// Everything the registry serves at one moment. A request reads <see cref="ModelRegistry.Current"/> once and scores
/// wholly with what it got; the registry publishes a new snapshot with one reference swap.
/// </summary>
public sealed record RegistrySnapshot(ImmutableSortedDictionary<string, ModelEntry> Models, ImmutableArray<LoadFailure> Failures, long Generation)
{
    public static RegistrySnapshot Empty { get; } = new(ImmutableSortedDictionary<string, ModelEntry>.Empty.WithComparers(StringComparer.Ordinal), [], 0);

    public ModelEntry? Find(string model) => Models.GetValueOrDefault(model);
}
