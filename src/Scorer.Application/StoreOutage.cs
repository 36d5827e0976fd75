using System.Data.Common;
using System.Net.Sockets;
using Grpc.Core;
using Scorer.Store;

namespace Scorer.Application;

/// <summary>
/// The one rule for a call that failed because the store did not answer (or had no room left for a write): which
/// failures those are, and the answer, Unavailable (HTTP 503) in the one error shape with the field <c>store</c>,
/// saying what happened and what of the call was or was not recorded. The gRPC interceptor
/// (<see cref="MetricsInterceptor"/>, every kind of call, transcoded REST included) and the REST error handler
/// (<see cref="Rest.RestErrorHandler"/>, the routes of our own) both answer through it.
/// </summary>
public static class StoreOutage
{
    /// <summary>The field the error names.</summary>
    public const string Field = "store";

    /// <summary>What a unary call or a REST request can say: the store's writes are all-or-nothing per call.</summary>
    public const string NothingRecorded = "nothing of this call was recorded";

    /// <summary>
    /// Whether the failure is the store's: a database error (<see cref="DbException"/>, both drivers' errors), a refused
    /// connection, a timeout, or a write refused for lack of space, itself or as the cause of another exception.
    /// </summary>
    public static bool Is(Exception ex)
    {
        for (Exception? e = ex; e is not null; e = e.InnerException)
        {
            if (e is StoreFullException or DbException or SocketException or TimeoutException)
            {
                return true;
            }
        }

        return false;
    }

    /// <summary>
    /// The answer to a call that failed with a store failure (<see cref="Is"/>): Unavailable, naming the field
    /// <c>store</c>, with what happened and <paramref name="recorded"/> (what of the call was or was not recorded).
    /// </summary>
    public static RpcException Answer(Exception ex, string recorded)
    {
        ArgumentNullException.ThrowIfNull(ex);
        if (Find<StoreFullException>(ex) is not null || Find<DbException>(ex) is { SqlState: "53100" })
        {
            // 53100: PostgreSQL's disk_full. The details (file, disk) are for the operator: readiness and the log have them.
            return Errors.Unavailable(Field, $"has no room left for writes (its disk is full, or its file reached its size limit), so {recorded}; "
                + "send it again once an operator has freed space (/readyz says so until then)");
        }

        var cause = Find<DbException>(ex) ?? Find<SocketException>(ex) ?? (Exception?)Find<TimeoutException>(ex) ?? ex;
        return Errors.Unavailable(Field, $"did not answer ({cause.GetType().Name}: {cause.Message}), so {recorded}; "
            + "send it again once the store is back (/readyz says degraded until then)");
    }

    /// <summary>What a client stream's failure at message <paramref name="messages"/> (1-based, as read) leaves recorded.</summary>
    public static string ClientStreamRecorded(int messages) => messages switch
    {
        <= 1 => "nothing of this stream was recorded",
        2 => "message 1 of this stream was recorded (each message is recorded in its own transaction) and nothing from message 2 on was",
        _ => $"messages 1 to {messages - 1} of this stream were recorded (each in its own transaction) and nothing from message {messages} on was",
    };

    /// <summary>What a server stream's failure leaves: nothing recorded; how many messages were sent before it ended.</summary>
    public static string ServerStreamRecorded(int sent) => $"nothing of this call was recorded; {Count(sent, "message")} had been sent before it ended";

    /// <summary>What a bidirectional stream's failure leaves: the messages answered stand; the unanswered ones were not recorded.</summary>
    public static string DuplexRecorded(int read, int sent) =>
        $"the {Count(sent, "answer")} sent stand; nothing of the messages not answered yet ({read} read) was recorded";

    private static string Count(int n, string noun) => n == 1 ? $"1 {noun}" : $"{n} {noun}s";

    private static T? Find<T>(Exception ex)
        where T : Exception
    {
        for (Exception? e = ex; e is not null; e = e.InnerException)
        {
            if (e is T found)
            {
                return found;
            }
        }

        return null;
    }
}
