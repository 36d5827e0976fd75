using System.Text;

namespace Scorer.ModelFile.Validation;

/// <summary>Builds the JSON paths that problems are reported at (<c>$.terms[2].factors[0].level</c>).</summary>
internal static class JsonPath
{
    public const string Root = "$";

    public static string Property(string parent, string name) =>
        IsPlain(name) ? parent + "." + name : parent + "['" + name.Replace("'", "\\'", StringComparison.Ordinal) + "']";

    public static string Index(string parent, int index) => parent + "[" + index.ToString(System.Globalization.CultureInfo.InvariantCulture) + "]";

    /// <summary>Turns a JSON Pointer (<c>/terms/2/name</c>) into a path in the same notation.</summary>
    public static string FromPointer(string pointer)
    {
        if (pointer.Length == 0 || pointer == "/")
        {
            return Root;
        }

        var sb = new StringBuilder(Root);
        foreach (var raw in pointer.TrimStart('/').Split('/'))
        {
            var segment = raw.Replace("~1", "/", StringComparison.Ordinal).Replace("~0", "~", StringComparison.Ordinal);
            if (segment.Length > 0 && segment.All(char.IsAsciiDigit))
            {
                sb.Append('[').Append(segment).Append(']');
            }
            else
            {
                var s = Property("", segment);
                sb.Append(s);
            }
        }

        return sb.ToString();
    }

    private static bool IsPlain(string name) =>
        name.Length > 0 && (char.IsAsciiLetter(name[0]) || name[0] == '_') && name.All(c => char.IsAsciiLetterOrDigit(c) || c == '_' || c == '-');
}
