using System.Collections.Concurrent;
using System.Net;
using System.Text.Json;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Logging;
using Microsoft.Extensions.Time.Testing;
using Scorer.Monitor.Reporting;

namespace Scorer.Server.Tests;

/// <summary>
/// The status webhook through its HttpClient and resilience pipeline, on a fake clock: a failed post is retried after
/// 1, 2, 4, 8 and 16 s of the service's clock, never sooner, and a notice is given up after six attempts.
/// </summary>
public sealed class StatusWebhookTests
{
    private static readonly StatusJudgement RefitDue = new(MonitorStatus.RefitDue, ["AUC 0.55 lies below the floor 0.6."], "Refit due: discrimination fell.");

    /// <summary>Answers each post with the next status of its script (then 200), keeping the bodies and the clock's time of each.</summary>
    private sealed class ScriptedEndpoint(TimeProvider clock, params HttpStatusCode[] script) : HttpMessageHandler
    {
        private int _calls;

        public ConcurrentQueue<string> Bodies { get; } = new();

        public ConcurrentQueue<DateTimeOffset> Times { get; } = new();

        public int Calls => Volatile.Read(ref _calls);

        protected override async Task<HttpResponseMessage> SendAsync(HttpRequestMessage request, CancellationToken cancellationToken)
        {
            Times.Enqueue(clock.GetUtcNow());
            Bodies.Enqueue(await request.Content!.ReadAsStringAsync(cancellationToken));
            var call = Interlocked.Increment(ref _calls) - 1;
            return new HttpResponseMessage(call < script.Length ? script[call] : HttpStatusCode.OK);
        }
    }

    /// <summary>
    /// Moves the fake clock on in steps of 100 ms until the endpoint has seen <paramref name="calls"/> posts (a retry
    /// waits for the clock; the pause between steps only lets the pipeline's continuations run).
    /// </summary>
    private static async Task DriveUntilAsync(FakeTimeProvider clock, ScriptedEndpoint endpoint, int calls)
    {
        for (var step = 0; endpoint.Calls < calls; step++)
        {
            Assert.True(step < 2_000, $"{endpoint.Calls} posts after {step / 10.0} s of the clock; {calls} expected");
            clock.Advance(TimeSpan.FromMilliseconds(100));
            await Task.Delay(5);
        }
    }

    private static double[] Gaps(ScriptedEndpoint endpoint)
    {
        var times = endpoint.Times.ToArray();
        return [.. times.Zip(times.Skip(1), (a, b) => (b - a).TotalSeconds)];
    }

    /// <summary>Holds the first post until released, then answers 200 to every post, keeping the bodies.</summary>
    private sealed class HeldEndpoint : HttpMessageHandler
    {
        private int _calls;

        public TaskCompletionSource Release { get; } = new(TaskCreationOptions.RunContinuationsAsynchronously);

        public ConcurrentQueue<string> Bodies { get; } = new();

        public int Calls => Volatile.Read(ref _calls);

        protected override async Task<HttpResponseMessage> SendAsync(HttpRequestMessage request, CancellationToken cancellationToken)
        {
            Bodies.Enqueue(await request.Content!.ReadAsStringAsync(cancellationToken));
            if (Interlocked.Increment(ref _calls) == 1)
            {
                await Release.Task.WaitAsync(cancellationToken);
            }

            return new HttpResponseMessage(HttpStatusCode.OK);
        }
    }

    private static (StatusWebhook Webhook, ServiceProvider Services) Start(FakeTimeProvider clock, HttpMessageHandler endpoint, int capacity = StatusWebhook.DefaultCapacity)
    {
        var services = new ServiceCollection();
        services.AddLogging(l => l.SetMinimumLevel(LogLevel.Warning));
        services.AddSingleton<TimeProvider>(clock);
        services.AddSingleton(new MonitorOptions { Webhook = new Uri("http://127.0.0.1:9/hook") });
        StatusWebhook.AddStatusWebhook(services, capacity);
        services.AddHttpClient(StatusWebhook.ClientName).ConfigurePrimaryHttpMessageHandler(() => endpoint);
        var provider = services.BuildServiceProvider();
        return (provider.GetRequiredService<StatusWebhook>(), provider);
    }

    private static async Task WaitForCallsAsync(ScriptedEndpoint endpoint, int calls) =>
        Assert.True(await Files.EventuallyAsync(() => Task.FromResult(endpoint.Calls >= calls), TimeSpan.FromSeconds(30)), $"{endpoint.Calls} posts, {calls} expected");

