using System.Text.Json;

// The baseline the service is measured against in bench/load/run.sh: the same route and JSON body, parsed the same
// way (into a document), and a constant answer. No model, no scoring, no log.
var builder = WebApplication.CreateSlimBuilder(args);
builder.Logging.ClearProviders();
var app = builder.Build();
var answer = """{"model":"pump-bearing-failure","version":"1","results":[{"id":"0","eta":-1.4,"probability":0.2,"error":null}]}"""u8.ToArray();
app.MapPost("/v1/models/{model}/score", async (HttpContext context) =>
{
    using var body = await JsonDocument.ParseAsync(context.Request.Body);
    var rows = body.RootElement.GetProperty("rows").GetArrayLength();
    context.Response.ContentType = "application/json";
    await context.Response.Body.WriteAsync(rows >= 0 ? answer : []);
});
app.Run();
