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

    /// <summary>
    /// The folder where rows the store refuses (a value it cannot hold, a repeated id) are kept as JSON lines with the
    /// reason, so that no accepted row is lost and none can stop the log. Default <c>data/set-aside</c>.
    /// </summary>
    public string SetAsideFolder { get; init; } = Path.Combine("data", "set-aside");

    /// <summary>
    /// Rows waiting with no successful write for this long make the log "not draining" (readiness says so). Default 30 s.
    /// </summary>
    public TimeSpan StallAfter { get; init; } = TimeSpan.FromSeconds(30);
}

/// <summary>
/// The prediction log behind the request path: a bounded queue drained by one writer in batches. Scoring never waits
/// for the store. When the store is slow the queue fills to its bound (memory stays bounded); rows that find it full
/// are dropped and counted, never lost silently. A failed write is retried with backoff and the batch kept; shutdown
/// drains the queue, within <see cref="PredictionLogOptions.DrainTimeout"/>. A batch the store refuses for what it
/// holds (<see cref="IPredictionLogStore.IsRefusal"/>) is split until the refused rows are found; those are set aside in
/// <see cref="PredictionLogOptions.SetAsideFolder"/> with the reason and counted, and the rest is written, so no single
/// row can stop the log.
/// </summary>
public sealed class PredictionLog : IAsyncDisposable
{
    private readonly IPredictionLogStore _store;
    private readonly PredictionLogOptions _options;
    private readonly ILogger _logger;
    private readonly TimeProvider _time;
    private readonly Channel<PredictionRecord> _queue;
    private readonly CancellationTokenSource _abort = new();
    private readonly Task _writer;
    private long _enqueued;
    private long _written;
    private long _dropped;
    private long _failedWrites;
    private long _setAside;
    private long _inWriter; // rows taken from the queue and not yet written or set aside
    private long _lastBatchTicks;
    // When the writer last had nothing in hand or a write last succeeded (TimeProvider timestamps), for "not draining".
    private long _lastDrainedTimestamp;
    private int _stopped;

