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
/// returned to the caller. Bounded: when it falls behind, work is dropped and counted.
/// </summary>
public sealed class ShadowScorer : IAsyncDisposable
{
    private readonly Channel<ShadowWork> _queue = Channel.CreateBounded<ShadowWork>(new BoundedChannelOptions(10_000) { SingleReader = true });
    private readonly PredictionLog _log;
    private readonly ILogger<ShadowScorer> _logger;
    private readonly TimeProvider _time;
    private readonly Scorer.Monitor.Reporting.DriftTracker _drift;
    private readonly Task _loop;
    private long _dropped;
    private long _scored;

    public ShadowScorer(PredictionLog log, TimeProvider time, ILogger<ShadowScorer> logger, Scorer.Monitor.Reporting.DriftTracker drift)
    {
        _drift = drift;
        _log = log;
        _time = time;
        _logger = logger;
        _loop = Task.Run(LoopAsync);
    }

    public long Dropped => Interlocked.Read(ref _dropped);
    public long Scored => Interlocked.Read(ref _scored);

    public void Enqueue(ShadowWork work)
    {
        if (!_queue.Writer.TryWrite(work))
        {
            Interlocked.Increment(ref _dropped);
        }
    }

    public async ValueTask DisposeAsync()
    {
        _queue.Writer.TryComplete();
        await _loop.ConfigureAwait(false);
    }

    private async Task LoopAsync()
    {
        await foreach (var work in _queue.Reader.ReadAllAsync().ConfigureAwait(false))
        {
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
                        _log.TryEnqueue(new PredictionRecord(PredictionIds.Next(_time.GetUtcNow()), shadow.Model, shadow.Version, Stage.Shadow,
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
}
