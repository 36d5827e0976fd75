using System.Text;

namespace Scorer.ModelFile.Tests;

/// <summary>A model file is UTF-8 text (RFC 8259 section 8.1); bytes that are not are refused, never thrown.</summary>
public sealed class EncodingRulesTests
{
    // "é" as Latin-1 writes it: the single byte 0xE9, which cannot start a UTF-8 sequence followed by 'x'.
    private static byte[] Latin1(string text) => Encoding.Latin1.GetBytes(text);

    [Fact]
    public void A_file_in_Latin1_is_refused_naming_the_byte_its_line_and_its_position()
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"version\": \"1.0.0\",", "\"version\": \"1.0.0\",\n  \"description\": \"caf\u00e9 pumps\",");

        var result = ModelFileReader.Read(Latin1(text));

        var error = Problems.SingleErrorAt(result, "$");
        Problems.Contains("not valid UTF-8", error);
        Problems.Contains("byte 0xE9", error);
        Problems.Contains("line 5, position 22", error);
        Assert.Contains("save the file as UTF-8", error.Hint, StringComparison.Ordinal);
    }

    [Fact]
    public void Bytes_that_are_not_UTF8_in_a_field_name_are_refused_too()
    {
        var bytes = Encoding.UTF8.GetBytes(ModelFiles.Minimal);
        var at = Encoding.UTF8.GetBytes(ModelFiles.Minimal[..ModelFiles.Minimal.IndexOf("link", StringComparison.Ordinal)]).Length;
        bytes[at] = 0xFF;

        Problems.Contains("byte 0xFF", Problems.SingleErrorAt(ModelFileReader.Read(bytes), "$"));
    }

    [Fact]
    public void A_sequence_cut_short_is_refused()
    {
        // The first two bytes of the three of "€" (E2 82 AC), then a quote.
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"version\": \"1.0.0\",", "\"version\": \"1.0.0\", \"description\": \"\u20ac\",");
        var bytes = Encoding.UTF8.GetBytes(text).ToList();
        var euro = bytes.IndexOf(0xAC);
        bytes.RemoveAt(euro);

        Problems.Contains("byte 0xE2", Problems.SingleErrorAt(ModelFileReader.Read(bytes.ToArray()), "$"));
    }

    [Fact]
    public void Text_in_UTF8_beyond_ASCII_is_read()
    {
        var text = ModelFiles.Replaced(ModelFiles.Minimal, "\"version\": \"1.0.0\",", "\"version\": \"1.0.0\", \"description\": \"caf\u00e9 \u20ac \ud83d\udd27\",");

        var result = ModelFileReader.Read(Encoding.UTF8.GetBytes(text));

        Problems.None(result);
        Assert.Equal("caf\u00e9 \u20ac \ud83d\udd27", result.Document!.Description);
    }
}
