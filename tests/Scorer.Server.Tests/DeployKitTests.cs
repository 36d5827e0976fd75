using Scorer.Host;
using System.Globalization;
using System.Net;
using System.Net.Sockets;
using System.Text;
using System.Text.Json;
using System.Text.Json.Nodes;
using System.Text.RegularExpressions;
using Microsoft.Extensions.Configuration;
using Microsoft.Extensions.Hosting;
using Microsoft.Extensions.Options;
using Scorer.Store;

namespace Scorer.Server.Tests;

/// <summary>
/// The deployment kit against the service it deploys: the alert rules through Prometheus's promtool and their unit
/// tests; every metric the rules and the dashboard read, exported by a real server; the Kubernetes manifests' probes,
/// ports, settings and shutdown timing; the Dockerfile's build context, runtime settings and health probe; and a
/// models folder laid out as the kubelet mounts a ConfigMap. No container engine is needed: what a build would
/// prove is checked on the files it would read.
/// </summary>
public sealed class DeployKitTests : IDisposable
{
    private const string Rules = "deploy/prometheus/scorer-alerts.yml";
    private const string RuleTests = "deploy/prometheus/tests/scorer-alerts.test.yml";
    private const string Dashboard = "deploy/grafana/scorer-dashboard.json";
    private const string Kubernetes = "deploy/kubernetes";
    private const string ProbeProject = "deploy/container/probe/Scorer.HealthProbe.csproj";
    private const string ServerProject = "src/Scorer.Server/Scorer.Server.csproj";

    private readonly TestFolder _folder = new();

    public void Dispose() => _folder.Dispose();

    // ---- Prometheus -------------------------------------------------------------------------------------------------

    [Fact]
    public async Task The_alert_rules_and_the_scrape_config_pass_promtool_and_the_rules_pass_their_unit_tests()
    {
        var check = await DeployKit.PromtoolAsync("check", "rules", DeployKit.PathOf(Rules));
        Assert.True(check.ExitCode == 0, "promtool check rules: " + check.Output);
        Assert.Contains("SUCCESS", check.Output, StringComparison.Ordinal);

        var test = await DeployKit.PromtoolAsync("test", "rules", DeployKit.PathOf(RuleTests));
        Assert.True(test.ExitCode == 0, "promtool test rules: " + test.Output);
        Assert.Contains("SUCCESS", test.Output, StringComparison.Ordinal);

        var config = await DeployKit.PromtoolAsync("check", "config", DeployKit.PathOf("deploy/prometheus/prometheus.yml"));
        Assert.True(config.ExitCode == 0, "promtool check config: " + config.Output);
    }

    [Fact]
    public async Task Every_alert_has_a_promtool_test_that_fires_it_and_one_that_keeps_it_quiet()
    {
        var alerts = await AlertsAsync();
        var tests = (await DeployKit.ReadYamlAsync(RuleTests)).Single();
        Assert.Contains(tests.GetProperty("rule_files").EnumerateArray(), f =>
            Path.GetFullPath(Path.Combine(DeployKit.PathOf("deploy/prometheus/tests"), f.GetString()!)) == Path.GetFullPath(DeployKit.PathOf(Rules)));

        var cases = tests.GetProperty("tests").EnumerateArray()
            .SelectMany(t => t.GetProperty("alert_rule_test").EnumerateArray())
            .Select(c => (Alert: c.GetProperty("alertname").GetString()!,
                Fires: c.TryGetProperty("exp_alerts", out var e) && e.ValueKind == JsonValueKind.Array && e.GetArrayLength() > 0))
            .ToList();
        foreach (var alert in alerts.Keys)
        {
            Assert.True(cases.Any(c => c.Alert == alert && c.Fires), $"no promtool test expects {alert} to fire");
            Assert.True(cases.Any(c => c.Alert == alert && !c.Fires), $"no promtool test expects {alert} to stay quiet");
        }

        Assert.All(cases, c => Assert.True(alerts.ContainsKey(c.Alert), $"a promtool test names {c.Alert}, which no rule defines"));
    }

    [Fact]
    public async Task The_alerts_watch_recalibrate_and_refit_status_cusum_signals_large_psi_row_errors_p99_latency_and_log_drops()
    {
        var expressions = (await AlertsAsync()).Values.Select(e => Regex.Replace(e, @"\s+", " ")).ToList();
        Assert.Contains(expressions, e => e.Contains("scorer_monitor_status", StringComparison.Ordinal) && e.Contains("== 2", StringComparison.Ordinal)); // recalibrate
        Assert.Contains(expressions, e => e.Contains("scorer_monitor_status", StringComparison.Ordinal) && e.Contains("== 3", StringComparison.Ordinal)); // refit-due
        Assert.Contains(expressions, e => e.Contains("increase(scorer_monitor_cusum_signals_total[", StringComparison.Ordinal));
        Assert.Contains(expressions, e => e.Contains("scorer_monitor_psi", StringComparison.Ordinal) && e.Contains("> 0.25", StringComparison.Ordinal));
        Assert.Contains(expressions, e => e.Contains("scorer_row_errors_total", StringComparison.Ordinal) && e.Contains("scorer_rows_scored_total", StringComparison.Ordinal));
        Assert.Contains(expressions, e => e.Contains("histogram_quantile(0.99", StringComparison.Ordinal) && e.Contains("scorer_call_duration_seconds_bucket", StringComparison.Ordinal));
        Assert.Contains(expressions, e => e.Contains("increase(scorer_prediction_log_dropped_rows_total[", StringComparison.Ordinal));
    }

    private static async Task<Dictionary<string, string>> AlertsAsync()
    {
        var rules = (await DeployKit.ReadYamlAsync(Rules)).Single();
        return rules.GetProperty("groups").EnumerateArray()
            .SelectMany(g => g.GetProperty("rules").EnumerateArray())
            .Where(r => r.TryGetProperty("alert", out _))
            .ToDictionary(r => r.GetProperty("alert").GetString()!, r => r.GetProperty("expr").GetString()!, StringComparer.Ordinal);
    }

