namespace Scorer.Server;

public static class Program
{
    public static Task<int> Main(string[] args) => Scorer.Host.ScorerServer.RunAsync(args);
}
