using System.Threading.Channels;
using Scorer.Monitor.Reporting;
using Scorer.Registry;
using Scorer.Transport.V1;

namespace Scorer.Transport.Services;

/// <summary>
/// The events of one watched version and window, for the gRPC stream and the Server-Sent Events endpoint alike: the
/// report at once, then a "snapshot" at each refresh of the monitor loop and a "status" when the status changes.
/// </summary>
public sealed class MonitorWatch(MonitorLoop loop, MonitorReporter reporter)
{
    public async IAsyncEnumerable<MonitorEvent> WatchAsync(LoadedVersion version, string window,
        [System.Runtime.CompilerServices.EnumeratorCancellation] CancellationToken cancellationToken)
    {
        var events = Channel.CreateBounded<MonitorEvent>(new BoundedChannelOptions(64) { FullMode = BoundedChannelFullMode.DropOldest });
        void OnUpdated(MonitorSnapshot s)
        {
            if (s.Version.Model == version.Model && s.Version.Version == version.Version && s.Window == window)
            {
                events.Writer.TryWrite(new MonitorEvent { Kind = "snapshot", Report = MonitorService.ToMessage(s) });
            }
        }

        void OnStatus(string model, string v, StatusJudgement judgement)
        {
            if (model == version.Model && v == version.Version)
            {
                // The status event carries the report of the watched window as it stands after the change.
                _ = Task.Run(async () =>
                {
                    var s = await reporter.ReportAsync(version, window, CancellationToken.None).ConfigureAwait(false);
                    events.Writer.TryWrite(new MonitorEvent { Kind = "status", Report = MonitorService.ToMessage(s) });
                }, CancellationToken.None);
            }
        }

        loop.Updated += OnUpdated;
        reporter.StatusChanged += OnStatus;
        try
        {
            var first = await reporter.ReportAsync(version, window, cancellationToken).ConfigureAwait(false);
            yield return new MonitorEvent { Kind = "snapshot", Report = MonitorService.ToMessage(first) };
            while (await events.Reader.WaitToReadAsync(cancellationToken).ConfigureAwait(false))
            {
                while (events.Reader.TryRead(out var e))
                {
                    yield return e;
                }
            }
        }
        finally
        {
            loop.Updated -= OnUpdated;
            reporter.StatusChanged -= OnStatus;
        }
    }
}
