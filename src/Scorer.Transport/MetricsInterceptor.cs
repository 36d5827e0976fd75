using System.Diagnostics;
using Grpc.Core;
using Grpc.Core.Interceptors;

namespace Scorer.Transport;

/// <summary>Times every call (gRPC and transcoded REST alike) into <c>scorer_call_duration_seconds{method, status}</c>.</summary>
public sealed class MetricsInterceptor(ScorerMetrics metrics) : Interceptor
{
    public override async Task<TResponse> UnaryServerHandler<TRequest, TResponse>(TRequest request, ServerCallContext context, UnaryServerMethod<TRequest, TResponse> continuation)
    {
        var started = Stopwatch.GetTimestamp();
        var status = "OK";
        try
        {
            return await continuation(request, context).ConfigureAwait(false);
        }
        catch (RpcException ex)
        {
            status = ex.StatusCode.ToString();
            throw;
        }
        finally
        {
            metrics.Calls.WithLabels(Name(context.Method), status).Observe(Stopwatch.GetElapsedTime(started).TotalSeconds);
        }
    }

    public override async Task DuplexStreamingServerHandler<TRequest, TResponse>(IAsyncStreamReader<TRequest> requestStream, IServerStreamWriter<TResponse> responseStream,
        ServerCallContext context, DuplexStreamingServerMethod<TRequest, TResponse> continuation)
    {
        var started = Stopwatch.GetTimestamp();
        var status = "OK";
        try
        {
            await continuation(requestStream, responseStream, context).ConfigureAwait(false);
        }
        catch (RpcException ex)
        {
            status = ex.StatusCode.ToString();
            throw;
        }
        finally
        {
            metrics.Calls.WithLabels(Name(context.Method), status).Observe(Stopwatch.GetElapsedTime(started).TotalSeconds);
        }
    }

    private static string Name(string method) => method.StartsWith("/scorer.v1.", StringComparison.Ordinal) ? method["/scorer.v1.".Length..] : method.TrimStart('/');
}