    [Fact]
    public async Task A_failed_post_is_retried_no_sooner_than_1_then_2_seconds_of_the_services_clock_and_delivered_once()
    {
        var clock = new FakeTimeProvider();
        var endpoint = new ScriptedEndpoint(clock, HttpStatusCode.ServiceUnavailable, HttpStatusCode.InternalServerError);
        var (webhook, services) = Start(clock, endpoint);
        await using (services)
        {
            webhook.Notify("pump-bearing-failure", "2026.11.1", RefitDue);
            await WaitForCallsAsync(endpoint, 1);
            await DriveUntilAsync(clock, endpoint, 3);
            Assert.True(await Files.EventuallyAsync(() => Task.FromResult(webhook.Delivered == 1), TimeSpan.FromSeconds(30)));

            var gaps = Gaps(endpoint);
            Assert.True(gaps[0] >= 1 && gaps[1] >= 2, $"retried after {string.Join(" s, ", gaps)} s of the clock");
            using var body = JsonDocument.Parse(endpoint.Bodies.Last());
            Assert.Equal("refit-due", body.RootElement.GetProperty("status").GetString());
            Assert.Equal("refit", body.RootElement.GetProperty("action").GetString());
            Assert.Equal("pump-bearing-failure", body.RootElement.GetProperty("model").GetString());
            Assert.Equal(3, endpoint.Calls);
        }
    }

    [Fact]
    public async Task A_notice_that_fails_six_times_is_given_up_after_backing_off_1_2_4_8_16_seconds_and_the_next_one_is_posted()
    {
        var clock = new FakeTimeProvider();
        var endpoint = new ScriptedEndpoint(clock, [.. Enumerable.Repeat(HttpStatusCode.BadGateway, StatusWebhook.Retries + 1)]);
        var (webhook, services) = Start(clock, endpoint);
        await using (services)
        {
            webhook.Notify("pump-bearing-failure", "2026.11.1", RefitDue);
            webhook.Notify("card-chargeback", "2026.10.2", RefitDue);
            await DriveUntilAsync(clock, endpoint, StatusWebhook.Retries + 2);
            Assert.True(await Files.EventuallyAsync(() => Task.FromResult(webhook.Delivered == 1), TimeSpan.FromSeconds(30)));

            var gaps = Gaps(endpoint);
            for (var retry = 0; retry < StatusWebhook.Retries; retry++)
            {
                Assert.True(gaps[retry] >= 1 << retry, $"retry {retry + 1} after {gaps[retry]} s of the clock, not {1 << retry} s");
            }

            // The first notice is given up after six attempts; the second is the seventh post, accepted.
            Assert.Equal(StatusWebhook.Retries + 2, endpoint.Calls);
            Assert.Contains("card-chargeback", endpoint.Bodies.Last(), StringComparison.Ordinal);
        }
    }

    [Fact]
    public async Task A_webhook_that_falls_behind_holds_its_bound_of_notices_drops_the_oldest_and_counts_exactly_those()
    {
        var clock = new FakeTimeProvider();
        var endpoint = new HeldEndpoint();
        var (webhook, services) = Start(clock, endpoint, capacity: 3);
        await using (services)
        {
            // The first notice is being posted and held; 6 more arrive while it is.
            webhook.Notify("pump-bearing-failure", "v0", RefitDue);
            Assert.True(await Files.EventuallyAsync(() => Task.FromResult(endpoint.Calls == 1), TimeSpan.FromSeconds(30)));
            for (var i = 1; i <= 6; i++)
            {
                webhook.Notify("pump-bearing-failure", $"v{i}", RefitDue);
            }

            // 3 wait, the 3 oldest of the 6 were dropped and counted.
            Assert.Equal(3, webhook.Waiting);
            Assert.Equal(3, webhook.Dropped);

            // Released: the held one and the 3 newest are posted, nothing else.
            endpoint.Release.SetResult();
            Assert.True(await Files.EventuallyAsync(() => Task.FromResult(webhook.Delivered == 4), TimeSpan.FromSeconds(30)), $"{webhook.Delivered} delivered");
            Assert.Equal(["v0", "v4", "v5", "v6"], endpoint.Bodies.Select(b => JsonDocument.Parse(b).RootElement.GetProperty("version").GetString()));
            Assert.Equal(0, webhook.Waiting);
            Assert.Equal(3, webhook.Dropped);
        }
    }
}
