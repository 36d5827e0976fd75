using System.Collections.Concurrent;
using Microsoft.Extensions.Logging;
using Prometheus;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Application;

/// <summary>
/// The service's metrics in the Prometheus exposition format, in a registry of the service's own (one per server, so
/// tests can run several). Counters are incremented per request, never per row; gauges are read at scrape time.
/// Names and labels are listed in docs/metrics.md.
/// </summary>
/// <remarks>
/// Series labelled with a version exist only for the live and shadow versions, at most
/// <see cref="ScoringLimits.MaxMetricVersions"/> of them (live ones first, then by model and version): at each scrape the
/// series of every other version are removed, so the scrape does not grow as versions come and go. Rows scored by a
/// version without series of its own (retired, beyond the bound, or under a stage it no longer has) are not lost:
/// they are added to <c>scorer_rows_scored_total{version=""}</c> of their model and stage, so the sum over a model and
/// stage never goes down.
/// </remarks>
public sealed partial class ScorerMetrics
{
    private readonly ConcurrentDictionary<(string Model, string Version, Stage Stage), RowCount> _scored = new();
    private readonly ConcurrentDictionary<(string Model, Stage Stage), RowCount> _former = new();
    private readonly Lock _scrape = new();
    private readonly ILogger<ScorerMetrics> _logger;
    private int _leftOut;

