using System.Net.Http.Json;
using System.Text.Json.Serialization;
using System.Threading.Channels;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Http.Resilience;
using Microsoft.Extensions.Logging;
using Polly;

namespace Scorer.Monitor.Reporting;

/// <summary>The JSON posted to the webhook when a version's status changes.</summary>
public sealed record StatusChangeNotice(
    [property: JsonPropertyName("model")] string Model,
    [property: JsonPropertyName("version")] string Version,
    [property: JsonPropertyName("status")] string Status,
    [property: JsonPropertyName("action")] string Action,
    [property: JsonPropertyName("reasons")] IReadOnlyList<string> Reasons,
    [property: JsonPropertyName("advice")] string Advice,
    [property: JsonPropertyName("at")] DateTimeOffset At);

/// <summary>
/// Posts each status change to <see cref="MonitorOptions.Webhook"/>, one at a time in order, through the named
/// <see cref="HttpClient"/> <see cref="ClientName"/>, whose resilience pipeline (<see cref="AddStatusWebhook"/>) gives each
/// attempt 10 s and retries a failed one after 1, 2, 4, 8 and 16 s, on the service's <see cref="TimeProvider"/>; a notice
/// still not delivered then is given up with an error in the log. Bounded: beyond <c>capacity</c> waiting notices
/// (<c>Scorer:Limits:StatusWebhookNotices</c>, default 1,000) the oldest is dropped, counted in <see cref="Dropped"/> and logged.
/// </summary>
public sealed class StatusWebhook : IAsyncDisposable
{
    /// <summary>The name of the webhook's HttpClient.</summary>
    public const string ClientName = "scorer-status-webhook";

    /// <summary>Retries after the first attempt, 1 s apart doubling (1, 2, 4, 8, 16 s).</summary>
    public const int Retries = 5;

    /// <summary>The default bound on waiting notices.</summary>
    public const int DefaultCapacity = 1_000;

    /// <summary>A dropped notice is logged the first time and then every this many.</summary>
    internal const int LogEvery = 100;

    private readonly Channel<StatusChangeNotice> _queue;
    private readonly int _capacity;
    private long _dropped;

    private readonly IHttpClientFactory _clients;
    private readonly CancellationTokenSource _stop = new();
    private readonly Uri? _target;
    private readonly ILogger<StatusWebhook> _logger;
    private readonly Task _loop;

    private readonly TimeProvider _time;

    public StatusWebhook(MonitorOptions options, TimeProvider time, IHttpClientFactory clients, ILogger<StatusWebhook> logger, int capacity = DefaultCapacity)
    {
        _capacity = capacity;
        _queue = Channel.CreateBounded<StatusChangeNotice>(
            new BoundedChannelOptions(capacity) { FullMode = BoundedChannelFullMode.DropOldest, SingleReader = true }, OnDropped);
        _target = options.Webhook;
        _time = time;
        _clients = clients;
        _logger = logger;
        _loop = _target is null ? Task.CompletedTask : Task.Run(LoopAsync);
    }

    /// <summary>Queues a status change for the webhook (nothing happens without <see cref="MonitorOptions.Webhook"/>).</summary>
    public void Notify(string model, string version, StatusJudgement judgement)
    {
        if (_target is not null)
        {
            _queue.Writer.TryWrite(new StatusChangeNotice(model, version, judgement.Name, judgement.ActionName, judgement.Reasons, judgement.Advice, _time.GetUtcNow()));
        }
    }

    /// <summary>Notices waiting to be posted (the one being posted not included).</summary>
    public int Waiting => _queue.Reader.Count;

    /// <summary>Notices dropped, oldest first, because <c>capacity</c> were waiting, since start.</summary>
    public long Dropped => Interlocked.Read(ref _dropped);

    private void OnDropped(StatusChangeNotice notice)
    {
        var dropped = Interlocked.Increment(ref _dropped);
        if (dropped % LogEvery == 1)
        {
            StatusWebhookEvents.Dropping(_logger, _capacity, notice.Model, notice.Version, notice.Status, dropped);
        }
    }

    /// <summary>Notices posted successfully since start.</summary>
    public long Delivered => Interlocked.Read(ref _delivered);

    private long _delivered;
    private int _disposed;

