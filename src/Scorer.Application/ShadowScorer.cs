using System.Threading.Channels;
using Microsoft.Extensions.Logging;
using Scorer.Engine.Scoring;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Application;

/// <summary>Rows a live version scored, to be scored again by the model's shadow versions.</summary>
/// <remarks><see cref="LiveIds"/>: the live prediction's id of each row, stored with the shadow prediction to pair them.</remarks>
public sealed record ShadowWork(IReadOnlyList<LoadedVersion> Shadows, NamedValue[][] Rows, Guid[] LiveIds, string?[] Keys, DateTimeOffset ScoredAt);

/// <summary>
/// Scores rows with the shadow versions off the request path and logs the results (stage shadow); nothing is
/// returned to the caller. Bounded by <see cref="ScoringLimits.ShadowQueueBatches"/> batches and
/// <see cref="ScoringLimits.ShadowQueueRows"/> rows waiting: a batch that does not fit is dropped whole, counted
/// (<see cref="Dropped"/>, <see cref="DroppedRows"/>) and logged. A batch once queued is scored, also at shutdown.
/// </summary>
/// <remarks>The loop starts with <see cref="Start"/> (the host's start); work queued before waits for it.</remarks>
public sealed class ShadowScorer : IAsyncDisposable
{
    /// <summary>A dropped batch is logged the first time and then every this many.</summary>
    internal const int LogEvery = 1_000;

    private readonly Channel<ShadowWork> _queue;
    private readonly int _maxRows;
    private readonly PredictionLog _log;
    private readonly ILogger<ShadowScorer> _logger;
    private readonly TimeProvider _time;
    private readonly Scorer.Monitor.Reporting.DriftTracker _drift;
    private readonly Lock _startLock = new();
    private Task? _loop;
    private long _rows;
    private long _dropped;
    private long _droppedRows;
    private long _scored;

    public ShadowScorer(PredictionLog log, TimeProvider time, ILogger<ShadowScorer> logger, Scorer.Monitor.Reporting.DriftTracker drift, ScoringLimits limits)
    {
        _queue = Channel.CreateBounded<ShadowWork>(new BoundedChannelOptions(limits.ShadowQueueBatches) { SingleReader = true });
        _maxRows = limits.ShadowQueueRows;
        _drift = drift;
        _log = log;
        _time = time;
        _logger = logger;
    }

    /// <summary>Batches dropped since start.</summary>
    public long Dropped => Interlocked.Read(ref _dropped);

    /// <summary>Rows of the dropped batches since start.</summary>
    public long DroppedRows => Interlocked.Read(ref _droppedRows);

    /// <summary>Shadow predictions made since start.</summary>
    public long Scored => Interlocked.Read(ref _scored);

    /// <summary>Batches waiting now.</summary>
    public int Batches => _queue.Reader.Count;

    /// <summary>Rows of the batches waiting now.</summary>
    public long Rows => Interlocked.Read(ref _rows);

    /// <summary>Starts scoring what is queued and what comes; once.</summary>
    public void Start()
    {
        lock (_startLock)
        {
            _loop ??= Task.Run(LoopAsync);
        }
    }

    /// <summary>Queues a batch, or drops it (counted and logged) when it would pass either bound.</summary>
    public void Enqueue(ShadowWork work)
    {
        var rows = work.Rows.Length;
        if (Interlocked.Add(ref _rows, rows) <= _maxRows && _queue.Writer.TryWrite(work))
        {
            return;
        }

        Interlocked.Add(ref _rows, -rows);
        var dropped = Interlocked.Increment(ref _dropped);
        var droppedRows = Interlocked.Add(ref _droppedRows, rows);
        if (dropped % LogEvery == 1)
        {
            ShadowScorerEvents.Dropping(_logger, Batches, Rows, dropped, droppedRows);
        }
    }

    /// <summary>Takes no more work and scores what is queued (starting the loop if the host never did).</summary>
    public async ValueTask DisposeAsync()
    {
        _queue.Writer.TryComplete();
        Start();
        await _loop!.ConfigureAwait(false);
    }

    private async Task LoopAsync()
    {
        await foreach (var work in _queue.Reader.ReadAllAsync().ConfigureAwait(false))
        {
            Interlocked.Add(ref _rows, -work.Rows.Length);
            try
            {
                foreach (var shadow in work.Shadows)
                {
                    var tally = _drift.Begin(shadow, work.ScoredAt);
                    for (var i = 0; i < work.Rows.Length; i++)
                    {
                        var r = shadow.Compiled.Score(work.Rows[i], ScoreSettings.PointOnly);
                        if (r.Failed)
                        {
                            continue;
                        }

                        tally?.Add(r.Eta, work.Rows[i]);
                        _log.TryEnqueue(new PredictionRecord(PredictionIds.Next(work.ScoredAt), shadow.Model, shadow.Version, Stage.Shadow,
                            work.ScoredAt, work.Keys[i], r.Eta, r.Probability, LoggedFeatures.Json(shadow.Compiled, work.Rows[i]), work.LiveIds[i]));
                        Interlocked.Increment(ref _scored);
                    }

                    tally?.Commit();
                }
            }
#pragma warning disable CA1031 // a shadow failure must never reach callers; it is logged
            catch (Exception ex)
#pragma warning restore CA1031
            {
                ShadowScorerEvents.Failed(_logger, ex);
            }
        }
    }
}

/// <summary>The log events of this file, with their event ids (docs/operations.md lists them).</summary>
internal static partial class ShadowScorerEvents
{
    [LoggerMessage(EventId = 5001, Level = LogLevel.Error, Message = "Shadow scoring failed")]
    public static partial void Failed(ILogger logger, Exception error);

    [LoggerMessage(EventId = 5002, Level = LogLevel.Warning,
        Message = "Shadow scoring is behind ({Batches} batches, {Rows} rows waiting; bounds Scorer:Limits:ShadowQueueBatches and ShadowQueueRows): work is being dropped; {Dropped} batches ({DroppedRows} rows) so far")]
    public static partial void Dropping(ILogger logger, int batches, long rows, long dropped, long droppedRows);
}
