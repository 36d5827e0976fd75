namespace Scorer.Store.Tests;

/// <summary>
/// The outcome rules every driver applies (<see cref="OutcomeRules"/>), in memory: each rule and each boundary. The
/// contract tests hold both drivers to the same on real databases.
/// </summary>
public sealed class OutcomeRulesTests
{
    private static readonly DateTimeOffset Seen = new(2025, 5, 6, 7, 8, 9, TimeSpan.Zero);

    // Ids in a known order (Guid.CompareTo): A < B < C < S (S shadows A).
    private static readonly Guid A = Guid.Parse("00000000-0000-7000-8000-00000000000a");
    private static readonly Guid B = Guid.Parse("00000000-0000-7000-8000-00000000000b");
    private static readonly Guid C = Guid.Parse("00000000-0000-7000-8000-00000000000c");
    private static readonly Guid S = Guid.Parse("00000000-0000-7000-8000-0000000000ff");

    private static readonly OutcomeTarget[] Log =
    [
        new(A, null, "WO-1"),
        new(B, null, "WO-1"),
        new(C, null, null),
        new(S, A, null),
    ];

    private static readonly Dictionary<Guid, RecordedOutcome> Nothing = [];

    [Fact]
    public void A_report_on_a_prediction_without_an_outcome_is_accepted_and_inserted_with_its_observation_time()
    {
        var applied = OutcomeRules.Apply([new OutcomeReport(C, null, 1, Seen)], Log, Nothing, ConflictPolicy.KeepFirst);

        Assert.Equal((1, 0), (applied.Receipt.Accepted, applied.Receipt.Duplicates));
        Assert.Empty(applied.Receipt.Unknown);
        Assert.Empty(applied.Receipt.Conflicts);
        Assert.Equal([new OutcomeWrite(C, 1, Seen)], applied.Inserts);
        Assert.Empty(applied.Updates);
        Assert.Empty(applied.Conflicts);
    }

    [Fact]
    public void The_same_outcome_again_is_a_duplicate_and_writes_nothing_whether_recorded_before_or_earlier_in_the_batch()
    {
        var recorded = new Dictionary<Guid, RecordedOutcome> { [C] = new(0, Implicit: false) };
        var before = OutcomeRules.Apply([new OutcomeReport(C, null, 0)], Log, recorded, ConflictPolicy.TakeLatest);
        var inBatch = OutcomeRules.Apply([new OutcomeReport(B, null, 1), new OutcomeReport(B, null, 1)], Log, Nothing, ConflictPolicy.KeepFirst);

        Assert.Equal((0, 1), (before.Receipt.Accepted, before.Receipt.Duplicates));
        Assert.Empty(before.Inserts);
        Assert.Empty(before.Updates);
        Assert.Empty(before.Conflicts);
        Assert.Equal((1, 1), (inBatch.Receipt.Accepted, inBatch.Receipt.Duplicates));
        Assert.Equal([new OutcomeWrite(B, 1, null)], inBatch.Inserts);
    }

    [Fact]
    public void Under_keep_first_a_different_outcome_is_a_conflict_row_that_keeps_the_recorded_one_and_changes_nothing()
    {
        var recorded = new Dictionary<Guid, RecordedOutcome> { [C] = new(1, Implicit: false) };

        var applied = OutcomeRules.Apply([new OutcomeReport(C, null, 0, Seen)], Log, recorded, ConflictPolicy.KeepFirst);

        Assert.Equal([C.ToString()], applied.Receipt.Conflicts);
        Assert.Equal((0, 0), (applied.Receipt.Accepted, applied.Receipt.Duplicates));
        Assert.Equal([new OutcomeConflict(C, Recorded: 1, Reported: 0, Kept: 1, WasImplicit: false)], applied.Conflicts);
        Assert.Empty(applied.Inserts);
        Assert.Empty(applied.Updates);
    }

    [Fact]
    public void Under_take_latest_a_different_outcome_is_a_conflict_row_and_an_update_to_the_reported_one()
    {
        var recorded = new Dictionary<Guid, RecordedOutcome> { [C] = new(1, Implicit: false) };

        var applied = OutcomeRules.Apply([new OutcomeReport(C, null, 0, Seen)], Log, recorded, ConflictPolicy.TakeLatest);

        Assert.Equal([C.ToString()], applied.Receipt.Conflicts);
        Assert.Equal([new OutcomeConflict(C, 1, 0, Kept: 0, WasImplicit: false)], applied.Conflicts);
        Assert.Equal([new OutcomeWrite(C, 0, Seen)], applied.Updates);
        Assert.Empty(applied.Inserts);
    }

