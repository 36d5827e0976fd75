using System.Net.Http.Json;
using System.Text.Json.Serialization;
using System.Threading.Channels;
using Microsoft.Extensions.Logging;

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
/// Posts each status change to <see cref="MonitorOptions.Webhook"/>, one at a time in order, retrying a failed post
/// with backoff (1, 2, 4, 8, 16 s) before giving up on it with an error in the log. Bounded: beyond 1,000 waiting
/// notices the oldest are dropped (and logged).
/// </summary>
public sealed class StatusWebhook : IAsyncDisposable
{
    private static readonly TimeSpan[] Backoff = [TimeSpan.FromSeconds(1), TimeSpan.FromSeconds(2), TimeSpan.FromSeconds(4), TimeSpan.FromSeconds(8), TimeSpan.FromSeconds(16)];

    private readonly Channel<StatusChangeNotice> _queue = Channel.CreateBounded<StatusChangeNotice>(
        new BoundedChannelOptions(1_000) { FullMode = BoundedChannelFullMode.DropOldest, SingleReader = true });

    private readonly HttpClient _http = new() { Timeout = TimeSpan.FromSeconds(10) };
    private readonly CancellationTokenSource _stop = new();
    private readonly Uri? _target;
    private readonly ILogger<StatusWebhook> _logger;
    private readonly Task _loop;

    public StatusWebhook(MonitorOptions options, MonitorReporter reporter, TimeProvider time, ILogger<StatusWebhook> logger)
    {
        _target = options.Webhook;
        _logger = logger;
        _loop = _target is null ? Task.CompletedTask : Task.Run(LoopAsync);
        if (_target is not null)
        {
            reporter.StatusChanged += (model, version, judgement) =>
                _queue.Writer.TryWrite(new StatusChangeNotice(model, version, judgement.Name, judgement.ActionName, judgement.Reasons, judgement.Advice, time.GetUtcNow()));
        }
    }

    /// <summary>Notices posted successfully since start.</summary>
    public long Delivered { get; private set; }

    private int _disposed;

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

        _http.Dispose();
        _stop.Dispose();
    }

    private async Task LoopAsync()
    {
        await foreach (var notice in _queue.Reader.ReadAllAsync(_stop.Token).ConfigureAwait(false))
        {
            for (var attempt = 0; ; attempt++)
            {
                try
                {
                    using var response = await _http.PostAsJsonAsync(_target, notice, _stop.Token).ConfigureAwait(false);
                    response.EnsureSuccessStatusCode();
                    Delivered++;
                    break;
                }
                catch (Exception ex) when (ex is HttpRequestException or TaskCanceledException && !_stop.IsCancellationRequested)
                {
                    if (attempt >= Backoff.Length)
                    {
                        _logger.LogError(ex, "Giving up posting the status change of {Model} {Version} to {Webhook} after {Attempts} attempts",
                            notice.Model, notice.Version, _target, attempt + 1);
                        break;
                    }

                    _logger.LogWarning("Posting the status change of {Model} {Version} to {Webhook} failed ({Error}); retrying in {Delay}",
                        notice.Model, notice.Version, _target, ex.Message, Backoff[attempt]);
                    await Task.Delay(Backoff[attempt], _stop.Token).ConfigureAwait(false);
                }
            }
        }
    }
}
