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
/// comment line every 15 s to keep proxies from closing the connection. Same contract as gRPC <c>WatchReports</c>.
/// </summary>
public sealed class MonitorEvents(ModelCatalog catalog, MonitorWatch watch, ApiKeyInterceptor keys, EventSubscribers subscribers)
{
    private static readonly JsonFormatter Json = new(JsonFormatter.Settings.Default.WithFormatDefaultValues(true));

    public async Task HandleAsync(HttpContext context, string model)
    {
        LoadedVersion version;
        string window;
        EventSubscribers.Lease lease;
        try
        {
            keys.Authorize(context.Request.Headers.Authorization.Count > 0 ? context.Request.Headers.Authorization.ToString() : null, "/scorer.v1.Monitor/WatchReports");
            (version, window) = catalog.Monitored(model, context.Request.Query["version"].ToString(), context.Request.Query["window"].ToString());
            lease = subscribers.Enter();
        }
        catch (RpcException ex)
        {
            await RestScoring.WriteErrorAsync(context.Response, ex).ConfigureAwait(false);
            return;
        }

        using var held = lease;
        context.Response.ContentType = "text/event-stream; charset=utf-8";
        context.Response.Headers.CacheControl = "no-cache";
        context.Response.Headers["X-Accel-Buffering"] = "no";
        var aborted = context.RequestAborted;
        using var keepAlive = new PeriodicTimer(TimeSpan.FromSeconds(15));
        var gate = new SemaphoreSlim(1, 1);
        var pings = Task.Run(async () =>
        {
            while (await keepAlive.WaitForNextTickAsync(aborted).ConfigureAwait(false))
            {
                await Send(": still here\n\n").ConfigureAwait(false);
            }
        }, aborted);

        try
        {
            await foreach (var e in watch.WatchAsync(version, window, aborted).ConfigureAwait(false))
            {
                await Send($"event: {e.Kind}\ndata: {Json.Format(e.Report)}\n\n").ConfigureAwait(false);
            }
        }
        catch (OperationCanceledException) when (aborted.IsCancellationRequested)
        {
        }
        finally
        {
            keepAlive.Dispose();
            try
            {
                await pings.ConfigureAwait(false);
            }
            catch (OperationCanceledException)
            {
            }

            gate.Dispose();
        }

        async Task Send(string text)
        {
            await gate.WaitAsync(aborted).ConfigureAwait(false);
            try
            {
                await context.Response.Body.WriteAsync(Encoding.UTF8.GetBytes(text), aborted).ConfigureAwait(false);
                await context.Response.Body.FlushAsync(aborted).ConfigureAwait(false);
            }
            finally
            {
                gate.Release();
            }
        }
    }
}
