namespace Scorer.Server;

public static class Program
{
    public static Task<int> Main(string[] args) => ScorerServer.RunAsync(args);
}