    // ---- Grafana ----------------------------------------------------------------------------------------------------

    [Fact]
    public async Task Every_status_panel_of_the_dashboard_names_the_gauge_values_with_the_services_four_status_words()
    {
        using var json = JsonDocument.Parse(await File.ReadAllTextAsync(DeployKit.PathOf(Dashboard)));
        var statusPanels = json.RootElement.GetProperty("panels").EnumerateArray()
            .Where(p => p.TryGetProperty("targets", out var t) && t.EnumerateArray().Any(q => q.TryGetProperty("expr", out var e) && e.GetString()!.Contains("scorer_monitor_status", StringComparison.Ordinal)))
            .ToList();
        Assert.NotEmpty(statusPanels);
        foreach (var panel in statusPanels)
        {
            var mapping = panel.GetProperty("fieldConfig").GetProperty("defaults").GetProperty("mappings").EnumerateArray().Single(m => m.GetProperty("type").GetString() == "value");
            var words = mapping.GetProperty("options").EnumerateObject().ToDictionary(o => int.Parse(o.Name, CultureInfo.InvariantCulture), o => o.Value.GetProperty("text").GetString());
            Assert.Equal(Enumerable.Range(0, Scorer.Monitor.Reporting.StatusRules.Names.Count).ToDictionary(i => i, i => (string?)Scorer.Monitor.Reporting.StatusRules.Names[i]), words);
        }
    }

    [Fact]
    public async Task The_dashboard_reads_its_data_source_from_a_variable_lays_out_its_rows_and_its_queries_are_valid_promql()
    {
        using var json = JsonDocument.Parse(await File.ReadAllTextAsync(DeployKit.PathOf(Dashboard)));
        var dashboard = json.RootElement;
        Assert.True(dashboard.GetProperty("schemaVersion").GetInt32() >= 36, "a schema of Grafana 9 or later");
        var variables = dashboard.GetProperty("templating").GetProperty("list").EnumerateArray().ToList();
        var source = Assert.Single(variables, v => v.GetProperty("type").GetString() == "datasource");
        Assert.Equal("prometheus", source.GetProperty("query").GetString());
        var sourceUid = "${" + source.GetProperty("name").GetString() + "}";

        var panels = dashboard.GetProperty("panels").EnumerateArray().ToList();
        var rows = panels.Where(p => p.GetProperty("type").GetString() == "row").Select(p => p.GetProperty("title").GetString()!).ToList();
        foreach (var topic in new[] { "Status", "Calibration", "Discrimination", "Drift", "Traffic" })
        {
            Assert.Contains(rows, r => r.StartsWith(topic, StringComparison.Ordinal));
        }

        var boxes = new List<(string Title, int X, int Y, int W, int H)>();
        foreach (var panel in panels)
        {
            var title = panel.GetProperty("title").GetString()!;
            var grid = panel.GetProperty("gridPos");
            var box = (title, grid.GetProperty("x").GetInt32(), grid.GetProperty("y").GetInt32(), grid.GetProperty("w").GetInt32(), grid.GetProperty("h").GetInt32());
            Assert.True(box.Item2 >= 0 && box.Item2 + box.Item4 <= 24, $"panel '{title}' lies outside the 24-column grid");
            Assert.DoesNotContain(boxes, b => b.X < box.Item2 + box.Item4 && box.Item2 < b.X + b.W && b.Y < box.Item3 + box.Item5 && box.Item3 < b.Y + b.H);
            boxes.Add(box);
            if (panel.GetProperty("type").GetString() == "row")
            {
                continue;
            }

            Assert.Equal(sourceUid, panel.GetProperty("datasource").GetProperty("uid").GetString());
            Assert.All(panel.GetProperty("targets").EnumerateArray(), t => Assert.Equal(sourceUid, t.GetProperty("datasource").GetProperty("uid").GetString()));
        }

        var queries = DeployKit.DashboardQueries(dashboard);
        var names = queries.SelectMany(q => DeployKit.MetricNames(q.Expr)).ToHashSet(StringComparer.Ordinal);
        foreach (var needed in new[]
        {
            "scorer_monitor_observed_expected", "scorer_monitor_calibration_intercept", "scorer_monitor_calibration_slope", "scorer_monitor_brier",
            "scorer_monitor_ece", "scorer_monitor_auc", "scorer_monitor_psi", "scorer_monitor_cusum", "scorer_monitor_cusum_threshold",
            "scorer_monitor_status", "scorer_rows_scored_total", "scorer_row_errors_total", "scorer_call_duration_seconds_bucket",
            "scorer_prediction_log_queue_rows",
        })
        {
            Assert.Contains(needed, names);
        }

        // Each panel query, with Grafana's interval variables given a value, as a recording rule that promtool parses.
        var promql = queries.Where(q => q.IsPromQl).ToList();
        var ruleFile = new JsonObject
        {
            ["groups"] = new JsonArray(new JsonObject
            {
                ["name"] = "dashboard",
                ["rules"] = new JsonArray([.. promql.Select((q, i) => (JsonNode)new JsonObject
                {
                    ["record"] = "dashboard:query_" + i.ToString(CultureInfo.InvariantCulture),
                    ["expr"] = DeployKit.WithoutGrafanaVariables(q.Expr),
                })]),
            }),
        };
        var path = Path.Combine(_folder.Root, "dashboard-queries.yml");
        await File.WriteAllTextAsync(path, ruleFile.ToJsonString()); // JSON is YAML
        var check = await DeployKit.PromtoolAsync("check", "rules", path);
        Assert.True(check.ExitCode == 0, "a dashboard query is not valid PromQL: " + check.Output + "\n" + string.Join("\n", promql.Select(q => q.Where + ": " + q.Expr)));
        Assert.Contains($"{promql.Count} rules found", check.Output, StringComparison.Ordinal);
    }

