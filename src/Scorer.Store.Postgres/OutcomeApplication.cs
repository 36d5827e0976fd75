namespace Scorer.Store.Postgres;

/// <summary>A prediction an outcome report reaches, as read from the log: what the outcome row copies in.</summary>
internal readonly record struct OutcomeTarget(Guid Id, string Version, string Stage, DateTime ScoredAt, double Eta, double Probability, Guid? LiveId);

/// <summary>An outcome row as it stood when the batch's transaction locked it.</summary>
internal readonly record struct RecordedOutcome(byte Outcome, bool Implicit);

/// <summary>A new outcome row: the prediction's copied values and its outcome after the whole batch.</summary>
internal readonly record struct OutcomeInsert(OutcomeTarget Target, byte Outcome, DateTime? ObservedAt);

/// <summary>A changed outcome row (take-latest): its outcome after the whole batch.</summary>
internal readonly record struct OutcomeUpdate(Guid Id, byte Outcome, DateTime? ObservedAt);

/// <summary>A report that disagreed with the recorded outcome: one row of outcome_conflicts.</summary>
internal readonly record struct OutcomeConflict(Guid Id, byte Recorded, byte Reported, byte Kept, bool WasImplicit);

/// <summary>
/// Applies a batch of outcome reports in memory, report by report, exactly as the SQLite driver applies them row by
/// row inside its transaction, and returns the receipt with the set of writes that leaves the tables in the same
/// state: one insert per prediction that had no outcome (with its value after the batch), one update per recorded
/// outcome the batch changed, the conflict rows in the order they arose.
/// </summary>
/// <remarks>
/// The reports are applied in id order, stable (so reports of one prediction keep their order, and reports by key,
/// whose sort id is <see cref="Guid.Empty"/>, come first), as the SQLite driver orders them; a later report sees what
/// an earlier one of the batch recorded. <see cref="Guid.CompareTo(Guid)"/> orders as PostgreSQL orders uuid (by the
/// RFC 9562 bytes). The receipt's lists keep the reports' order.
/// </remarks>
internal sealed class OutcomeApplication
{
    private readonly Dictionary<Guid, State> _state = [];

    private OutcomeApplication()
    {
    }

    public OutcomeReceipt Receipt { get; private set; } = new(0, 0, [], []);

    public List<OutcomeInsert> Inserts { get; } = [];

    public List<OutcomeUpdate> Updates { get; } = [];

    public List<OutcomeConflict> Conflicts { get; } = [];

    /// <param name="reports">The batch, checked by the caller (each has an id or a key, and an outcome of 0 or 1).</param>
    /// <param name="targets">Every prediction of the model that a report reaches, by id.</param>
    /// <param name="shadowsOf">The shadow predictions of the model paired with a live prediction id (their live_id).</param>
    /// <param name="byKey">The predictions of the model carrying a key.</param>
    /// <param name="recorded">The outcomes already recorded for the targets, locked by the caller's transaction.</param>
    /// <param name="policy">What a conflicting report does.</param>
    public static OutcomeApplication Apply(
        IReadOnlyList<OutcomeReport> reports,
        IReadOnlyDictionary<Guid, OutcomeTarget> targets,
        IReadOnlyDictionary<Guid, List<Guid>> shadowsOf,
        IReadOnlyDictionary<string, List<Guid>> byKey,
        IReadOnlyDictionary<Guid, RecordedOutcome> recorded,
        ConflictPolicy policy)
    {
        var application = new OutcomeApplication();
        application.Run(reports, targets, shadowsOf, byKey, recorded, policy);
        return application;
    }

    private void Run(
        IReadOnlyList<OutcomeReport> reports,
        IReadOnlyDictionary<Guid, OutcomeTarget> targets,
        IReadOnlyDictionary<Guid, List<Guid>> shadowsOf,
        IReadOnlyDictionary<string, List<Guid>> byKey,
        IReadOnlyDictionary<Guid, RecordedOutcome> recorded,
        ConflictPolicy policy)
    {
        int accepted = 0, duplicates = 0;
        var unknown = new List<(int Index, string Name)>();
        var conflicts = new List<(int Index, string Name)>();
        var reached = new List<Guid>();
        var order = Enumerable.Range(0, reports.Count).OrderBy(i => reports[i].Id ?? Guid.Empty).ThenBy(i => i).ToArray();
        foreach (var index in order)
        {
            var report = reports[index];
            var name = report.Id is { } g ? g.ToString() : report.Key!;
            reached.Clear();
            if (report.Id is { } id)
            {
                if (targets.ContainsKey(id))
                {
                    reached.Add(id);
                }

                if (shadowsOf.TryGetValue(id, out var shadows))
                {
                    foreach (var shadow in shadows)
                    {
                        if (shadow != id)
                        {
                            reached.Add(shadow);
                        }
                    }
                }
            }
            else if (byKey.TryGetValue(report.Key!, out var keyed))
            {
                reached.AddRange(keyed);
            }

            if (reached.Count == 0)
            {
                unknown.Add((index, name));
                continue;
            }

            bool labelled = false, differed = false;
            var observed = PostgresValues.ToTimestamp(report.ObservedAt);
            foreach (var target in reached)
            {
                if (!_state.TryGetValue(target, out var state))
                {
                    state = recorded.TryGetValue(target, out var r) ? new State(r.Outcome, r.Implicit, Existed: true) : null;
                    if (state is not null)
                    {
                        _state[target] = state;
                    }
                }

                if (state is null)
                {
                    _state[target] = new State(report.Outcome, Implicit: false, Existed: false) { Changed = true, ObservedAt = observed };
                    labelled = true;
                }
                else if (state.Outcome != report.Outcome)
                {
                    differed = true;
                    var keep = policy == ConflictPolicy.TakeLatest ? report.Outcome : state.Outcome;
                    Conflicts.Add(new OutcomeConflict(target, state.Outcome, report.Outcome, keep, state.Implicit));
                    if (policy == ConflictPolicy.TakeLatest)
                    {
                        state.Outcome = report.Outcome;
                        state.Implicit = false;
                        state.ObservedAt = observed;
                        state.Changed = true;
                    }
                }
            }

            if (differed)
            {
                conflicts.Add((index, name));
            }
            else if (labelled)
            {
                accepted++;
            }
            else
            {
                duplicates++;
            }
        }

        // In id order: the rows' index entries and locks are then taken in one order by every writer.
        foreach (var (id, state) in _state.OrderBy(s => s.Key))
        {
            if (!state.Changed)
            {
                continue;
            }

            if (state.Existed)
            {
                Updates.Add(new OutcomeUpdate(id, state.Outcome, state.ObservedAt));
            }
            else
            {
                Inserts.Add(new OutcomeInsert(targets[id], state.Outcome, state.ObservedAt));
            }
        }

        Receipt = new OutcomeReceipt(accepted, duplicates, [.. unknown.OrderBy(u => u.Index).Select(u => u.Name)],
            [.. conflicts.OrderBy(c => c.Index).Select(c => c.Name)]);
    }

    /// <summary>
    /// A prediction's outcome as the batch goes: <see cref="Existed"/> when a row was recorded before the batch;
    /// <see cref="Changed"/> when the batch inserts or updates it.
    /// </summary>
    private sealed record State(byte Outcome, bool Implicit, bool Existed)
    {
        public byte Outcome { get; set; } = Outcome;

        public bool Implicit { get; set; } = Implicit;

        public bool Changed { get; set; }

        public DateTime? ObservedAt { get; set; }
    }
}
