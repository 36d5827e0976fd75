using Google.Protobuf.WellKnownTypes;
using Google.Rpc;
using Grpc.Core;

namespace Scorer.Transport;

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

    /// <summary>A part the call needs (<paramref name="field"/>: the store) does not answer now; the caller may retry.</summary>
    public static RpcException Unavailable(string field, string reason) => Make(Code.Unavailable, field, reason);

    private static RpcException Make(Code code, string field, string reason)
    {
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
