using Microsoft.Extensions.Logging;
using Serilog;
using System.Net;
using System.Threading.RateLimiting;
using Microsoft.AspNetCore.Server.Kestrel.Core;
using Microsoft.Extensions.DependencyInjection.Extensions;
using Microsoft.Extensions.Options;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Store.Postgres;
using Scorer.Store.Sqlite;
using Scorer.Transport;
using Scorer.Transport.Services;

namespace Scorer.Host;

/// <summary>Builds and runs the service: one process, embedded defaults, everything configurable.</summary>
public static class ScorerServer
{
    private static readonly Dictionary<string, string> Switches = new(StringComparer.Ordinal)
    {
        ["--models"] = "Scorer:ModelsPath",
        ["--store"] = "Scorer:Store:Path",
        ["--store-kind"] = "Scorer:Store:Kind",
        ["--store-connection"] = "Scorer:Store:ConnectionString",
        ["--http"] = "Scorer:Http",
        ["--grpc"] = "Scorer:Grpc",
    };

    /// <summary>
    /// Each store kind (<c>Scorer:Store:Kind</c>) and the driver's registration of it; <see cref="StoreOptions.Validate"/>
    /// refuses any other kind.
    /// </summary>
    internal static readonly IReadOnlyDictionary<string, Action<IServiceCollection, StoreOptions>> StoreKinds =
        new Dictionary<string, Action<IServiceCollection, StoreOptions>>(StringComparer.Ordinal)
        {
            ["sqlite"] = (services, store) => services.AddSqliteStore(store.Path, new SqliteStoreOptions
            {
                MaxSizeBytes = store.MaxSizeMegabytes << 20,
                PredictionRetention = store.PredictionRetention,
                OutcomeRetention = store.OutcomeRetention,
                PruneInterval = store.PruneInterval,
                PruneBatchSize = store.PruneBatchSize,
                WriteCacheBytes = (long)store.WriteCacheMegabytes << 20,
                ReadCacheBytes = (long)store.ReadCacheMegabytes << 20,
            }),
            ["postgres"] = (services, store) => services.AddPostgresStore(store.ConnectionString!, new PostgresStoreOptions
            {
                Schema = store.Schema,
                PredictionRetention = store.PredictionRetention,
                OutcomeRetention = store.OutcomeRetention,
                PruneInterval = store.PruneInterval,
            }),
        };

    public static async Task<int> RunAsync(string[] args)
    {
        WebApplication app;
        try
        {
            app = await BuildAsync(args).ConfigureAwait(false);
        }
        catch (OptionsValidationException ex)
        {
            await Console.Error.WriteLineAsync("scorer: the settings are not usable:").ConfigureAwait(false);
            foreach (var failure in ex.Failures)
            {
                await Console.Error.WriteLineAsync("  " + failure).ConfigureAwait(false);
            }

            return 2;
        }

        await app.RunAsync().ConfigureAwait(false);
        return 0;
    }

