using System.Text;

namespace Scorer.Cli.Csv;

/// <summary>
/// A streaming RFC 4180 reader: fields separated by commas, optionally quoted with doubled quotes inside, records ended
/// by LF or CRLF (also inside quotes). Reads one record at a time into a reused list; never holds the file.
/// </summary>
public sealed class CsvReader(TextReader reader, char separator = ',')
{
    private readonly StringBuilder _field = new();

    /// <summary>1-based number of the record last read (the header is record 1).</summary>
    public long RecordNumber { get; private set; }

    /// <summary>Reads the next record into <paramref name="fields"/>; false at the end of the input.</summary>
    public bool TryRead(List<string> fields)
    {
        fields.Clear();
        _field.Clear();
        var c = reader.Read();
        if (c < 0)
        {
            return false;
        }

        var quoted = false;
        var atFieldStart = true;
        while (true)
        {
            if (c < 0)
            {
                if (quoted)
                {
                    throw new FormatException($"record {RecordNumber + 1}: a quoted field is not closed before the end of the input");
                }

                fields.Add(_field.ToString());
                break;
            }

            var ch = (char)c;
            if (quoted)
            {
                if (ch == '"')
                {
                    if (reader.Peek() == '"')
                    {
                        reader.Read();
                        _field.Append('"');
                    }
                    else
                    {
                        quoted = false;
                    }
                }
                else
                {
                    _field.Append(ch);
                }
            }
            else if (ch == '"' && atFieldStart)
            {
                quoted = true;
                atFieldStart = false;
            }
            else if (ch == separator)
            {
                fields.Add(_field.ToString());
                _field.Clear();
                atFieldStart = true;
            }
            else if (ch == '\n' || ch == '\r')
            {
                if (ch == '\r' && reader.Peek() == '\n')
                {
                    reader.Read();
                }

                fields.Add(_field.ToString());
                break;
            }
            else
            {
                _field.Append(ch);
                atFieldStart = false;
            }

            c = reader.Read();
        }

        RecordNumber++;
        return true;
    }
}
