namespace Scorer.Store;

/// <summary>A prediction of the model that an outcome report of a batch may reach, as a driver read it: its id, the live prediction it shadows, its key.</summary>
public readonly record struct OutcomeTarget(Guid Id, Guid? LiveId, string? Key);

/// <summary>An outcome already recorded for a prediction when the batch's transaction read it.</summary>
public readonly record struct RecordedOutcome(byte Outcome, bool Implicit);

/// <summary>
/// An outcome row the batch writes: a new one (the prediction had none) or a changed one (take-latest), with its
/// outcome and observation time after the whole batch. A written row is never implicit.
/// </summary>
public readonly record struct OutcomeWrite(Guid Id, byte Outcome, DateTimeOffset? ObservedAt);

/// <summary>A report that disagreed with the outcome recorded for a prediction: one row of the conflict table.</summary>
public readonly record struct OutcomeConflict(Guid Id, byte Recorded, byte Reported, byte Kept, bool WasImplicit);

/// <summary>
/// What a batch of reports comes to: the receipt for the caller and the writes that leave the tables as applying the
/// reports one by one would: one insert per prediction that had no outcome, one update per recorded outcome the batch
/// changed (each with its value after the batch, in id order), and the conflict rows in the order they arose.
/// </summary>
public sealed record OutcomeApplication(OutcomeReceipt Receipt, IReadOnlyList<OutcomeWrite> Inserts, IReadOnlyList<OutcomeWrite> Updates,
    IReadOnlyList<OutcomeConflict> Conflicts);

/// <summary>
/// The rules of <see cref="IOutcomeStore.RecordOutcomesAsync"/>, once for every driver: the argument checks, which
/// predictions a report reaches, and what it does to each. A driver reads, inside its transaction, the predictions the
/// batch can reach (<see cref="Ids"/>, <see cref="Keys"/>) and their recorded outcomes, calls <see cref="Apply"/>, and
/// writes what it returns.
/// </summary>
/// <remarks>
/// <para>
/// The rules. A report by id reaches the prediction of the model with that id and every shadow prediction paired with
/// it (whose live id it is); a report by key reaches every prediction of the model with that key. A report that
/// reaches nothing is unknown. For each prediction it reaches: with no outcome recorded, the report's outcome is
/// recorded (the report labelled it anew); with the same outcome recorded, implicit or not, nothing changes; with a
/// different one, a conflict row is written, and under <see cref="ConflictPolicy.TakeLatest"/> the report's outcome
/// replaces the recorded one (no longer implicit), while under <see cref="ConflictPolicy.KeepFirst"/> the recorded one
/// stays. A report that met a conflict on any prediction counts as a conflict; otherwise one that labelled any
/// prediction anew is accepted; otherwise it is a duplicate.
/// </para>
/// <para>
/// Order. The reports are applied in id order, stable (reports of one prediction keep their order; reports by key,
/// whose sort id is <see cref="Guid.Empty"/>, come first), and a later report sees what an earlier one of the batch
/// recorded. Time-ordered ids then touch the drivers' index pages in order rather than at random.
/// <see cref="Guid.CompareTo(Guid)"/> orders as PostgreSQL orders uuid and as SQLite orders the ids' big-endian bytes.
/// The receipt's lists keep the reports' order.
/// </para>
/// </remarks>
public static class OutcomeRules
{
    /// <summary>
    /// Checks a call's arguments: a model name, a list of reports with no null entry, each giving an id or a key (not
    /// both, not neither) and an outcome of 0 or 1, and a defined conflict policy. Throws <see cref="ArgumentException"/>
    /// (or <see cref="ArgumentOutOfRangeException"/> for the policy) naming the field and the report.
    /// </summary>
    public static void Check(string model, IReadOnlyList<OutcomeReport> reports, ConflictPolicy policy)
    {
        ArgumentException.ThrowIfNullOrEmpty(model);
        ArgumentNullException.ThrowIfNull(reports);
        for (var i = 0; i < reports.Count; i++)
        {
            var r = reports[i] ?? throw new ArgumentException($"reports[{i}] is null.", nameof(reports));
            if (r.Id is null == string.IsNullOrEmpty(r.Key))
            {
                throw new ArgumentException($"reports[{i}] must give either an id or a key.", nameof(reports));
            }

            if (r.Outcome > 1)
            {
                throw new ArgumentException($"reports[{i}] has outcome {r.Outcome}; outcomes are 0 or 1.", nameof(reports));
            }
        }

        if (!Enum.IsDefined(policy))
        {
            throw new ArgumentOutOfRangeException(nameof(policy), policy, "Not a conflict policy: expected KeepFirst or TakeLatest.");
        }
    }