    public ScorerMetrics(ModelRegistry registry, PredictionLog log, ShadowScorer shadows, Scorer.Monitor.Reporting.MonitorLoop monitor,
        Scorer.Monitor.Reporting.ChartRunner charts, Scorer.Monitor.Reporting.DriftTracker drift, Scorer.Monitor.Reporting.StatusWebhook webhook, Scorer.Monitor.Reporting.LabelledCache rowCache,
        Scorer.Monitor.Reporting.SummaryReader summaries, EventSubscribers subscribers, ScoringLimits limits,
        IEnumerable<IStoreSpaceSignal> spaces, IEnumerable<IStoreMemorySignal> storeMemory, ILogger<ScorerMetrics> logger, RetentionCounters? retention = null)
    {
        _logger = logger;
        Registry = Metrics.NewCustomRegistry();
        var factory = Metrics.WithCustomRegistry(Registry);
        var rowsScored = factory.CreateCounter("scorer_rows_scored_total",
            "Rows scored, by model, version and stage; version \"\" holds the rows of versions without series of their own (retired, or beyond Scorer:Limits:MaxMetricVersions).",
            "model", "version", "stage");
        RowErrors = factory.CreateCounter("scorer_row_errors_total", "Rows that could not be scored, by model and reason.", "model", "kind");
        Refused = factory.CreateCounter("scorer_calls_refused_total",
            "Calls refused for their API key before they ran: unauthenticated (no key, or an unknown one) or forbidden (the key lacks the role).", "reason");
        RowWarnings = factory.CreateCounter("scorer_row_warnings_total", "Rows scored with at least one warning, by model.", "model");
        Outcomes = factory.CreateCounter("scorer_outcome_reports_total", "Outcome reports, by model and result (accepted, duplicate, unknown, conflict).", "model", "result");
        Calls = factory.CreateHistogram("scorer_call_duration_seconds", "Duration of calls, by method and status.",
            new HistogramConfiguration { LabelNames = ["method", "status"], Buckets = Histogram.ExponentialBuckets(0.0001, 2, 18) });
        var versions = factory.CreateGauge("scorer_model_versions", "Loaded versions, by model and stage.", "model", "stage");
        var loadErrors = factory.CreateGauge("scorer_model_load_errors", "Model files that could not be loaded.");
        var refused = factory.CreateGauge("scorer_model_files_refused",
            "Model files not loaded, by reason: changed_version, invalid, too_large, too_many_terms, not_a_regular_file, unreadable, error.", "reason");
        var fileReads = factory.CreateCounter("scorer_model_file_reads_total", "Model files read and hashed by the registry (a file whose length and times are unchanged is not read again).");
        var reloads = factory.CreateCounter("scorer_registry_snapshots_total", "Registry snapshots published (loads, reloads, stage changes).");
        var queue = factory.CreateGauge("scorer_prediction_log_queue_rows", "Rows waiting for the store.");
        var capacity = factory.CreateGauge("scorer_prediction_log_capacity_rows", "Rows the prediction log queue holds at most.");
        var written = factory.CreateCounter("scorer_prediction_log_written_rows_total", "Rows written to the store, since start.");
        var dropped = factory.CreateCounter("scorer_prediction_log_dropped_rows_total", "Rows dropped because the queue was full, since start.");
        var failed = factory.CreateCounter("scorer_prediction_log_failed_writes_total", "Batch writes that failed and were retried, since start.");
        var batch = factory.CreateGauge("scorer_prediction_log_batch_seconds", "Duration of the last batch write.");
        var setAside = factory.CreateCounter("scorer_prediction_log_set_aside_rows_total",
            "Rows the store refused for what they hold, set aside in Scorer:PredictionLog:SetAsideFolder instead of written, since start.");
        var waiting = factory.CreateGauge("scorer_prediction_log_waiting_seconds",
            "How long rows have waited with no successful write (0 when the queue is empty); beyond Scorer:PredictionLog:StallAfter the log is not draining.");
        var streams = factory.CreateGauge("scorer_event_streams_open", "Event streams open (monitor and overview events); at most Scorer:Limits:MaxEventSubscribers.");
        var streamsRefused = factory.CreateCounter("scorer_event_streams_refused_total", "Event streams refused because Scorer:Limits:MaxEventSubscribers were open, since start.");
        var shadowDropped = factory.CreateCounter("scorer_shadow_dropped_batches_total", "Shadow scoring work dropped because it fell behind, since start.");
        var shadowDroppedRows = factory.CreateCounter("scorer_shadow_dropped_rows_total", "Rows of the shadow scoring work dropped because it fell behind, since start.");
        var shadowBatches = factory.CreateGauge("scorer_memory_shadow_queue_batches", "Batches waiting for shadow scoring; at most Scorer:Limits:ShadowQueueBatches.");
        var shadowRows = factory.CreateGauge("scorer_memory_shadow_queue_rows", "Rows of the batches waiting for shadow scoring; at most Scorer:Limits:ShadowQueueRows.");
        var driftTallies = factory.CreateGauge("scorer_memory_drift_tallies",
            "Drift tallies held (one per version and hour) until the store has their counts; at most Scorer:Limits:MaxDriftTallies.");
        var driftDropped = factory.CreateCounter("scorer_memory_drift_dropped_rows_total",
            "Rows scored but not counted into the drift bins because Scorer:Limits:MaxDriftTallies tallies were held, since start.");
        var metricVersions = factory.CreateGauge("scorer_memory_metric_versions",
            "Versions with metric series of their own (live and shadow ones); at most Scorer:Limits:MaxMetricVersions.");
        var metricVersionsLeftOut = factory.CreateGauge("scorer_memory_metric_versions_left_out",
            "Live and shadow versions without metric series of their own because more than Scorer:Limits:MaxMetricVersions are loaded.");
        var webhookWaiting = factory.CreateGauge("scorer_memory_webhook_queue_notices",
            "Status changes waiting to be posted to the webhook; at most Scorer:Limits:StatusWebhookNotices.");
        var webhookDropped = factory.CreateCounter("scorer_memory_webhook_dropped_notices_total",
            "Status changes not posted to the webhook because Scorer:Limits:StatusWebhookNotices were waiting (the oldest dropped), since start.");
        var chartVersions = factory.CreateGauge("scorer_memory_chart_versions", "Versions whose CUSUM and EWMA charts this process holds in memory (the live and shadow ones).");
        var cacheRows = factory.CreateGauge("scorer_memory_row_cache_rows",
            "Labelled predictions the monitor's row cache holds, over every version (at most 1.25 x Scorer:Monitor:ExactRows per version).");
        var summaryBuckets = factory.CreateGauge("scorer_memory_bucket_documents", "Summary buckets this process holds for reports, over every version.");
        var summaryBytes = factory.CreateGauge("scorer_memory_bucket_bytes", "Bytes of the summary documents this process holds for reports.");
        var resident = factory.CreateGauge("scorer_memory_resident_bytes", "Resident memory of the process (its working set), read at the scrape.");
        var heap = factory.CreateGauge("scorer_memory_managed_heap_bytes", "The managed heap's size after the last garbage collection.");
        var committed = factory.CreateGauge("scorer_memory_managed_committed_bytes", "Memory the garbage collector has committed for the managed heap (in use and held for reuse).");
        var storeHeld = factory.CreateGauge("scorer_memory_store_cache_bytes",
            "Memory the store's driver holds in this process (SQLite: page caches and statements, bounded by Scorer:Store:WriteCacheMegabytes and ReadCacheMegabytes); 0 for PostgreSQL.");
        var prunePasses = factory.CreateCounter("scorer_store_retention_passes_total", "Retention passes this process ran (as the holder of the retention lease), since start.");
        var pruned = factory.CreateCounter("scorer_store_pruned_rows_total", "Rows retention deleted, by table (predictions, outcomes, conflicts), since start.", "table");
        var partitions = factory.CreateCounter("scorer_store_partitions_dropped_total", "PostgreSQL partitions retention dropped whole, since start.");
        var awaiting = factory.CreateGauge("scorer_store_kept_awaiting_outcome_rows", "Predictions past the retention kept at the last pass because their outcome is still awaited.");
        var longestBatch = factory.CreateGauge("scorer_store_retention_longest_batch_seconds", "The longest single pruning transaction so far (SQLite: one batch).");
        var storeFull = factory.CreateGauge("scorer_store_full", "1 while the store refuses writes for lack of space (SQLite: a full disk, or Scorer:Store:MaxSizeMegabytes reached), else 0.");
        var storeFullWrites = factory.CreateCounter("scorer_store_full_writes_total", "Writes the store refused for lack of space, since start.");
        registry.Changed += _ => reloads.Inc();
        string[] windowLabels = ["model", "version", "window"];
        Gauge Window(string name, string help) => factory.CreateGauge(name, help, windowLabels);
        var labelled = Window("scorer_monitor_labelled", "Predictions with a known outcome in the window.");
        var immature = Window("scorer_monitor_immature", "Predictions of the window still without an outcome.");
        var oe = Window("scorer_monitor_observed_expected", "Observed/expected events in the window.");
        var intercept = Window("scorer_monitor_calibration_intercept", "Calibration intercept (logistic fit with offset logit(p)).");
        var slope = Window("scorer_monitor_calibration_slope", "Calibration slope (logistic fit on logit(p)).");
        var brier = Window("scorer_monitor_brier", "Brier score.");
        var logLoss = Window("scorer_monitor_log_loss", "Log loss.");
        var ece = Window("scorer_monitor_ece", "Expected calibration error over the ten equal-width bins.");
        var auc = Window("scorer_monitor_auc", "ROC AUC.");
        var psi = factory.CreateGauge("scorer_monitor_psi", "Population stability index against the baseline, by series (linear_predictor or a feature).",
            "model", "version", "window", "series");
        var cusum = factory.CreateGauge("scorer_monitor_cusum", "Risk-adjusted Bernoulli CUSUM value, by chart (up, down).", "model", "version", "chart");
        var cusumThreshold = factory.CreateGauge("scorer_monitor_cusum_threshold", "CUSUM threshold, by chart.", "model", "version", "chart");
        var cusumSignals = factory.CreateCounter("scorer_monitor_cusum_signals_total",
            "CUSUM signals of the chart, by chart, since the chart started (its state, and so this count, outlives restarts).", "model", "version", "chart");
        var status = factory.CreateGauge("scorer_monitor_status", "Status of the version: 0 fine, 1 watch, 2 recalibrate, 3 refit-due.", "model", "version");
        var chartsHolder = factory.CreateGauge("scorer_monitor_charts_holder",
            "1 when this process runs the CUSUM charts (holds the store's charts lease), 0 when another process sharing the store does.");
        Collector<Gauge.Child>[] versionGauges = [labelled, immature, oe, intercept, slope, brier, logLoss, ece, auc, psi, cusum, cusumThreshold, status];
        Registry.AddBeforeCollectCallback(() =>
        {
            lock (_scrape)
            {
                Collect();
            }
        });

        void Collect()
        {
            var shown = Shown(registry.Current, limits.MaxMetricVersions, out var leftOut);
            metricVersions.Set(shown.Count);
            metricVersionsLeftOut.Set(leftOut);
            if (leftOut != _leftOut && leftOut > 0)
            {
                LeftOut(leftOut, limits.MaxMetricVersions);
            }

            _leftOut = leftOut;

            // Rows scored: each (model, version, stage) counted here goes to its own series while the version has that
            // stage and is shown; otherwise its count is closed, moved to the model's version "" and its series removed.
            foreach (var (key, count) in _scored)
            {
                if (shown.TryGetValue((key.Model, key.Version), out var stage) && stage == key.Stage)
                {
                    rowsScored.WithLabels(key.Model, key.Version, Models.ModelCatalog.StageName(key.Stage)).IncTo(count.Value);
                    continue;
                }

                var total = count.Close();
                _scored.TryRemove(KeyValuePair.Create(key, count));
                AddFormer(key.Model, key.Stage, total);
                rowsScored.RemoveLabelled(key.Model, key.Version, Models.ModelCatalog.StageName(key.Stage));
            }

            foreach (var (key, count) in _former)
            {
                rowsScored.WithLabels(key.Model, "", Models.ModelCatalog.StageName(key.Stage)).IncTo(count.Value);
            }

            chartsHolder.Set(charts.IsHolder ? 1 : 0);
            foreach (var s in monitor.Latest)
            {
                if (!shown.ContainsKey((s.Version.Model, s.Version.Version)))
                {
                    continue;
                }

                string[] l = [s.Version.Model, s.Version.Version, s.Window];
                var c = s.Calibration;
                labelled.WithLabels(l).Set(c.Labelled);
                immature.WithLabels(l).Set(s.Immature);
                SetOrNaN(oe.WithLabels(l), c.ObservedExpected?.Estimate);
                SetOrNaN(intercept.WithLabels(l), c.CalibrationIntercept?.Estimate);
                SetOrNaN(slope.WithLabels(l), c.CalibrationSlope?.Estimate);
                SetOrNaN(brier.WithLabels(l), c.Labelled > 0 ? c.Brier : null);
                SetOrNaN(logLoss.WithLabels(l), c.Labelled > 0 ? c.LogLoss : null);
                SetOrNaN(ece.WithLabels(l), c.Labelled > 0 ? c.Ece : null);
                SetOrNaN(auc.WithLabels(l), c.Auc?.Estimate);
                if (s.Drift.Score is { } score)
                {
                    psi.WithLabels(s.Version.Model, s.Version.Version, s.Window, Scorer.Monitor.Reporting.DriftTracker.ScoreSeries).Set(score);
                }

                foreach (var (feature, value) in s.Drift.Features)
                {
                    psi.WithLabels(s.Version.Model, s.Version.Version, s.Window, feature).Set(value);
                }

                status.WithLabels(s.Version.Model, s.Version.Version).Set((int)s.Status.Status);
                foreach (var (chart, view) in new[] { ("up", s.Charts?.Up), ("down", s.Charts?.Down) })
                {
                    if (view is not null)
                    {
                        cusum.WithLabels(s.Version.Model, s.Version.Version, chart).Set(view.Value);
                        cusumThreshold.WithLabels(s.Version.Model, s.Version.Version, chart).Set(view.Threshold);
                        cusumSignals.WithLabels(s.Version.Model, s.Version.Version, chart).IncTo(view.SignalCount);
                    }
                }
            }

            foreach (var family in versionGauges)
            {
                RemoveOthers(family, shown);
            }

            RemoveOthers(cusumSignals, shown);
            chartVersions.Set(charts.Versions);
            cacheRows.Set(rowCache.Rows);
            if (retention is not null)
            {
                prunePasses.IncTo(retention.Passes);
                pruned.WithLabels("predictions").IncTo(retention.PredictionsDeleted);
                pruned.WithLabels("outcomes").IncTo(retention.OutcomesDeleted);
                pruned.WithLabels("conflicts").IncTo(retention.ConflictsDeleted);
                partitions.IncTo(retention.PartitionsDropped);
                awaiting.Set(retention.KeptAwaitingOutcome);
                longestBatch.Set(retention.LongestBatch.TotalSeconds);
            }

            var (_, buckets, bytes) = summaries.Size();
            summaryBuckets.Set(buckets);
            summaryBytes.Set(bytes);
            var gc = GC.GetGCMemoryInfo();
            resident.Set(Environment.WorkingSet);
            heap.Set(gc.HeapSizeBytes);
            committed.Set(gc.TotalCommittedBytes);
            storeHeld.Set(storeMemory.Sum(m => m.HeldBytes));
        }

        Registry.AddBeforeCollectCallback(() =>
        {
            var snapshot = registry.Current;
            foreach (var entry in snapshot.Models.Values)
            {
                foreach (var stage in new[] { Stage.Live, Stage.Shadow, Stage.Retired })
                {
                    versions.WithLabels(entry.Name, Models.ModelCatalog.StageName(stage)).Set(entry.Versions.Count(v => v.Stage == stage));
                }
            }

            loadErrors.Set(snapshot.Failures.Length);
            foreach (var kind in LoadFailure.Kinds)
            {
                refused.WithLabels(LoadFailure.KindName(kind)).Set(snapshot.Failures.Count(f => f.Kind == kind));
            }

            fileReads.IncTo(registry.FileReads);
            queue.Set(log.Depth);
            capacity.Set(log.Capacity);
            written.IncTo(log.Written);
            dropped.IncTo(log.Dropped);
            failed.IncTo(log.FailedWrites);
            batch.Set(log.LastBatchLatency.TotalSeconds);
            setAside.IncTo(log.SetAside);
            waiting.Set(log.Waiting.TotalSeconds);
            shadowDropped.IncTo(shadows.Dropped);
            shadowDroppedRows.IncTo(shadows.DroppedRows);
            shadowBatches.Set(shadows.Batches);
            shadowRows.Set(shadows.Rows);
            driftTallies.Set(drift.Tallies);
            driftDropped.IncTo(drift.DroppedRows);
            webhookWaiting.Set(webhook.Waiting);
            webhookDropped.IncTo(webhook.Dropped);
            streams.Set(subscribers.Open);
            streamsRefused.IncTo(subscribers.Refused);
            foreach (var space in spaces)
            {
                storeFull.Set(space.Full is null ? 0 : 1);
                storeFullWrites.IncTo(space.FullWrites);
            }
        });
    }

