using Grpc.Core;
using Scorer.Registry;
using Scorer.Store;
using Scorer.Transport.V1;

namespace Scorer.Transport.Services;

/// <summary>How outcome reports are taken in.</summary>
public sealed record OutcomeSettings
{
    /// <summary>Which outcome is kept when a report disagrees with one already recorded. Default keep the first.</summary>
    public ConflictPolicy Conflicts { get; init; } = ConflictPolicy.KeepFirst;

    /// <summary>Reports per request message. Default 10,000.</summary>
    public int MaxPerRequest { get; init; } = 10_000;
}

/// <summary>
/// Outcomes of earlier predictions, by id or business key. Each message is checked whole before anything is recorded
/// (a bad entry refuses the message, naming it), then recorded in one transaction before the answer is sent.
/// </summary>
public sealed class OutcomesService(ModelRegistry registry, IScorerStore store, OutcomeSettings settings, ScoringLimits limits, ScorerMetrics metrics,
    TimeProvider time)
    : V1.Outcomes.OutcomesBase
{
    public override async Task<RecordOutcomesResponse> RecordOutcomes(RecordOutcomesRequest request, ServerCallContext context)
    {
        var receipt = await RecordAsync(request, context.CancellationToken).ConfigureAwait(false);
        return Answer(receipt.Accepted, receipt.Duplicates, receipt.Unknown, receipt.Conflicts);
    }

    public override async Task<RecordOutcomesResponse> RecordOutcomesStream(IAsyncStreamReader<RecordOutcomesRequest> requestStream, ServerCallContext context)
    {
        int accepted = 0, duplicates = 0, messages = 0;
        var unknown = new List<string>();
        var conflicts = new List<string>();
        await foreach (var request in requestStream.ReadAllAsync(context.CancellationToken).ConfigureAwait(false))
        {
            OutcomeReceipt receipt;
            try
            {
                receipt = await RecordAsync(request, context.CancellationToken).ConfigureAwait(false);
            }
            catch (RpcException ex) when (messages > 0)
            {
                // Each message is recorded on its own: say what the earlier ones recorded, so the caller resends only the rest.
                throw Errors.WithNote(ex, $"message {messages + 1} of the stream was refused and nothing of it or after it was recorded; "
                    + $"the {messages} before it were recorded (accepted {accepted}, duplicates {duplicates}, unknown {unknown.Count}, conflicts {conflicts.Count})");
            }

            messages++;
            accepted += receipt.Accepted;
            duplicates += receipt.Duplicates;
            unknown.AddRange(receipt.Unknown);
            conflicts.AddRange(receipt.Conflicts);
        }

        return Answer(accepted, duplicates, unknown, conflicts);
    }

    private async Task<OutcomeReceipt> RecordAsync(RecordOutcomesRequest request, CancellationToken cancellationToken)
    {
        if (string.IsNullOrEmpty(request.Model))
        {
            throw Errors.Invalid("model", "name the model");
        }

        if (registry.Current.Find(request.Model) is null)
        {
            throw Errors.NotFound("model", $"no model '{Errors.Echo(request.Model)}' is loaded");
        }

        if (request.Outcomes.Count > settings.MaxPerRequest)
        {
            throw Errors.TooMuch("outcomes", $"{request.Outcomes.Count} outcomes in one request; at most {settings.MaxPerRequest}");
        }

        var reports = new List<OutcomeReport>(request.Outcomes.Count);
        for (var i = 0; i < request.Outcomes.Count; i++)
        {
            var o = request.Outcomes[i];
            var field = $"outcomes[{i}]";
            if (o is null)
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
                if (o.Id.Length != 36 || !Guid.TryParseExact(o.Id, "D", out var parsed))
                {
                    throw Errors.Invalid(field + ".id", $"'{Errors.Echo(o.Id)}' is not a prediction id (a UUID as the score response gave it, such as "
                        + "0193a3c4-5e6f-7a8b-9c0d-1e2f3a4b5c6d, with nothing around it)");
                }

                id = parsed;
            }
            else if (o.Key.Length > limits.MaxStringLength)
            {
                throw Errors.Invalid(field + ".key", $"longer than {limits.MaxStringLength} characters, so no prediction can carry it (Scorer:Limits:MaxStringLength)");
            }
            else if (Scorer.Store.StoreRules.Unstorable(o.Key) is { } reason)
            {
                throw Errors.Invalid(field + ".key", reason);
            }

            if (!o.HasOutcome)
            {
                throw Errors.Invalid(field + ".outcome", "missing; give 1 for the event, 0 for its absence (an entry without it is never taken as 0)");
            }

            if (o.Outcome is not (0 or 1))
            {
                throw Errors.Invalid(field + ".outcome", $"{o.Outcome} is not an outcome; give 1 for the event, 0 for its absence");
            }

            DateTimeOffset? observedAt = null;
            if (o.ObservedAt is { } observed)
            {
                observedAt = observed.ToDateTimeOffset();
                if (observedAt > time.GetUtcNow().AddMinutes(5))
                {
                    throw Errors.Invalid(field + ".observedAt", $"{observedAt:O} is in the future");
                }
            }

            reports.Add(new OutcomeReport(id, hasKey ? o.Key : null, (byte)o.Outcome, observedAt));
        }

        var receipt = await store.RecordOutcomesAsync(request.Model, reports, settings.Conflicts, time.GetUtcNow(), cancellationToken).ConfigureAwait(false);
        metrics.Outcomes.WithLabels(request.Model, "accepted").Inc(receipt.Accepted);
        metrics.Outcomes.WithLabels(request.Model, "duplicate").Inc(receipt.Duplicates);
        metrics.Outcomes.WithLabels(request.Model, "unknown").Inc(receipt.Unknown.Count);
        metrics.Outcomes.WithLabels(request.Model, "conflict").Inc(receipt.Conflicts.Count);
        return receipt;
    }

    private static RecordOutcomesResponse Answer(int accepted, int duplicates, IEnumerable<string> unknown, IEnumerable<string> conflicts) => new()
    {
        Accepted = accepted,
        Duplicates = duplicates,
        Unknown = { unknown },
        Conflicts = { conflicts },
    };
}