    [Fact]
    public void A_change_within_the_batch_under_take_latest_inserts_the_last_outcome_once_and_records_the_conflict()
    {
        var applied = OutcomeRules.Apply([new OutcomeReport(C, null, 1), new OutcomeReport(C, null, 0, Seen)], Log, Nothing, ConflictPolicy.TakeLatest);

        Assert.Equal((1, 0), (applied.Receipt.Accepted, applied.Receipt.Duplicates));
        Assert.Equal([C.ToString()], applied.Receipt.Conflicts);
        Assert.Equal([new OutcomeWrite(C, 0, Seen)], applied.Inserts);
        Assert.Empty(applied.Updates);
        Assert.Equal([new OutcomeConflict(C, 1, 0, 0, false)], applied.Conflicts);
    }

    [Fact]
    public void A_real_positive_after_an_implicit_zero_is_a_conflict_that_says_the_zero_was_implicit_and_replaces_it_under_take_latest()
    {
        var recorded = new Dictionary<Guid, RecordedOutcome> { [C] = new(0, Implicit: true) };

        var kept = OutcomeRules.Apply([new OutcomeReport(C, null, 1)], Log, recorded, ConflictPolicy.KeepFirst);
        var taken = OutcomeRules.Apply([new OutcomeReport(C, null, 1, Seen)], Log, recorded, ConflictPolicy.TakeLatest);

        Assert.Equal([new OutcomeConflict(C, 0, 1, Kept: 0, WasImplicit: true)], kept.Conflicts);
        Assert.Empty(kept.Updates);
        Assert.Equal([new OutcomeConflict(C, 0, 1, Kept: 1, WasImplicit: true)], taken.Conflicts);
        Assert.Equal([new OutcomeWrite(C, 1, Seen)], taken.Updates);
    }

    [Fact]
    public void A_real_zero_on_an_implicit_zero_is_a_duplicate()
    {
        var recorded = new Dictionary<Guid, RecordedOutcome> { [C] = new(0, Implicit: true) };

        var applied = OutcomeRules.Apply([new OutcomeReport(C, null, 0)], Log, recorded, ConflictPolicy.TakeLatest);

        Assert.Equal((0, 1), (applied.Receipt.Accepted, applied.Receipt.Duplicates));
        Assert.Empty(applied.Updates);
        Assert.Empty(applied.Conflicts);
    }

    [Fact]
    public void A_report_by_key_labels_every_prediction_with_the_key_and_is_one_accepted_report()
    {
        var applied = OutcomeRules.Apply([new OutcomeReport(null, "WO-1", 1)], Log, Nothing, ConflictPolicy.KeepFirst);

        Assert.Equal((1, 0), (applied.Receipt.Accepted, applied.Receipt.Duplicates));
        Assert.Equal([new OutcomeWrite(A, 1, null), new OutcomeWrite(B, 1, null)], applied.Inserts);
    }

    [Fact]
    public void A_key_report_that_labels_one_prediction_anew_and_finds_the_other_labelled_alike_is_accepted_and_one_that_differs_on_either_is_a_conflict()
    {
        var recorded = new Dictionary<Guid, RecordedOutcome> { [A] = new(1, false) };

        var same = OutcomeRules.Apply([new OutcomeReport(null, "WO-1", 1)], Log, recorded, ConflictPolicy.KeepFirst);
        var differs = OutcomeRules.Apply([new OutcomeReport(null, "WO-1", 0)], Log, recorded, ConflictPolicy.KeepFirst);

        Assert.Equal((1, 0), (same.Receipt.Accepted, same.Receipt.Duplicates));
        Assert.Equal([new OutcomeWrite(B, 1, null)], same.Inserts);
        Assert.Equal(["WO-1"], differs.Receipt.Conflicts);
        Assert.Equal(0, differs.Receipt.Accepted);
        Assert.Equal([new OutcomeWrite(B, 0, null)], differs.Inserts); // B had none: labelled all the same
        Assert.Equal([new OutcomeConflict(A, 1, 0, 1, false)], differs.Conflicts);
    }

    [Fact]
    public void A_report_for_a_live_prediction_also_labels_its_paired_shadow_and_a_report_for_the_shadow_labels_only_the_shadow()
    {
        var live = OutcomeRules.Apply([new OutcomeReport(A, null, 1)], Log, Nothing, ConflictPolicy.KeepFirst);
        var shadow = OutcomeRules.Apply([new OutcomeReport(S, null, 0)], Log, Nothing, ConflictPolicy.KeepFirst);

        Assert.Equal([new OutcomeWrite(A, 1, null), new OutcomeWrite(S, 1, null)], live.Inserts);
        Assert.Equal([new OutcomeWrite(S, 0, null)], shadow.Inserts);
        Assert.Equal(1, live.Receipt.Accepted);
    }

    [Fact]
    public void A_shadow_whose_live_prediction_is_gone_is_still_reached_by_the_live_id()
    {
        var applied = OutcomeRules.Apply([new OutcomeReport(A, null, 1)], [new OutcomeTarget(S, A, null)], Nothing, ConflictPolicy.KeepFirst);

        Assert.Equal([new OutcomeWrite(S, 1, null)], applied.Inserts);
        Assert.Equal(1, applied.Receipt.Accepted);
        Assert.Empty(applied.Receipt.Unknown);
    }

