using System.Text.Json;
using Grpc.Core;
using Scorer.Transport.V1;

// The baselines the service is measured against in bench/load/: the same REST route and JSON body, parsed the same way
// (into a document) with a constant answer; and the same gRPC dense stream answered with arrays of the right length.
// No model, no scoring, no log.
var builder = WebApplication.CreateSlimBuilder(args);
builder.Logging.ClearProviders();
builder.Services.AddGrpc();
var app = builder.Build();
var answer = """{"model":"pump-bearing-failure","version":"1","results":[{"id":"0","eta":-1.4,"probability":0.2,"error":null}]}"""u8.ToArray();
app.MapPost("/v1/models/{model}/score", async (HttpContext context) =>
{
    using var body = await JsonDocument.ParseAsync(context.Request.Body);
    var rows = body.RootElement.GetProperty("rows").GetArrayLength();
    context.Response.ContentType = "application/json";
    await context.Response.Body.WriteAsync(rows >= 0 ? answer : []);
});
app.MapGrpcService<EchoScoring>();
app.Run();

/// <summary>Answers each dense message with columns of the message's row count, all constants (one message, built once per size).</summary>
internal sealed class EchoScoring : Scoring.ScoringBase
{
    public override async Task ScoreDenseStream(IAsyncStreamReader<DenseScoreRequest> requestStream, IServerStreamWriter<DenseScoreResponse> responseStream, ServerCallContext context)
    {
        var columns = 0;
        DenseScoreResponse? cached = null;
        await foreach (var request in requestStream.ReadAllAsync(context.CancellationToken))
        {
            columns = request.Features.Count > 0 ? request.Features.Count : columns;
            var rows = columns == 0 ? 0 : request.Values.Count / columns;
            if (cached is null || cached.Eta.Count != rows)
            {
                cached = new DenseScoreResponse { Model = request.Model, Version = "1" };
                cached.Ids.AddRange(Enumerable.Repeat("0", rows));
                cached.Eta.AddRange(Enumerable.Repeat(-1.4, rows));
                cached.Se.AddRange(Enumerable.Repeat(0.1, rows));
                cached.Probability.AddRange(Enumerable.Repeat(0.2, rows));
                cached.Lower.AddRange(Enumerable.Repeat(0.15, rows));
                cached.Upper.AddRange(Enumerable.Repeat(0.25, rows));
                cached.Flag.AddRange(Enumerable.Repeat(0, rows));
                cached.WarningCount.AddRange(Enumerable.Repeat(0, rows));
            }

            var response = cached;
            await responseStream.WriteAsync(response, context.CancellationToken);
        }
    }
}
