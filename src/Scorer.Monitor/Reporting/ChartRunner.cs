using System.Collections.Concurrent;
using System.Text.Json;
using System.Text.Json.Serialization;
using Microsoft.Extensions.Logging;
using Scorer.Statistics.Sequential;
using Scorer.Statistics;
using Scorer.ModelFile;
using Scorer.Registry;
using Scorer.Store;

namespace Scorer.Monitor.Reporting;

/// <summary>One signal of a chart: the 1-based position of the prediction among the chart's outcomes, its time, the statistic.</summary>
/// <remarks><see cref="Threshold"/>: the threshold in force when the chart signalled (the thresholds follow the outcome rate); NaN in states saved before it was kept.</remarks>
public sealed record ChartSignal(long Index, DateTimeOffset Time, double Statistic, Guid PredictionId, double Threshold = double.NaN);

/// <summary>
/// A CUSUM chart as it stands: <see cref="Signals"/> holds its most recent signals (at most
/// <see cref="MonitorOptions.CusumSignalsKept"/>), <see cref="SignalCount"/> counts every signal since it started.
/// </summary>
public sealed record CusumView(double OddsRatio, double Value, double Threshold, double InControlRunLength, double DetectionDelay, long Steps,
    IReadOnlyList<ChartSignal> Signals, long SignalCount);

/// <summary>The EWMA of observed minus expected as it stands: its value, its control limit (L·sd) and whether it is beyond it.</summary>
public sealed record EwmaView(double Value, double Limit, double Lambda, bool OutOfControl, long Steps);

/// <summary>The charts of one model version; <see cref="Waiting"/> says why they have not started, when they have not.</summary>
public sealed record ChartsView(CusumView? Up, CusumView? Down, EwmaView Ewma, long Outcomes, DateTimeOffset? Through, string? Waiting);

/// <summary>
/// Runs the sequential charts of every live and shadow version: takes in each matured outcome once, in
/// prediction-time order, up to the maturity frontier (now − the model's horizon), so a prediction enters the charts
/// only when its outcome can be known. Records implicit negatives for models whose negatives are implicit. The CUSUM
/// thresholds come from the version's own recent predicted probabilities (Markov-chain run length, docs/monitoring.md)
/// and are set again when those probabilities shift.
/// </summary>
/// <remarks>
/// <para>
/// One process runs the charts among all that share the store: the holder of the store's lease
/// <see cref="Lease"/> (PostgreSQL: a session advisory lock; SQLite: a row of the file renewed each round, see
/// <see cref="ILeaseStore.TryHoldLeaseAsync"/>). After each catch-up that took
/// outcomes in, the holder saves every changed version's chart state (values, thresholds, signals, the threshold
/// sample and the walk's position) to the store, fenced by the lease, so a holder that lost the lease cannot overwrite
/// its successor's state. Every other process reads the saved states each round and shows them; when the holder dies,
/// the next to take the lease starts from the last saved state and walks on from its position: outcomes taken in after
/// that save are taken in again by the new holder (the dead one's progress was never saved), none is taken twice in
/// the saved state, none is skipped.
/// </para>
/// <para>
/// A restart continues from the saved state. An outcome older than the frontier that arrives after the charts moved
/// past it is counted in the windows' statistics but not in the charts.
/// </para>
/// </remarks>
public sealed partial class ChartRunner(ModelRegistry registry, ILeaseStore leases, ILabelledStore labelled, IOutcomeStore outcomes, MonitorOptions options, TimeProvider time, ILogger<ChartRunner> logger)
{
    private readonly ConcurrentDictionary<(string Model, string Version), VersionCharts> _charts = new();

    /// <summary>Raised (on the runner's thread) when a chart signals.</summary>
    public event Action<string, string, string, ChartSignal>? Signalled;

    public ChartsView? View(string model, string version) => _charts.TryGetValue((model, version), out var c) ? c.View() : null;