    private static void SetOrNaN(Gauge.Child gauge, double? value) => gauge.Set(value ?? double.NaN);

    /// <summary>
    /// The versions that get series of their own, with their stage: the live and shadow ones, live first, then by model
    /// and version (ordinal), at most <paramref name="max"/>; <paramref name="leftOut"/> says how many more there are.
    /// </summary>
    private static Dictionary<(string Model, string Version), Stage> Shown(RegistrySnapshot snapshot, int max, out int leftOut)
    {
        var candidates = snapshot.Models.Values.SelectMany(m => m.Versions).Where(v => v.Stage != Stage.Retired)
            .OrderBy(v => v.Stage == Stage.Live ? 0 : 1).ThenBy(v => v.Model, StringComparer.Ordinal).ThenBy(v => v.Version, StringComparer.Ordinal).ToList();
        leftOut = Math.Max(0, candidates.Count - max);
        return candidates.Take(max).ToDictionary(v => (v.Model, v.Version), v => v.Stage);
    }

    /// <summary>Removes the series of a family whose version (the second label) is not shown.</summary>
    private static void RemoveOthers<TChild>(Collector<TChild> family, Dictionary<(string Model, string Version), Stage> shown)
        where TChild : ChildBase
    {
        foreach (var labels in family.GetAllLabelValues())
        {
            if (!shown.ContainsKey((labels[0], labels[1])))
            {
                family.RemoveLabelled(labels);
            }
        }
    }

