using Google.Protobuf.WellKnownTypes;
using Google.Rpc;
using Grpc.Core;

namespace Scorer.Application;

/// <summary>
/// The one error shape: a gRPC status whose message names the field and the reason, with a google.rpc.BadRequest
/// field violation in its details. JSON transcoding turns it into HTTP 400/404/… with the same JSON body.
/// </summary>
public static class Errors
{
    public static RpcException Invalid(string field, string reason) => Make(Code.InvalidArgument, field, reason);

    public static RpcException NotFound(string field, string reason) => Make(Code.NotFound, field, reason);

    public static RpcException Precondition(string field, string reason) => Make(Code.FailedPrecondition, field, reason);

    public static RpcException TooMuch(string field, string reason) => Make(Code.ResourceExhausted, field, reason);

    public static RpcException Unauthenticated(string reason) => Make(Code.Unauthenticated, "authorization", reason);

    public static RpcException Forbidden(string reason) => Make(Code.PermissionDenied, "authorization", reason);

    /// <summary>
    /// A caller's text as an error message repeats it: whole up to <paramref name="max"/> characters, else its start
    /// and its length, so that a huge input is never echoed back in full.
    /// </summary>
    public static string Echo(string? text, int max = 80) =>
        text is null ? "" : text.Length <= max ? text : string.Concat(text.AsSpan(0, max), $"… ({text.Length} characters)");

    /// <summary>The same error with a sentence added to its message (its code and field violations kept).</summary>
    public static RpcException WithNote(RpcException error, string note)
    {
        ArgumentNullException.ThrowIfNull(error);
        var status = error.GetRpcStatus() ?? new Google.Rpc.Status { Code = (int)error.StatusCode, Message = error.Status.Detail };
        status.Message = $"{status.Message}; {note}";
        return status.ToRpcException();
    }

    /// <summary>A part the call needs (<paramref name="field"/>: the store) does not answer now; the caller may retry.</summary>
    public static RpcException Unavailable(string field, string reason) => Make(Code.Unavailable, field, reason);

    /// <summary>The longest field name and reason an error carries: gRPC sends them in headers, which clients bound.</summary>
    public const int MaxField = 200, MaxReason = 900;

    private static RpcException Make(Code code, string field, string reason)
    {
        field = string.IsNullOrWhiteSpace(field) ? $"\"{field}\"" : Echo(field, MaxField); // a blank name is quoted, as JSON writes it
        reason = Echo(reason, MaxReason);
        var status = new Google.Rpc.Status
        {
            Code = (int)code,
            Message = $"{field}: {reason}",
            Details =
            {
                Any.Pack(new BadRequest { FieldViolations = { new BadRequest.Types.FieldViolation { Field = field, Description = reason } } }),
            },
        };
        return status.ToRpcException();
    }
}
