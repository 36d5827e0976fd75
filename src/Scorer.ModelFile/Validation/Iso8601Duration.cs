using System.Globalization;
using System.Text.RegularExpressions;

namespace Scorer.ModelFile.Validation;

/// <summary>ISO 8601 durations such as <c>P30D</c>, <c>PT12H</c>, <c>P1Y2M</c>; a month counts as 30 days and a year as 365.</summary>
internal static partial class Iso8601Duration
{
    // [0-9], not \d: in .NET \d also matches other scripts' digits, which double.Parse does not read.
    [GeneratedRegex(@"^P(?!$)(?:([0-9]+)Y)?(?:([0-9]+)M)?(?:([0-9]+)W)?(?:([0-9]+)D)?(?:T(?=[0-9])(?:([0-9]+)H)?(?:([0-9]+)M)?(?:([0-9]+)S)?)?$", RegexOptions.CultureInvariant)]
    private static partial Regex Pattern();

    public static bool TryParse(string text, out TimeSpan value)
    {
        value = default;
        var m = Pattern().Match(text);
        if (!m.Success)
        {
            return false;
        }

        double Part(int i) => m.Groups[i].Success ? double.Parse(m.Groups[i].Value, CultureInfo.InvariantCulture) : 0;
        var days = Part(1) * 365 + Part(2) * 30 + Part(3) * 7 + Part(4);
        var seconds = Part(5) * 3600 + Part(6) * 60 + Part(7);
        var total = days * 86400 + seconds;
        if (total <= 0 || total > TimeSpan.MaxValue.TotalSeconds / 2)
        {
            return false;
        }

        value = TimeSpan.FromSeconds(total);
        return true;
    }
}