    public PredictionLog(IPredictionLogStore store, PredictionLogOptions options, ILogger<PredictionLog> logger, TimeProvider? time = null)
    {
        _store = store;
        _options = options;
        _logger = logger;
        _time = time ?? TimeProvider.System;
        _lastDrainedTimestamp = _time.GetTimestamp();
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

    /// <summary>Rows the store refused, set aside in <see cref="PredictionLogOptions.SetAsideFolder"/> since start.</summary>
    public long SetAside => Interlocked.Read(ref _setAside);

    /// <summary>
    /// How long rows have waited with no successful write (zero when the queue is empty or a write succeeded since
    /// they came). Beyond <see cref="PredictionLogOptions.StallAfter"/> the log is not draining.
    /// </summary>
    public TimeSpan Waiting
    {
        get
        {
            return Depth == 0 && Interlocked.Read(ref _inWriter) == 0 ? TimeSpan.Zero : _time.GetElapsedTime(Interlocked.Read(ref _lastDrainedTimestamp));
        }
    }

    /// <summary>Rows accepted and not yet written or set aside: those in the queue and those in the writer's hands.</summary>
    public long Pending => Depth + Interlocked.Read(ref _inWriter);

    /// <summary>True when rows have waited longer than <see cref="PredictionLogOptions.StallAfter"/> with no successful write.</summary>
    public bool Stalled => Waiting > _options.StallAfter;
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
            PredictionLogEvents.Full(_logger, _options.Capacity, Dropped);
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
        var finished = await Task.WhenAny(_writer, Task.Delay(_options.DrainTimeout, _time)).ConfigureAwait(false);
        if (finished != _writer)
        {
            await _abort.CancelAsync().ConfigureAwait(false);
            PredictionLogEvents.NotDrained(_logger, _options.DrainTimeout, Depth);
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
        while (true)
        {
            // Everything taken so far is written or set aside: rows that come now wait from here.
            Interlocked.Exchange(ref _lastDrainedTimestamp, _time.GetTimestamp());
            if (!await reader.WaitToReadAsync(_abort.Token).ConfigureAwait(false))
            {
                break;
            }

            // A batch waits at most MaxDelay (on the injected clock) for more rows after its first.
            var deadline = _time.GetTimestamp() + (long)(_options.MaxDelay.TotalSeconds * _time.TimestampFrequency);
            while (batch.Count < _options.MaxBatch)
            {
                if (reader.TryRead(out var item))
                {
                    // Counted as pending from the moment it leaves the queue, not only once the batch is written.
                    Interlocked.Increment(ref _inWriter);
                    batch.Add(item);
                    continue;
                }

                var remaining = TimeSpan.FromSeconds((double)(deadline - _time.GetTimestamp()) / _time.TimestampFrequency);
                if (remaining <= TimeSpan.Zero || reader.Completion.IsCompleted)
                {
                    break;
                }

                using var timeout = new CancellationTokenSource(remaining, _time);
                using var either = CancellationTokenSource.CreateLinkedTokenSource(timeout.Token, _abort.Token);
                try
                {
                    if (!await reader.WaitToReadAsync(either.Token).ConfigureAwait(false))
                    {
                        break;
                    }
                }
                catch (OperationCanceledException) when (!_abort.IsCancellationRequested)
                {
                    break; // MaxDelay passed: write what there is
                }
            }

            if (batch.Count > 0)
            {
                await WriteAsync(batch, 0, batch.Count).ConfigureAwait(false);
                batch.Clear();
            }
        }
    }

    /// <summary>
    /// Writes rows [start, start + count) of the batch: retried with backoff while the store fails in a way that may
    /// pass; split in halves when it refuses them, down to the single rows it refuses, which are set aside.
    /// </summary>
    private async Task WriteAsync(List<PredictionRecord> batch, int start, int count)
    {
        var rows = start == 0 && count == batch.Count ? batch : batch.GetRange(start, count);
        var delay = TimeSpan.FromMilliseconds(100);
        var failed = false;
        while (true)
        {
            var started = Stopwatch.GetTimestamp();
            try
            {
                // A batch is written all or nothing. After a failure the store may still have committed it (the reply
                // was lost): then its first row is there, and writing it again would only fail on the stored ids.
                if (failed && await _store.GetPredictionAsync(rows[0].Id, _abort.Token).ConfigureAwait(false) is not null)
                {
                    CountWritten(rows.Count);
                    return;
                }

                await _store.WritePredictionsAsync(rows, _abort.Token).ConfigureAwait(false);
                Interlocked.Exchange(ref _lastBatchTicks, Stopwatch.GetElapsedTime(started).Ticks);
                CountWritten(rows.Count);
                return;
            }
            catch (OperationCanceledException) when (_abort.IsCancellationRequested)
            {
                throw;
            }
#pragma warning disable CA1031 // the store may fail for any reason; the rows are kept, retried or set aside
            catch (Exception ex)
#pragma warning restore CA1031
            {
                Interlocked.Increment(ref _failedWrites);
                failed = true;
                if (_store.IsRefusal(ex))
                {
                    if (count == 1)
                    {
                        await SetAsideAsync(rows[0], ex).ConfigureAwait(false);
                        return;
                    }

                    // Some row of these is refused: write each half on its own until the refused rows are alone.
                    PredictionLogEvents.BatchRefused(_logger, count, ex.Message);
                    var half = count / 2;
                    await WriteAsync(batch, start, half).ConfigureAwait(false);
                    await WriteAsync(batch, start + half, count - half).ConfigureAwait(false);
                    return;
                }

                PredictionLogEvents.WriteFailed(_logger, ex, rows.Count, delay);
                await Task.Delay(delay, _time, _abort.Token).ConfigureAwait(false);
                delay = TimeSpan.FromTicks(Math.Min(delay.Ticks * 2, TimeSpan.FromSeconds(5).Ticks));
            }
        }
    }

    private void CountWritten(int rows)
    {
        Interlocked.Add(ref _written, rows);
        Interlocked.Add(ref _inWriter, -rows);
        Interlocked.Exchange(ref _lastDrainedTimestamp, _time.GetTimestamp());
    }

    /// <summary>
    /// Keeps a row the store refused as one JSON line (the reason, when, and the row) in the set-aside folder, one file
    /// per day; when even that fails, the line goes to the service's log at error level. Either way it is counted.
    /// </summary>
    private async Task SetAsideAsync(PredictionRecord row, Exception reason)
    {
        Interlocked.Increment(ref _setAside);
        Interlocked.Add(ref _inWriter, -1);
        Interlocked.Exchange(ref _lastDrainedTimestamp, _time.GetTimestamp());
        var now = _time.GetUtcNow();
        var line = SetAsideLine(row, reason.Message, now);
        try
        {
            Directory.CreateDirectory(_options.SetAsideFolder);
            var file = Path.Combine(_options.SetAsideFolder, $"predictions-{now:yyyy-MM-dd}.jsonl");
            await File.AppendAllTextAsync(file, line + "\n", _abort.Token).ConfigureAwait(false);
            PredictionLogEvents.SetAside(_logger, row.Id, row.Model, row.Version, reason.Message, file);
        }
        catch (Exception ex) when (ex is IOException or UnauthorizedAccessException)
        {
            PredictionLogEvents.SetAsideFailed(_logger, row.Id, reason.Message, _options.SetAsideFolder, ex.Message, line);
        }
    }

    /// <summary>One set-aside row as a JSON line.</summary>
    public static string SetAsideLine(PredictionRecord row, string reason, DateTimeOffset at)
    {
        ArgumentNullException.ThrowIfNull(row);
        var buffer = new System.Buffers.ArrayBufferWriter<byte>(256 + (row.FeaturesJson?.Length ?? 0));
        using (var w = new System.Text.Json.Utf8JsonWriter(buffer))
        {
            w.WriteStartObject();
            w.WriteString("reason", reason);
            w.WriteString("setAsideAt", at);
            w.WriteString("id", row.Id);
            w.WriteString("model", row.Model);
            w.WriteString("version", row.Version);
            w.WriteString("stage", row.Stage.ToString().ToLowerInvariant());
            w.WriteString("scoredAt", row.ScoredAt);
            w.WriteString("key", row.Key);
            w.WriteNumber("eta", double.IsFinite(row.Eta) ? row.Eta : 0);
            w.WriteNumber("probability", double.IsFinite(row.Probability) ? row.Probability : 0);
            w.WriteString("features", row.FeaturesJson);
            w.WriteEndObject();
        }

        return System.Text.Encoding.UTF8.GetString(buffer.WrittenSpan);
    }
}

/// <summary>The log events of this file, with their event ids (docs/operations.md lists them).</summary>
internal static partial class PredictionLogEvents
{
    [LoggerMessage(EventId = 2201, Level = LogLevel.Warning, Message = "Prediction log full ({Capacity} rows waiting): rows are being dropped; {Dropped} so far")]
    public static partial void Full(ILogger logger, int capacity, long dropped);