    /// <summary>Builds the application, migrates the store and loads the models; the caller starts it.</summary>
    public static async Task<WebApplication> BuildAsync(string[] args, Action<WebApplicationBuilder>? configure = null)
    {
        var builder = WebApplication.CreateSlimBuilder(new WebApplicationOptions { Args = args, ContentRootPath = AppContext.BaseDirectory });
        builder.Configuration.AddCommandLine(args, Switches);
        configure?.Invoke(builder);
        var options = builder.Configuration.GetSection("Scorer").Get<ScorerOptions>() ?? new ScorerOptions();
        var problems = options.Validate();
        if (problems.Count > 0)
        {
            throw new OptionsValidationException("Scorer", typeof(ScorerOptions), problems);
        }

        var http = ScorerOptions.ParseEndpoint(options.Http, "Scorer:Http")!;
        var grpc = ScorerOptions.ParseEndpoint(options.Grpc, "Scorer:Grpc")!;
        builder.WebHost.ConfigureKestrel(k =>
        {
            k.Limits.MaxRequestBodySize = options.MaxRequestBodyBytes;
            k.Listen(http, o => o.Protocols = HttpProtocols.Http1AndHttp2);
            k.Listen(grpc, o => o.Protocols = HttpProtocols.Http2);
        });

        var level = Enum.Parse<Serilog.Events.LogEventLevel>(options.LogLevel, ignoreCase: true);
        var json = options.LogFormat == "json" || (options.LogFormat == "auto" && Console.IsOutputRedirected);
        builder.Services.AddSerilog(log =>
        {
            log.MinimumLevel.Is(level)
                .MinimumLevel.Override("Microsoft.AspNetCore", Serilog.Events.LogEventLevel.Warning)
                .MinimumLevel.Override("Grpc", Serilog.Events.LogEventLevel.Warning)
                .Enrich.FromLogContext();
            if (json)
            {
                log.WriteTo.Console(new Serilog.Formatting.Compact.CompactJsonFormatter());
            }
            else
            {
                log.WriteTo.Console(outputTemplate: "{Timestamp:HH:mm:ss} {Level:u3} {Message:lj}{NewLine}{Exception}", formatProvider: System.Globalization.CultureInfo.InvariantCulture);
            }
        });
        builder.Services.AddSingleton(options);
        builder.Services.TryAddSingleton(TimeProvider.System); // a test may bring its own clock
        // The store of the configured kind: its driver registers the store (as IScorerStore and each narrow contract),
        // its signals and its own background work.
        StoreKinds[options.Store.Kind](builder.Services, options.Store);
        builder.Services.AddSingleton(new RegistryOptions { ModelsPath = options.ModelsPath, Reader = options.ModelFiles.ToReaderOptions() });
        builder.Services.AddSingleton<ModelRegistry>();
        builder.Services.AddSingleton(sp => new RegistryWatcher(sp.GetRequiredService<ModelRegistry>(), sp.GetRequiredService<RegistryOptions>(),
            sp.GetRequiredService<TimeProvider>(), sp.GetRequiredService<ILogger<RegistryWatcher>>()) { RescanInterval = options.RescanInterval });
        builder.Services.AddSingleton(sp => new PredictionLog(sp.GetRequiredService<IPredictionLogStore>(), options.PredictionLog, sp.GetRequiredService<ILogger<PredictionLog>>(),
            sp.GetRequiredService<TimeProvider>()));
        builder.Services.AddSingleton<ShadowScorer>();
        // The application layer (src/Scorer.Application): every transport goes through these.
        builder.Services.AddSingleton<Scorer.Application.Models.ModelCatalog>();
        builder.Services.AddSingleton<Scorer.Application.Scoring.ScoringPipeline>();
        builder.Services.AddSingleton<Scorer.Application.Models.StageChanges>();
        builder.Services.AddSingleton<Scorer.Application.Outcomes.OutcomeIntake>();
        builder.Services.AddSingleton<Scorer.Application.Monitoring.Recalibration>();
        builder.Services.AddSingleton(options.Monitor);
        builder.Services.AddSingleton(options.Outcomes);
        builder.Services.AddSingleton<Scorer.Monitor.Reporting.ChartRunner>();
        builder.Services.AddSingleton<Scorer.Monitor.Reporting.LabelledCache>();
        builder.Services.AddSingleton<Scorer.Monitor.Reporting.SummaryReader>();
        builder.Services.AddSingleton<Scorer.Monitor.Reporting.SummaryWriter>();
        builder.Services.AddSingleton<Scorer.Monitor.Reporting.MonitorReporter>();
        builder.Services.AddSingleton(sp => new Scorer.Monitor.Reporting.DriftTracker(sp.GetRequiredService<IDriftCountStore>(), sp.GetRequiredService<TimeProvider>(),
            options.Limits.MaxDriftTallies, sp.GetRequiredService<ILogger<Scorer.Monitor.Reporting.DriftTracker>>()));
        builder.Services.AddSingleton<Scorer.Monitor.Reporting.MonitorLoop>();
        Scorer.Monitor.Reporting.StatusWebhook.AddStatusWebhook(builder.Services, options.Limits.StatusWebhookNotices);
        builder.Services.AddSingleton<MonitorWatch>();
        builder.Services.AddSingleton<Scorer.Transport.Rest.MonitorEvents>();
        builder.Services.AddSingleton<Scorer.Transport.Rest.LabelledExport>();
        builder.Services.AddSingleton<Scorer.Transport.Rest.RestScoring>();
        // The monitor page (docs/page.md): its trends, overview and files.
        builder.Services.AddSingleton<Scorer.Monitor.Reporting.TrendReporter>();
        builder.Services.AddSingleton<Scorer.Page.PageApi>();
        builder.Services.AddSingleton(options.Limits);
        builder.Services.AddSingleton<EventSubscribers>();
        builder.Services.AddApiKeys(options.Keys); // the ApiKey scheme and the role policies (Scorer.Transport/Security)
        builder.Services.AddSingleton<ScorerMetrics>();
        builder.Services.AddExceptionHandler<Scorer.Transport.Rest.RestErrorHandler>();
        builder.Services.AddSingleton<MetricsInterceptor>();
        builder.Services.AddHostedService<Lifecycle>();
        builder.Services
            .AddGrpc(g =>
            {
                g.Interceptors.Add<MetricsInterceptor>();
                g.MaxReceiveMessageSize = (int)Math.Min(int.MaxValue, options.MaxRequestBodyBytes);
                g.EnableDetailedErrors = false;
            })
            .AddJsonTranscoding(t => t.TypeRegistry = Google.Protobuf.Reflection.TypeRegistry.FromMessages(Google.Rpc.BadRequest.Descriptor));
        builder.Services.AddGrpcReflection();
        builder.Services.AddGrpcSwagger();
        builder.Services.Configure<RouteOptions>(r => r.SetParameterPolicy<Microsoft.AspNetCore.Routing.Constraints.RegexInlineRouteConstraint>("regex"));
        builder.Services.AddSwaggerGen(c => c.SwaggerDoc("v1", new Microsoft.OpenApi.Models.OpenApiInfo
        {
            Title = "Scorer",
            Version = "v1",
            Description = "Scores rows with fitted binary GLMs; REST generated from the gRPC contract in protos/scorer/v1.",
        }));
        builder.Services.AddSingleton<ReadinessCheck>();
        builder.Services.AddGrpcHealthChecks().AddCheck<ReadinessCheck>("ready");
        if (options.RateLimitPerSecond > 0)
        {
            builder.Services.AddRateLimiter(r =>
            {
                r.RejectionStatusCode = StatusCodes.Status429TooManyRequests;
                r.GlobalLimiter = PartitionedRateLimiter.Create<HttpContext, string>(ctx => RateLimitPartition.GetTokenBucketLimiter(
                    ctx.Connection.RemoteIpAddress?.ToString() ?? "unknown",
                    _ => new TokenBucketRateLimiterOptions
                    {
                        TokenLimit = options.RateLimitPerSecond,
                        TokensPerPeriod = options.RateLimitPerSecond,
                        ReplenishmentPeriod = TimeSpan.FromSeconds(1),
                        QueueLimit = 0,
                    }));
            });
        }

        var app = builder.Build();

        // Failures of the REST routes of our own, in the API's error shape: a store that does not answer is 503 (the gRPC
        // and transcoded routes get the same from MetricsInterceptor). After the response started, the response is aborted.
        app.UseExceptionHandler(new ExceptionHandlerOptions { ExceptionHandler = Scorer.Transport.Rest.RestErrorHandler.UnknownAsync });

        // The page's assets (static file middleware) before routing, which the fallback route would otherwise answer.
        var page = app.Services.GetRequiredService<Scorer.Page.PageApi>();
        page.UseAssets(app);
        app.UseRouting();

        // A declared body over the limit is refused before anything reads it (Kestrel's own limit catches the rest).
        app.Use(async (context, next) =>
        {
            if (context.Request.ContentLength > options.MaxRequestBodyBytes)
            {
                // Read and discard a moderately large body first: closing a connection with unread data resets it,
                // and the caller would see a broken connection instead of the 413.
                if (context.Request.ContentLength <= 64L * 1024 * 1024
                    && context.Features.Get<Microsoft.AspNetCore.Http.Features.IHttpMaxRequestBodySizeFeature>() is { IsReadOnly: false } size)
                {
                    size.MaxRequestBodySize = null;
                    await context.Request.Body.CopyToAsync(Stream.Null, context.RequestAborted).ConfigureAwait(false);
                }
                else
                {
                    context.Response.Headers.Connection = "close";
                }

                var reason = $"{context.Request.ContentLength} bytes; at most {options.MaxRequestBodyBytes} (Scorer:MaxRequestBodyBytes)";
                context.Response.StatusCode = StatusCodes.Status413PayloadTooLarge;
                context.Response.ContentType = "application/json";
                await context.Response.WriteAsync(
                    $"{{\"code\":8,\"message\":\"body: {reason}\",\"details\":[{{\"@type\":\"type.googleapis.com/google.rpc.BadRequest\",\"fieldViolations\":[{{\"field\":\"body\",\"description\":\"{reason}\"}}]}}]}}").ConfigureAwait(false);
                return;
            }

            await next(context).ConfigureAwait(false);
        });

        if (options.RateLimitPerSecond > 0)
        {
            app.UseRateLimiter();
        }

        // Every call but health, metrics and the page's HTML needs a key with the role its endpoint names ([Authorize] on
        // the gRPC services, which the transcoded and direct REST routes carry too; RequireAuthorization on the others).
        app.UseAuthentication();
        app.UseAuthorization();

        if (options.DirectRestScoring)
        {
            // In front of the transcoded endpoint of the same route (routing has already matched it).
            var rest = app.Services.GetRequiredService<Scorer.Transport.Rest.RestScoring>();
            app.Use((context, next) =>
            {
                if (HttpMethods.IsPost(context.Request.Method)
                    && context.GetEndpoint()?.Metadata.GetMetadata<Grpc.AspNetCore.Server.GrpcMethodMetadata>() is { } grpcMethod
                    && grpcMethod.Method.FullName == Scorer.Transport.Rest.RestScoring.Method
                    && context.Request.RouteValues.TryGetValue("model", out var model) && model is string modelName
                    && context.Request.ContentType?.StartsWith("application/grpc", StringComparison.OrdinalIgnoreCase) != true)
                {
                    return rest.HandleAsync(context, modelName);
                }

                return next(context);
            });
        }

        // A native gRPC request the framework could not read is answered in the one error shape, naming the body.
        app.UseMiddleware<Scorer.Transport.UnreadableMessage>();

        // Every other transcoded call is checked as strictly as the direct score reader before the transcoder reads it.
        app.Use(new Scorer.Transport.Rest.TranscodedRequestCheck(options.MaxRequestBodyBytes).InvokeAsync);

        app.UseSwagger(); // the OpenAPI document at /swagger/v1/swagger.json
        app.MapGrpcService<ScoringService>();
        app.MapGrpcService<ModelsService>();
        app.MapGrpcService<OutcomesService>();
        app.MapGrpcService<MonitorService>();
        app.MapGrpcReflectionService();
        app.MapGrpcHealthChecksService();
        var metrics = app.Services.GetRequiredService<ScorerMetrics>();
        app.MapGet("/metrics", async context =>
        {
            context.Response.ContentType = "text/plain; version=0.0.4; charset=utf-8";
            await metrics.Registry.CollectAndExportAsTextAsync(context.Response.Body, context.RequestAborted).ConfigureAwait(false);
        });
        var monitorEvents = app.Services.GetRequiredService<Scorer.Transport.Rest.MonitorEvents>();
        app.MapGet("/v1/models/{model}/monitor/events", (HttpContext context, string model) => monitorEvents.HandleAsync(context, model))
            .RequireAuthorization(Roles.Score);
        var export = app.Services.GetRequiredService<Scorer.Transport.Rest.LabelledExport>();
        app.MapGet("/v1/models/{model}/labelled", (HttpContext context, string model) => export.HandleAsync(context, model))
            .RequireAuthorization(Roles.Admin);
        // The monitor page at / and /models/{model}, its files under /page/, and its JSON (docs/page.md).
        page.Map(app);
        app.MapGet("/healthz", () => Results.Text("ok\n"));
        app.MapGet("/readyz", async ([Microsoft.AspNetCore.Mvc.FromServices] ReadinessCheck check) =>
        {
            // 200 "ready", 200 with the reasons when degraded (the store does not answer; scoring goes on), 503 otherwise.
            var (ready, _, reasons) = await check.CheckAsync().ConfigureAwait(false);
            return Results.Text(reasons.Count == 0 ? "ready\n" : string.Join('\n', reasons) + "\n", statusCode: ready ? 200 : 503);
        });

        // A path no call answers is 404 in the one error shape, naming the path (not an empty 404).
        app.MapFallback("{*path}", context => Scorer.Transport.Rest.RestScoring.WriteErrorAsync(context.Response, Errors.NotFound("path",
            $"no call answers {context.Request.Method} {Errors.Echo(context.Request.Path.Value)}; the calls are listed at /swagger/v1/swagger.json")));

        await PrepareAsync(app, options).ConfigureAwait(false);
        return app;
    }

