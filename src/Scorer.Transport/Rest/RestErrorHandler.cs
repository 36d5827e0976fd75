using Grpc.Core;
using Microsoft.AspNetCore.Diagnostics;
using Microsoft.AspNetCore.Http;
using Microsoft.Extensions.Logging;

namespace Scorer.Transport.Rest;

/// <summary>
/// The one mapping of exceptions for the REST routes of our own (the page's JSON, the event streams, the labelled
/// export, direct REST scoring), run by the framework's exception handler middleware: a refusal (<see cref="RpcException"/>)
/// becomes the API's JSON error, and a store that does not answer becomes 503 in the same shape (<see cref="StoreOutage"/>),
/// as the gRPC interceptor answers the transcoded routes. The framework calls it only while nothing of the response has
/// been sent; a failure after that rethrows, and Kestrel aborts the response (HTTP/1.1: the connection closes without
/// the last chunk; HTTP/2: the stream is reset), so a client can tell a cut-off body from a whole one.
/// </summary>
public sealed partial class RestErrorHandler(ILogger<RestErrorHandler> logger) : IExceptionHandler
{
    public async ValueTask<bool> TryHandleAsync(HttpContext httpContext, Exception exception, CancellationToken cancellationToken)
    {
        ArgumentNullException.ThrowIfNull(httpContext);
        RpcException answer;
        if (exception is RpcException refusal)
        {
            answer = refusal;
        }
        else if (StoreOutage.Is(exception))
        {
            answer = StoreOutage.Answer(exception, StoreOutage.NothingRecorded);
            StoreFailed(logger, httpContext.Request.Method, httpContext.Request.Path.ToString(), exception.GetType().Name, exception.Message);
        }
        else
        {
            return false;
        }

        await RestScoring.WriteErrorAsync(httpContext.Response, answer).ConfigureAwait(false);
        return true;
    }

    /// <summary>
    /// Any other failure, before the response started: 500 in the same shape (the transcoded routes' wording), the
    /// exception in the log (the framework logs it).
    /// </summary>
    public static Task UnknownAsync(HttpContext context) =>
        RestScoring.WriteErrorAsync(context.Response, new RpcException(new Status(StatusCode.Unknown, "Exception was thrown by handler.")));

    [LoggerMessage(EventId = 4001, Level = LogLevel.Warning, Message = "{Method} {Path} answered 503: the store failed ({Type}: {Reason})")]
    private static partial void StoreFailed(ILogger logger, string method, string path, string type, string reason);
}
