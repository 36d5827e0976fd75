using System.Globalization;

namespace Scorer.Bench;

/// <summary>
/// `--fit-data PATH ROWS`: writes a seeded, invented CSV for the fitting benchmark: 14 numeric features x0..x13
/// (normal, two of them positive for a log transform), a 5-level categorical `grade`, and a logit outcome `y`.
/// With `--numeric x0..x13 --categorical grade --transform x0=log,x1=log --interaction x2:x3` the model has 20 terms.
/// </summary>
internal static class FitData
{
    public static void Write(string path, int rows)
    {
        var random = new Random(20261201);
        using var w = new StreamWriter(path);
        w.WriteLine(string.Join(',', Enumerable.Range(0, 14).Select(i => $"x{i}")) + ",grade,y");
        var values = new double[14];
        Span<char> buffer = stackalloc char[32];
        for (var r = 0; r < rows; r++)
        {
            var eta = -1.5;
            for (var i = 0; i < 14; i++)
            {
                var v = Normal(random);
                values[i] = i < 2 ? Math.Round(Math.Exp(0.5 * v) * 10, 3) : Math.Round(v, 4);
                eta += (i < 2 ? Math.Log(values[i]) - 2.3 : values[i]) * 0.08 * ((i % 3) - 1 + 0.5);
            }

            eta += 0.1 * values[2] * values[3];
            var grade = random.Next(5);
            eta += 0.15 * grade;
            var y = random.NextDouble() < 1 / (1 + Math.Exp(-eta)) ? 1 : 0;
            for (var i = 0; i < 14; i++)
            {
                values[i].TryFormat(buffer, out var n, "R", CultureInfo.InvariantCulture);
                w.Write(buffer[..n]);
                w.Write(',');
            }

            w.Write("ABCDE"[grade]);
            w.Write(',');
            w.Write(y);
            w.Write('\n');
        }
    }

    private static double Normal(Random random) =>
        Math.Sqrt(-2 * Math.Log(1 - random.NextDouble())) * Math.Cos(2 * Math.PI * random.NextDouble());
}
