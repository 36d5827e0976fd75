using Scorer.Tabular;

namespace Scorer.Cli.Tests;

/// <summary>RFC 4180 (Common Format and MIME Type for CSV Files), sections 2.1–2.7.</summary>
public sealed class CsvTests
{
    [Fact]
    public void Quoted_fields_keep_commas_quotes_and_line_breaks()
    {
        using var reader = new CsvReader(new StringReader("a,\"b,c\",\"say \"\"hi\"\"\",\"two\nlines\"\r\nx,,z\n"));
        var fields = new List<string>();
        Assert.True(reader.TryRead(fields));
        Assert.Equal(["a", "b,c", "say \"hi\"", "two\nlines"], fields);
        Assert.True(reader.TryRead(fields));
        Assert.Equal(["x", "", "z"], fields);
        Assert.False(reader.TryRead(fields));
    }

    [Fact]
    public void A_quoted_field_left_open_is_an_error_naming_the_record()
    {
        var reader = new CsvReader(new StringReader("a,b\n\"open,c\n"));
        var fields = new List<string>();
        Assert.True(reader.TryRead(fields));
        var ex = Assert.Throws<FormatException>(() => reader.TryRead(fields));
        Assert.Contains("record 2", ex.Message, StringComparison.Ordinal);
    }

    [Fact]
    public void Written_fields_read_back_unchanged_and_numbers_round_trip()
    {
        var sw = new StringWriter();
        var writer = new CsvWriter(sw);
        writer.Field("plain");
        writer.Field("with,comma");
        writer.Field("with \"quote\"");
        writer.Number(0.1 + 0.2);
        writer.Number(double.NaN);
        writer.EndRecord();
        var fields = new List<string>();
        new CsvReader(new StringReader(sw.ToString())).TryRead(fields);
        Assert.Equal(["plain", "with,comma", "with \"quote\"", "0.30000000000000004", ""], fields);
        Assert.Equal(0.1 + 0.2, double.Parse(fields[3], System.Globalization.CultureInfo.InvariantCulture));
    }

    [Fact]
    public void Fields_and_records_that_cross_the_read_buffer_come_out_whole()
    {
        // 70,000-character fields (longer than the 64 Ki-character buffer), quoted and plain, across many records.
        var big = new string('x', 70_000);
        var text = string.Concat(Enumerable.Range(0, 50).Select(i => $"{i},\"{big}\"\"q\",{big}\r\n"));
        using var reader = new CsvReader(new StringReader(text));
        var fields = new List<string>();
        for (var i = 0; i < 50; i++)
        {
            Assert.True(reader.TryRead(fields));
            Assert.Equal([i.ToString(System.Globalization.CultureInfo.InvariantCulture), big + "\"q", big], fields);
        }

        Assert.False(reader.TryRead(fields));
    }

    [Fact]
    public void A_last_record_without_a_line_end_and_a_trailing_empty_field_are_read()
    {
        using var reader = new CsvReader(new StringReader("a,b,\n1,2,"));
        var fields = new List<string>();
        Assert.True(reader.TryRead(fields));
        Assert.Equal(["a", "b", ""], fields);
        Assert.True(reader.TryRead(fields));
        Assert.Equal(["1", "2", ""], fields);
        Assert.False(reader.TryRead(fields));
    }
}
