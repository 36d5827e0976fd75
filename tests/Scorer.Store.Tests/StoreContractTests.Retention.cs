namespace Scorer.Store.Tests;

/// <summary>
/// The retention (<see cref="IRetentionStore.PruneAsync"/>), the same for every driver. Predictions are placed on days
/// of their own, so that PostgreSQL's daily partitions hold the same rows as SQLite's row-by-row walk looks at.
/// </summary>
public abstract partial class StoreContractTests
{
    private static readonly TimeSpan Month = TimeSpan.FromDays(30);

    /// <summary>
    /// Opens a new store instance over this test's storage, as <see cref="CreateStoreAsync()"/> does, with the given
    /// retentions (the other settings at their defaults). Not yet migrated.
    /// </summary>
    protected abstract Task<IScorerStore> CreateStoreAsync(TimeSpan? predictionRetention, TimeSpan? outcomeRetention);

    private async Task<(IScorerStore Store, IRetentionStore Retention)> OpenRetainingAsync(TimeSpan? predictionRetention, TimeSpan? outcomeRetention = null)
    {
        var store = await CreateStoreAsync(predictionRetention, outcomeRetention);
        _opened.Add(store);
        await store.MigrateAsync();
        return (store, Assert.IsAssignableFrom<IRetentionStore>(store));
    }

