using System.Net.ServerSentEvents;
using System.Runtime.CompilerServices;
using System.Threading.Channels;
using Microsoft.AspNetCore.Http;

namespace Scorer.Transport.Rest;

/// <summary>
/// Server-Sent Events through the framework's own support (<see cref="TypedResults.ServerSentEvents{T}(IAsyncEnumerable{SseItem{T}}, string?)"/>),
/// with an event <c>keepalive</c> (empty data) every <see cref="KeepAlive"/> on the service's clock, so that proxies and
/// load balancers do not close a quiet stream. EventSource clients ignore an event type they do not listen for.
/// </summary>
public static class EventStreams
{
    /// <summary>How often a stream sends <c>keepalive</c>.</summary>
    public static readonly TimeSpan KeepAlive = TimeSpan.FromSeconds(15);

    /// <summary>Sends <paramref name="events"/> (event type and JSON data) until the caller goes away or they end.</summary>
    public static Task WriteAsync(HttpContext context, IAsyncEnumerable<SseItem<string>> events, TimeProvider time)
    {
        context.Response.Headers["X-Accel-Buffering"] = "no";
        return TypedResults.ServerSentEvents(WithKeepAlive(events, time, context.RequestAborted)).ExecuteAsync(context);
    }

    private static async IAsyncEnumerable<SseItem<string>> WithKeepAlive(IAsyncEnumerable<SseItem<string>> events, TimeProvider time,
        [EnumeratorCancellation] CancellationToken cancellationToken)
    {
        var merged = Channel.CreateBounded<SseItem<string>>(new BoundedChannelOptions(64) { SingleReader = true });
        using var stop = CancellationTokenSource.CreateLinkedTokenSource(cancellationToken);
        var source = Task.Run(async () =>
        {
            try
            {
                await foreach (var e in events.WithCancellation(stop.Token).ConfigureAwait(false))
                {
                    await merged.Writer.WriteAsync(e, stop.Token).ConfigureAwait(false);
                }

                merged.Writer.TryComplete();
            }
            catch (OperationCanceledException)
            {
                merged.Writer.TryComplete();
            }
#pragma warning disable CA1031 // handed to the reader, which rethrows it
            catch (Exception ex)
#pragma warning restore CA1031
            {
                merged.Writer.TryComplete(ex);
            }
        }, CancellationToken.None);
        var pings = Task.Run(async () =>
        {
            using var timer = new PeriodicTimer(KeepAlive, time);
            try
            {
                while (await timer.WaitForNextTickAsync(stop.Token).ConfigureAwait(false))
                {
                    merged.Writer.TryWrite(new SseItem<string>("", "keepalive"));
                }
            }
            catch (OperationCanceledException)
            {
            }
        }, CancellationToken.None);
        try
        {
            await foreach (var e in merged.Reader.ReadAllAsync(cancellationToken).ConfigureAwait(false))
            {
                yield return e;
            }
        }
        finally
        {
            await stop.CancelAsync().ConfigureAwait(false);
            await Task.WhenAll(source, pings).ConfigureAwait(false);
        }
    }
}
