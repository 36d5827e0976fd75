using System.Diagnostics;
using Grpc.Core;
using Grpc.Core.Interceptors;

namespace Scorer.Transport;

/// <summary>
/// Every call, of every kind (unary, client-, server- and bidirectional streaming; gRPC and transcoded REST alike),
/// passes through here once: it is timed into <c>scorer_call_duration_seconds{method, status}</c>, and a call that
/// fails because the store does not answer ends as Unavailable (HTTP 503) in the one error shape, saying so and what
/// of the call was or was not recorded (<see cref="StoreOutage"/>), not as an unknown error. For streams that depends
/// on how far the stream got, so the streams are counted as they are read and written.
/// </summary>
public sealed class MetricsInterceptor(ScorerMetrics metrics) : Interceptor
{
    public override Task<TResponse> UnaryServerHandler<TRequest, TResponse>(TRequest request, ServerCallContext context,
        UnaryServerMethod<TRequest, TResponse> continuation) =>
        ObserveAsync(context, () => continuation(request, context), () => StoreOutage.NothingRecorded);

    public override Task<TResponse> ClientStreamingServerHandler<TRequest, TResponse>(IAsyncStreamReader<TRequest> requestStream, ServerCallContext context,
        ClientStreamingServerMethod<TRequest, TResponse> continuation)
    {
        var reader = new CountingReader<TRequest>(requestStream);
        return ObserveAsync(context, () => continuation(reader, context), () => StoreOutage.ClientStreamRecorded(reader.Read));
    }

    public override Task ServerStreamingServerHandler<TRequest, TResponse>(TRequest request, IServerStreamWriter<TResponse> responseStream, ServerCallContext context,
        ServerStreamingServerMethod<TRequest, TResponse> continuation)
    {
        var writer = new CountingWriter<TResponse>(responseStream);
        return ObserveAsync(context, async () =>
        {
            await continuation(request, writer, context).ConfigureAwait(false);
            return true;
        }, () => StoreOutage.ServerStreamRecorded(writer.Written));
    }

    public override Task DuplexStreamingServerHandler<TRequest, TResponse>(IAsyncStreamReader<TRequest> requestStream, IServerStreamWriter<TResponse> responseStream,
        ServerCallContext context, DuplexStreamingServerMethod<TRequest, TResponse> continuation)
    {
        var reader = new CountingReader<TRequest>(requestStream);
        var writer = new CountingWriter<TResponse>(responseStream);
        return ObserveAsync(context, async () =>
        {
            await continuation(reader, writer, context).ConfigureAwait(false);
            return true;
        }, () => StoreOutage.DuplexRecorded(reader.Read, writer.Written));
    }

    /// <summary>Runs the call, times it under its final status, and turns a store failure into the Unavailable answer.</summary>
    private async Task<T> ObserveAsync<T>(ServerCallContext context, Func<Task<T>> call, Func<string> recorded)
    {
        var started = Stopwatch.GetTimestamp();
        var status = "OK";
        context.GetHttpContext().Items[UnreadableMessage.HandlerRan] = true;
        try
        {
            return await call().ConfigureAwait(false);
        }
        catch (RpcException ex)
        {
            status = ex.StatusCode.ToString();
            throw;
        }
        catch (Exception ex) when (StoreOutage.Is(ex))
        {
            status = nameof(StatusCode.Unavailable);
            throw StoreOutage.Answer(ex, recorded());
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

    internal static string Name(string method) => method.StartsWith("/scorer.v1.", StringComparison.Ordinal) ? method["/scorer.v1.".Length..] : method.TrimStart('/');

    /// <summary>The request stream, counting the messages the handler has taken from it.</summary>
    private sealed class CountingReader<T>(IAsyncStreamReader<T> inner) : IAsyncStreamReader<T>
    {
        private int _read;

        public int Read => Volatile.Read(ref _read);

        public T Current => inner.Current;

        public async Task<bool> MoveNext(CancellationToken cancellationToken)
        {
            bool more;
            try
            {
                more = await inner.MoveNext(cancellationToken).ConfigureAwait(false);
            }
            catch (Exception e) when (UnreadableMessage.Answer(e, $"message {Read + 1} of the stream") is { } answer)
            {
                throw answer;
            }

            if (more)
            {
                Interlocked.Increment(ref _read);
            }

            return more;
        }
    }

    /// <summary>The response stream, counting the messages written to it.</summary>
    private sealed class CountingWriter<T>(IServerStreamWriter<T> inner) : IServerStreamWriter<T>
    {
        private int _written;

        public int Written => Volatile.Read(ref _written);

        public WriteOptions? WriteOptions
        {
            get => inner.WriteOptions;
            set => inner.WriteOptions = value;
        }

        public async Task WriteAsync(T message)
        {
            await inner.WriteAsync(message).ConfigureAwait(false);
            Interlocked.Increment(ref _written);
        }

        public async Task WriteAsync(T message, CancellationToken cancellationToken)
        {
            await inner.WriteAsync(message, cancellationToken).ConfigureAwait(false);
            Interlocked.Increment(ref _written);
        }
    }
}