    /// <summary>The paths the charts of a version took over [from, to), as they keep them (<see cref="ChartPath"/>); null when this process holds none.</summary>
    public (List<CusumPoint> Up, List<CusumPoint> Down)? Paths(string model, string version, DateTimeOffset from, DateTimeOffset to) =>
        _charts.TryGetValue((model, version), out var c) ? c.Paths(from, to) : null;

    /// <summary>Versions whose charts this process holds in memory: the live and shadow ones (a retired version's state stays in the store).</summary>
    public int Versions => _charts.Count;

    /// <summary>Runs until cancelled, catching up every <see cref="MonitorOptions.PollInterval"/>.</summary>
    public async Task RunAsync(CancellationToken cancellationToken)
    {
        using var timer = new PeriodicTimer(options.PollInterval, time);
        do
        {
            try
            {
                await CatchUpAsync(cancellationToken).ConfigureAwait(false);
            }
            catch (OperationCanceledException) when (cancellationToken.IsCancellationRequested)
            {
                return;
            }
#pragma warning disable CA1031 // the runner must keep running; the failure is logged and retried at the next tick
            catch (Exception ex)
#pragma warning restore CA1031
            {
                CatchUpFailed(ex);
            }
        }
        while (await timer.WaitForNextTickAsync(cancellationToken).ConfigureAwait(false));
    }

    [LoggerMessage(EventId = 3101, Level = LogLevel.Error, Message = "The monitor's charts could not catch up; retrying")]
    private partial void CatchUpFailed(Exception error);

    [LoggerMessage(EventId = 3102, Level = LogLevel.Information, Message = "This process now runs the monitor's charts (lease {Lease}); continuing from their saved states")]
    private partial void BecameHolder(string lease);

    [LoggerMessage(EventId = 3103, Level = LogLevel.Warning, Message = "Another process runs the monitor's charts now (lease {Lease})")]
    private partial void LostToAnother(string lease);

    [LoggerMessage(EventId = 3104, Level = LogLevel.Warning, Message = "The lease {Lease} was lost while saving the charts; another process runs them now")]
    private partial void LostWhileSaving(string lease);

    [LoggerMessage(EventId = 3105, Level = LogLevel.Warning,
        Message = "CUSUM {Chart} of {Model} {Version} signalled at outcome {Index} (prediction {Id} of {Time:O}): statistic {Statistic:F3}")]
    private partial void ChartSignalled(string chart, string model, string version, long index, Guid id, DateTimeOffset time, double statistic);

    /// <summary>The store lease whose holder runs the charts.</summary>
    public const string Lease = "monitor-charts";

    private bool _holder;

    /// <summary>Whether this process ran the charts in its last round (it held <see cref="Lease"/>).</summary>
    public bool IsHolder => Volatile.Read(ref _holder);

    /// <summary>
    /// One round. As the lease holder: implicit negatives first, then every version's charts up to its frontier, and
    /// the changed states saved. Otherwise: every version's charts as the holder last saved them.
    /// </summary>
    public async Task CatchUpAsync(CancellationToken cancellationToken = default)
    {
        var holds = await leases.TryHoldLeaseAsync(Lease, cancellationToken).ConfigureAwait(false);
        if (holds && !_holder)
        {
            BecameHolder(Lease);
        }
        else if (!holds && _holder)
        {
            LostToAnother(Lease);
        }

        var becameHolder = holds && !_holder;
        Volatile.Write(ref _holder, holds);
        LetGoOfRetired();
        if (!holds)
        {
            await FollowAsync(cancellationToken).ConfigureAwait(false);
            return;
        }

        if (becameHolder)
        {
            await FollowAsync(cancellationToken).ConfigureAwait(false); // start from what the previous holder saved
        }

        var now = time.GetUtcNow();
        try
        {
            foreach (var entry in registry.Current.Models.Values)
            {
                var outcome = entry.Versions.Length > 0 ? entry.Versions[^1].Document.Outcome : null;
                var horizon = outcome?.HorizonSpan ?? TimeSpan.Zero;
                if (outcome?.Negatives == NegativesPolicy.Implicit && horizon > TimeSpan.Zero)
                {
                    while (await outcomes.RecordImplicitNegativesAsync(entry.Name, now - horizon, now, 10_000, cancellationToken).ConfigureAwait(false) == 10_000)
                    {
                    }
                }

                foreach (var version in entry.Versions.Where(v => v.Stage != Stage.Retired))
                {
                    var charts = await ChartsOfAsync(entry.Name, version.Version, cancellationToken).ConfigureAwait(false);
                    if (await charts.CatchUpAsync(labelled, entry.Name, version.Version, now - horizon, cancellationToken, OnSignal).ConfigureAwait(false))
                    {
                        await leases.SaveChartStateAsync(entry.Name, version.Version, charts.SaveState(), Lease, cancellationToken).ConfigureAwait(false);
                    }
                }
            }
        }
        catch (LeaseLostException)
        {
            LostWhileSaving(Lease);
            Volatile.Write(ref _holder, false);
            await FollowAsync(cancellationToken).ConfigureAwait(false);
        }

        void OnSignal(string model, string version, string chart, ChartSignal signal)
        {
            ChartSignalled(chart, model, version, signal.Index, signal.PredictionId, signal.Time, signal.Statistic);
            Signalled?.Invoke(model, version, chart, signal);
        }
    }

