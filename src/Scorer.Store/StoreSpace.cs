namespace Scorer.Store;

/// <summary>
/// A write the store refused because its storage has no room left (a full disk, or a size limit the store was given):
/// nothing of the write was stored. <see cref="Exception.InnerException"/> is the driver's own error.
/// </summary>
public sealed class StoreFullException : IOException
{
    public StoreFullException(string message, Exception inner)
        : base(message, inner)
    {
    }

    /// <summary>
    /// Whether an I/O error says the disk is full: ENOSPC (28) on Linux and macOS, ERROR_DISK_FULL (112) or
    /// ERROR_HANDLE_DISK_FULL (39) on Windows, as .NET reports them in <see cref="Exception.HResult"/>.
    /// </summary>
    public static bool IsDiskFull(IOException ex)
    {
        ArgumentNullException.ThrowIfNull(ex);
        var code = ex.HResult;
        if (OperatingSystem.IsWindows())
        {
            return (code & 0xFFFF) is 112 or 39;
        }

        return code == 28;
    }
}

/// <summary>What a store on storage that can fill up (the SQLite file) knows of its last writes.</summary>
/// <param name="Since">When the first of the refused writes failed.</param>
/// <param name="Reason">The last refusal, in the driver's words.</param>
public sealed record StoreFull(DateTimeOffset Since, string Reason);

/// <summary>
/// A store whose writes can fail for lack of space (a file on a local disk). Readiness and the metrics read it; a
/// store on a server of its own (PostgreSQL) reports its full disk as any other failure of the server.
/// </summary>
public interface IStoreSpaceSignal
{
    /// <summary>
    /// Set while writes are refused for lack of space: from the first refusal until none has been refused for a while
    /// (the driver says how long), so that a small write that still fits does not hide the larger ones that do not.
    /// </summary>
    StoreFull? Full { get; }

    /// <summary>Writes refused for lack of space since the store was opened.</summary>
    long FullWrites { get; }
}