    [Fact]
    public void Ids_and_keys_that_reach_nothing_are_unknown_in_the_order_of_the_reports_and_write_nothing()
    {
        var ghost = Guid.Parse("00000000-0000-7000-8000-000000000001");
        OutcomeReport[] reports = [new(C, null, 1), new(null, "WO-9", 1), new(ghost, null, 0), new(null, "wo-1", 1)];

        var applied = OutcomeRules.Apply(reports, Log, Nothing, ConflictPolicy.KeepFirst);

        Assert.Equal(["WO-9", ghost.ToString(), "wo-1"], applied.Receipt.Unknown); // keys match exactly (ordinal)
        Assert.Equal([new OutcomeWrite(C, 1, null)], applied.Inserts);
        Assert.Equal(1, applied.Receipt.Accepted);
    }

    [Fact]
    public void Reports_are_applied_in_id_order_with_key_reports_first_while_the_receipt_keeps_the_reports_order()
    {
        // In id order the key report (sort id empty) comes first and labels A and B with 1; the report by A's id, given
        // first, then conflicts on A and labels A's shadow S (which the key does not reach) with its 0.
        OutcomeReport[] reports = [new(A, null, 0), new(null, "WO-1", 1)];

        var applied = OutcomeRules.Apply(reports, Log, Nothing, ConflictPolicy.KeepFirst);

        Assert.Equal([A.ToString()], applied.Receipt.Conflicts);
        Assert.Equal((1, 0), (applied.Receipt.Accepted, applied.Receipt.Duplicates));
        Assert.Equal([new OutcomeConflict(A, 1, 0, 1, false)], applied.Conflicts);
        Assert.Equal([new OutcomeWrite(A, 1, null), new OutcomeWrite(B, 1, null), new OutcomeWrite(S, 0, null)], applied.Inserts);
    }

    [Fact]
    public void A_prediction_the_driver_listed_twice_counts_once()
    {
        var applied = OutcomeRules.Apply([new OutcomeReport(null, "WO-1", 1)], [.. Log, .. Log], Nothing, ConflictPolicy.KeepFirst);

        Assert.Equal([new OutcomeWrite(A, 1, null), new OutcomeWrite(B, 1, null)], applied.Inserts);
    }

    [Fact]
    public void The_lookups_are_the_distinct_ids_in_order_and_the_distinct_keys_of_reports_by_key()
    {
        OutcomeReport[] reports = [new(C, null, 1), new(A, null, 1), new(C, null, 0), new(null, "WO-1", 1), new(null, "WO-1", 0), new(null, "WO-2", 1)];

        Assert.Equal([A, C], OutcomeRules.Ids(reports));
        Assert.Equal(["WO-1", "WO-2"], OutcomeRules.Keys(reports));
    }

    public static TheoryData<string, OutcomeReport?[], ConflictPolicy, string> Refused => new()
    {
        { "a null report", [null], ConflictPolicy.KeepFirst, "reports[0] is null" },
        { "neither id nor key", [new OutcomeReport(A, null, 1), new OutcomeReport(null, null, 1)], ConflictPolicy.KeepFirst, "reports[1] must give either an id or a key" },
        { "an empty key", [new OutcomeReport(null, "", 1)], ConflictPolicy.KeepFirst, "reports[0] must give either an id or a key" },
        { "both id and key", [new OutcomeReport(A, "WO-1", 1)], ConflictPolicy.KeepFirst, "reports[0] must give either an id or a key" },
        { "an outcome of 2", [new OutcomeReport(A, null, 2)], ConflictPolicy.KeepFirst, "reports[0] has outcome 2; outcomes are 0 or 1" },
        { "an undefined policy", [new OutcomeReport(A, null, 1)], (ConflictPolicy)7, "Not a conflict policy: expected KeepFirst or TakeLatest" },
    };

    [Theory]
    [MemberData(nameof(Refused))]
    public void A_bad_argument_is_refused_naming_the_field(string why, OutcomeReport?[] reports, ConflictPolicy policy, string message)
    {
        var error = Assert.ThrowsAny<ArgumentException>(() => OutcomeRules.Check("renewal", reports!, policy));

        Assert.Contains(message, error.Message, StringComparison.Ordinal);
        Assert.Equal(why == "an undefined policy" ? "policy" : "reports", error.ParamName);
    }

    [Fact]
    public void A_missing_model_or_list_is_refused_naming_it()
    {
        Assert.Equal("model", Assert.ThrowsAny<ArgumentException>(() => OutcomeRules.Check("", [], ConflictPolicy.KeepFirst)).ParamName);
        Assert.Equal("reports", Assert.Throws<ArgumentNullException>(() => OutcomeRules.Check("renewal", null!, ConflictPolicy.KeepFirst)).ParamName);
        Assert.Equal("policy", Assert.Throws<ArgumentOutOfRangeException>(() => OutcomeRules.Apply([], Log, Nothing, (ConflictPolicy)(-1))).ParamName);
    }
}
