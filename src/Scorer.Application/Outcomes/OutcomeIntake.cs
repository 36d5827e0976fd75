using Scorer.Application.Models;
using Scorer.Store;

namespace Scorer.Application.Outcomes;

/// <summary>How outcome reports are taken in.</summary>
public sealed record OutcomeSettings
{
    /// <summary>Which outcome is kept when a report disagrees with one already recorded. Default keep the first.</summary>
    public ConflictPolicy Conflicts { get; init; } = ConflictPolicy.KeepFirst;

    /// <summary>Reports per request message. Default 10,000.</summary>
    public int MaxPerRequest { get; init; } = 10_000;
}

/// <summary>
/// One outcome report as a transport read it, before any check: the prediction's id as text or a business key (one of
/// the two), the outcome (null when the caller left it out), when it was observed.
/// </summary>
public readonly record struct OutcomeInput(string? Id, string? Key, int? Outcome, DateTimeOffset? ObservedAt);

/// <summary>
/// Outcomes of earlier predictions, by id or business key, for every transport. Each message is checked whole before
/// anything is recorded (a bad entry refuses the message, naming it, as <c>outcomes[i].field</c>), then recorded in one
/// transaction before the answer is given.
/// </summary>
public sealed class OutcomeIntake(ModelCatalog catalog, IOutcomeStore store, OutcomeSettings settings, ScoringLimits limits, ScorerMetrics metrics, TimeProvider time)
{
    /// <summary>Checks the entries (<paramref name="count"/> of them, read by <paramref name="entry"/>) and records them.</summary>
    public async Task<OutcomeReceipt> RecordAsync(string? model, int count, Func<int, OutcomeInput?> entry, CancellationToken cancellationToken)
    {
        var name = catalog.Model(model).Name;
        if (count > settings.MaxPerRequest)
        {
            throw Errors.TooMuch("outcomes", $"{count} outcomes in one request; at most {settings.MaxPerRequest} (Scorer:Outcomes:MaxPerRequest)");
        }

        var now = time.GetUtcNow();
        var reports = new List<OutcomeReport>(count);
        for (var i = 0; i < count; i++)
        {
            reports.Add(Check(entry(i), $"outcomes[{i}]", now));
        }

        var receipt = await store.RecordOutcomesAsync(name, reports, settings.Conflicts, time.GetUtcNow(), cancellationToken).ConfigureAwait(false);
        metrics.Outcomes.WithLabels(name, "accepted").Inc(receipt.Accepted);
        metrics.Outcomes.WithLabels(name, "duplicate").Inc(receipt.Duplicates);
        metrics.Outcomes.WithLabels(name, "unknown").Inc(receipt.Unknown.Count);
        metrics.Outcomes.WithLabels(name, "conflict").Inc(receipt.Conflicts.Count);
        return receipt;
    }

    /// <summary>One entry as the store takes it, or the error naming <paramref name="field"/> and the part of it that is wrong.</summary>
    private OutcomeReport Check(OutcomeInput? given, string field, DateTimeOffset now)
    {
        if (given is not { } o)
        {
            throw Errors.Invalid(field, "not an object");
        }

        var hasId = !string.IsNullOrEmpty(o.Id);
        var hasKey = !string.IsNullOrEmpty(o.Key);
        if (hasId == hasKey)
        {
            throw Errors.Invalid(field, hasId ? "gives both an id and a key; give one" : "gives neither an id nor a key");
        }

        Guid? id = null;
        if (hasId)
        {
            // Exactly as the score response wrote it: 36 characters, no braces, no spaces around it.
            if (o.Id!.Length != 36 || !Guid.TryParseExact(o.Id, "D", out var parsed))
            {
                throw Errors.Invalid(field + ".id", $"'{Errors.Echo(o.Id)}' is not a prediction id (a UUID as the score response gave it, such as "
                    + "0193a3c4-5e6f-7a8b-9c0d-1e2f3a4b5c6d, with nothing around it)");
            }

            id = parsed;
        }
        else if (o.Key!.Length > limits.MaxStringLength)
        {
            throw Errors.Invalid(field + ".key", $"longer than {limits.MaxStringLength} characters, so no prediction can carry it (Scorer:Limits:MaxStringLength)");
        }
        else if (StoreRules.Unstorable(o.Key) is { } reason)
        {
            throw Errors.Invalid(field + ".key", reason);
        }

        if (o.Outcome is not { } outcome)
        {
            throw Errors.Invalid(field + ".outcome", "missing; give 1 for the event, 0 for its absence (an entry without it is never taken as 0)");
        }

        if (outcome is not (0 or 1))
        {
            throw Errors.Invalid(field + ".outcome", $"{outcome} is not an outcome; give 1 for the event, 0 for its absence");
        }

        if (o.ObservedAt > now.AddMinutes(5))
        {
            throw Errors.Invalid(field + ".observedAt", $"{o.ObservedAt:O} is in the future");
        }

        return new OutcomeReport(id, hasKey ? o.Key : null, (byte)outcome, o.ObservedAt);
    }
}