    private void AddFormer(string model, Stage stage, long rows)
    {
        if (rows > 0)
        {
            _former.GetOrAdd((model, stage), static _ => new RowCount()).TryAdd(rows);
        }
    }

    /// <summary>Counts the rows one message scored with a version (into <c>scorer_rows_scored_total</c> at the next scrape).</summary>
    public void CountScored(LoadedVersion version, long rows)
    {
        var key = (version.Model, version.Version, version.Stage);
        while (true)
        {
            var count = _scored.GetOrAdd(key, static _ => new RowCount());
            if (count.TryAdd(rows))
            {
                return;
            }

            _scored.TryRemove(KeyValuePair.Create(key, count)); // closed by a scrape: its rows went to version "", these go to a new count
        }
    }

    [LoggerMessage(EventId = 5020, Level = LogLevel.Warning,
        Message = "{LeftOut} live and shadow versions have no metric series of their own: more than Scorer:Limits:MaxMetricVersions ({Max}) are loaded; their rows are counted under version \"\"")]
    private partial void LeftOut(int leftOut, int max);

    /// <summary>A count of rows that a scrape can close: once closed it takes no more, so the scrape's total is final.</summary>
    private sealed class RowCount
    {
        private const long Closed = -1;
        private long _value;

        public long Value => Math.Max(0, Interlocked.Read(ref _value));

        public bool TryAdd(long rows)
        {
            var seen = Interlocked.Read(ref _value);
            while (seen != Closed)
            {
                var was = Interlocked.CompareExchange(ref _value, seen + rows, seen);
                if (was == seen)
                {
                    return true;
                }

                seen = was;
            }

            return false;
        }

        /// <summary>Closes the count and returns its total.</summary>
        public long Close() => Math.Max(0, Interlocked.Exchange(ref _value, Closed));
    }

    public CollectorRegistry Registry { get; }
    public Counter RowErrors { get; }

    /// <summary>Calls refused for their key (reason unauthenticated or forbidden); they reach no other metric.</summary>
    public Counter Refused { get; }
    public Counter RowWarnings { get; }
    public Histogram Calls { get; }
    public Counter Outcomes { get; }
}