    /// <summary>
    /// Lets go of the charts of versions no longer live or shadow (retired, or gone from the registry); their saved state
    /// stays in the store, and <see cref="ChartsOfAsync"/> continues from it if the version comes back.
    /// </summary>
    private void LetGoOfRetired()
    {
        var current = registry.Current;
        foreach (var key in _charts.Keys)
        {
            if (current.Find(key.Model)?.Find(key.Version) is not { Stage: not Stage.Retired })
            {
                _charts.TryRemove(key, out _);
            }
        }
    }

    /// <summary>The charts of a version as held, else as last saved, else new.</summary>
    private async Task<VersionCharts> ChartsOfAsync(string model, string version, CancellationToken cancellationToken)
    {
        if (_charts.TryGetValue((model, version), out var charts))
        {
            return charts;
        }

        var saved = await leases.GetChartStateAsync(model, version, cancellationToken).ConfigureAwait(false);
        return _charts.GetOrAdd((model, version), saved is null ? new VersionCharts(options) : VersionCharts.Restore(options, saved));
    }

    /// <summary>Replaces every version's charts by the state the holder last saved; raises <see cref="Signalled"/> for signals new to this process.</summary>
    private async Task FollowAsync(CancellationToken cancellationToken)
    {
        foreach (var version in registry.Current.Models.Values.SelectMany(m => m.Versions).Where(v => v.Stage != Stage.Retired))
        {
            var saved = await leases.GetChartStateAsync(version.Model, version.Version, cancellationToken).ConfigureAwait(false);
            if (saved is null)
            {
                continue;
            }

            var key = (version.Model, version.Version);
            var before = _charts.TryGetValue(key, out var previous) ? previous.View() : null;
            var charts = VersionCharts.Restore(options, saved);
            _charts[key] = charts;
            var after = charts.View();
            Announce("up", before?.Up?.SignalCount ?? 0, after.Up);
            Announce("down", before?.Down?.SignalCount ?? 0, after.Down);

            void Announce(string chart, long seen, CusumView? view)
            {
                if (view is null || previous is null)
                {
                    return; // a process that just started does not announce the history again
                }

                // The signals new since the last look, of those the holder kept.
                var fresh = (int)Math.Min(Math.Max(view.SignalCount - seen, 0), view.Signals.Count);
                foreach (var signal in view.Signals.Skip(view.Signals.Count - fresh))
                {
                    Signalled?.Invoke(version.Model, version.Version, chart, signal);
                }
            }
        }
    }