    // ---- the metrics, from a real server ------------------------------------------------------------------------------

    [Fact]
    public async Task Every_metric_the_alerts_and_the_dashboard_read_is_exported_by_a_running_server()
    {
        var expressions = (await AlertsAsync()).Values.ToList();
        using (var json = JsonDocument.Parse(await File.ReadAllTextAsync(DeployKit.PathOf(Dashboard))))
        {
            expressions.AddRange(DeployKit.DashboardQueries(json.RootElement).Select(q => q.Expr));
        }

        var referenced = expressions.SelectMany(DeployKit.MetricNames).ToHashSet(StringComparer.Ordinal);
        Assert.True(referenced.Count >= 15, "the kit reads only " + string.Join(", ", referenced));

        // The invented pump model (examples/pump-bearings: baseline bins for the PSI, implicit negatives) with its
        // outcome horizon cut to 2 s, so that outcomes mature and the CUSUM charts start within the test.
        var model = JsonNode.Parse(await File.ReadAllTextAsync(Files.Example("pump-bearings")))!;
        model["outcome"]!["horizon"] = "PT2S";
        await File.WriteAllTextAsync(Path.Combine(_folder.Models, "pump.json"), model.ToJsonString());
        await using var server = await RunningServer.StartAsync(_folder, new Dictionary<string, string?>
        {
            ["Scorer:Monitor:PollInterval"] = "00:00:00.050",
            ["Scorer:Monitor:ReportInterval"] = "00:00:00.200",
        });

        // 400 seeded rows within the training ranges, one with an unknown site (refused), one beyond the training
        // range of hours (scored with a warning); outcomes drawn from the returned probabilities with a seeded generator.
        var random = new Random(20261202);
        string[] sites = ["north", "east", "river"];
        var rows = Enumerable.Range(0, 400).Select(_ => string.Create(CultureInfo.InvariantCulture,
            $"{{\"vibration_rms\":{0.7 + (random.NextDouble() * 9.5):F3},\"bearing_temp_c\":{28 + (random.NextDouble() * 56):F2},\"hours_since_service\":{20 + random.Next(7900)},\"site\":\"{sites[random.Next(3)]}\"}}")).ToList();
        rows.Add("{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":2500,\"site\":\"harbour\"}");
        rows.Add("{\"vibration_rms\":3.2,\"bearing_temp_c\":61,\"hours_since_service\":8500,\"site\":\"river\"}");
        var keys = Enumerable.Range(0, rows.Count).Select(i => "WO-" + i.ToString(CultureInfo.InvariantCulture)).ToList();
        using var scored = JsonDocument.Parse(await PostAsync(server, "/v1/models/pump-bearing-failure/score",
            "{\"rows\":[" + string.Join(",", rows) + "],\"keys\":[" + string.Join(",", keys.Select(k => $"\"{k}\"")) + "]}"));
        var results = scored.RootElement.GetProperty("results").EnumerateArray().ToList();
        Assert.Equal(JsonValueKind.Object, results[400].GetProperty("error").ValueKind);

        var store = server.Service<IScorerStore>();
        Assert.True(await Files.EventuallyAsync(async () => await store.CountPredictionsAsync("pump-bearing-failure") >= rows.Count - 1, TimeSpan.FromSeconds(10)));
        var positives = results.Select((r, i) => (r, i))
            .Where(x => x.r.GetProperty("error").ValueKind == JsonValueKind.Null && random.NextDouble() < x.r.GetProperty("probability").GetDouble())
            .Select(x => $"{{\"key\":\"{keys[x.i]}\",\"outcome\":1}}").ToList();
        Assert.NotEmpty(positives);
        await PostAsync(server, "/v1/models/pump-bearing-failure/outcomes", "{\"outcomes\":[" + string.Join(",", positives) + "]}");

        // Then wait for the monitor's report (the CUSUM charts start once 200 outcomes have matured).
        var text = "";
        List<string> missing = [];
        await Files.EventuallyAsync(async () =>
        {
            text = await server.Http.GetStringAsync("/metrics");
            var (types, samples) = DeployKit.ParseExposition(text);
            missing = [.. referenced.Where(n => !DeployKit.IsExported(n, types, samples)).Order(StringComparer.Ordinal)];
            return missing.Count == 0;
        }, TimeSpan.FromSeconds(60));
        Assert.True(missing.Count == 0, "read by the kit but not exported: " + string.Join(", ", missing) + "\n" + text);

        // A label value the alert rules select on exactly (such as window="7d") is one the server exports.
        foreach (Match selector in Regex.Matches(string.Join("\n", expressions), @"(scorer_[A-Za-z0-9_]+)\{([^}]*)\}"))
        {
            foreach (Match matcher in Regex.Matches(selector.Groups[2].Value, @"(\w+)\s*(=~|!=|!~|=)\s*""([^""]*)"""))
            {
                if (matcher.Groups[2].Value == "=" && !matcher.Groups[3].Value.Contains('$', StringComparison.Ordinal))
                {
                    var sample = $"{matcher.Groups[1].Value}=\"{matcher.Groups[3].Value}\"";
                    Assert.True(text.Split('\n').Any(l => l.StartsWith(selector.Groups[1].Value + "{", StringComparison.Ordinal) && l.Contains(sample, StringComparison.Ordinal)),
                        $"{selector.Value}: no exported sample has {sample}");
                }
            }
        }
    }

    private static async Task<string> PostAsync(RunningServer server, string path, string body)
    {
        using var content = new StringContent(body, Encoding.UTF8, "application/json");
        using var response = await server.Http.PostAsync(path, content);
        var text = await response.Content.ReadAsStringAsync();
        Assert.True(response.StatusCode == HttpStatusCode.OK, $"{path}: {(int)response.StatusCode} {text}");
        return text;
    }

