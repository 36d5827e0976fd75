using System.Collections.Concurrent;
using System.Net;
using System.Text;
using System.Text.Json;
using Grpc.Core;
using Microsoft.AspNetCore.Builder;
using Microsoft.AspNetCore.Hosting.Server;
using Microsoft.AspNetCore.Hosting.Server.Features;
using Microsoft.AspNetCore.Hosting;
using Microsoft.AspNetCore.Http;
using Microsoft.Extensions.DependencyInjection;
using Scorer.Store;
using Scorer.Transport.V1;

namespace Scorer.Server.Tests;

/// <summary>
/// Status changes as they happen: Server-Sent Events, the gRPC stream, the metrics and the webhook, on MASS's Pima.te
/// scored with the model R fit on Pima.tr. Its real outcomes keep the model fine; the same rows with every outcome
/// flipped (1 − y) turn its AUC to 1 − 0.865 and the status to refit-due.
/// </summary>
public sealed class MonitorStreamTests : IAsyncLifetime
{
    private readonly TestFolder _folder = new();
    private readonly ConcurrentQueue<string> _hooks = new();
    private WebApplication _hookServer = null!;
    private RunningServer _server = null!;

    public async Task InitializeAsync()
    {
        // A webhook receiver: a bare Kestrel on loopback that keeps every body posted to it.
        var builder = WebApplication.CreateSlimBuilder();
        builder.WebHost.ConfigureKestrel(k => k.Listen(IPAddress.Loopback, 0));
        _hookServer = builder.Build();
        _hookServer.MapPost("/hook", async (HttpContext c) =>
        {
            using var reader = new StreamReader(c.Request.Body);
            _hooks.Enqueue(await reader.ReadToEndAsync());
            return Results.Ok();
        });
        await _hookServer.StartAsync();
        var hook = _hookServer.Services.GetRequiredService<IServer>().Features.Get<IServerAddressesFeature>()!.Addresses.First() + "/hook";

        _folder.AddModel(Files.Reference("pima-logit.model.json"), "pima.json");
        _server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:Monitor:ReportInterval"] = "00:00:00.200",
            ["Scorer:Monitor:PollInterval"] = "00:00:00.050",
            ["Scorer:Monitor:Webhook"] = hook,
        });
    }

    public async Task DisposeAsync()
    {
        await _server.DisposeAsync();
        await _hookServer.StopAsync();
        await _hookServer.DisposeAsync();
        _folder.Dispose();
    }

    private async Task ScoreAndLabelAsync(bool flipped)
    {
        var lines = File.ReadAllLines(Files.Reference("pima.rows.csv"));
        var header = lines[0].Split(',').Select(h => h.Trim('"')).ToArray();
        var rows = lines.Skip(1).Select(l => "{" + string.Join(",", l.Split(',').Select((v, i) => $"\"{header[i]}\":{v}")) + "}").ToList();
        var keys = string.Join(",", Enumerable.Range(0, rows.Count).Select(i => $"\"te-{i}\""));
        using (var content = new StringContent("{\"rows\":[" + string.Join(",", rows) + "],\"keys\":[" + keys + "]}", Encoding.UTF8, "application/json"))
        {
            (await _server.Http.PostAsync("/v1/models/pima/score", content)).EnsureSuccessStatusCode();
        }

        var store = _server.Service<IScorerStore>();
        Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync("pima") == rows.Count, TimeSpan.FromSeconds(10)));
        var y = File.ReadAllLines(Files.Reference("pima.outcomes.csv")).Skip(1).Select(int.Parse).ToList();
        var outcomes = "{\"outcomes\":[" + string.Join(",", y.Select((v, i) => $"{{\"key\":\"te-{i}\",\"outcome\":{(flipped ? 1 - v : v)}}}")) + "]}";
        using var body = new StringContent(outcomes, Encoding.UTF8, "application/json");
        (await _server.Http.PostAsync("/v1/models/pima/outcomes", body)).EnsureSuccessStatusCode();
    }

    [Fact]
    public async Task A_status_change_arrives_live_on_the_event_stream_the_grpc_stream_and_the_webhook()
    {
        using var cancel = new CancellationTokenSource(TimeSpan.FromSeconds(60));
        using var request = new HttpRequestMessage(HttpMethod.Get, "/v1/models/pima/monitor/events?window=all");
        using var response = await _server.Http.SendAsync(request, HttpCompletionOption.ResponseHeadersRead, cancel.Token);
        Assert.Equal("text/event-stream", response.Content.Headers.ContentType!.MediaType);
        using var reader = new StreamReader(await response.Content.ReadAsStreamAsync(cancel.Token));
        var client = new Scorer.Transport.V1.Monitor.MonitorClient(_server.Channel);
        using var grpc = client.WatchReports(new MonitorRequest { Model = "pima", Window = "all" }, cancellationToken: cancel.Token);

        var first = await NextEventAsync(reader, cancel.Token);
        Assert.Equal("snapshot", first.Kind);
        Assert.Equal("fine", first.Data.GetProperty("status").GetString());
        Assert.Equal("none", first.Data.GetProperty("action").GetString());
        Assert.True(await grpc.ResponseStream.MoveNext(cancel.Token));
        Assert.Equal("fine", grpc.ResponseStream.Current.Report.Status);

        await ScoreAndLabelAsync(flipped: true);

        (string Kind, JsonElement Data) change;
        do
        {
            change = await NextEventAsync(reader, cancel.Token);
        }
        while (change.Kind != "status");
        Assert.Equal("refit-due", change.Data.GetProperty("status").GetString());
        Assert.Equal("refit", change.Data.GetProperty("action").GetString());
        Assert.Contains(change.Data.GetProperty("reasons").EnumerateArray(), r => r.GetString()!.StartsWith("AUC ", StringComparison.Ordinal));
        Assert.StartsWith("Refit due", change.Data.GetProperty("advice").GetString(), StringComparison.Ordinal);

        var grpcStatus = await NextGrpcStatusAsync(grpc.ResponseStream, cancel.Token);
        Assert.Equal("refit-due", grpcStatus.Report.Status);
        Assert.Equal("refit", grpcStatus.Report.Action);

        Assert.True(await Files.EventuallyAsync(() => Task.FromResult(_hooks.Any(h => h.Contains("\"refit-due\"", StringComparison.Ordinal))), TimeSpan.FromSeconds(10)));
        using var hook = JsonDocument.Parse(_hooks.First(h => h.Contains("\"refit-due\"", StringComparison.Ordinal)));
        Assert.Equal("pima", hook.RootElement.GetProperty("model").GetString());
        Assert.Equal("refit", hook.RootElement.GetProperty("action").GetString());
        Assert.NotEmpty(hook.RootElement.GetProperty("reasons").EnumerateArray());
    }

    [Fact]
    public async Task The_metrics_carry_the_monitor_statistics_per_version_and_window()
    {
        await ScoreAndLabelAsync(flipped: false);
        string text = "";
        Assert.True(await Files.EventuallyAsync(async () =>
        {
            text = await _server.Http.GetStringAsync("/metrics");
            return text.Contains("scorer_monitor_labelled{model=\"pima\",version=", StringComparison.Ordinal)
                && text.Contains("window=\"all\"} 332", StringComparison.Ordinal);
        }, TimeSpan.FromSeconds(10)), text);
        Assert.Contains("scorer_monitor_auc{model=\"pima\"", text, StringComparison.Ordinal);
        Assert.Contains("scorer_monitor_status{model=\"pima\"", text, StringComparison.Ordinal);
        Assert.Contains("scorer_outcome_reports_total{model=\"pima\",result=\"accepted\"} 332", text, StringComparison.Ordinal);
    }

    [Fact]
    public async Task The_event_stream_refuses_an_unknown_model_with_the_json_error()
    {
        using var response = await _server.Http.GetAsync("/v1/models/nope/monitor/events");
        Assert.Equal(HttpStatusCode.NotFound, response.StatusCode);
        using var json = JsonDocument.Parse(await response.Content.ReadAsStringAsync());
        Assert.StartsWith("model:", json.RootElement.GetProperty("message").GetString(), StringComparison.Ordinal);
    }

    private static async Task<(string Kind, JsonElement Data)> NextEventAsync(StreamReader reader, CancellationToken cancellationToken)
    {
        string? kind = null;
        while (await reader.ReadLineAsync(cancellationToken) is { } line)
        {
            if (line.StartsWith("event: ", StringComparison.Ordinal))
            {
                kind = line["event: ".Length..];
            }
            else if (line.StartsWith("data: ", StringComparison.Ordinal) && kind is not null)
            {
                return (kind, JsonDocument.Parse(line["data: ".Length..]).RootElement.Clone());
            }
        }

        throw new InvalidOperationException("the event stream ended");
    }

    private static async Task<MonitorEvent> NextGrpcStatusAsync(IAsyncStreamReader<MonitorEvent> stream, CancellationToken cancellationToken)
    {
        while (await stream.MoveNext(cancellationToken))
        {
            if (stream.Current.Kind == "status")
            {
                return stream.Current;
            }
        }

        throw new InvalidOperationException("the gRPC stream ended");
    }
}
