using System.Security.Cryptography;
using System.Text;
using Grpc.Core;
using Grpc.Core.Interceptors;

namespace Scorer.Transport;

/// <summary>An API key and the roles it carries (<c>score</c>, <c>outcomes</c>, <c>admin</c>).</summary>
public sealed record ApiKey
{
    /// <summary>Who the key belongs to: recorded as the actor of stage changes.</summary>
    public required string Name { get; init; }

    public required string Key { get; init; }

    public IReadOnlyList<string> Roles { get; init; } = [];
}

/// <summary>
/// Checks <c>Authorization: Bearer &lt;key&gt;</c> on every call (gRPC and transcoded REST alike): scoring and reading
/// need the <c>score</c> role (or <c>admin</c>), stage changes need <c>admin</c>. With no keys configured every call is
/// let through as "anonymous" (the host allows that on loopback only).
/// </summary>
public sealed class ApiKeyInterceptor(IReadOnlyList<ApiKey> keys) : Interceptor
{
    private const string ActorKey = "scorer.actor";

    private static readonly Dictionary<string, string> RoleOfMethod = new(StringComparer.Ordinal)
    {
        ["/scorer.v1.Models/SetStage"] = "admin",
        ["/scorer.v1.Models/Rollback"] = "admin",
        ["/scorer.v1.Outcomes/RecordOutcomes"] = "outcomes",
        ["/scorer.v1.Outcomes/RecordOutcomesStream"] = "outcomes",
        ["/scorer.v1.Outcomes/ExportLabelled"] = "admin",
        ["/scorer.v1.Monitor/Recalibrate"] = "admin",
    };

    public static string Actor(ServerCallContext context) =>
        context.UserState.TryGetValue(ActorKey, out var actor) && actor is string s ? s : "anonymous";

    public override Task<TResponse> UnaryServerHandler<TRequest, TResponse>(TRequest request, ServerCallContext context, UnaryServerMethod<TRequest, TResponse> continuation)
    {
        Authorize(context);
        return continuation(request, context);
    }

    public override Task DuplexStreamingServerHandler<TRequest, TResponse>(IAsyncStreamReader<TRequest> requestStream, IServerStreamWriter<TResponse> responseStream,
        ServerCallContext context, DuplexStreamingServerMethod<TRequest, TResponse> continuation)
    {
        Authorize(context);
        return continuation(requestStream, responseStream, context);
    }

    public override Task<TResponse> ClientStreamingServerHandler<TRequest, TResponse>(IAsyncStreamReader<TRequest> requestStream, ServerCallContext context,
        ClientStreamingServerMethod<TRequest, TResponse> continuation)
    {
        Authorize(context);
        return continuation(requestStream, context);
    }

    public override Task ServerStreamingServerHandler<TRequest, TResponse>(TRequest request, IServerStreamWriter<TResponse> responseStream, ServerCallContext context,
        ServerStreamingServerMethod<TRequest, TResponse> continuation)
    {
        Authorize(context);
        return continuation(request, responseStream, context);
    }

    private void Authorize(ServerCallContext context)
    {
        if (context.Method.StartsWith("/grpc.", StringComparison.Ordinal))
        {
            return; // health and reflection are open
        }

        context.UserState[ActorKey] = Authorize(context.RequestHeaders.GetValue("authorization"), context.Method);
    }

    /// <summary>
    /// Checks an <c>Authorization</c> header for a gRPC method (<c>/scorer.v1.Service/Method</c>); returns who called
    /// ("anonymous" without configured keys) or throws the Unauthenticated / PermissionDenied error.
    /// </summary>
    public string Authorize(string? header, string method)
    {
        if (keys.Count == 0)
        {
            return "anonymous";
        }

        if (header is null || !header.StartsWith("Bearer ", StringComparison.OrdinalIgnoreCase))
        {
            throw Errors.Unauthenticated("send 'Authorization: Bearer <key>'");
        }

        var presented = Encoding.UTF8.GetBytes(header[7..].Trim());
        var key = keys.FirstOrDefault(k => CryptographicOperations.FixedTimeEquals(Encoding.UTF8.GetBytes(k.Key), presented))
            ?? throw Errors.Unauthenticated("the API key is not known");
        var role = RoleOfMethod.GetValueOrDefault(method, "score");
        if (!key.Roles.Contains(role) && !key.Roles.Contains("admin"))
        {
            throw Errors.Forbidden($"the key '{key.Name}' lacks the '{role}' role this call needs");
        }

        return key.Name;
    }
}