    // ---- Kubernetes -------------------------------------------------------------------------------------------------

    private static async Task<List<JsonElement>> ManifestsAsync()
    {
        var kustomization = (await DeployKit.ReadYamlAsync(Kubernetes + "/kustomization.yaml")).Single();
        var documents = new List<JsonElement>();
        foreach (var resource in kustomization.GetProperty("resources").EnumerateArray())
        {
            documents.AddRange(await DeployKit.ReadYamlAsync(Kubernetes + "/" + resource.GetString()));
        }

        return documents;
    }

    private static JsonElement Kind(List<JsonElement> documents, string kind) =>
        Assert.Single(documents, d => d.GetProperty("kind").GetString() == kind);

    private static void AssertSelects(JsonElement selector, JsonElement labels, string what)
    {
        foreach (var label in selector.EnumerateObject())
        {
            Assert.True(labels.TryGetProperty(label.Name, out var value) && value.GetString() == label.Value.GetString(),
                $"{what} selects {label.Name}={label.Value}, which the Deployment's pods do not carry");
        }
    }

    [Fact]
    public async Task The_kubernetes_manifests_parse_and_their_probes_ports_and_grace_period_agree_with_the_server()
    {
        var documents = await ManifestsAsync();
        foreach (var extra in new[] { "models-configmap.yaml", "models-pvc.yaml" })
        {
            Assert.NotEmpty(await DeployKit.ReadYamlAsync(Kubernetes + "/" + extra));
        }

        var deployment = Kind(documents, "Deployment");
        var settings = Kind(documents, "ConfigMap").GetProperty("data");
        var pod = deployment.GetProperty("spec").GetProperty("template");
        var podLabels = pod.GetProperty("metadata").GetProperty("labels");
        AssertSelects(deployment.GetProperty("spec").GetProperty("selector").GetProperty("matchLabels"), podLabels, "the Deployment");
        var spec = pod.GetProperty("spec");
        var container = Assert.Single(spec.GetProperty("containers").EnumerateArray());
        var ports = container.GetProperty("ports").EnumerateArray().ToDictionary(p => p.GetProperty("name").GetString()!, p => p.GetProperty("containerPort").GetInt32());

        // The ports: the settings' ports, which are the service's defaults.
        var defaults = new ScorerOptions();
        Assert.Equal(DeployKit.Port(defaults.Http), ports["http"]);
        Assert.Equal(DeployKit.Port(defaults.Grpc), ports["grpc"]);
        Assert.Equal(ports["http"], DeployKit.Port(settings.GetProperty("Scorer__Http").GetString()!));
        Assert.Equal(ports["grpc"], DeployKit.Port(settings.GetProperty("Scorer__Grpc").GetString()!));

        // The probes: liveness and start-up on /healthz, readiness on /readyz, all on the REST port, and the running
        // server answers each path with 200.
        var probes = new Dictionary<string, string> { ["livenessProbe"] = "/healthz", ["readinessProbe"] = "/readyz", ["startupProbe"] = "/healthz" };
        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        await using var server = await RunningServer.StartAsync(_folder);
        foreach (var (probe, expected) in probes)
        {
            var get = container.GetProperty(probe).GetProperty("httpGet");
            Assert.Equal(expected, get.GetProperty("path").GetString());
            var port = get.GetProperty("port");
            Assert.Equal(ports["http"], port.ValueKind == JsonValueKind.String ? ports[port.GetString()!] : port.GetInt32());
            using var response = await server.Http.GetAsync(expected);
            Assert.True(response.StatusCode == HttpStatusCode.OK, $"{probe}: GET {expected} answered {(int)response.StatusCode}");
        }

        // Shutdown: the preStop sleep, then the host's shutdown (within which the log drains) must end before the kill.
        var preStop = container.GetProperty("lifecycle").GetProperty("preStop");
        var sleep = preStop.TryGetProperty("sleep", out var native)
            ? native.GetProperty("seconds").GetInt32()
            : int.Parse(Assert.Single(preStop.GetProperty("exec").GetProperty("command").EnumerateArray().Skip(1)).GetString()!, CultureInfo.InvariantCulture);
        Assert.Equal("sleep", preStop.TryGetProperty("exec", out var exec) ? exec.GetProperty("command")[0].GetString() : "sleep");
        Assert.True(sleep >= 5, "the preStop sleep gives the endpoints controller and proxies time to stop sending calls");
        var drain = settings.TryGetProperty("Scorer__PredictionLog__DrainTimeout", out var configured)
            ? TimeSpan.Parse(configured.GetString()!, CultureInfo.InvariantCulture)
            : new PredictionLogOptions().DrainTimeout;
        var hostShutdown = server.Service<IOptions<HostOptions>>().Value.ShutdownTimeout;
        var grace = TimeSpan.FromSeconds(spec.GetProperty("terminationGracePeriodSeconds").GetInt32());
        Assert.True(grace > TimeSpan.FromSeconds(sleep) + new PredictionLogOptions().DrainTimeout, $"grace {grace} is not longer than the preStop sleep and the default log drain");
        Assert.True(grace > TimeSpan.FromSeconds(sleep) + (drain > hostShutdown ? drain : hostShutdown), $"grace {grace}: preStop {sleep} s + host shutdown {hostShutdown} / drain {drain}");

        // Non-root with a read-only root filesystem: /tmp an emptyDir, the models folder a mounted volume.
        var podSecurity = spec.GetProperty("securityContext");
        Assert.True(podSecurity.GetProperty("runAsNonRoot").GetBoolean());
        Assert.NotEqual(0, podSecurity.GetProperty("runAsUser").GetInt32());
        Assert.True(container.GetProperty("securityContext").GetProperty("readOnlyRootFilesystem").GetBoolean());
        Assert.False(container.GetProperty("securityContext").GetProperty("allowPrivilegeEscalation").GetBoolean());
        var volumes = spec.GetProperty("volumes").EnumerateArray().ToDictionary(v => v.GetProperty("name").GetString()!, v => v);
        var mounts = container.GetProperty("volumeMounts").EnumerateArray().ToDictionary(m => m.GetProperty("mountPath").GetString()!, m => m.GetProperty("name").GetString()!);
        Assert.True(volumes[mounts["/tmp"]].TryGetProperty("emptyDir", out _), "/tmp is an emptyDir");
        Assert.True(mounts.ContainsKey(settings.GetProperty("Scorer__ModelsPath").GetString()!), "the models folder is mounted");
        Assert.Equal("false", settings.GetProperty("Scorer__SeedDemoModels").GetString());
        Assert.Equal("postgres", settings.GetProperty("Scorer__Store__Kind").GetString());

        // Resources: requests within limits.
        var resources = container.GetProperty("resources");
        foreach (var resource in new[] { "cpu", "memory" })
        {
            Assert.True(Quantity(resources.GetProperty("requests").GetProperty(resource).GetString()!) <= Quantity(resources.GetProperty("limits").GetProperty(resource).GetString()!), resource);
        }

        // The settings and secrets reach the container; the Service, the autoscaler and the budget find the pods.
        var sources = container.GetProperty("envFrom").EnumerateArray().ToList();
        Assert.Contains(sources, s => s.TryGetProperty("configMapRef", out var c) && c.GetProperty("name").GetString() == Kind(documents, "ConfigMap").GetProperty("metadata").GetProperty("name").GetString());
        Assert.Contains(sources, s => s.TryGetProperty("secretRef", out var c) && c.GetProperty("name").GetString() == Kind(documents, "Secret").GetProperty("metadata").GetProperty("name").GetString());

        var service = Kind(documents, "Service").GetProperty("spec");
        AssertSelects(service.GetProperty("selector"), podLabels, "the Service");
        var servicePorts = service.GetProperty("ports").EnumerateArray().ToDictionary(p => p.GetProperty("name").GetString()!, p => p);
        foreach (var name in new[] { "http", "grpc" })
        {
            var target = servicePorts[name].GetProperty("targetPort");
            Assert.Equal(ports[name], target.ValueKind == JsonValueKind.String ? ports[target.GetString()!] : target.GetInt32());
        }

        Assert.EndsWith("h2c", servicePorts["grpc"].GetProperty("appProtocol").GetString(), StringComparison.Ordinal);

        var hpa = Kind(documents, "HorizontalPodAutoscaler");
        Assert.Equal("autoscaling/v2", hpa.GetProperty("apiVersion").GetString());
        var scaleTarget = hpa.GetProperty("spec").GetProperty("scaleTargetRef");
        Assert.Equal(("Deployment", deployment.GetProperty("metadata").GetProperty("name").GetString()), (scaleTarget.GetProperty("kind").GetString(), scaleTarget.GetProperty("name").GetString()));
        Assert.Contains(hpa.GetProperty("spec").GetProperty("metrics").EnumerateArray(), m => m.GetProperty("resource").GetProperty("name").GetString() == "cpu");
        Assert.True(hpa.GetProperty("spec").GetProperty("minReplicas").GetInt32() >= 2, "at least two pods, so that the disruption budget can be met");
        AssertSelects(Kind(documents, "PodDisruptionBudget").GetProperty("spec").GetProperty("selector").GetProperty("matchLabels"), podLabels, "the PodDisruptionBudget");

        // The Prometheus job for Kubernetes keeps exactly these pods, on the port that serves /metrics.
        var scrape = Assert.Single((await DeployKit.ReadYamlAsync("deploy/prometheus/prometheus-kubernetes.yml")).Single().GetProperty("scrape_configs").EnumerateArray());
        Assert.Equal("/metrics", scrape.GetProperty("metrics_path").GetString());
        foreach (var keep in scrape.GetProperty("relabel_configs").EnumerateArray().Where(r => r.TryGetProperty("action", out var action) && action.GetString() == "keep"))
        {
            var values = keep.GetProperty("source_labels").EnumerateArray().Select(l => l.GetString()!).Select(l => l switch
            {
                "__meta_kubernetes_pod_container_port_name" => "http",
                "__meta_kubernetes_pod_phase" => "Running",
                _ when l.StartsWith("__meta_kubernetes_pod_label_", StringComparison.Ordinal) => podLabels.EnumerateObject()
                    .First(p => Regex.Replace(p.Name, "[^A-Za-z0-9_]", "_") == l["__meta_kubernetes_pod_label_".Length..]).Value.GetString()!,
                _ => throw new InvalidOperationException("unexpected label " + l),
            });
            Assert.Matches("^(?:" + keep.GetProperty("regex").GetString() + ")$", string.Join(';', values));
        }
    }

