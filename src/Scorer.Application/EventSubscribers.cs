namespace Scorer.Application;

/// <summary>
/// The bound on open event streams (the monitor's Server-Sent Events and gRPC <c>WatchReports</c>, the overview's
/// events): each holds a connection, a queue and the monitor's attention, so at most
/// <see cref="ScoringLimits.MaxEventSubscribers"/> are open at once; one more is refused (429 / RESOURCE_EXHAUSTED)
/// before anything is sent, saying so.
/// </summary>
public sealed class EventSubscribers(ScoringLimits limits)
{
    private int _open;

    /// <summary>Streams open now.</summary>
    public int Open => Volatile.Read(ref _open);

    /// <summary>Streams refused at the bound since start.</summary>
    public long Refused => Interlocked.Read(ref _refused);

    private long _refused;

    /// <summary>A place for one more stream, given back when the lease is disposed; refused at the bound.</summary>
    public Lease Enter()
    {
        if (Interlocked.Increment(ref _open) > limits.MaxEventSubscribers)
        {
            Interlocked.Decrement(ref _open);
            Interlocked.Increment(ref _refused);
            throw Errors.TooMuch("subscribers", $"{limits.MaxEventSubscribers} event streams are open, the most this service keeps "
                + "(Scorer:Limits:MaxEventSubscribers); close one, or retry later");
        }

        return new Lease(this);
    }

    /// <summary>One open stream.</summary>
    public sealed class Lease(EventSubscribers owner) : IDisposable
    {
        private int _disposed;

        public void Dispose()
        {
            if (Interlocked.Exchange(ref _disposed, 1) == 0)
            {
                Interlocked.Decrement(ref owner._open);
            }
        }
    }
}