    private static async Task PrepareAsync(WebApplication app, ScorerOptions options)
    {
        var logger = app.Services.GetRequiredService<ILoggerFactory>().CreateLogger("Scorer");
        if (options.SeedDemoModels && !Directory.Exists(options.ModelsPath))
        {
            SeedDemoModels(options.ModelsPath);
            ServerEvents.DemoModelsCreated(logger, Path.GetFullPath(options.ModelsPath));
        }

        await app.Services.GetRequiredService<IScorerStore>().MigrateAsync().ConfigureAwait(false);
        await app.Services.GetRequiredService<ModelRegistry>().ReloadAsync().ConfigureAwait(false); // logs each version loaded and each file refused
        ServerEvents.Listening(logger, options.Http, options.Grpc, options.Store.Describe(), Path.GetFullPath(options.ModelsPath));

        if (options.Keys.Count == 0)
        {
            ServerEvents.NoKeys(logger);
        }
    }

    private static void SeedDemoModels(string folder)
    {
        Directory.CreateDirectory(folder);
        var assembly = typeof(ScorerServer).Assembly;
        foreach (var name in assembly.GetManifestResourceNames().Where(n => n.StartsWith("demo/", StringComparison.Ordinal)))
        {
            using var source = assembly.GetManifestResourceStream(name)!;
            using var target = File.Create(Path.Combine(folder, name["demo/".Length..]));
            source.CopyTo(target);
        }
    }
}

/// <summary>The log events of this file, with their event ids (docs/operations.md lists them).</summary>
internal static partial class ServerEvents
{
    [LoggerMessage(EventId = 1001, Level = LogLevel.Information, Message = "Created {Folder} with the demo models")]
    public static partial void DemoModelsCreated(Microsoft.Extensions.Logging.ILogger logger, string folder);

    [LoggerMessage(EventId = 1002, Level = LogLevel.Information, Message = "REST on http://{Http}, gRPC (h2c) on http://{Grpc}; store {Store}; models from {Models}")]
    public static partial void Listening(Microsoft.Extensions.Logging.ILogger logger, string http, string grpc, string store, string models);

    [LoggerMessage(EventId = 1005, Level = LogLevel.Warning, Message = "NO API KEYS ARE CONFIGURED: every caller on this machine can score and change stages. Configure Scorer:Keys before binding beyond loopback.")]
    public static partial void NoKeys(Microsoft.Extensions.Logging.ILogger logger);
}