    /// <summary>A Kubernetes quantity (500m, 2, 512Mi, 1Gi) as a number.</summary>
    private static double Quantity(string text)
    {
        var units = new (string Suffix, double Factor)[] { ("Ki", 1024), ("Mi", 1024 * 1024), ("Gi", 1024 * 1024 * 1024), ("m", 1e-3) };
        foreach (var (suffix, factor) in units)
        {
            if (text.EndsWith(suffix, StringComparison.Ordinal))
            {
                return double.Parse(text[..^suffix.Length], CultureInfo.InvariantCulture) * factor;
            }
        }

        return double.Parse(text, CultureInfo.InvariantCulture);
    }

    /// <summary>
    /// Settings as the server binds them from environment variables ("__" becomes ":", as .NET's environment-variable
    /// configuration provider does), refusing names that bind to no setting.
    /// </summary>
    private static ScorerOptions Bind(IEnumerable<KeyValuePair<string, string>> variables)
    {
        var configuration = new ConfigurationBuilder()
            .AddInMemoryCollection(variables.Select(v => KeyValuePair.Create(v.Key.Replace("__", ":", StringComparison.Ordinal), (string?)v.Value)))
            .Build();
        return configuration.GetSection("Scorer").Get<ScorerOptions>(o => o.ErrorOnUnknownConfiguration = true) ?? new ScorerOptions();
    }

