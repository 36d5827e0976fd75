using System.Runtime.InteropServices;

namespace Scorer.Registry;

/// <summary>What a directory entry is, after following symbolic links.</summary>
internal enum FileKind
{
    Regular,
    Fifo,
    CharacterDevice,
    BlockDevice,
    Socket,
    Directory,
    /// <summary>A symbolic link whose target does not exist (or a link loop).</summary>
    BrokenLink,
    /// <summary>Gone since the folder was listed.</summary>
    Missing,
}

/// <summary>
/// An entry's kind and what changes when its content does: length, modification and change times, inode and device
/// of the file a link leads to. Two equal stamps mean the file was not written in between (as far as the file system
/// tells; make and rsync rely on the same).
/// </summary>
internal readonly record struct FileStamp(FileKind Kind, long Length, long ModifiedTicks, long ChangedTicks, ulong Inode, ulong Device, string? Target);

/// <summary>
/// Looks at a directory entry without opening it: opening a FIFO for reading waits for a writer, and a device may never
/// end. On Linux the kind comes from <c>statx(2)</c> (following links, as a ConfigMap's links must be followed); elsewhere
/// .NET cannot tell a FIFO from a file, and every entry that is not a directory counts as a regular file.
/// </summary>
internal static class FileProbe
{
    private static int _statxMissing;

    public static FileStamp Of(string path)
    {
        if (OperatingSystem.IsLinux() && Volatile.Read(ref _statxMissing) == 0)
        {
            try
            {
                return OfStatx(path);
            }
            catch (EntryPointNotFoundException)
            {
                Volatile.Write(ref _statxMissing, 1); // a C library without statx (glibc before 2.28): as elsewhere
            }
        }

        return OfFileInfo(path);
    }

    /// <summary>What a kind is called in a load error.</summary>
    public static string Describe(FileKind kind) => kind switch
    {
        FileKind.Fifo => "a FIFO (named pipe)",
        FileKind.CharacterDevice => "a character device",
        FileKind.BlockDevice => "a block device",
        FileKind.Socket => "a socket",
        FileKind.Directory => "a directory",
        FileKind.BrokenLink => "a symbolic link to nothing (its target does not exist, or the links loop)",
        FileKind.Missing => "gone",
        _ => "a regular file",
    };

    private static FileStamp OfStatx(string path)
    {
        const int AtFdCwd = -100;
        const uint BasicStats = 0x7ff;
        if (NativeMethods.statx(AtFdCwd, path, 0, BasicStats, out var st) != 0)
        {
            var errno = Marshal.GetLastPInvokeError();
            return errno switch
            {
                Enoent or Enotdir when IsLink(path) => new FileStamp(FileKind.BrokenLink, 0, 0, 0, 0, 0, null),
                Eloop => new FileStamp(FileKind.BrokenLink, 0, 0, 0, 0, 0, null),
                Enoent or Enotdir => new FileStamp(FileKind.Missing, 0, 0, 0, 0, 0, null),
                Eacces => throw new UnauthorizedAccessException($"Access to the path '{path}' is denied."),
                _ => throw new IOException($"statx of '{path}' failed with error {errno}", errno),
            };
        }

        var kind = (st.Mode & 0xF000) switch
        {
            0x8000 => FileKind.Regular,
            0x1000 => FileKind.Fifo,
            0x2000 => FileKind.CharacterDevice,
            0x6000 => FileKind.BlockDevice,
            0xC000 => FileKind.Socket,
            0x4000 => FileKind.Directory,
            _ => FileKind.Missing,
        };
        return new FileStamp(kind, (long)st.Size, Ticks(st.MtimeSeconds, st.MtimeNanoseconds), Ticks(st.CtimeSeconds, st.CtimeNanoseconds), st.Inode,
            ((ulong)st.DevMajor << 32) | st.DevMinor, null);
    }

    private static long Ticks(long seconds, uint nanoseconds) => (seconds * TimeSpan.TicksPerSecond) + (nanoseconds / 100);

    private static bool IsLink(string path)
    {
        try
        {
            return new FileInfo(path).LinkTarget is not null;
        }
        catch (IOException)
        {
            return false;
        }
    }

    private static FileStamp OfFileInfo(string path)
    {
        FileSystemInfo info = new FileInfo(path);
        if (info.LinkTarget is not null)
        {
            var target = info.ResolveLinkTarget(returnFinalTarget: true);
            if (target is null || !target.Exists)
            {
                return new FileStamp(Directory.Exists(path) ? FileKind.Directory : FileKind.BrokenLink, 0, 0, 0, 0, 0, null);
            }

            info = target;
        }

        if (!info.Exists)
        {
            return new FileStamp(Directory.Exists(info.FullName) ? FileKind.Directory : FileKind.Missing, 0, 0, 0, 0, 0, null);
        }

        return new FileStamp(FileKind.Regular, ((FileInfo)info).Length, info.LastWriteTimeUtc.Ticks, 0, 0, 0, info.FullName);
    }

    private const int Enoent = 2;
    private const int Eacces = 13;
    private const int Enotdir = 20;
    private const int Eloop = 40;

    /// <summary>struct statx of linux/stat.h (the same layout on every architecture), the fields read here.</summary>
    [StructLayout(LayoutKind.Explicit, Size = 256)]
    private struct Statx
    {
        [FieldOffset(28)] public ushort Mode;
        [FieldOffset(32)] public ulong Inode;
        [FieldOffset(40)] public ulong Size;
        [FieldOffset(96)] public long CtimeSeconds;
        [FieldOffset(104)] public uint CtimeNanoseconds;
        [FieldOffset(112)] public long MtimeSeconds;
        [FieldOffset(120)] public uint MtimeNanoseconds;
        [FieldOffset(136)] public uint DevMajor;
        [FieldOffset(140)] public uint DevMinor;
    }

    private static class NativeMethods
    {
        // int statx(int dirfd, const char *pathname, int flags, unsigned int mask, struct statx *statxbuf); glibc 2.28 and later.
        [DllImport("libc", EntryPoint = "statx", SetLastError = true)]
        [DefaultDllImportSearchPaths(DllImportSearchPath.SafeDirectories)]
        public static extern int statx(int dirfd, [MarshalAs(UnmanagedType.LPUTF8Str)] string path, int flags, uint mask, out Statx buffer);
    }
}
