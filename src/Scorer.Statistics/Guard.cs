using System.Globalization;

namespace Scorer.Statistics;

/// <summary>Input checks shared by the statistics: each failure names the offending parameter and row.</summary>
internal static class Guard
{
    public static void SameLength(int expected, int actual, string paramName, string otherName)
    {
        if (expected != actual)
        {
            throw new ArgumentException(
                string.Create(CultureInfo.InvariantCulture, $"{paramName} has {actual} values but {otherName} has {expected}; they must have the same length."),
                paramName);
        }
    }

    /// <summary>Every value is a probability: not NaN and within [0, 1].</summary>
    public static void Probabilities(ReadOnlySpan<double> probability, string paramName)
    {
        for (var i = 0; i < probability.Length; i++)
        {
            var p = probability[i];
            if (!(p >= 0.0 && p <= 1.0))
            {
                throw new ArgumentException(
                    string.Create(CultureInfo.InvariantCulture, $"{paramName}[{i}] = {p} is not a probability in [0, 1]."),
                    paramName);
            }
        }
    }

    /// <summary>Every outcome is 0 or 1.</summary>
    public static void Outcomes(ReadOnlySpan<byte> outcome, string paramName)
    {
        for (var i = 0; i < outcome.Length; i++)
        {
            if (outcome[i] > 1)
            {
                throw new ArgumentException(
                    string.Create(CultureInfo.InvariantCulture, $"{paramName}[{i}] = {outcome[i]}; an outcome is 0 or 1."),
                    paramName);
            }
        }
    }

    /// <summary>No score is NaN (infinite scores rank normally).</summary>
    public static void Scores(ReadOnlySpan<double> score, string paramName)
    {
        for (var i = 0; i < score.Length; i++)
        {
            if (double.IsNaN(score[i]))
            {
                throw new ArgumentException(
                    string.Create(CultureInfo.InvariantCulture, $"{paramName}[{i}] is NaN."), paramName);
            }
        }
    }

    public static int Events(ReadOnlySpan<byte> outcome)
    {
        var events = 0;
        foreach (var y in outcome)
        {
            events += y;
        }

        return events;
    }
}
