using System.Net.ServerSentEvents;
using System.Runtime.CompilerServices;
using Scorer.Application.Models;
using System.Text;
using Google.Protobuf;
using Grpc.Core;
using Microsoft.AspNetCore.Http;
using Scorer.Monitor.Reporting;
using Scorer.Registry;
using Scorer.Transport.Services;
using Scorer.Transport.V1;

namespace Scorer.Transport.Rest;

/// <summary>
/// <c>GET /v1/models/{model}/monitor/events?version=&amp;window=</c>: the monitor's events as Server-Sent Events
/// (<c>event: snapshot</c> or <c>event: status</c>, <c>data:</c> the report as JSON, as the REST report gives it), a
/// <c>keepalive</c> event every 15 s to keep proxies from closing the connection (<see cref="EventStreams"/>). Same
/// contract as gRPC <c>WatchReports</c>.
/// </summary>
public sealed class MonitorEvents(ModelCatalog catalog, MonitorWatch watch, EventSubscribers subscribers, TimeProvider time)
{
    private static readonly JsonFormatter Json = new(JsonFormatter.Settings.Default.WithFormatDefaultValues(true));

    public async Task HandleAsync(HttpContext context, string model)
    {
        LoadedVersion version;
        string window;
        EventSubscribers.Lease lease;
        try
        {
            (version, window) = catalog.Monitored(model, context.Request.Query["version"].ToString(), context.Request.Query["window"].ToString());
            lease = subscribers.Enter();
        }
        catch (RpcException ex)
        {
            await RestScoring.WriteErrorAsync(context.Response, ex).ConfigureAwait(false);
            return;
        }

        using var held = lease;
        try
        {
            await EventStreams.WriteAsync(context, Events(version, window, context.RequestAborted), time).ConfigureAwait(false);
        }
        catch (OperationCanceledException) when (context.RequestAborted.IsCancellationRequested)
        {
        }
    }

    private async IAsyncEnumerable<SseItem<string>> Events(LoadedVersion version, string window, [EnumeratorCancellation] CancellationToken cancellationToken)
    {
        await foreach (var e in watch.WatchAsync(version, window, cancellationToken).ConfigureAwait(false))
        {
            yield return new SseItem<string>(Json.Format(e.Report), e.Kind);
        }
    }
}