    [Fact]
    public async Task The_configmap_and_secret_bind_to_the_servers_settings_and_the_unedited_secret_template_is_refused()
    {
        var documents = await ManifestsAsync();
        var variables = Kind(documents, "ConfigMap").GetProperty("data").EnumerateObject()
            .Concat(Kind(documents, "Secret").GetProperty("stringData").EnumerateObject())
            .Select(p => KeyValuePair.Create(p.Name, p.Value.GetString()!)).ToList();
        var keyNames = variables.Where(v => Regex.IsMatch(v.Key, @"^Scorer__Keys__\d+__Key$")).Select(v => v.Key).ToList();
        Assert.NotEmpty(keyNames);
        Assert.All(variables.Where(v => keyNames.Contains(v.Key) || v.Key == "Scorer__Store__ConnectionString"), v => Assert.Contains("REPLACE-ME", v.Value, StringComparison.Ordinal));

        // As shipped, each placeholder key is refused at start-up, naming the setting.
        var template = Bind(variables);
        var problems = template.Validate();
        for (var i = 0; i < keyNames.Count; i++)
        {
            Assert.Contains(problems, p => p.StartsWith($"Scorer:Keys:{i} (", StringComparison.Ordinal) && p.EndsWith("the key is shorter than 16 characters", StringComparison.Ordinal));
        }

        // With real keys the settings are complete.
        var filled = variables.Select(v => keyNames.Contains(v.Key) ? KeyValuePair.Create(v.Key, Convert.ToHexString(Guid.NewGuid().ToByteArray())) : v).ToList();
        var options = Bind(filled);
        Assert.Empty(options.Validate());
        Assert.Equal(keyNames.Count, options.Keys.Count);
        Assert.All(options.Keys, k => Assert.Single(k.Roles));
        Assert.Equal(new[] { "admin", "outcomes", "score" }, options.Keys.SelectMany(k => k.Roles).Order(StringComparer.Ordinal));
        Assert.Equal("/models", options.ModelsPath);
        Assert.False(options.SeedDemoModels);
        Assert.Equal("json", options.LogFormat);
        Assert.Equal(TimeSpan.FromSeconds(20), options.PredictionLog.DrainTimeout);
    }

    [Fact]
    public async Task A_models_folder_mounted_as_the_kubelet_mounts_a_configmap_loads_each_model_once_and_takes_an_update()
    {
        // The kubelet's atomic writer (kubernetes, pkg/volume/util/atomic_writer.go): the files in a hidden timestamped
        // folder, "..data" a symlink to it, each key a symlink to "..data/<key>"; an update writes a new folder, swaps
        // "..data" by renaming a new link over it, adds the new keys' links and removes the old folder.
        var models = _folder.Models;
        var original = await File.ReadAllTextAsync(Files.Example("pump-bearings"));
        var next = JsonNode.Parse(original)!;
        next["version"] = "2026.12.1";
        const string First = "..2026_12_01_08_00_00.000000001";
        const string Second = "..2026_12_02_08_00_00.000000002";
        Directory.CreateDirectory(Path.Combine(models, First));
        await File.WriteAllTextAsync(Path.Combine(models, First, "pump.json"), original);
        File.CreateSymbolicLink(Path.Combine(models, "..data"), First);
        File.CreateSymbolicLink(Path.Combine(models, "pump.json"), Path.Combine("..data", "pump.json"));

        await using var server = await RunningServer.StartAsync(_folder);
        var (versions, errors) = await ModelsAsync(server);
        Assert.Equal(0, errors);
        Assert.Equal(new Dictionary<string, string> { ["2026.11.1"] = "live" }, versions);

        Directory.CreateDirectory(Path.Combine(models, Second));
        await File.WriteAllTextAsync(Path.Combine(models, Second, "pump.json"), original);
        await File.WriteAllTextAsync(Path.Combine(models, Second, "pump-next.json"), next.ToJsonString());
        File.CreateSymbolicLink(Path.Combine(models, "..data_tmp"), Second);
        // rename(2) over the old link, as the kubelet's os.Rename does (.NET's File.Move follows a link to a folder).
        var swapped = await DeployKit.RunAsync("mv", ["-T", Path.Combine(models, "..data_tmp"), Path.Combine(models, "..data")], "GNU coreutils");
        Assert.True(swapped.ExitCode == 0, swapped.Output);
        File.CreateSymbolicLink(Path.Combine(models, "pump-next.json"), Path.Combine("..data", "pump-next.json"));
        Directory.Delete(Path.Combine(models, First), recursive: true);

        Assert.True(await Files.EventuallyAsync(async () => (await ModelsAsync(server)).Versions.Count == 2, TimeSpan.FromSeconds(10)));
        (versions, errors) = await ModelsAsync(server);
        Assert.Equal(0, errors);
        Assert.Equal(new Dictionary<string, string> { ["2026.11.1"] = "live", ["2026.12.1"] = "shadow" }, versions);
    }

    private static async Task<(Dictionary<string, string> Versions, int LoadErrors)> ModelsAsync(RunningServer server)
    {
        using var json = JsonDocument.Parse(await server.Http.GetStringAsync("/v1/models"));
        var versions = json.RootElement.GetProperty("models").EnumerateArray()
            .SelectMany(m => m.GetProperty("versions").EnumerateArray())
            .ToDictionary(v => v.GetProperty("version").GetString()!, v => v.GetProperty("stage").GetString()!);
        return (versions, json.RootElement.GetProperty("loadErrors").GetArrayLength());
    }

