using Scorer.Host;
using Grpc.Net.Client;
using Microsoft.AspNetCore.Builder;
using Microsoft.AspNetCore.Hosting.Server;
using Microsoft.AspNetCore.Hosting.Server.Features;
using Microsoft.Extensions.Configuration;
using Microsoft.Extensions.DependencyInjection;

namespace Scorer.Server.Tests;

/// <summary>
/// The real server on loopback: real Kestrel on ports the OS picks, a real SQLite file, a real models folder; an
/// HTTP client for REST and a gRPC channel over h2c.
/// </summary>
internal sealed class RunningServer : IAsyncDisposable
{
    private RunningServer(WebApplication app, Uri http, Uri grpc)
    {
        App = app;
        Http = new HttpClient { BaseAddress = http };
        Channel = GrpcChannel.ForAddress(grpc);
    }

    public WebApplication App { get; }
    public HttpClient Http { get; }
    public GrpcChannel Channel { get; }

    public T Service<T>() where T : notnull => App.Services.GetRequiredService<T>();

    /// <param name="folder">The models folder and the store file.</param>
    /// <param name="settings">Settings over the tests' defaults.</param>
    /// <param name="services">Services registered before the server's own (a clock the test moves).</param>
    public static async Task<RunningServer> StartAsync(TestFolder folder, IDictionary<string, string?>? settings = null, Action<IServiceCollection>? services = null)
    {
        string[] args = ["--models", folder.Models, "--store", folder.Store, "--http", "127.0.0.1:0", "--grpc", "127.0.0.1:0"];
        var app = await ScorerServer.BuildAsync(args, b =>
        {
            b.Configuration.AddInMemoryCollection(new Dictionary<string, string?>
            {
                ["Scorer:RescanInterval"] = "00:00:00.250",
                ["Scorer:SeedDemoModels"] = "false",
                ["Scorer:PredictionLog:MaxDelay"] = "00:00:00.005",
                ["Scorer:LogLevel"] = "Warning",
            });
            if (settings is not null)
            {
                b.Configuration.AddInMemoryCollection(settings);
            }

            services?.Invoke(b.Services);

        });
        await app.StartAsync();
        var addresses = app.Services.GetRequiredService<IServer>().Features.Get<IServerAddressesFeature>()!.Addresses.ToList();
        return new RunningServer(app, new Uri(addresses[0]), new Uri(addresses[1]));
    }

    public async ValueTask DisposeAsync()
    {
        Http.Dispose();
        Channel.Dispose();
        await App.StopAsync();
        await App.DisposeAsync();
    }
}

/// <summary>A temporary folder with <c>models/</c> and a store file, deleted afterwards.</summary>
internal sealed class TestFolder : IDisposable
{
    public TestFolder()
    {
        Root = Directory.CreateTempSubdirectory("scorer-server-").FullName;
        Directory.CreateDirectory(Models);
    }

    public string Root { get; }
    public string Models => Path.Combine(Root, "models");
    public string Store => Path.Combine(Root, "data", "scorer.db");

    /// <summary>Copies a model file into the models folder under <paramref name="name"/>.</summary>
    public string AddModel(string source, string name)
    {
        var target = Path.Combine(Models, name);
        File.Copy(source, target, overwrite: true);
        return target;
    }

    public string WriteModel(string name, string json)
    {
        var target = Path.Combine(Models, name);
        File.WriteAllText(target, json);
        return target;
    }

    public void Dispose()
    {
        try
        {
            Directory.Delete(Root, recursive: true);
        }
        catch (IOException)
        {
        }
    }
}

internal static class Files
{
    public static string Example(string scenario) => Path.Combine(Scorer.Testing.TestRepository.Root, "examples", scenario, "model.json");

    public static string Reference(string name) => Scorer.Testing.TestRepository.ReferenceFile(name);

    /// <summary>Polls until the condition holds or the timeout passes; returns whether it held.</summary>
    public static async Task<bool> EventuallyAsync(Func<Task<bool>> condition, TimeSpan timeout)
    {
        var until = DateTime.UtcNow + timeout;
        while (DateTime.UtcNow < until)
        {
            if (await condition())
            {
                return true;
            }

            await Task.Delay(50);
        }

        return await condition();
    }
}
