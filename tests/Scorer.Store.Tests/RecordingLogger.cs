using System.Threading.Channels;
using Microsoft.Extensions.Logging;

namespace Scorer.Store.Tests;

/// <summary>A logger that keeps every event it is given (id and message), for a test to wait on.</summary>
internal sealed class RecordingLogger<T> : ILogger<T>
{
    private readonly Channel<(EventId Id, string Message)> _events = Channel.CreateUnbounded<(EventId, string)>();

    public IDisposable? BeginScope<TState>(TState state)
        where TState : notnull => null;

    public bool IsEnabled(LogLevel logLevel) => true;

    private readonly System.Collections.Concurrent.ConcurrentQueue<int> _ids = new();

    public void Log<TState>(LogLevel logLevel, EventId eventId, TState state, Exception? exception, Func<TState, Exception?, string> formatter)
    {
        _ids.Enqueue(eventId.Id);
        _events.Writer.TryWrite((eventId, formatter(state, exception)));
    }

    /// <summary>How many events with the id <paramref name="id"/> were logged so far, whether or not a test waited on them.</summary>
    public int Count(int id) => _ids.Count(i => i == id);

    /// <summary>The next event with the id <paramref name="id"/>, skipping others; fails after a minute without one (the test's bound, not a wait for time).</summary>
    public async Task<string> NextAsync(int id)
    {
        using var bound = new CancellationTokenSource(TimeSpan.FromMinutes(1));
        while (true)
        {
            var (eventId, message) = await _events.Reader.ReadAsync(bound.Token);
            if (eventId.Id == id)
            {
                return message;
            }
        }
    }
}
