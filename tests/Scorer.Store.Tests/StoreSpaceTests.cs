namespace Scorer.Store.Tests;

/// <summary>How an I/O error is recognised as a full disk (<see cref="StoreFullException.IsDiskFull"/>).</summary>
public sealed class StoreSpaceTests
{
    [Fact]
    public void A_write_to_a_device_that_is_always_full_is_a_full_disk_and_other_io_errors_are_not()
    {
        if (!OperatingSystem.IsLinux())
        {
            // /dev/full (ENOSPC on every write) is Linux's; the Windows codes are checked by value below.
            Assert.True(StoreFullException.IsDiskFull(new IOException("disk full", unchecked((int)0x80070070))));
            return;
        }

        var full = Assert.ThrowsAny<IOException>(() =>
        {
            using var device = new FileStream("/dev/full", FileMode.Open, FileAccess.Write, FileShare.ReadWrite, bufferSize: 0);
            device.Write(new byte[4096]);
        });
        Assert.True(StoreFullException.IsDiskFull(full), $"{full.GetType().Name} (HResult {full.HResult}): {full.Message}");

        var missing = Assert.ThrowsAny<IOException>(() => File.ReadAllBytes(Path.Combine(Path.GetTempPath(), Guid.NewGuid().ToString("N"), "none")));
        Assert.False(StoreFullException.IsDiskFull(missing));
    }
}
