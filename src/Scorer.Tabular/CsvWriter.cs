using System.Globalization;

namespace Scorer.Tabular;

/// <summary>Writes CSV records; quotes a field only when it must; numbers in shortest round-trip form.</summary>
public sealed class CsvWriter(TextWriter writer, char separator = ',')
{
    private bool _atRecordStart = true;

    public void Field(string? value)
    {
        Separate();
        if (string.IsNullOrEmpty(value))
        {
            return;
        }

        if (value.AsSpan().IndexOfAny([separator, '"', '\n', '\r']) < 0)
        {
            writer.Write(value);
            return;
        }

        writer.Write('"');
        writer.Write(value.Replace("\"", "\"\"", StringComparison.Ordinal));
        writer.Write('"');
    }

    /// <summary>A number in shortest round-trip form; NaN is written as an empty field.</summary>
    public void Number(double value)
    {
        Separate();
        if (double.IsNaN(value))
        {
            return;
        }

        Span<char> buffer = stackalloc char[32];
        value.TryFormat(buffer, out var n, "R", CultureInfo.InvariantCulture);
        writer.Write(buffer[..n]);
    }

    public void EndRecord()
    {
        writer.Write('\n');
        _atRecordStart = true;
    }

    private void Separate()
    {
        if (!_atRecordStart)
        {
            writer.Write(separator);
        }

        _atRecordStart = false;
    }
}