    /// <summary>
    /// Registers the webhook and its HttpClient: each attempt timed out after 10 s, a failed one (a connection error,
    /// a timeout, a 408, 429 or 5xx answer) retried <see cref="Retries"/> times with exponential backoff from 1 s, without
    /// jitter, on the <see cref="TimeProvider"/> registered in the container.
    /// </summary>
    public static IServiceCollection AddStatusWebhook(IServiceCollection services, int capacity = DefaultCapacity)
    {
        services.AddHttpClient(ClientName, c => c.Timeout = Timeout.InfiniteTimeSpan) // the pipeline times each attempt
            .AddResilienceHandler("status-webhook", (pipeline, context) =>
            {
                pipeline.TimeProvider = context.ServiceProvider.GetService<TimeProvider>() ?? TimeProvider.System;
                var logger = context.ServiceProvider.GetRequiredService<ILogger<StatusWebhook>>();
                pipeline.AddRetry(new HttpRetryStrategyOptions
                {
                    MaxRetryAttempts = Retries,
                    BackoffType = DelayBackoffType.Exponential,
                    Delay = TimeSpan.FromSeconds(1),
                    UseJitter = false,
                    ShouldRetryAfterHeader = false,
                    OnRetry = args =>
                    {
                        StatusWebhookEvents.Retrying(logger, args.Outcome.Exception?.Message ?? $"HTTP {(int?)args.Outcome.Result?.StatusCode}", args.AttemptNumber + 2, Retries + 1, args.RetryDelay);
                        return ValueTask.CompletedTask;
                    },
                });
                pipeline.AddTimeout(TimeSpan.FromSeconds(10));
            });
        services.AddSingleton(sp =>
        {
            var webhook = ActivatorUtilities.CreateInstance<StatusWebhook>(sp, capacity);
            if (sp.GetService<MonitorReporter>() is { } reporter)
            {
                reporter.StatusChanged += webhook.Notify;
            }

            return webhook;
        });
        return services;
    }

    public async ValueTask DisposeAsync()
    {
        if (Interlocked.Exchange(ref _disposed, 1) == 1)
        {
            return;
        }

        _queue.Writer.TryComplete();
        await _stop.CancelAsync().ConfigureAwait(false);
        try
        {
            await _loop.ConfigureAwait(false);
        }
        catch (OperationCanceledException)
        {
        }

        _stop.Dispose();
    }

    private async Task LoopAsync()
    {
        var http = _clients.CreateClient(ClientName);
        await foreach (var notice in _queue.Reader.ReadAllAsync(_stop.Token).ConfigureAwait(false))
        {
            try
            {
                using var response = await http.PostAsJsonAsync(_target, notice, _stop.Token).ConfigureAwait(false);
                response.EnsureSuccessStatusCode();
                Interlocked.Increment(ref _delivered);
            }
            catch (Exception ex) when (ex is HttpRequestException or TaskCanceledException or Polly.Timeout.TimeoutRejectedException && !_stop.IsCancellationRequested)
            {
                StatusWebhookEvents.GaveUp(_logger, ex, notice.Model, notice.Version, _target, Retries + 1);
            }
        }
    }
}

/// <summary>The log events of this file, with their event ids (docs/operations.md lists them).</summary>
internal static partial class StatusWebhookEvents
{
    [LoggerMessage(EventId = 3201, Level = LogLevel.Warning, Message = "Posting a status change to the webhook failed ({Error}); attempt {Attempt} of {Attempts} in {Delay}")]
    public static partial void Retrying(ILogger logger, string error, int attempt, int attempts, TimeSpan delay);

    [LoggerMessage(EventId = 3202, Level = LogLevel.Error, Message = "Giving up posting the status change of {Model} {Version} to {Webhook} after {Attempts} attempts")]
    public static partial void GaveUp(ILogger logger, Exception error, string model, string version, Uri? webhook, int attempts);

    [LoggerMessage(EventId = 5030, Level = LogLevel.Warning,
        Message = "Status webhook behind ({Capacity} notices waiting, Scorer:Limits:StatusWebhookNotices): the oldest are dropped, now {Model} {Version} ({Status}); {Dropped} so far")]
    public static partial void Dropping(ILogger logger, int capacity, string model, string version, string status, long dropped);
}
