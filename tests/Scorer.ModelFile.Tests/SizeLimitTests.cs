using System.Text;

namespace Scorer.ModelFile.Tests;

/// <summary>The size limit (<see cref="ModelFileReaderOptions.MaxBytes"/>) is checked before anything is parsed.</summary>
public sealed class SizeLimitTests
{
    private static readonly byte[] Minimal = Encoding.UTF8.GetBytes(ModelFiles.Minimal);

    [Fact]
    public void Default_limit_is_32_MiB()
    {
        Assert.Equal(32L * 1024 * 1024, ModelFileReaderOptions.Default.MaxBytes);
        Assert.Equal(32L * 1024 * 1024, new ModelFileReaderOptions().MaxBytes);
    }

    [Fact]
    public void File_over_the_limit_is_rejected_before_parsing()
    {
        var result = ModelFileReader.Read(Minimal, new ModelFileReaderOptions { MaxBytes = 100 });

        var error = Problems.SingleErrorAt(result, "$");

        Problems.Contains("larger than the limit of 100 bytes", error);
        Assert.NotNull(error.Hint);
    }

    [Fact]
    public void Invalid_json_over_the_limit_is_rejected_for_its_size()
    {
        var result = ModelFileReader.Read("{ this is not json"u8.ToArray(), new ModelFileReaderOptions { MaxBytes = 10 });

        Problems.Contains("larger than the limit", Problems.SingleErrorAt(result, "$"));
    }

    [Fact]
    public void File_of_exactly_the_limit_is_read()
    {
        var result = ModelFileReader.Read(Minimal, new ModelFileReaderOptions { MaxBytes = Minimal.Length });

        Problems.None(result);
    }

    [Fact]
    public void Stream_over_the_limit_is_rejected()
    {
        using var stream = new MemoryStream(Minimal);

        var result = ModelFileReader.Read(stream, new ModelFileReaderOptions { MaxBytes = Minimal.Length - 1 });

        Problems.Contains("larger than the limit", Problems.SingleErrorAt(result, "$"));
    }

    [Fact]
    public void Stream_of_exactly_the_limit_is_read()
    {
        using var stream = new MemoryStream(Minimal);

        Problems.None(ModelFileReader.Read(stream, new ModelFileReaderOptions { MaxBytes = Minimal.Length }));
    }

    [Fact]
    public void Endless_stream_is_read_only_up_to_the_limit()
    {
        using var stream = new EndlessStream();

        var result = ModelFileReader.Read(stream, new ModelFileReaderOptions { MaxBytes = 1000 });

        Problems.Contains("larger than the limit", Problems.SingleErrorAt(result, "$"));
        Assert.True(stream.BytesRead < 1_000_000, $"read {stream.BytesRead} bytes");
    }

    [Fact]
    public void File_on_disk_over_the_limit_is_rejected()
    {
        var path = Path.Combine(Path.GetTempPath(), $"scorer-size-{Guid.NewGuid():N}.json");
        File.WriteAllBytes(path, Minimal);
        try
        {
            var result = ModelFileReader.ReadFile(path, new ModelFileReaderOptions { MaxBytes = 64 });

            Problems.SingleErrorAt(result, "$");
        }
        finally
        {
            File.Delete(path);
        }
    }

    /// <summary>A stream of spaces that never ends.</summary>
    private sealed class EndlessStream : Stream
    {
        public long BytesRead { get; private set; }

        public override bool CanRead => true;
        public override bool CanSeek => false;
        public override bool CanWrite => false;
        public override long Length => throw new NotSupportedException();
        public override long Position { get => BytesRead; set => throw new NotSupportedException(); }

        public override int Read(byte[] buffer, int offset, int count)
        {
            buffer.AsSpan(offset, count).Fill((byte)' ');
            BytesRead += count;
            return count;
        }

        public override void Flush()
        {
        }

        public override long Seek(long offset, SeekOrigin origin) => throw new NotSupportedException();
        public override void SetLength(long value) => throw new NotSupportedException();
        public override void Write(byte[] buffer, int offset, int count) => throw new NotSupportedException();
    }
}