    /// <summary>The distinct ids the reports give, in id order: the driver reads the predictions with these ids and those whose live id they are.</summary>
    public static Guid[] Ids(IReadOnlyList<OutcomeReport> reports) =>
        [.. reports.Where(r => r.Id is not null).Select(r => r.Id!.Value).Distinct().Order()];

    /// <summary>The distinct keys the reports give (reports by key only): the driver reads the predictions carrying them.</summary>
    public static string[] Keys(IReadOnlyList<OutcomeReport> reports) =>
        [.. reports.Where(r => r.Id is null).Select(r => r.Key!).Distinct(StringComparer.Ordinal)];

    /// <summary>Applies checked reports (see <see cref="Check"/>) to what the driver read, in memory.</summary>
    /// <param name="reports">The batch.</param>
    /// <param name="targets">
    /// The predictions of the model the batch reaches: every one whose id or live id is among <see cref="Ids"/> and
    /// every one whose key is among <see cref="Keys"/> (more do no harm). A prediction listed twice counts once.
    /// </param>
    /// <param name="recorded">The outcomes recorded for those predictions, as the driver's transaction read them.</param>
    /// <param name="policy">What a conflicting report does.</param>
    public static OutcomeApplication Apply(IReadOnlyList<OutcomeReport> reports, IEnumerable<OutcomeTarget> targets,
        IReadOnlyDictionary<Guid, RecordedOutcome> recorded, ConflictPolicy policy)
    {
        ArgumentNullException.ThrowIfNull(reports);
        ArgumentNullException.ThrowIfNull(targets);
        ArgumentNullException.ThrowIfNull(recorded);
        if (!Enum.IsDefined(policy))
        {
            throw new ArgumentOutOfRangeException(nameof(policy), policy, "Not a conflict policy: expected KeepFirst or TakeLatest.");
        }

        var known = new HashSet<Guid>();
        var shadowsOf = new Dictionary<Guid, List<Guid>>();
        var byKey = new Dictionary<string, List<Guid>>(StringComparer.Ordinal);
        foreach (var target in targets)
        {
            if (!known.Add(target.Id))
            {
                continue;
            }

            if (target.LiveId is { } live && live != target.Id)
            {
                Add(shadowsOf, live, target.Id);
            }

            if (target.Key is { } key)
            {
                Add(byKey, key, target.Id);
            }
        }

        var state = new Dictionary<Guid, State>();
        var conflictRows = new List<OutcomeConflict>();
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
                if (known.Contains(id))
                {
                    reached.Add(id);
                }

                if (shadowsOf.TryGetValue(id, out var shadows))
                {
                    reached.AddRange(shadows);
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
            foreach (var target in reached)
            {
                if (!state.TryGetValue(target, out var now) && recorded.TryGetValue(target, out var r))
                {
                    state[target] = now = new State(r.Outcome, r.Implicit, Existed: true);
                }

                if (now is null)
                {
                    state[target] = new State(report.Outcome, Implicit: false, Existed: false) { Changed = true, ObservedAt = report.ObservedAt };
                    labelled = true;
                }
                else if (now.Outcome != report.Outcome)
                {
                    differed = true;
                    var keep = policy == ConflictPolicy.TakeLatest ? report.Outcome : now.Outcome;
                    conflictRows.Add(new OutcomeConflict(target, now.Outcome, report.Outcome, keep, now.Implicit));
                    if (policy == ConflictPolicy.TakeLatest)
                    {
                        now.Outcome = report.Outcome;
                        now.Implicit = false;
                        now.ObservedAt = report.ObservedAt;
                        now.Changed = true;
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
        var inserts = new List<OutcomeWrite>();
        var updates = new List<OutcomeWrite>();
        foreach (var (id, s) in state.OrderBy(s => s.Key))
        {
            if (s.Changed)
            {
                (s.Existed ? updates : inserts).Add(new OutcomeWrite(id, s.Outcome, s.ObservedAt));
            }
        }

        var receipt = new OutcomeReceipt(accepted, duplicates, [.. unknown.OrderBy(u => u.Index).Select(u => u.Name)],
            [.. conflicts.OrderBy(c => c.Index).Select(c => c.Name)]);
        return new OutcomeApplication(receipt, inserts, updates, conflictRows);
    }

    private static void Add<TKey>(Dictionary<TKey, List<Guid>> map, TKey key, Guid id)
        where TKey : notnull
    {
        if (!map.TryGetValue(key, out var list))
        {
            map[key] = list = [];
        }

        list.Add(id);
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

        public DateTimeOffset? ObservedAt { get; set; }
    }
}
