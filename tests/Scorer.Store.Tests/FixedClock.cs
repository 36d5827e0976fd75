namespace Scorer.Store.Tests;

/// <summary>A clock that says the time it was given, until a test moves it (<see cref="Now"/>).</summary>
internal sealed class FixedClock(DateTimeOffset now) : TimeProvider
{
    public DateTimeOffset Now { get; set; } = now;

    public override DateTimeOffset GetUtcNow() => Now;
}
