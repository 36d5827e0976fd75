using System.Buffers;
using System.Globalization;

namespace Scorer.Tabular;

/// <summary>
/// A streaming RFC 4180 reader: fields separated by commas, optionally quoted with doubled quotes inside, records ended
/// by LF or CRLF (also inside quotes). It reads the input in large blocks and hands out the fields of one record at a
/// time as spans into its buffer, valid until the next <see cref="TryRead()"/>; it never holds more of the file than
/// the record being read.
/// </summary>
public sealed class CsvReader : IDisposable
{
    private static readonly SearchValues<char> Specials = SearchValues.Create(",\"\r\n");

    private readonly TextReader _reader;
    private readonly char _separator;
    private readonly SearchValues<char> _specials;
    private char[] _buffer = ArrayPool<char>.Shared.Rent(1 << 16);
    private int _start;   // start of the unread part of the buffer
    private int _end;     // end of the valid data in the buffer
    private bool _eof;

    // The current record: field i is _fields[_fieldStart[i] .. _fieldStart[i] + _fieldLength[i]).
    private char[] _fields = ArrayPool<char>.Shared.Rent(1 << 12);
    private int[] _fieldStart = new int[64];
    private int[] _fieldLength = new int[64];
    private int _fieldsUsed;

    public CsvReader(TextReader reader, char separator = ',')
    {
        _reader = reader;
        _separator = separator;
        _specials = separator == ',' ? Specials : SearchValues.Create(separator + "\"\r\n");
    }

    /// <summary>1-based number of the record last read (the header is record 1).</summary>
    public long RecordNumber { get; private set; }

    /// <summary>Number of fields of the current record.</summary>
    public int FieldCount { get; private set; }

    /// <summary>Field <paramref name="i"/> of the current record, valid until the next read.</summary>
    public ReadOnlySpan<char> this[int i] => _fields.AsSpan(_fieldStart[i], _fieldLength[i]);

    /// <summary>Field <paramref name="i"/> as a new string.</summary>
    public string GetString(int i) => new(this[i]);

    /// <summary>Reads the next record into <paramref name="fields"/> as strings; false at the end of the input.</summary>
    public bool TryRead(List<string> fields)
    {
        fields.Clear();
        if (!TryRead())
        {
            return false;
        }

        for (var i = 0; i < FieldCount; i++)
        {
            fields.Add(GetString(i));
        }

        return true;
    }

    /// <summary>Reads the next record; its fields are then available through the indexer. False at the end.</summary>
    public bool TryRead()
    {
        FieldCount = 0;
        _fieldsUsed = 0;
        if (_start >= _end && !Fill())
        {
            return false;
        }

        while (true)
        {
            // One field per turn.
            if (_start >= _end && !Fill())
            {
                AddField(ReadOnlySpan<char>.Empty);
                break;
            }

            if (_buffer[_start] == '"')
            {
                _start++;
                ReadQuoted();
            }
            else
            {
                ReadPlain();
            }

            // After a field: a separator (another field follows), a line end, or the end of the input.
            if (_start >= _end && !Fill())
            {
                break;
            }

            var c = _buffer[_start];
            if (c == _separator)
            {
                _start++;
                if (_start >= _end && !Fill())
                {
                    AddField(ReadOnlySpan<char>.Empty);
                    break;
                }

                continue;
            }

            if (c == '\r' || c == '\n')
            {
                _start++;
                if (c == '\r' && (_start < _end || Fill()) && _buffer[_start] == '\n')
                {
                    _start++;
                }

                break;
            }

            throw new FormatException($"record {RecordNumber + 1}: unexpected character '{c}' after a quoted field");
        }

        RecordNumber++;
        return true;
    }

    public void Dispose()
    {
        ArrayPool<char>.Shared.Return(_buffer);
        ArrayPool<char>.Shared.Return(_fields);
        _buffer = [];
        _fields = [];
    }

    private void ReadPlain()
    {
        var fieldBegin = _fieldsUsed;
        while (true)
        {
            var span = _buffer.AsSpan(_start, _end - _start);
            var stop = span.IndexOfAny(_specials);
            var take = stop < 0 ? span.Length : stop;
            Append(span[..take]);
            _start += take;
            if (stop >= 0)
            {
                if (span[stop] == '"')
                {
                    // A quote inside an unquoted field: kept as a character (lenient, as most writers expect).
                    Append("\"");
                    _start++;
                    continue;
                }

                break;
            }

            if (!Fill())
            {
                break;
            }
        }

        Commit(fieldBegin);
    }

    private void ReadQuoted()
    {
        var fieldBegin = _fieldsUsed;
        while (true)
        {
            if (_start >= _end && !Fill())
            {
                throw new FormatException($"record {RecordNumber + 1}: a quoted field is not closed before the end of the input");
            }

            var span = _buffer.AsSpan(_start, _end - _start);
            var quote = span.IndexOf('"');
            if (quote < 0)
            {
                Append(span);
                _start = _end;
                continue;
            }

            Append(span[..quote]);
            _start += quote + 1;
            if ((_start < _end || Fill()) && _buffer[_start] == '"')
            {
                Append("\"");
                _start++;
                continue;
            }

            break;
        }

        Commit(fieldBegin);
    }

    private void Append(ReadOnlySpan<char> chars)
    {
        if (_fieldsUsed + chars.Length > _fields.Length)
        {
            var bigger = ArrayPool<char>.Shared.Rent(Math.Max(_fields.Length * 2, _fieldsUsed + chars.Length));
            _fields.AsSpan(0, _fieldsUsed).CopyTo(bigger);
            ArrayPool<char>.Shared.Return(_fields);
            _fields = bigger;
        }

        chars.CopyTo(_fields.AsSpan(_fieldsUsed));
        _fieldsUsed += chars.Length;
    }

    private void AddField(ReadOnlySpan<char> chars)
    {
        var begin = _fieldsUsed;
        Append(chars);
        Commit(begin);
    }

    private void Commit(int begin)
    {
        if (FieldCount == _fieldStart.Length)
        {
            Array.Resize(ref _fieldStart, FieldCount * 2);
            Array.Resize(ref _fieldLength, FieldCount * 2);
        }

        _fieldStart[FieldCount] = begin;
        _fieldLength[FieldCount] = _fieldsUsed - begin;
        FieldCount++;
    }

    private bool Fill()
    {
        if (_eof)
        {
            return false;
        }

        var remaining = _end - _start;
        if (remaining > 0 && _start > 0)
        {
            Array.Copy(_buffer, _start, _buffer, 0, remaining);
        }

        _start = 0;
        _end = remaining;
        var read = _reader.Read(_buffer, _end, _buffer.Length - _end);
        if (read <= 0)
        {
            _eof = true;
            return _end > 0;
        }

        _end += read;
        return true;
    }
}

/// <summary>Parsing helpers for CSV cells.</summary>
public static class CsvCells
{
    /// <summary>True for the cells that mean "no value": empty, NA, NaN, null.</summary>
    public static bool IsMissing(ReadOnlySpan<char> cell) =>
        cell.IsEmpty || cell.SequenceEqual("NA") || cell.SequenceEqual("NaN") || cell.SequenceEqual("nan") || cell.SequenceEqual("null");

    public static bool TryParseNumber(ReadOnlySpan<char> cell, out double value) =>
        double.TryParse(cell, NumberStyles.Float, CultureInfo.InvariantCulture, out value);
}
