using Scorer.Engine.Scoring;
using Scorer.ModelFile;

namespace PumpBearings.Generator;

/// <summary>
/// One invented example: its model file header (features without training ranges, terms holding the true coefficients
/// of the simulation), how a training row is drawn, the new rows to score, and the README text.
/// </summary>
internal abstract class Scenario
{
    /// <summary>Folder under examples/ that receives model.json, training.csv, rows.csv and README.md.</summary>
    public abstract string Folder { get; }

    public abstract int Seed { get; }

    public abstract int TrainingRows { get; }

    /// <summary>Name of the identifier column of training.csv and rows.csv.</summary>
    public abstract string TrainingIdColumn { get; }

    public abstract string NewRowIdColumn { get; }

    /// <summary>
    /// The model file before fitting: header, outcome, threshold, features (policies set, ranges not yet), and the terms
    /// with the true coefficients of the simulation.
    /// </summary>
    public abstract ModelDocument Template { get; }

    /// <summary>Draws one training row: values in the template's feature order, rounded as they are written to CSV.</summary>
    public abstract FeatureValue[] Draw(Random rng);

    /// <summary>The rows of rows.csv, drawn from the same population with a few rows set by hand.</summary>
    public abstract IReadOnlyList<NewRow> NewRows(Random rng);

    public abstract string Readme(Report report);
}

/// <summary>A row of rows.csv; <see cref="Note"/> says why a hand-set row is there.</summary>
internal sealed record NewRow(string Id, FeatureValue[] Values, string? Note = null);

/// <summary>A scored row of rows.csv, for the README.</summary>
internal sealed record ScoredNewRow(NewRow Row, double Probability, bool Flagged, IReadOnlyList<string> Warnings, string? Error);

/// <summary>What the generator produced for one scenario.</summary>
internal sealed record Report(
    Scenario Scenario,
    ModelDocument Document,
    int N,
    int Events,
    double[] TrueCoefficients,
    FitResult Fit,
    double MaxSe,
    IReadOnlyList<ScoredNewRow> NewRows)
{
    public double EventRate => (double)Events / N;

    public double StandardError(int term) => Math.Sqrt(Fit.Covariance[term, term]);
}
