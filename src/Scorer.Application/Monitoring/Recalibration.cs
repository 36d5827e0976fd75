using Scorer.Application.Models;
using Scorer.Monitor.Reporting;
using Scorer.Registry;
using Scorer.Statistics.Recalibration;
using Scorer.Store;

namespace Scorer.Application.Monitoring;

/// <summary>What a recalibration call did: the decision, the counts it rested on, and the file written (null: nothing written).</summary>
public sealed record RecalibrationResult(string Model, string NewVersion, int Rows, int Events, RecalibrationOutcome Outcome, string? File);

/// <summary>
/// The monitor's recalibration for every transport: reads the version's labelled predictions of a window from the
/// store, refuses too few events, runs the <see cref="RecalibrationWorkflow"/> (the same one <c>scorer recalibrate</c>
/// runs on a CSV), writes the candidate into the models folder and reloads the registry.
/// </summary>
public sealed class Recalibration(ModelCatalog catalog, ModelRegistry registry, ILabelledStore store, MonitorOptions options, RegistryOptions folder, TimeProvider time)
{
    public MonitorOptions Options => options;

    /// <summary>Recalibrates the named version on its labelled predictions of <paramref name="window"/> (empty: the judged window).</summary>
    public async Task<RecalibrationResult> RunAsync(string? model, string? version, string? window, string? kind, string? newVersion, CancellationToken cancellationToken)
    {
        var (resolved, w) = catalog.Monitored(model, version, window, options.JudgedWindow);
        if (string.IsNullOrEmpty(version))
        {
            throw Errors.Invalid("version", "name the version to recalibrate");
        }

        var now = time.GetUtcNow();
        var target = string.IsNullOrEmpty(newVersion) ? $"{resolved.Version}-recal-{now:yyyyMMddHHmmss}" : newVersion;
        RecalibrationKind? parsed;
        try
        {
            parsed = RecalibrationWorkflow.ParseKind(kind);
            RecalibrationWorkflow.CheckNewVersion(resolved.Document, target);
        }
        catch (RecalibrationRefused ex)
        {
            throw Errors.Invalid(ex.Field, ex.Reason);
        }

        if (catalog.Current.Find(resolved.Model)?.Find(target) is not null)
        {
            throw Errors.Invalid("newVersion", $"model '{resolved.Model}' already has a version '{target}'");
        }

        var span = options.Windows[w];
        var (eta, y, inWindow) = await LatestAsync(resolved.Model, resolved.Version, span is { } s ? now - s : DateTimeOffset.UnixEpoch, now.AddMinutes(1),
            cancellationToken).ConfigureAwait(false);
        var events = y.Count(v => v == 1);
        var needed = Math.Max(1, options.MinEvents);
        if (events < needed || y.Length - events < needed)
        {
            // Nothing is written: a candidate fitted on a handful of outcomes would only carry their noise.
            var held = inWindow > y.Length ? $"the latest {y.Length} of the {inWindow} labelled predictions of the window {w} (Scorer:Monitor:RecalibrationRows)"
                : $"the window {w} holds {y.Length} labelled predictions";
            throw Errors.Precondition("window", $"{held} of {resolved.Model} {resolved.Version} "
                + $"({events} events, {y.Length - events} non-events); a recalibration needs at least {needed} of each (Scorer:Monitor:MinEvents): "
                + "wait for more outcomes or choose a longer window");
        }

        RecalibrationOutcome outcome;
        try
        {
            outcome = RecalibrationWorkflow.Run(resolved.Document, eta, y, parsed, target);
        }
        catch (RecalibrationRefused ex)
        {
            throw Errors.Precondition(ex.Field == "data" ? "window" : "version", ex.Reason);
        }

        if (outcome.Document is not { } document)
        {
            return new RecalibrationResult(resolved.Model, target, y.Length, events, outcome, null);
        }

        var file = Path.Combine(folder.ModelsPath, $"{resolved.Model}-{target}.json");
        if (File.Exists(file))
        {
            throw Errors.Invalid("newVersion", $"the file {Path.GetFileName(file)} exists already");
        }

        await using (var stream = new FileStream(file, FileMode.CreateNew))
        {
            ModelFile.ModelFileWriter.Write(document, stream);
        }

        await registry.ReloadAsync(cancellationToken).ConfigureAwait(false);
        return new RecalibrationResult(resolved.Model, target, y.Length, events, outcome, Path.GetFileName(file));
    }

    /// <summary>
    /// η and y of the window's latest <see cref="MonitorOptions.RecalibrationRows"/> labelled predictions, in prediction-time
    /// order: read page by page (<see cref="MonitorOptions.ChartPageRows"/>) into a ring of that many, so the memory is
    /// 9 bytes per kept row and one page, whatever the window holds.
    /// </summary>
    private async Task<(double[] Eta, byte[] Y, long InWindow)> LatestAsync(string model, string version, DateTimeOffset from, DateTimeOffset to, CancellationToken cancellationToken)
    {
        var capacity = options.RecalibrationRows;
        var eta = new List<double>();
        var y = new List<byte>();
        long seen = 0;
        LabelledRowPosition? after = null;
        while (true)
        {
            var page = await store.GetLabelledRowsAsync(model, version, from, to, after, options.ChartPageRows, cancellationToken).ConfigureAwait(false);
            foreach (var row in page)
            {
                var slot = (int)(seen++ % capacity);
                if (slot == eta.Count)
                {
                    eta.Add(row.Prediction.Eta);
                    y.Add(row.Prediction.Outcome);
                }
                else
                {
                    eta[slot] = row.Prediction.Eta;
                    y[slot] = row.Prediction.Outcome;
                }
            }

            if (page.Count < options.ChartPageRows)
            {
                break;
            }

            after = page[^1].Position;
        }

        // The ring's oldest kept row is at seen % capacity once it wrapped.
        var start = seen > capacity ? (int)(seen % capacity) : 0;
        return ([.. eta[start..], .. eta[..start]], [.. y[start..], .. y[..start]], seen);
    }
}