    /// <summary>What a version's charts save: everything needed to continue exactly where they were.</summary>
    internal sealed record ChartsState(
        CusumState? Up,
        CusumState? Down,
        ThresholdChoice? UpChoice,
        ThresholdChoice? DownChoice,
        EwmaState Ewma,
        double[] Recent,
        PendingOutcome[] Pending,
        ChartSignal[] UpSignals,
        ChartSignal[] DownSignals,
        double[] SampleEdges,
        double[] SampleProportions,
        DateTimeOffset CursorTime,
        Guid CursorId,
        long Outcomes,
        long SinceCheck,
        DateTimeOffset[]? RecentTimes = null,
        double? Target = null,
        OutcomeRateState? Rate = null,
        ChartPathState? UpPath = null,
        ChartPathState? DownPath = null);

    /// <summary>An outcome taken in before the charts had enough to set their thresholds.</summary>
    internal readonly record struct PendingOutcome(double P, byte Y, DateTimeOffset At, Guid Id);

    private static readonly JsonSerializerOptions StateJson = new()
    {
        NumberHandling = JsonNumberHandling.AllowNamedFloatingPointLiterals,
        PropertyNamingPolicy = JsonNamingPolicy.CamelCase,
    };

    /// <summary>The charts of one version and the walk's position.</summary>
    private sealed class VersionCharts(MonitorOptions options)
    {
        private readonly Lock _lock = new();
        private readonly List<PendingOutcome> _pending = [];
        private readonly Queue<double> _recent = new();
        private OutcomeRate _rate = new(); // outcomes per day of prediction time, for the false-alarm budget
        private ChartPath _upPath = new(options.CusumPathTail, options.CusumPathDays);
        private ChartPath _downPath = new(options.CusumPathTail, options.CusumPathDays);
        private double _target; // the run length the thresholds were last set for
        private readonly List<ChartSignal> _upSignals = [];
        private readonly List<ChartSignal> _downSignals = [];
        private ObservedExpectedEwma _ewma = new(options.EwmaLambda, options.EwmaLimit);
        private RiskAdjustedCusum? _up;
        private RiskAdjustedCusum? _down;
        private ThresholdChoice? _upChoice;
        private ThresholdChoice? _downChoice;
        private double[] _sampleEdges = [];
        private double[] _sampleProportions = [];
        private DateTimeOffset _cursorTime = DateTimeOffset.UnixEpoch;
        private Guid _cursorId = Guid.Empty;
        private long _outcomes;
        private long _sinceCheck;

        public ChartsView View()
        {
            lock (_lock)
            {
                var limit = options.EwmaLimit * _ewma.Sd;
                var ewma = new EwmaView(_ewma.Value, limit, options.EwmaLambda, _ewma.Steps > 0 && Math.Abs(_ewma.Value) > limit, _ewma.Steps);
                var waiting = _up is null
                    ? $"the CUSUM charts start once {options.CusumMinSample} outcomes have matured, to set their thresholds from the version's own predictions ({_pending.Count} so far)"
                    : null;
                return new ChartsView(Cusum(_up, _upChoice, _upSignals), Cusum(_down, _downChoice, _downSignals), ewma, _outcomes,
                    _outcomes > 0 ? _cursorTime : null, waiting);
            }
        }

        /// <summary>Both charts' kept paths over [from, to) (<see cref="ChartPath.Points"/>).</summary>
        public (List<CusumPoint> Up, List<CusumPoint> Down) Paths(DateTimeOffset from, DateTimeOffset to)
        {
            lock (_lock)
            {
                return (_upPath.Points(from, to), _downPath.Points(from, to));
            }
        }

        private static CusumView? Cusum(RiskAdjustedCusum? chart, ThresholdChoice? choice, List<ChartSignal> signals) => chart is null || choice is null
            ? null
            : new CusumView(chart.OddsRatio, chart.Value, chart.Threshold, choice.InControlRunLength, choice.DetectionDelay, chart.Steps, [.. signals],
                chart.Signals);

        /// <summary>Saves the charts as JSON (<see cref="ChartsState"/>): doubles round-trip exactly.</summary>
        public string SaveState()
        {
            lock (_lock)
            {
                var state = new ChartsState(_up?.Save(), _down?.Save(), _upChoice, _downChoice, _ewma.Save(), [.. _recent], [.. _pending], [.. _upSignals],
                    [.. _downSignals], _sampleEdges, _sampleProportions, _cursorTime, _cursorId, _outcomes, _sinceCheck, null, _target, _rate.Save(), _upPath.Save(),
                    _downPath.Save());
                return JsonSerializer.Serialize(state, StateJson);
            }
        }

