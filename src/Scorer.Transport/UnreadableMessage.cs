using Google.Protobuf;
using Grpc.Core;
using Microsoft.AspNetCore.Http;
using Microsoft.AspNetCore.Http.Features;

namespace Scorer.Transport;

/// <summary>
/// A native gRPC request whose message cannot be read (damaged protobuf bytes, a message over
/// <c>Scorer:MaxRequestBodyBytes</c>) is a client error in the one error shape naming <c>body</c>: InvalidArgument or
/// ResourceExhausted with a field violation, never <c>Unknown</c>. The gRPC framework reads a unary request before any
/// interceptor runs, so for those the answer is rewritten after the call (<see cref="InvokeAsync"/>); a stream's
/// messages are read inside the handler, where <see cref="MetricsInterceptor"/> maps the failure with <see cref="Answer"/>.
/// </summary>
public sealed class UnreadableMessage(ScorerMetrics metrics, RequestDelegate next)
{
    /// <summary>Set by <see cref="MetricsInterceptor"/> when the handler ran: its answer stands as it is.</summary>
    internal static readonly object HandlerRan = new();

    /// <summary>The error for a message the server could not read, or null when the failure is something else.</summary>
    public static RpcException? Answer(Exception error, string which) => error switch
    {
        InvalidProtocolBufferException e => Errors.Invalid("body", $"{which} is not a valid protobuf message of this call ({e.Message})"),
        RpcException { StatusCode: StatusCode.ResourceExhausted } e when e.GetRpcStatus() is null =>
            Errors.TooMuch("body", $"{which} is larger than this server reads (Scorer:MaxRequestBodyBytes); {e.Status.Detail}"),
        _ => null,
    };

    public async Task InvokeAsync(HttpContext context)
    {
        if (context.Request.ContentType?.StartsWith("application/grpc", StringComparison.OrdinalIgnoreCase) != true)
        {
            await next(context).ConfigureAwait(false);
            return;
        }

        // gRPC bounds each message (MaxReceiveMessageSize, the same setting); Kestrel's bound on the whole body would race
        // with it on a unary call and end it as Unknown. Streams are unbounded in total by design (the framework lifts it).
        if (context.Features.Get<IHttpMaxRequestBodySizeFeature>() is { IsReadOnly: false } size)
        {
            size.MaxRequestBodySize = null;
        }

        var started = System.Diagnostics.Stopwatch.GetTimestamp();
        await next(context).ConfigureAwait(false);
        if (context.Items.ContainsKey(HandlerRan))
        {
            return;
        }

        // The handler never ran: the status was set while the framework read the request. Trailers-only answers carry it
        // in the headers, others in the trailers.
        var response = context.Response;
        var trailers = response.HasStarted ? context.Features.Get<IHttpResponseTrailersFeature>()?.Trailers : response.Headers;
        if (trailers is null || trailers.IsReadOnly || trailers.ContainsKey("grpc-status-details-bin"))
        {
            return;
        }

        var code = trailers["grpc-status"].ToString();
        var detail = Uri.UnescapeDataString(trailers["grpc-message"].ToString());
        RpcException? answer = code switch
        {
            "2" => Errors.Invalid("body", $"the request is not a valid protobuf message of this call ({detail})"),
            "8" => Errors.TooMuch("body", $"the request is larger than this server reads (Scorer:MaxRequestBodyBytes); {detail}"),
            _ => null,
        };
        if (answer is null)
        {
            return;
        }

        var status = answer.GetRpcStatus()!;
        trailers["grpc-status"] = status.Code.ToString(System.Globalization.CultureInfo.InvariantCulture);
        trailers["grpc-message"] = Uri.EscapeDataString(status.Message);
        trailers["grpc-status-details-bin"] = Convert.ToBase64String(status.ToByteArray());
        var method = context.Request.Path.Value ?? "";
        metrics.Calls.WithLabels(MetricsInterceptor.Name(method), answer.StatusCode.ToString()).Observe(System.Diagnostics.Stopwatch.GetElapsedTime(started).TotalSeconds);
    }
}
