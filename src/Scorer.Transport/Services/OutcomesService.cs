using Microsoft.AspNetCore.Authorization;
using Grpc.Core;
using Scorer.Application.Outcomes;
using Scorer.Store;
using Scorer.Transport.V1;

namespace Scorer.Transport.Services;

/// <summary>
/// Outcomes of earlier predictions, by id or business key. Each message is checked whole before anything is recorded
/// (a bad entry refuses the message, naming it), then recorded in one transaction before the answer is sent.
/// </summary>
[Authorize(Policy = Roles.Outcomes)]
public sealed class OutcomesService(OutcomeIntake intake)
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

    private Task<OutcomeReceipt> RecordAsync(RecordOutcomesRequest request, CancellationToken cancellationToken) =>
        intake.RecordAsync(request.Model, request.Outcomes.Count, i => request.Outcomes[i] is { } o
            ? new OutcomeInput(o.Id, o.Key, o.HasOutcome ? o.Outcome : null, o.ObservedAt?.ToDateTimeOffset())
            : null, cancellationToken);

    private static RecordOutcomesResponse Answer(int accepted, int duplicates, IEnumerable<string> unknown, IEnumerable<string> conflicts) => new()
    {
        Accepted = accepted,
        Duplicates = duplicates,
        Unknown = { unknown },
        Conflicts = { conflicts },
    };
}
