using System.Net.ServerSentEvents;
using System.Runtime.CompilerServices;
using System.Text;
using Microsoft.AspNetCore.Http;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Time.Testing;
using Scorer.Transport.Rest;

namespace Scorer.Server.Tests;

/// <summary>Server-Sent Events as the framework writes them, with the keep-alive on the service's clock.</summary>
public sealed class EventStreamTests
{
    /// <summary>A response body that can be read while the stream is still being written.</summary>
    private sealed class Captured : MemoryStream
    {
        private readonly Lock _lock = new();

        public override void Write(ReadOnlySpan<byte> buffer)
        {
            var copy = buffer.ToArray();
            Write(copy, 0, copy.Length);
        }

        public override void Write(byte[] buffer, int offset, int count)
        {
            lock (_lock)
            {
                base.Write(buffer, offset, count);
            }
        }

        public override Task WriteAsync(byte[] buffer, int offset, int count, CancellationToken cancellationToken)
        {
            Write(buffer, offset, count);
            return Task.CompletedTask;
        }

        public override ValueTask WriteAsync(ReadOnlyMemory<byte> buffer, CancellationToken cancellationToken = default)
        {
            Write(buffer.Span);
            return ValueTask.CompletedTask;
        }

        public string Text()
        {
            lock (_lock)
            {
                return Encoding.UTF8.GetString(GetBuffer(), 0, (int)Length);
            }
        }
    }

    private static async IAsyncEnumerable<SseItem<string>> OneThenQuiet([EnumeratorCancellation] CancellationToken cancellationToken)
    {
        yield return new SseItem<string>("{\"n\":1}", "snapshot");
        await Task.Delay(Timeout.Infinite, cancellationToken);
    }

    private static async Task<bool> EventuallyAsync(Func<bool> condition)
    {
        for (var i = 0; i < 1000 && !condition(); i++)
        {
            await Task.Delay(10);
        }

        return condition();
    }

    [Fact]
    public async Task A_quiet_stream_sends_keepalive_each_time_the_clock_passes_the_interval_and_events_in_the_framework_format()
    {
        var clock = new FakeTimeProvider(DateTimeOffset.UnixEpoch);
        var body = new Captured();
        using var aborted = new CancellationTokenSource();
        var context = new DefaultHttpContext { RequestServices = new ServiceCollection().AddLogging().BuildServiceProvider(), RequestAborted = aborted.Token };
        context.Response.Body = body;
        var writing = EventStreams.WriteAsync(context, OneThenQuiet(aborted.Token), clock);

        Assert.True(await EventuallyAsync(() => body.Text().Contains("event: snapshot\ndata: {\"n\":1}\n\n", StringComparison.Ordinal)), body.Text());
        Assert.DoesNotContain("keepalive", body.Text(), StringComparison.Ordinal);
        Assert.Equal("text/event-stream", context.Response.ContentType);

        clock.Advance(EventStreams.KeepAlive - TimeSpan.FromSeconds(1));
        await Task.Delay(50);
        Assert.DoesNotContain("keepalive", body.Text(), StringComparison.Ordinal); // not before the interval has passed

        clock.Advance(TimeSpan.FromSeconds(1));
        Assert.True(await EventuallyAsync(() => body.Text().Contains("event: keepalive\n", StringComparison.Ordinal)), body.Text());
        clock.Advance(EventStreams.KeepAlive);
        Assert.True(await EventuallyAsync(() => body.Text().Split("event: keepalive").Length - 1 == 2), body.Text());

        await aborted.CancelAsync();
        await Assert.ThrowsAnyAsync<OperationCanceledException>(() => writing);
    }
}