        /// <summary>Charts that continue from a saved state.</summary>
        public static VersionCharts Restore(MonitorOptions options, string json)
        {
            var state = JsonSerializer.Deserialize<ChartsState>(json, StateJson) ?? throw new JsonException("The saved chart state is empty.");
            var charts = new VersionCharts(options)
            {
                _up = state.Up is { } up ? RiskAdjustedCusum.Restore(up) : null,
                _down = state.Down is { } down ? RiskAdjustedCusum.Restore(down) : null,
                _upChoice = state.UpChoice,
                _downChoice = state.DownChoice,
                _ewma = ObservedExpectedEwma.Restore(state.Ewma),
                _sampleEdges = state.SampleEdges,
                _sampleProportions = state.SampleProportions,
                _cursorTime = state.CursorTime,
                _cursorId = state.CursorId,
                _outcomes = state.Outcomes,
                _sinceCheck = state.SinceCheck,
                _target = state.Target ?? state.UpChoice?.InControlRunLength ?? 0,
                _upPath = ChartPath.Restore(options.CusumPathTail, options.CusumPathDays, state.UpPath),
                _downPath = ChartPath.Restore(options.CusumPathTail, options.CusumPathDays, state.DownPath),
            };
            foreach (var p in state.Recent)
            {
                charts._recent.Enqueue(p);
            }

            if (state.Rate is { } rate)
            {
                charts._rate = OutcomeRate.Restore(rate);
            }
            else
            {
                // A state saved before the rate was kept: the recent outcomes' times, or (older still) the cursor's time.
                foreach (var t in state.RecentTimes ?? Enumerable.Repeat(state.CursorTime, state.Recent.Length).ToArray())
                {
                    charts._rate.Add(t);
                }
            }

            charts._pending.AddRange(state.Pending);
            charts._upSignals.AddRange(state.UpSignals);
            charts._downSignals.AddRange(state.DownSignals);
            Keep(charts._upSignals, options.CusumSignalsKept);
            Keep(charts._downSignals, options.CusumSignalsKept);
            return charts;
        }

        /// <summary>Takes in the matured outcomes after the walk's position; true when it took any.</summary>
        public async Task<bool> CatchUpAsync(ILabelledStore store, string model, string version, DateTimeOffset frontier, CancellationToken cancellationToken,
            Action<string, string, string, ChartSignal> onSignal)
        {
            if (frontier <= _cursorTime)
            {
                return false;
            }

            var took = false;

            // Page by page after the walk's position (prediction time, then id, in the store's order), so a version far
            // behind (a first start over its history, a long outage) holds one page of rows at a time.
            LabelledRowPosition? after = _cursorId == Guid.Empty ? null : new LabelledRowPosition(_cursorTime, _cursorId);
            while (true)
            {
                var page = await store.GetLabelledRowsAsync(model, version, _cursorTime, frontier, after, options.ChartPageRows, cancellationToken)
                    .ConfigureAwait(false);
                foreach (var row in page)
                {
                    var r = row.Prediction;
                    Take(model, version, r.Probability, r.Outcome, r.ScoredAt, r.Id, onSignal);
                    _cursorTime = r.ScoredAt;
                    _cursorId = r.Id;
                    took = true;
                }

                if (page.Count < options.ChartPageRows)
                {
                    return took;
                }

                after = page[^1].Position;
            }
        }

