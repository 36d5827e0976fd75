using BenchmarkDotNet.Running;

namespace Scorer.Bench;

public static class Program
{
    public static void Main(string[] args)
    {
        if (args.Length > 2 && args[0] == "--grpc-dense")
        {
            var ci = System.Globalization.CultureInfo.InvariantCulture;
            DenseStreamLoad.RunAsync(args[1], double.Parse(args[2], ci), args.Length > 3 ? int.Parse(args[3], ci) : 1000).GetAwaiter().GetResult();
            return;
        }

        if (args.Length > 2 && args[0] == "--fit-data")
        {
            FitData.Write(args[1], int.Parse(args[2], System.Globalization.CultureInfo.InvariantCulture));
            return;
        }

        if (args.Length > 4 && args[0] == "--store-writes")
        {
            var ci = System.Globalization.CultureInfo.InvariantCulture;
            StoreWrites.RunAsync(args[1], int.Parse(args[2], ci), int.Parse(args[3], ci), args[4] == "keyed").GetAwaiter().GetResult();
            return;
        }

        if (args.Length > 3 && args[0] == "--outcomes")
        {
            var ci = System.Globalization.CultureInfo.InvariantCulture;
            OutcomeIngestion.RunAsync(args[1], int.Parse(args[2], ci), int.Parse(args[3], ci), experiments: !(args.Length > 4 && args[4] == "store-only")).GetAwaiter().GetResult();
            return;
        }

        if (args.Length > 2 && args[0] == "--postgres")
        {
            PostgresWrites.RunAsync(args[1], int.Parse(args[2], System.Globalization.CultureInfo.InvariantCulture), args.Length > 3 ? int.Parse(args[3], System.Globalization.CultureInfo.InvariantCulture) : 1000).GetAwaiter().GetResult();
            return;
        }

        if (args.Length > 1 && args[0] == "--report")
        {
            ReportSpeed.RunAsync(int.Parse(args[1], System.Globalization.CultureInfo.InvariantCulture)).GetAwaiter().GetResult();
            return;
        }

        if (args.Length > 4 && args[0] == "--volume")
        {
            var ci = System.Globalization.CultureInfo.InvariantCulture;
            VolumeMemory.RunAsync(args[1], args[2], int.Parse(args[3], ci), int.Parse(args[4], ci)).GetAwaiter().GetResult();
            return;
        }

        if (args.Length > 4 && args[0] == "--soak")
        {
            var ci = System.Globalization.CultureInfo.InvariantCulture;
            Soak.RunAsync(args[1], int.Parse(args[2], ci), int.Parse(args[3], ci), int.Parse(args[4], ci)).GetAwaiter().GetResult();
            return;
        }

        if (args.Length > 0 && args[0] == "--summary-report")
        {
            SummaryReportSpeed.Run();
            return;
        }

        if (args.Length > 0 && args[0] == "--quick")
        {
            QuickRun.Run(args.Length > 1 ? int.Parse(args[1], System.Globalization.CultureInfo.InvariantCulture) : 7);
            return;
        }

        BenchmarkSwitcher.FromAssembly(typeof(Program).Assembly).Run(args);
    }
}
