using System.Globalization;
using MathNet.Numerics.Distributions;
using Scorer.Engine.Scoring;
using Scorer.ModelFile;
using static PumpBearings.Generator.ReadmeParts;

namespace PumpBearings.Generator;

/// <summary>
/// Invented scenario: card-not-present payments and whether a chargeback is filed within 90 days. A rare event, so the
/// complementary log-log link.
/// </summary>
internal sealed class CardPaymentsScenario : Scenario
{
    private static readonly string[] Categories = ["grocery", "travel", "electronics", "digital_goods"];
    private static readonly double[] CategoryShares = [0.40, 0.15, 0.20, 0.25];

    // Relative share of payments by hour of day, 00 to 23: quiet at night, busiest in the evening.
    private static readonly double[] HourShares =
        [1, 0.7, 0.5, 0.4, 0.4, 0.5, 1, 2, 3.5, 4.5, 5, 5.5, 6, 5.5, 5, 5, 5.5, 6, 6.5, 6.5, 6, 5, 3.5, 2];

    public override string Folder => "card-payments";

    public override int Seed => 20261102;

    public override int TrainingRows => 12000;

    public override string TrainingIdColumn => "record_id";

    public override string NewRowIdColumn => "payment_id";

    public override ModelDocument Template { get; } = new()
    {
        Format = ModelDocument.FormatV1,
        Model = "card-chargeback",
        Version = "2026.11.1",
        Description = "Invented demo model: probability that a card-not-present payment draws a chargeback within 90 days, " +
            "from the amount, the merchant category, the hour of day and whether the payment came from a device not seen before. " +
            "Complementary log-log link for a rare event. Fitted by examples/PumpBearings.Generator to simulated data; every number is invented. " +
            "Scores support review decisions; they do not replace fraud rules or the regulations that apply locally.",
        Link = LinkKind.CLogLog,
        Outcome = new OutcomeSpec("chargeback_within_90d", "chargeback filed within 90 days of the payment", "P90D", NegativesPolicy.Implicit),
        Features =
        [
            new FeatureSpec { Name = "amount", Kind = FeatureKind.Numeric, Description = "Payment amount in the account currency" },
            new FeatureSpec
            {
                Name = "merchant_category",
                Kind = FeatureKind.Categorical,
                Description = "Merchant category of the payee",
                Levels = [.. Categories],
                Reference = "grocery",
                Unknown = UnknownLevelPolicy.Reject,
            },
            new FeatureSpec { Name = "hour_of_day", Kind = FeatureKind.Numeric, Description = "Local hour of the payment, 0 to 23" },
            new FeatureSpec { Name = "new_device", Kind = FeatureKind.Numeric, Description = "1 when the payment came from a device not seen before on the card, else 0" },
        ],
        Terms =
        [
            new TermSpec("(Intercept)", -5.1, []),
            new TermSpec("log(amount)-3.8", 0.35, [new FactorSpec { Feature = "amount", Transform = TransformKind.Log, Center = 3.8 }]),
            new TermSpec("merchant_category=travel", 0.6, [Category("travel")]),
            new TermSpec("merchant_category=electronics", 0.9, [Category("electronics")]),
            new TermSpec("merchant_category=digital_goods", 1.2, [Category("digital_goods")]),
            new TermSpec("(hour_of_day-13)/6", -0.1, [Hour]),
            new TermSpec("((hour_of_day-13)/6)^2", 0.45, [Hour, Hour]),
            new TermSpec("new_device", 1.1, [new FactorSpec { Feature = "new_device" }]),
        ],
        Threshold = 0.10,
    };

    private static FactorSpec Hour => new() { Feature = "hour_of_day", Center = 13, Scale = 6 };

    private static FactorSpec Category(string level) => new() { Feature = "merchant_category", Level = level };

    public override FeatureValue[] Draw(Random rng)
    {
        // Amount: lognormal around 45 (σ = 1 on the log scale), in cents, at least 1.00.
        double amount;
        do
        {
            amount = Math.Round(Math.Exp(Normal.Sample(rng, Math.Log(45), 1.0)), 2);
        }
        while (amount < 1.0);

        var category = PumpBearingsScenario.Pick(rng, CategoryShares);
        var hour = Categorical.Sample(rng, HourShares);

        // New devices are a little more common for digital goods.
        var newDevice = rng.NextDouble() < (Categories[category] == "digital_goods" ? 0.18 : 0.10) ? 1.0 : 0.0;
        return [amount, Categories[category], (double)hour, newDevice];
    }