        private void Take(string model, string version, double p, byte y, DateTimeOffset at, Guid id, Action<string, string, string, ChartSignal> onSignal)
        {
            lock (_lock)
            {
                _outcomes++;
                _ewma.Add(p, y);
                _recent.Enqueue(p);
                _rate.Add(at);
                while (_recent.Count > options.CusumSample)
                {
                    _recent.Dequeue();
                }

                if (_up is null)
                {
                    _pending.Add(new PendingOutcome(p, y, at, id));
                    if (_pending.Count < options.CusumMinSample)
                    {
                        return;
                    }

                    SetThresholds();
                    foreach (var (pp, yy, tt, ii) in _pending.ToArray())
                    {
                        Step(model, version, pp, yy, tt, ii, onSignal);
                    }

                    _pending.Clear();
                    return;
                }

                Step(model, version, p, y, at, id, onSignal);
                if (++_sinceCheck % options.CusumMinSample == 0 && FalseAlarmBudget.Moved(_target, Target()))
                {
                    SetThresholds(); // the outcome rate moved the budget's run length by a quarter
                }

                if (_sinceCheck >= 1_000)
                {
                    _sinceCheck = 0;
                    // Set again when the risk mix moved.
                    var shift = PopulationStability.IndexFromCounts(_sampleProportions, PopulationStability.Counts(_sampleEdges, [.. _recent]));
                    if (shift > options.CusumResampleShift)
                    {
                        SetThresholds();
                    }
                }
            }
        }

        private void Step(string model, string version, double p, byte y, DateTimeOffset at, Guid id, Action<string, string, string, ChartSignal> onSignal)
        {
            var signalledUp = _up!.Add(p, y, out var upStatistic);
            var signalledDown = _down!.Add(p, y, out var downStatistic);
            _upPath.Add(_up.Steps, at, upStatistic);
            _downPath.Add(_down.Steps, at, downStatistic);
            if (signalledUp)
            {
                var signal = new ChartSignal(_up.Steps, at, upStatistic, id, _up.Threshold);
                _upSignals.Add(signal);
                Keep(_upSignals, options.CusumSignalsKept);
                onSignal(model, version, "up", signal);
            }

            if (signalledDown)
            {
                var signal = new ChartSignal(_down.Steps, at, downStatistic, id, _down.Threshold);
                _downSignals.Add(signal);
                Keep(_downSignals, options.CusumSignalsKept);
                onSignal(model, version, "down", signal);
            }
        }

        /// <summary>Drops the oldest signals beyond <paramref name="kept"/>; the chart's own count keeps counting them.</summary>
        private static void Keep(List<ChartSignal> signals, int kept)
        {
            if (signals.Count > kept)
            {
                signals.RemoveRange(0, signals.Count - kept);
            }
        }

        /// <summary>
        /// The run length the thresholds are set for: one false alarm per <see cref="MonitorOptions.CusumFalseAlarmDays"/>
        /// at the outcome rate over the last week of prediction time (<see cref="OutcomeRate"/>), at least <see cref="MonitorOptions.CusumRunLength"/>.
        /// </summary>
        private double Target() => _rate.Count < 2
            ? options.CusumRunLength
            : FalseAlarmBudget.RunLength(options.CusumRunLength, options.CusumFalseAlarmDays, _rate.PerDay);

        /// <summary>Thresholds for the budget's run length from the recent probabilities; the charts keep their values.</summary>
        private void SetThresholds()
        {
            var sample = _recent.ToArray();
            _target = Target();
            _upChoice = RunLength.ThresholdFor(sample, options.CusumUpOddsRatio, _target);
            _downChoice = RunLength.ThresholdFor(sample, options.CusumDownOddsRatio, _target);
            if (_up is null)
            {
                _up = new RiskAdjustedCusum(options.CusumUpOddsRatio, _upChoice.Threshold);
                _down = new RiskAdjustedCusum(options.CusumDownOddsRatio, _downChoice.Threshold);
            }
            else
            {
                _up.Threshold = _upChoice.Threshold;
                _down!.Threshold = _downChoice.Threshold;
            }

            // The sample's own deciles (tied edges merged) and its proportions in them: the baseline the later shift is measured against.
            _sampleEdges = PopulationStability.Edges(sample);
            _sampleProportions = [.. PopulationStability.Counts(_sampleEdges, sample).Select(c => c / (double)sample.Length)];
        }
    }
}