    // ---- the container image ------------------------------------------------------------------------------------------

    private static List<DeployKit.DockerInstruction> Dockerfile() =>
        DeployKit.ParseDockerfile(File.ReadAllText(DeployKit.PathOf("Dockerfile")));

    /// <summary>The stage the SDK image builds in, and the last stage (the image).</summary>
    private static (int Build, int Runtime) Stages(List<DeployKit.DockerInstruction> instructions)
    {
        var froms = instructions.Where(i => i.Keyword == "FROM").ToList();
        var build = Assert.Single(froms, f => f.Arguments.StartsWith("mcr.microsoft.com/dotnet/sdk:", StringComparison.Ordinal));
        return (build.Stage, froms[^1].Stage);
    }

    /// <summary>The projects the build stage publishes, with the folder each is published to.</summary>
    private static Dictionary<string, string> Publishes(List<DeployKit.DockerInstruction> instructions, int stage) =>
        instructions.Where(i => i.Keyword == "RUN" && i.Stage == stage)
            .SelectMany(i => Regex.Matches(i.Arguments, @"dotnet publish (\S+)[^&]*?-o (\S+)"))
            .ToDictionary(m => m.Groups[1].Value, m => m.Groups[2].Value.TrimEnd('/'), StringComparer.Ordinal);

    [Fact]
    public void The_container_build_context_holds_every_file_the_publish_reads_at_the_path_the_projects_expect()
    {
        var instructions = Dockerfile();
        var (build, _) = Stages(instructions);
        var ignore = new DeployKit.DockerIgnore(File.ReadAllText(DeployKit.PathOf(".dockerignore")));
        var copied = new List<string>();
        foreach (var copy in instructions.Where(i => i.Keyword == "COPY" && i.Stage == build).Select(DeployKit.Copy))
        {
            Assert.False(copy.Flags.ContainsKey("from"), "the build stage copies from the context only");
            foreach (var raw in copy.Sources)
            {
                var source = raw.Trim('/');
                var full = DeployKit.PathOf(source);
                Assert.True(File.Exists(full) || Directory.Exists(full), $"COPY {raw}: no such path in the repository");
                var files = DeployKit.SourceFiles(source).ToList();
                Assert.NotEmpty(files);
                Assert.All(files, f => Assert.False(ignore.Excludes(f), $"COPY {raw}: {f} is left out of the context by .dockerignore"));

                // Below WORKDIR the repository's layout is kept, so the projects' relative paths (..\..\protos) hold.
                var destination = copy.Destination.TrimEnd('/');
                var inImage = Directory.Exists(full) ? destination : (copy.Destination.EndsWith('/') ? destination + "/" + Path.GetFileName(source) : destination);
                Assert.Equal(source, inImage.StartsWith("./", StringComparison.Ordinal) ? inImage[2..] : inImage);
                copied.Add(source);
            }
        }

        var publishes = Publishes(instructions, build);
        Assert.Contains(ServerProject, publishes.Keys);
        Assert.Contains(ProbeProject, publishes.Keys);
        foreach (var project in publishes.Keys)
        {
            foreach (var input in DeployKit.BuildInputs(project))
            {
                Assert.True(copied.Any(c => DeployKit.IsInside(input, c)), $"publishing {project} reads {input}, which the Dockerfile does not copy");
                Assert.All(DeployKit.SourceFiles(input), f => Assert.False(ignore.Excludes(f), $"publishing {project} reads {f}, which .dockerignore leaves out"));
            }
        }

        // And build output never enters the context.
        Assert.True(ignore.Excludes("src/Scorer.Server/bin/Release/net10.0/Scorer.Server.dll"));
        Assert.True(ignore.Excludes("src/Scorer.Server/obj/project.assets.json"));
        Assert.True(ignore.Excludes("tests/Scorer.Server.Tests/DeployKitTests.cs"));
    }

