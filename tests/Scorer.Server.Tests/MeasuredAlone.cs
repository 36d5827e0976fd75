namespace Scorer.Server.Tests;

/// <summary>
/// Tests that measure the whole process (its managed heap, its working set) run in this collection: after every other
/// test of the assembly and never beside one, so that the figures are theirs and not a neighbour's allocations.
/// </summary>
[CollectionDefinition(Name, DisableParallelization = true)]
public sealed class MeasuredAlone
{
    public const string Name = "measured alone";
}
