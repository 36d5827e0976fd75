using System.Globalization;
using MathNet.Numerics.Distributions;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;
using static PumpBearings.Generator.ReadmeParts;

namespace PumpBearings.Generator;

/// <summary>
/// Invented scenario: pump bearings at a water utility, and whether a bearing failure is reported within 30 days of a
/// condition snapshot (vibration, bearing temperature, running hours since service, site). Logit link.
/// </summary>
internal sealed class PumpBearingsScenario : Scenario
{
    private static readonly string[] Sites = ["north", "east", "river"];
    private static readonly double[] SiteShares = [0.45, 0.35, 0.20];

    public override string Folder => "pump-bearings";

    public override int Seed => 20261101;

    public override int TrainingRows => 5000;

    public override string TrainingIdColumn => "record_id";

    public override string NewRowIdColumn => "pump_id";

    public override ModelDocument Template { get; } = new()
    {
        Format = ModelDocument.FormatV1,
        Model = "pump-bearing-failure",
        Version = "2026.11.1",
        Description = "Invented demo model: probability that a pump bearing at a water utility has a failure reported within 30 days " +
            "of a condition snapshot, from RMS vibration, bearing temperature, running hours since the last bearing service and site. " +
            "Fitted by examples/PumpBearings.Generator to simulated data; every number is invented. " +
            "Scores support maintenance decisions; they do not replace inspection or safety procedures.",
        Link = LinkKind.Logit,
        Outcome = new OutcomeSpec("failed_within_30d", "bearing failure reported within 30 days", "P30D", NegativesPolicy.Implicit),
        Features =
        [
            new FeatureSpec { Name = "vibration_rms", Kind = FeatureKind.Numeric, Description = "RMS vibration velocity at the bearing housing, mm/s" },
            new FeatureSpec
            {
                Name = "bearing_temp_c",
                Kind = FeatureKind.Numeric,
                Description = "Bearing housing temperature, degrees Celsius; a missing reading is replaced by the training mean",
                Missing = MissingPolicy.Mean,
                Mean = 55, // the simulated distribution's mean; the written file carries the training rows' mean (Simulation.WithRange)
            },
            new FeatureSpec { Name = "hours_since_service", Kind = FeatureKind.Numeric, Description = "Running hours since the last bearing service" },
            new FeatureSpec
            {
                Name = "site",
                Kind = FeatureKind.Categorical,
                Description = "Group of pumping stations",
                Levels = [.. Sites],
                Reference = "north",
                Unknown = UnknownLevelPolicy.Reject,
            },
        ],
        Terms =
        [
            new TermSpec("(Intercept)", -5.6, []),
            new TermSpec("log(vibration_rms)", 1.6, [LogVibration]),
            new TermSpec("(bearing_temp_c-55)/10", 0.45, [new FactorSpec { Feature = "bearing_temp_c", Center = 55, Scale = 10 }]),
            new TermSpec("hours_since_service/1000", 0.30, [new FactorSpec { Feature = "hours_since_service", Scale = 1000 }]),
            new TermSpec("site=east", 0.25, [new FactorSpec { Feature = "site", Level = "east" }]),
            new TermSpec("site=river", 0.55, [River]),
            new TermSpec("log(vibration_rms):site=river", 0.50, [LogVibration, River]),
        ],
        Threshold = 0.15,
    };

    private static FactorSpec LogVibration => new() { Feature = "vibration_rms", Transform = TransformKind.Log };

    private static FactorSpec River => new() { Feature = "site", Level = "river" };

    public override FeatureValue[] Draw(Random rng)
    {
        // Vibration: lognormal around 2.5 mm/s (σ = 0.4 on the log scale, so roughly 0.5 to 12 mm/s).
        var vibration = Math.Round(Math.Exp(Normal.Sample(rng, Math.Log(2.5), 0.4)), 2);
        var temperature = Math.Round(Normal.Sample(rng, 55, 8), 1);

        // Hours since service: gamma with shape 2 and mean 2,400 h, kept within 0 to 8,000 h.
        double hours;
        do
        {
            hours = Gamma.Sample(rng, 2.0, 1.0 / 1200);
        }
        while (hours > 8000);

        var site = Sites[Pick(rng, SiteShares)];
        return [vibration, temperature, Math.Round(hours), site];
    }