    [Fact]
    public async Task The_image_runs_the_published_server_as_a_numeric_non_root_user_with_its_ports_volumes_settings_and_health_probe()
    {
        var instructions = Dockerfile();
        var (build, runtime) = Stages(instructions);
        var target = Regex.Match(File.ReadAllText(DeployKit.PathOf("Directory.Build.props")), @"<TargetFramework>net(\d+\.\d+)</TargetFramework>").Groups[1].Value;
        Assert.Equal($"mcr.microsoft.com/dotnet/sdk:{target}", DeployKit.Words(instructions.First(i => i.Keyword == "FROM" && i.Stage == build).Arguments)[0]);
        var image = instructions.Where(i => i.Stage == runtime).ToList();
        Assert.Equal($"mcr.microsoft.com/dotnet/aspnet:{target}", DeployKit.Words(image[0].Arguments)[0]);
        Assert.DoesNotContain(image, i => i.Keyword == "RUN"); // nothing runs in the image's stage: no shell needed

        // The user: numeric (Kubernetes checks runAsNonRoot on numbers only), not root, the one the manifests run as.
        var user = Assert.Single(image, i => i.Keyword == "USER").Arguments.Split(':');
        var uid = int.Parse(user[0], CultureInfo.InvariantCulture);
        Assert.NotEqual(0, uid);
        var deployment = (await DeployKit.ReadYamlAsync(Kubernetes + "/deployment.yaml")).Single();
        Assert.Equal(uid, deployment.GetProperty("spec").GetProperty("template").GetProperty("spec").GetProperty("securityContext").GetProperty("runAsUser").GetInt32());
        Assert.Contains(image, i => i.Keyword == "COPY" && DeployKit.Copy(i).Flags.TryGetValue("chown", out var owner) && owner.Split(':')[0] == user[0]);

        // The settings: every ENV Scorer__… binds to a setting, and with an API key (required beyond loopback) they validate.
        var env = DeployKit.Environment(image);
        var scorer = env.Where(e => e.Key.StartsWith("Scorer__", StringComparison.Ordinal)).ToList();
        var options = Bind(scorer.Append(KeyValuePair.Create("Scorer__Keys__0__Name", "ops")).Append(KeyValuePair.Create("Scorer__Keys__0__Key", "0123456789abcdef0123")));
        Assert.Empty(options.Validate());
        Assert.Equal(IPAddress.Any, ScorerOptions.ParseEndpoint(options.Http, "Scorer:Http")!.Address);
        Assert.Equal(IPAddress.Any, ScorerOptions.ParseEndpoint(options.Grpc, "Scorer:Grpc")!.Address);
        Assert.False(options.SeedDemoModels);

        // The ports: exposed = the settings' = the service's defaults.
        var exposed = image.Where(i => i.Keyword == "EXPOSE").SelectMany(i => DeployKit.Words(i.Arguments)).Select(p => int.Parse(p.Split('/')[0], CultureInfo.InvariantCulture)).Order().ToList();
        var defaults = new ScorerOptions();
        Assert.Equal(new[] { DeployKit.Port(defaults.Http), DeployKit.Port(defaults.Grpc) }.Order(), exposed);
        Assert.Equal(new[] { DeployKit.Port(options.Http), DeployKit.Port(options.Grpc) }.Order(), exposed);

        // The volumes: the models folder and the folder of the SQLite file, the only places written besides /tmp.
        var volumes = image.Where(i => i.Keyword == "VOLUME").SelectMany(i => DeployKit.Words(i.Arguments)).ToList();
        Assert.Contains(options.ModelsPath, volumes);
        var store = env["Scorer__Store__Path"];
        Assert.Contains(Path.GetDirectoryName(store)!, volumes);

        // The entry point and the health check run what the build stage published, where the image keeps it.
        var publishes = Publishes(instructions, build);
        string InImage(string project)
        {
            var output = publishes[project];
            var copy = Assert.Single(image.Where(i => i.Keyword == "COPY").Select(DeployKit.Copy), c => c.Flags.GetValueOrDefault("from") == "build" && c.Sources.Single().TrimEnd('/') == output);
            var name = System.Xml.Linq.XDocument.Load(DeployKit.PathOf(project)).Descendants("AssemblyName").Single().Value;
            return copy.Destination.TrimEnd('/') + "/" + name + ".dll";
        }

        Assert.Equal(new[] { "dotnet", InImage(ServerProject) }, DeployKit.Words(Assert.Single(image, i => i.Keyword == "ENTRYPOINT").Arguments));
        var health = Assert.Single(image, i => i.Keyword == "HEALTHCHECK").Arguments;
        var command = health[(health.IndexOf(" CMD ", StringComparison.Ordinal) + 5)..].Trim();
        Assert.StartsWith("[", command, StringComparison.Ordinal); // exec form: no shell
        Assert.Equal(new[] { "dotnet", InImage(ProbeProject) }, DeployKit.Words(command));
    }

    [Fact]
    public async Task The_health_probe_reports_a_running_server_healthy_and_a_closed_port_or_a_failing_path_unhealthy()
    {
        var output = Path.Combine(_folder.Root, "probe");
        var dotnet = System.Environment.GetEnvironmentVariable("DOTNET_HOST_PATH") is { Length: > 0 } host ? host : "dotnet";
        var built = await DeployKit.RunAsync(dotnet, ["build", DeployKit.PathOf(ProbeProject), "-c", "Release", "-o", output, "-nodeReuse:false", "-p:UseSharedCompilation=false"],
            "the .NET SDK", timeout: TimeSpan.FromMinutes(5));
        Assert.True(built.ExitCode == 0, built.Output);
        var probe = Path.Combine(output, "Scorer.HealthProbe.dll");

        _folder.AddModel(Files.Example("pump-bearings"), "pump.json");
        await using var server = await RunningServer.StartAsync(_folder);
        var port = server.Http.BaseAddress!.Port.ToString(CultureInfo.InvariantCulture);

        // As in the image: the setting names every address of the container; the probe asks loopback.
        // A generous timeout here: the test machine runs other test assemblies at the same time.
        var healthy = await DeployKit.RunAsync(dotnet, [probe], "the .NET runtime",
            new Dictionary<string, string> { ["Scorer__Http"] = "0.0.0.0:" + port, ["SCORER_PROBE_TIMEOUT_SECONDS"] = "30" });
        Assert.True(healthy.ExitCode == 0, healthy.Output);
        Assert.Contains("/healthz answered 200", healthy.Stdout, StringComparison.Ordinal);

        var missingPath = await DeployKit.RunAsync(dotnet, [probe, $"http://127.0.0.1:{port}/no-such-path"], "the .NET runtime",
            new Dictionary<string, string> { ["SCORER_PROBE_TIMEOUT_SECONDS"] = "30" });
        Assert.Equal(1, missingPath.ExitCode);
        Assert.Contains("answered 404", missingPath.Stderr, StringComparison.Ordinal);

        var listener = new TcpListener(IPAddress.Loopback, 0);
        listener.Start();
        var closed = ((IPEndPoint)listener.LocalEndpoint).Port.ToString(CultureInfo.InvariantCulture);
        listener.Stop();
        var refused = await DeployKit.RunAsync(dotnet, [probe], "the .NET runtime", new Dictionary<string, string> { ["Scorer__Http"] = "127.0.0.1:" + closed });
        Assert.Equal(1, refused.ExitCode);
        Assert.StartsWith("unhealthy:", refused.Stderr, StringComparison.Ordinal);

        var malformed = await DeployKit.RunAsync(dotnet, [probe], "the .NET runtime", new Dictionary<string, string> { ["Scorer__Http"] = "port-8080" });
        Assert.Equal(1, malformed.ExitCode);
        Assert.Contains("Scorer__Http is 'port-8080'", malformed.Stderr, StringComparison.Ordinal);
    }
}
