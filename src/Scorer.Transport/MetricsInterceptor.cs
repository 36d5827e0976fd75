using System.Diagnostics;
using Grpc.Core;
using Grpc.Core.Interceptors;

namespace Scorer.Transport;

/// <summary>
/// Times every call (gRPC and transcoded REST alike) into <c>scorer_call_duration_seconds{method, status}</c>. A call
/// that fails because the store does not answer ends as Unavailable (HTTP 503) saying so, not as an unknown error:
/// nothing of it was recorded, and the caller may retry.
/// </summary>
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
        catch (Exception ex) when (IsStoreFailure(ex))
        {
            status = nameof(StatusCode.Unavailable);
            throw StoreUnavailable(ex);
        }
        catch (Exception)
        {
            status = nameof(StatusCode.Unknown);
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
        catch (Exception ex) when (IsStoreFailure(ex))
        {
            status = nameof(StatusCode.Unavailable);
            throw StoreUnavailable(ex);
        }
        catch (Exception)
        {
            status = nameof(StatusCode.Unknown);
            throw;
        }
        finally
        {
            metrics.Calls.WithLabels(Name(context.Method), status).Observe(Stopwatch.GetElapsedTime(started).TotalSeconds);
        }
    }

    private static bool IsStoreFailure(Exception ex) => ex is System.Data.Common.DbException or System.Net.Sockets.SocketException or TimeoutException
        || (ex.InnerException is { } inner && IsStoreFailure(inner));

    private static RpcException StoreUnavailable(Exception ex) => new(new Status(StatusCode.Unavailable,
        "The store does not answer, so nothing of this call was recorded; retry later. (" + ex.GetType().Name + ": " + ex.Message + ")"));

    private static string Name(string method) => method.StartsWith("/scorer.v1.", StringComparison.Ordinal) ? method["/scorer.v1.".Length..] : method.TrimStart('/');
}
