using System.Security.Claims;
using System.Security.Cryptography;
using System.Text;
using System.Text.Encodings.Web;
using Grpc.Core;
using Microsoft.AspNetCore.Authentication;
using Microsoft.AspNetCore.Authorization;
using Microsoft.AspNetCore.Authorization.Policy;
using Microsoft.AspNetCore.Http;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Logging;
using Microsoft.Extensions.Options;

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
/// The roles, each named after what it allows, and the authorization policy of the same name: <c>score</c> scores and
/// reads (models, reports, the page's data), <c>outcomes</c> records outcomes, <c>admin</c> changes stages, recalibrates
/// and exports labelled rows; a key with <c>admin</c> may do everything.
/// </summary>
public static class Roles
{
    public const string Score = "score";
    public const string Outcomes = "outcomes";
    public const string Admin = "admin";

    public static readonly IReadOnlyList<string> All = [Score, Outcomes, Admin];
}

/// <summary>A policy's one requirement: the role it names, or <c>admin</c>.</summary>
public sealed class RoleRequirement(string role) : AuthorizationHandler<RoleRequirement>, IAuthorizationRequirement
{
    public string Role { get; } = role;

    protected override Task HandleRequirementAsync(AuthorizationHandlerContext context, RoleRequirement requirement)
    {
        if (context.User.IsInRole(requirement.Role) || context.User.IsInRole(Roles.Admin))
        {
            context.Succeed(requirement);
        }

        return Task.CompletedTask;
    }
}

/// <summary>The configured keys, for <see cref="ApiKeyAuthentication"/>.</summary>
public sealed class ApiKeyOptions : AuthenticationSchemeOptions
{
    private IReadOnlyList<ApiKey> _keys = [];

    public IReadOnlyList<ApiKey> Keys
    {
        get => _keys;
        set
        {
            _keys = value;
            KeyBytes = [.. value.Select(k => Encoding.UTF8.GetBytes(k.Key))];
        }
    }

    /// <summary>Each key's UTF-8 bytes, made once, in the order of <see cref="Keys"/>.</summary>
    internal byte[][] KeyBytes { get; private set; } = [];
}

/// <summary>
/// The <c>ApiKey</c> authentication scheme: <c>Authorization: Bearer &lt;key&gt;</c> on every call, gRPC, transcoded
/// REST, direct REST and the page alike (keys compared in constant time). With no keys configured every caller is
/// "anonymous" with every role (the host allows that on loopback only). The name of the key is the caller's name, the
/// actor recorded with stage changes.
/// </summary>
public sealed class ApiKeyAuthentication(IOptionsMonitor<ApiKeyOptions> options, ILoggerFactory logger, UrlEncoder encoder)
    : AuthenticationHandler<ApiKeyOptions>(options, logger, encoder)
{
    public const string SchemeName = "ApiKey";

    /// <summary>Where the reason a key was refused is kept for the error written by <see cref="ApiKeyResults"/>.</summary>
    internal const string RefusalItem = "scorer.refusal";

    protected override Task<AuthenticateResult> HandleAuthenticateAsync()
    {
        var keys = Options.Keys;
        if (keys.Count == 0)
        {
            return Task.FromResult(Success("anonymous", Roles.All));
        }

        var header = Request.Headers.Authorization.ToString();
        if (!header.StartsWith("Bearer ", StringComparison.OrdinalIgnoreCase))
        {
            Context.Items[RefusalItem] = "send 'Authorization: Bearer <key>'";
            return Task.FromResult(AuthenticateResult.NoResult());
        }

        var presented = Encoding.UTF8.GetBytes(header[7..].Trim());
        ApiKey? key = null;
        for (var i = 0; i < keys.Count && key is null; i++)
        {
            key = CryptographicOperations.FixedTimeEquals(Options.KeyBytes[i], presented) ? keys[i] : null;
        }

        if (key is null)
        {
            Context.Items[RefusalItem] = "the API key is not known";
            return Task.FromResult(AuthenticateResult.Fail("the API key is not known"));
        }

        return Task.FromResult(Success(key.Name, key.Roles));
    }

    private AuthenticateResult Success(string name, IEnumerable<string> roles)
    {
        var identity = new ClaimsIdentity([new Claim(ClaimTypes.Name, name), .. roles.Select(r => new Claim(ClaimTypes.Role, r))], SchemeName);
        return AuthenticateResult.Success(new AuthenticationTicket(new ClaimsPrincipal(identity), SchemeName));
    }

    /// <summary>The name of the key a gRPC call came with ("anonymous" without configured keys).</summary>
    public static string Actor(ServerCallContext context) => context.GetHttpContext().User.Identity?.Name ?? "anonymous";
}

