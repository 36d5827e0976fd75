using System.Diagnostics;
using System.Threading.Channels;
using Microsoft.Extensions.Logging;

namespace Scorer.Store;

public sealed record PredictionLogOptions
{
    /// <summary>Log scored rows at all. Default true.</summary>
    public bool Enabled { get; init; } = true;

    /// <summary>Rows held in memory waiting for the store; beyond it new rows are dropped and counted. Default 200,000.</summary>
    public int Capacity { get; init; } = 200_000;

    /// <summary>Rows per write. Default 2,000.</summary>
    public int MaxBatch { get; init; } = 2_000;

    /// <summary>How long a partial batch waits for more rows. Default 20 ms.</summary>
    public TimeSpan MaxDelay { get; init; } = TimeSpan.FromMilliseconds(20);

    /// <summary>How long shutdown waits for the queue to drain. Default 20 s.</summary>
    public TimeSpan DrainTimeout { get; init; } = TimeSpan.FromSeconds(20);
}

/// <summary>
/// The prediction log behind the request path: a bounded queue drained by one writer in batches. Scoring never waits
/// for the store. When the store is slow the queue fills to its bound (memory stays bounded); rows that find it full
/// are dropped and counted, never lost silently. A failed write is retried with backoff and the batch kept; shutdown
/// drains the queue, within <see cref="PredictionLogOptions.DrainTimeout"/>.
/// </summary>
public sealed class PredictionLog : IAsyncDisposable
{
    private readonly IScorerStore _store;
    private readonly PredictionLogOptions _options;
    private readonly ILogger _logger;
    private readonly Channel<PredictionRecord> _queue;
    private readonly CancellationTokenSource _abort = new();
    private readonly Task _writer;
    private long _enqueued;
    private long _written;
    private long _dropped;
    private long _failedWrites;
    private long _lastBatchTicks;
    private int _stopped;

    public PredictionLog(IScorerStore store, PredictionLogOptions options, ILogger<PredictionLog> logger)
    {
        _store = store;
        _options = options;
        _logger = logger;
        _queue = Channel.CreateBounded<PredictionRecord>(new BoundedChannelOptions(Math.Max(1, options.Capacity))
        {
            SingleReader = true,
            SingleWriter = false,
            FullMode = BoundedChannelFullMode.Wait,
        });
        _writer = options.Enabled ? Task.Run(WriteLoopAsync) : Task.CompletedTask;
    }

    public bool Enabled => _options.Enabled;
    public long Enqueued => Interlocked.Read(ref _enqueued);
    public long Written => Interlocked.Read(ref _written);
    public long Dropped => Interlocked.Read(ref _dropped);
    public long FailedWrites => Interlocked.Read(ref _failedWrites);
    public int Depth => _queue.Reader.CanCount ? _queue.Reader.Count : 0;
    public int Capacity => _options.Capacity;

    /// <summary>Duration of the last batch write.</summary>
    public TimeSpan LastBatchLatency => TimeSpan.FromTicks(Interlocked.Read(ref _lastBatchTicks));

    /// <summary>Queues a row; false (and counted as dropped) when the queue is full or the log is stopping.</summary>
    public bool TryEnqueue(PredictionRecord record)
    {
        if (!_options.Enabled)
        {
            return false;
        }

        if (_queue.Writer.TryWrite(record))
        {
            Interlocked.Increment(ref _enqueued);
            return true;
        }

        if (Interlocked.Increment(ref _dropped) % 10_000 == 1)
        {
            _logger.LogWarning("Prediction log full ({Capacity} rows waiting): rows are being dropped; {Dropped} so far", _options.Capacity, Dropped);
        }

        return false;
    }

    /// <summary>Stops taking rows and waits for the queue to drain (bounded by the drain timeout).</summary>
    public async Task StopAsync()
    {
        if (Interlocked.Exchange(ref _stopped, 1) == 1)
        {
            return;
        }

        _queue.Writer.TryComplete();
        var finished = await Task.WhenAny(_writer, Task.Delay(_options.DrainTimeout)).ConfigureAwait(false);
        if (finished != _writer)
        {
            await _abort.CancelAsync().ConfigureAwait(false);
            _logger.LogError("Prediction log did not drain within {Timeout}; {Depth} rows not written", _options.DrainTimeout, Depth);
        }

        try
        {
            await _writer.ConfigureAwait(false);
        }
        catch (OperationCanceledException)
        {
        }
    }

    public async ValueTask DisposeAsync()
    {
        await StopAsync().ConfigureAwait(false);
        _abort.Dispose();
    }

    private async Task WriteLoopAsync()
    {
        var batch = new List<PredictionRecord>(_options.MaxBatch);
        var reader = _queue.Reader;
        while (await reader.WaitToReadAsync(_abort.Token).ConfigureAwait(false))
        {
            var deadline = Stopwatch.GetTimestamp() + (long)(_options.MaxDelay.TotalSeconds * Stopwatch.Frequency);
            while (batch.Count < _options.MaxBatch)
            {
                if (reader.TryRead(out var item))
                {
                    batch.Add(item);
                    continue;
                }

                if (Stopwatch.GetTimestamp() >= deadline || reader.Completion.IsCompleted)
                {
                    break;
                }

                await Task.Delay(1, _abort.Token).ConfigureAwait(false);
            }

            if (batch.Count > 0)
            {
                await WriteWithRetryAsync(batch).ConfigureAwait(false);
                batch.Clear();
            }
        }
    }

    private async Task WriteWithRetryAsync(List<PredictionRecord> batch)
    {
        var delay = TimeSpan.FromMilliseconds(100);
        var failed = false;
        while (true)
        {
            var started = Stopwatch.GetTimestamp();
            try
            {
                // A batch is written all or nothing. After a failure the store may still have committed it (the reply
                // was lost): then its first row is there, and writing it again would only fail on the stored ids.
                if (failed && await _store.GetPredictionAsync(batch[0].Id, _abort.Token).ConfigureAwait(false) is not null)
                {
                    Interlocked.Add(ref _written, batch.Count);
                    return;
                }

                await _store.WritePredictionsAsync(batch, _abort.Token).ConfigureAwait(false);
                Interlocked.Exchange(ref _lastBatchTicks, Stopwatch.GetElapsedTime(started).Ticks);
                Interlocked.Add(ref _written, batch.Count);
                return;
            }
            catch (OperationCanceledException) when (_abort.IsCancellationRequested)
            {
                throw;
            }
#pragma warning disable CA1031 // the store may fail for any reason; the batch is kept and retried
            catch (Exception ex)
#pragma warning restore CA1031
            {
                Interlocked.Increment(ref _failedWrites);
                failed = true;
                _logger.LogError(ex, "Writing {Rows} predictions failed; retrying in {Delay}", batch.Count, delay);
                await Task.Delay(delay, _abort.Token).ConfigureAwait(false);
                delay = TimeSpan.FromTicks(Math.Min(delay.Ticks * 2, TimeSpan.FromSeconds(5).Ticks));
            }
        }
    }
}