    public override IReadOnlyList<NewRow> NewRows(Random rng)
    {
        const int count = 40;
        var rows = new List<NewRow>(count);
        for (var i = 0; i < count; i++)
        {
            var id = "PB-" + (101 + i).ToString(CultureInfo.InvariantCulture);
            var v = Draw(rng);
            string? note = null;
            switch (i)
            {
                case 4:
                case 17:
                case 29:
                    v[1] = FeatureValue.Missing;
                    note = "temperature sensor offline (empty cell)";
                    break;
                case 11:
                    v = [1.2, 47.5, 150.0, "north"];
                    note = "set by hand: bearing serviced last week, running quietly";
                    break;
                case 22:
                    v = [8.4, 71.5, 6900.0, "river"];
                    note = "set by hand: worn bearing, hot and loud";
                    break;
                case 25:
                    v[0] = 31.5;
                    note = "vibration far above anything seen in training";
                    break;
                case 34:
                    v[3] = "harbour";
                    note = "a site the model has never seen";
                    break;
                default:
                    break;
            }

            rows.Add(new NewRow(id, v, note));
        }

        return rows;
    }

    public override string Readme(Report report) => $"""
        # Pump bearings: failure within 30 days

        An invented example for Scorer. A water utility monitors the bearings of its pumps at three groups of pumping
        stations (`north`, `east` and `river`). Every month a condition snapshot is taken of each pump: the RMS vibration
        velocity at the bearing housing (mm/s), the bearing temperature (°C), and the running hours since the bearing was
        last serviced. The question is whether a bearing failure will be reported within 30 days of the snapshot
        (`failed_within_30d`; snapshots without a report count as 0, so negatives are implicit).

        **Every number here is invented.** There is no such utility and no real measurement behind any row. The
        training rows, the outcomes and the new rows were simulated by the seeded program in
        `examples/PumpBearings.Generator` (seed {Seed}), which then fitted the model written to `model.json`.
        Running the program again writes the same files.

        ## Files

        | file | contents |
        |---|---|
        | `model.json` | the fitted model, format `scorer.model/1`: logit link, terms, coefficients, covariance, threshold, training baselines |
        | `training.csv` | the {Count(report.N)} simulated training rows with the outcome column `failed_within_30d` |
        | `rows.csv` | {report.NewRows.Count} new snapshots to score, a few of them set by hand to show warnings and a row error |
        | `README.md` | this file, also written by the generator |

        ## How the data were simulated

        - `vibration_rms`: lognormal around 2.5 mm/s (σ = 0.4 on the log scale), rounded to 0.01 mm/s.
        - `bearing_temp_c`: normal with mean 55 °C and standard deviation 8 °C, rounded to 0.1 °C.
        - `hours_since_service`: gamma with shape 2 and mean 2,400 h, kept below 8,000 h, rounded to whole hours.
        - `site`: `north` 45%, `east` 35%, `river` 20%.
        - Outcome: drawn from a logistic model with the "true" coefficients below, chosen so that about 6% of snapshots
          end in a failure report. The river stations' interaction lets vibration matter more there (say, silt in the
          water). The simulated failure rate is {Percent(report.EventRate)} ({Count(report.Events)} of {Count(report.N)}).

        ## The model

        Logistic regression, fitted by Newton-Raphson (IRLS) on the training rows; the covariance in the file is
        (X'WX)⁻¹ at the optimum. With {Count(report.Events)} events the estimates land within a few standard errors
        of the truth, as they should:

        {Coefficients(report)}
        {FitSummary(report)}

        {FeatureRanges(report.Document)}
        Rows at or above the threshold of {F(report.Document.Threshold!.Value, "0.##")} are flagged (`flag` = 1) as
        candidates for an inspection within the month.

        {Commands(Folder)}

        {ExpectedScores(report)}
        A value outside the training range still gets a score, with a warning that it is an extrapolation; the unknown
        site is rejected because the model file says `"unknown": "reject"` for `site`, and a missing temperature is
        replaced by the training mean because the file says `"missing": "mean"` for `bearing_temp_c`.

        ## What the scores are for

        The scores support maintenance decisions: which pumps to inspect first. They do not replace inspection, the
        utility's maintenance and safety procedures, or the regulations that apply locally. This model was fitted to
        invented data and says nothing about real pumps.
        """;

    internal static int Pick(Random rng, double[] shares)
    {
        var u = rng.NextDouble();
        var acc = 0.0;
        for (var i = 0; i < shares.Length - 1; i++)
        {
            acc += shares[i];
            if (u < acc)
            {
                return i;
            }
        }

        return shares.Length - 1;
    }
}
