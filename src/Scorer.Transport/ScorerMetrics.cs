using Prometheus;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Transport;

/// <summary>
/// The service's metrics in the Prometheus exposition format, in a registry of the service's own (one per server, so
/// tests can run several). Counters are incremented per request, never per row; gauges are read at scrape time.
/// Names and labels are listed in docs/metrics.md.
/// </summary>
public sealed class ScorerMetrics
{
    public ScorerMetrics(ModelRegistry registry, PredictionLog log, ShadowScorer shadows)
    {
        Registry = Metrics.NewCustomRegistry();
        var factory = Metrics.WithCustomRegistry(Registry);
        RowsScored = factory.CreateCounter("scorer_rows_scored_total", "Rows scored, by model, version and stage.", "model", "version", "stage");
        RowErrors = factory.CreateCounter("scorer_row_errors_total", "Rows that could not be scored, by model and reason.", "model", "kind");
        RowWarnings = factory.CreateCounter("scorer_row_warnings_total", "Rows scored with at least one warning, by model.", "model");
        Outcomes = factory.CreateCounter("scorer_outcome_reports_total", "Outcome reports, by model and result (accepted, duplicate, unknown, conflict).", "model", "result");
        Calls = factory.CreateHistogram("scorer_call_duration_seconds", "Duration of calls, by method and status.",
            new HistogramConfiguration { LabelNames = ["method", "status"], Buckets = Histogram.ExponentialBuckets(0.0001, 2, 18) });
        var versions = factory.CreateGauge("scorer_model_versions", "Loaded versions, by model and stage.", "model", "stage");
        var loadErrors = factory.CreateGauge("scorer_model_load_errors", "Model files that could not be loaded.");
        var reloads = factory.CreateCounter("scorer_registry_snapshots_total", "Registry snapshots published (loads, reloads, stage changes).");
        var queue = factory.CreateGauge("scorer_prediction_log_queue_rows", "Rows waiting for the store.");
        var capacity = factory.CreateGauge("scorer_prediction_log_capacity_rows", "Rows the prediction log queue holds at most.");
        var written = factory.CreateGauge("scorer_prediction_log_written_rows", "Rows written to the store since start.");
        var dropped = factory.CreateGauge("scorer_prediction_log_dropped_rows", "Rows dropped because the queue was full, since start.");
        var failed = factory.CreateGauge("scorer_prediction_log_failed_writes", "Batch writes that failed and were retried, since start.");
        var batch = factory.CreateGauge("scorer_prediction_log_batch_seconds", "Duration of the last batch write.");
        var shadowDropped = factory.CreateGauge("scorer_shadow_dropped_batches", "Shadow scoring work dropped because it fell behind, since start.");
        registry.Changed += _ => reloads.Inc();
        Registry.AddBeforeCollectCallback(() =>
        {
            var snapshot = registry.Current;
            foreach (var entry in snapshot.Models.Values)
            {
                foreach (var stage in new[] { Stage.Live, Stage.Shadow, Stage.Retired })
                {
                    versions.WithLabels(entry.Name, Services.ModelsService.StageName(stage)).Set(entry.Versions.Count(v => v.Stage == stage));
                }
            }

            loadErrors.Set(snapshot.Failures.Length);
            queue.Set(log.Depth);
            capacity.Set(log.Capacity);
            written.Set(log.Written);
            dropped.Set(log.Dropped);
            failed.Set(log.FailedWrites);
            batch.Set(log.LastBatchLatency.TotalSeconds);
            shadowDropped.Set(shadows.Dropped);
        });
    }

    public CollectorRegistry Registry { get; }
    public Counter RowsScored { get; }
    public Counter RowErrors { get; }
    public Counter RowWarnings { get; }
    public Histogram Calls { get; }
    public Counter Outcomes { get; }
}
