using System.Globalization;

namespace Scorer.Tabular;

/// <summary>Writes CSV records; quotes a field only when it must; numbers in shortest round-trip form.</summary>
public sealed class CsvWriter(TextWriter writer, char separator = ',')
{
    private bool _atRecordStart = true;

    public void Field(string? value) => Field(value.AsSpan());

    /// <summary>A field from characters formatted in place (an id, a time), so that nothing is allocated for it.</summary>
    public void Field(ReadOnlySpan<char> value)
    {
        Separate();
        if (value.IsEmpty)
        {
            return;
        }

        if (value.IndexOfAny([separator, '"', '\n', '\r']) < 0)
        {
            writer.Write(value);
            return;
        }

        writer.Write('"');
        for (int quote; (quote = value.IndexOf('"')) >= 0; value = value[(quote + 1)..])
        {
            writer.Write(value[..(quote + 1)]);
            writer.Write('"');
        }

        writer.Write(value);
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