    [LoggerMessage(EventId = 2202, Level = LogLevel.Error, Message = "Prediction log did not drain within {Timeout}; {Depth} rows not written")]
    public static partial void NotDrained(ILogger logger, TimeSpan timeout, int depth);

    [LoggerMessage(EventId = 2203, Level = LogLevel.Warning, Message = "The store refused a batch of {Rows} predictions ({Reason}); writing it in halves to set the refused rows aside")]
    public static partial void BatchRefused(ILogger logger, int rows, string reason);

    [LoggerMessage(EventId = 2204, Level = LogLevel.Error, Message = "Writing {Rows} predictions failed; retrying in {Delay}")]
    public static partial void WriteFailed(ILogger logger, Exception error, int rows, TimeSpan delay);

    [LoggerMessage(EventId = 2205, Level = LogLevel.Error, Message = "The store refused prediction {Id} of {Model} {Version} ({Reason}); set aside in {File}")]
    public static partial void SetAside(ILogger logger, Guid id, string model, string version, string reason, string file);

    [LoggerMessage(EventId = 2206, Level = LogLevel.Error, Message = "The store refused prediction {Id} ({Reason}) and the set-aside folder {Folder} could not take it ({Error}); the row: {Row}")]
    public static partial void SetAsideFailed(ILogger logger, Guid id, string reason, string? folder, string error, string row);
}