    public override IReadOnlyList<NewRow> NewRows(Random rng)
    {
        const int count = 40;
        var rows = new List<NewRow>(count);
        for (var i = 0; i < count; i++)
        {
            var id = "CNP-" + (2001 + i).ToString(CultureInfo.InvariantCulture);
            var v = Draw(rng);
            string? note = null;
            switch (i)
            {
                case 6:
                    v = [38.2, "grocery", 11.0, 0.0];
                    note = "set by hand: weekly groceries at midday from a known device";
                    break;
                case 15:
                    v = [640.0, "digital_goods", 3.0, 1.0];
                    note = "set by hand: gift cards at 3 a.m. from a new device";
                    break;
                case 21:
                    v[0] = 25000.0;
                    v[1] = "travel";
                    note = "amount far above anything seen in training";
                    break;
                case 28:
                    v[1] = "crypto_exchange";
                    note = "a merchant category the model has never seen";
                    break;
                case 33:
                    v[2] = FeatureValue.Missing;
                    note = "hour of day not recorded (empty cell)";
                    break;
                default:
                    break;
            }

            rows.Add(new NewRow(id, v, note));
        }

        return rows;
    }

    public override string Readme(Report report) => $"""
        # Card-not-present payments: chargeback within 90 days

        A second invented example for Scorer. A card issuer scores card-not-present payments (online and by phone) for
        the chance that the payment draws a chargeback within 90 days (`chargeback_within_90d`; payments without a
        chargeback count as 0, so negatives are implicit). The features are the amount, the merchant category
        (`grocery`, `travel`, `electronics`, `digital_goods`), the local hour of day, and whether the payment came from a
        device not seen before on the card (`new_device`, 0 or 1).

        **Every number here is invented.** There is no such issuer and no real payment behind any row. The training
        rows, the outcomes and the new rows were simulated by the seeded program in `examples/PumpBearings.Generator`
        (seed {Seed}), which then fitted the model written to `model.json`. Running the program again writes the same
        files.

        ## Files

        | file | contents |
        |---|---|
        | `model.json` | the fitted model, format `scorer.model/1`: complementary log-log link, terms, coefficients, covariance, threshold, training baselines |
        | `training.csv` | the {Count(report.N)} simulated training payments with the outcome column `chargeback_within_90d` |
        | `rows.csv` | {report.NewRows.Count} new payments to score, a few of them set by hand to show a warning and row errors |
        | `README.md` | this file, also written by the generator |

        ## How the data were simulated

        - `amount`: lognormal around 45 (σ = 1 on the log scale), rounded to cents, at least 1.00.
        - `merchant_category`: `grocery` 40%, `travel` 15%, `electronics` 20%, `digital_goods` 25%.
        - `hour_of_day`: whole hours, quiet at night and busiest in the early evening.
        - `new_device`: 1 for 10% of payments, 18% for digital goods.
        - Outcome: drawn from a complementary log-log model, P = 1 − exp(−exp(η)), with the "true" coefficients below,
          chosen so that about 2.5% of payments draw a chargeback. The hour enters as a quadratic around 13:00, so
          night-time payments are riskier. The simulated chargeback rate is {Percent(report.EventRate)}
          ({Count(report.Events)} of {Count(report.N)}).

        ## The model

        A binary GLM with the complementary log-log link, fitted by Fisher scoring (IRLS with weights
        (dμ/dη)² / (μ(1 − μ))); the covariance in the file is (X'WX)⁻¹ at the optimum. The link suits a rare event: for
        small probabilities it is close to a Poisson rate model, so exp(coefficient) reads as a rate ratio.

        {Coefficients(report)}
        {FitSummary(report)}

        {FeatureRanges(report.Document)}
        Payments at or above the threshold of {F(report.Document.Threshold!.Value, "0.##")} are flagged (`flag` = 1)
        for review.

        {Commands(Folder)}

        {ExpectedScores(report)}
        The amount far above the training range still gets a score, with a warning that it is an extrapolation. The
        unknown merchant category and the missing hour are rejected because the model file says `"unknown": "reject"`
        and `"missing": "reject"` for them.

        ## What the scores are for

        The scores support review decisions: which payments to look at first. They do not replace the issuer's fraud
        rules, chargeback procedures, or the card scheme rules and regulations that apply locally. This model was fitted
        to invented data and says nothing about real payments.
        """;
}