    [Fact]
    public async Task Without_a_retention_pruning_deletes_nothing()
    {
        var (store, retention) = await OpenRetainingAsync(null);
        var old = Prediction(Renewal, "1", T0);
        await store.WritePredictionsAsync([old]);
        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(old.Id, null, 1)], ConflictPolicy.KeepFirst, T0.AddDays(1));

        var result = await retention.PruneAsync(T0.AddYears(10));

        Assert.Equal((0L, 0L, 0L, 0L), (result.PredictionsDeleted, result.KeptAwaitingOutcome, result.OutcomesDeleted, result.ConflictsDeleted));
        Assert.NotNull(await store.GetPredictionAsync(old.Id));
        Assert.Single(await store.GetLabelledAsync(Renewal, null, T0, T0.AddDays(1)));
    }

    [Fact]
    public async Task Pruning_deletes_exactly_the_old_predictions_whose_outcome_is_in_or_whose_model_no_longer_serves_and_keeps_those_awaiting_an_outcome()
    {
        var (store, retention) = await OpenRetainingAsync(Month);
        var now = T0.AddDays(40);
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Live), "loader");
        await store.AddVersionAsync(Version(Claims, "1", Stage.Live), "loader");
        await store.ChangeStagesAsync([new StageChange(Claims, "1", Stage.Live, Stage.Retired, "ana", T0.AddDays(2))]);

        // Day T0: every prediction done with (an outcome, an implicit 0, a retired model, a model the registry never knew).
        var oldLabelled = Prediction(Renewal, "1", T0);
        var oldImplicit = Prediction(Renewal, "1", T0.AddMinutes(1));
        var retiredModel = Prediction(Claims, "1", T0.AddMinutes(2));
        var unknownModel = Prediction("pumps", "1", T0.AddMinutes(3));
        // Day T0 + 5: still awaiting its outcome (the model's horizon has not passed for it). Days within the retention.
        var oldAwaiting = Prediction(Renewal, "1", T0.AddDays(5));
        var recentLabelled = Prediction(Renewal, "1", now.AddDays(-2));
        var recentAwaiting = Prediction(Renewal, "1", now.AddDays(-1));
        await store.WritePredictionsAsync([oldLabelled, oldImplicit, retiredModel, unknownModel, oldAwaiting, recentLabelled, recentAwaiting]);
        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(oldLabelled.Id, null, 1), new OutcomeReport(recentLabelled.Id, null, 0)],
            ConflictPolicy.KeepFirst, T0.AddDays(3));
        Assert.Equal(1, await store.RecordImplicitNegativesAsync(Renewal, T0.AddMinutes(2), T0.AddDays(3))); // oldImplicit

        var result = await retention.PruneAsync(now);

        Assert.Equal((4, 1), (result.PredictionsDeleted, result.KeptAwaitingOutcome));
        foreach (var gone in new[] { oldLabelled, oldImplicit, retiredModel, unknownModel })
        {
            Assert.Null(await store.GetPredictionAsync(gone.Id));
        }

        foreach (var kept in new[] { oldAwaiting, recentLabelled, recentAwaiting })
        {
            Assert.NotNull(await store.GetPredictionAsync(kept.Id));
        }

        // Without an outcome retention the outcomes stay, with their copy of the prediction, and so do the counts beside the log.
        Assert.Equal([oldLabelled.Id, oldImplicit.Id, recentLabelled.Id], (await store.GetLabelledAsync(Renewal, "1", T0, now)).Select(l => l.Id));
        Assert.Equal(1, await store.CountPredictionsByMinuteAsync(Renewal, "1", T0, T0.AddMinutes(1)));
        Assert.Equal(3, await store.CountPredictionsAsync(Renewal, "1")); // oldAwaiting, recentLabelled, recentAwaiting

        // The awaited outcome comes: the next pass deletes the prediction.
        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(oldAwaiting.Id, null, 1)], ConflictPolicy.KeepFirst, now);
        var next = await retention.PruneAsync(now);
        Assert.Equal((1, 0), (next.PredictionsDeleted, next.KeptAwaitingOutcome));
        Assert.Null(await store.GetPredictionAsync(oldAwaiting.Id));
    }

    [Fact]
    public async Task An_outcome_reported_for_a_pruned_prediction_is_answered_as_unknown()
    {
        var (store, retention) = await OpenRetainingAsync(Month);
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Live), "loader");
        var old = Prediction(Renewal, "1", T0, key: "policy-old");
        var recent = Prediction(Renewal, "1", T0.AddDays(39), key: "policy-recent");
        await store.WritePredictionsAsync([old, recent]);
        Assert.Equal(1, await store.RecordImplicitNegativesAsync(Renewal, T0.AddDays(1), T0.AddDays(2)));
        Assert.Equal(1, (await retention.PruneAsync(T0.AddDays(40))).PredictionsDeleted);

        var receipt = await store.RecordOutcomesAsync(Renewal,
            [new OutcomeReport(old.Id, null, 1), new OutcomeReport(null, "policy-old", 1), new OutcomeReport(recent.Id, null, 1)], ConflictPolicy.TakeLatest,
            T0.AddDays(40));

        Assert.Equal([old.Id.ToString(), "policy-old"], receipt.Unknown);
        Assert.Equal(1, receipt.Accepted);
        Assert.Empty(receipt.Conflicts);
        var implicitZero = Assert.Single(await store.GetLabelledAsync(Renewal, "1", T0, T0.AddDays(1)));
        Assert.Equal(((byte)0, true), (implicitZero.Outcome, implicitZero.Implicit)); // the kept outcome is not changed by the report
    }

    [Fact]
    public async Task Outcomes_and_conflicts_are_pruned_after_the_outcome_retention_and_never_before_their_prediction()
    {
        var (store, retention) = await OpenRetainingAsync(Month, TimeSpan.FromDays(60));
        await store.AddVersionAsync(Version(Renewal, "1", Stage.Live), "loader");
        var labelled = Prediction(Renewal, "1", T0);
        var awaiting = Prediction(Renewal, "1", T0.AddDays(1)); // its outcome comes late, after the outcome retention of its time
        var recent = Prediction(Renewal, "1", T0.AddDays(100));
        await store.WritePredictionsAsync([labelled, awaiting, recent]);
        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(labelled.Id, null, 1)], ConflictPolicy.KeepFirst, T0.AddHours(1));
        var conflict = await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(labelled.Id, null, 0)], ConflictPolicy.KeepFirst, T0.AddHours(2));
        Assert.Single(conflict.Conflicts);

        // Forty days on: the labelled prediction has left the prediction retention, its outcome not the outcome retention.
        var first = await retention.PruneAsync(T0.AddDays(40));
        Assert.Equal((1, 1, 0, 0), (first.PredictionsDeleted, first.KeptAwaitingOutcome, first.OutcomesDeleted, first.ConflictsDeleted));
        Assert.Single(await store.GetLabelledAsync(Renewal, "1", T0, T0.AddDays(1)));

        // Seventy days on: the awaiting prediction's outcome comes (past the outcome retention of its time). In one pass the
        // prediction goes, then the outcomes whose prediction is gone and the conflict, all older than the outcome retention.
        await store.RecordOutcomesAsync(Renewal, [new OutcomeReport(awaiting.Id, null, 1)], ConflictPolicy.KeepFirst, T0.AddDays(70));
        var second = await retention.PruneAsync(T0.AddDays(70));
        Assert.Equal((1, 0, 2, 1), (second.PredictionsDeleted, second.KeptAwaitingOutcome, second.OutcomesDeleted, second.ConflictsDeleted));
        Assert.Empty(await store.GetLabelledAsync(Renewal, "1", T0, T0.AddDays(2)));
        Assert.NotNull(await store.GetPredictionAsync(recent.Id));
    }
}