/// <summary>
/// Writes a refused call in the API's one error shape: a gRPC status (Unauthenticated, PermissionDenied) with the
/// reason for gRPC callers, the google.rpc.Status JSON with HTTP 401/403 for REST callers, naming the role a call needs.
/// </summary>
public sealed class ApiKeyResults : IAuthorizationMiddlewareResultHandler
{
    private readonly AuthorizationMiddlewareResultHandler _default = new();

    public Task HandleAsync(RequestDelegate next, HttpContext context, AuthorizationPolicy policy, PolicyAuthorizationResult authorizeResult)
    {
        if (authorizeResult.Succeeded)
        {
            return _default.HandleAsync(next, context, policy, authorizeResult);
        }

        RpcException error;
        var metrics = context.RequestServices.GetService<ScorerMetrics>();
        metrics?.Refused.WithLabels(authorizeResult.Forbidden ? "forbidden" : "unauthenticated").Inc();
        if (authorizeResult.Forbidden)
        {
            var role = authorizeResult.AuthorizationFailure?.FailedRequirements.OfType<RoleRequirement>().FirstOrDefault()?.Role ?? Roles.Admin;
            error = Errors.Forbidden($"the key '{context.User.Identity?.Name}' lacks the '{role}' role this call needs");
        }
        else
        {
            error = Errors.Unauthenticated(context.Items[ApiKeyAuthentication.RefusalItem] as string ?? "send 'Authorization: Bearer <key>'");
        }

        if (context.Request.ContentType?.StartsWith("application/grpc", StringComparison.OrdinalIgnoreCase) == true)
        {
            // A trailers-only gRPC response: HTTP 200 with the status in the headers, as a gRPC server refuses a call.
            context.Response.StatusCode = StatusCodes.Status200OK;
            context.Response.ContentType = "application/grpc";
            context.Response.Headers["grpc-status"] = ((int)error.StatusCode).ToString(System.Globalization.CultureInfo.InvariantCulture);
            context.Response.Headers["grpc-message"] = Uri.EscapeDataString(error.Status.Detail);
            if (error.GetRpcStatus() is { } status)
            {
                // The google.rpc.Status with its BadRequest details, as every other error of the API carries it.
                context.Response.Headers["grpc-status-details-bin"] = Convert.ToBase64String(Google.Protobuf.MessageExtensions.ToByteArray(status)).TrimEnd('=');
            }
            return Task.CompletedTask;
        }

        return Rest.RestScoring.WriteErrorAsync(context.Response, error);
    }
}

/// <summary>Registers the <c>ApiKey</c> scheme, the role policies and the refusal writer.</summary>
public static class ApiKeyRegistration
{
    public static IServiceCollection AddApiKeys(this IServiceCollection services, IReadOnlyList<ApiKey> keys)
    {
        services.AddAuthentication(ApiKeyAuthentication.SchemeName)
            .AddScheme<ApiKeyOptions, ApiKeyAuthentication>(ApiKeyAuthentication.SchemeName, o => o.Keys = keys);
        services.AddAuthorizationBuilder()
            .AddPolicy(Roles.Score, p => p.RequireAuthenticatedUser().AddRequirements(new RoleRequirement(Roles.Score)))
            .AddPolicy(Roles.Outcomes, p => p.RequireAuthenticatedUser().AddRequirements(new RoleRequirement(Roles.Outcomes)))
            .AddPolicy(Roles.Admin, p => p.RequireAuthenticatedUser().AddRequirements(new RoleRequirement(Roles.Admin)));
        // RoleRequirement is its own handler: the framework's pass-through handler runs it for each policy.
        services.AddSingleton<IAuthorizationMiddlewareResultHandler, ApiKeyResults>();
        return services;
    }
}
