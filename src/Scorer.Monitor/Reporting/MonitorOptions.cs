namespace Scorer.Monitor.Reporting;

/// <summary>The monitor's settings (<c>Scorer:Monitor</c>). Every rule of the status has its threshold here; docs/monitoring.md lists them.</summary>
public sealed record MonitorOptions
{
    /// <summary>Windows of prediction time by name; "all" is every prediction. Defaults 24h, 7d, 30d and all.</summary>
    public Dictionary<string, TimeSpan?> Windows { get; init; } = new(StringComparer.Ordinal)
    {
        ["24h"] = TimeSpan.FromHours(24),
        ["7d"] = TimeSpan.FromDays(7),
        ["30d"] = TimeSpan.FromDays(30),
        ["all"] = null,
    };

    /// <summary>The window a report uses when none is asked for. Default 7d.</summary>
    public string DefaultWindow { get; init; } = "7d";

    /// <summary>Confidence level of every interval. Default 0.95.</summary>
    public double Level { get; init; } = 0.95;

    /// <summary>The window whose statistics decide the status. Default 30d.</summary>
    public string JudgedWindow { get; init; } = "30d";

    /// <summary>Events (and non-events) a window needs before calibration and discrimination are judged. Default 50 of each.</summary>
    public int MinEvents { get; init; } = 50;

    /// <summary>The calibration slope's interval must not lie wholly outside 1 ± this. Default 0.2.</summary>
    public double SlopeTolerance { get; init; } = 0.2;

    /// <summary>The observed/expected interval must not lie wholly outside 1 ± this. Default 0.2.</summary>
    public double ObservedExpectedTolerance { get; init; } = 0.2;

    /// <summary>PSI above this is a moderate shift (watch). Default 0.1 (common practice).</summary>
    public double PsiModerate { get; init; } = 0.1;

    /// <summary>PSI above this is a large shift (refit due). Default 0.25 (common practice).</summary>
    public double PsiLarge { get; init; } = 0.25;

    /// <summary>Rows a window needs before its PSI is judged. Default 500.</summary>
    public int MinPsiRows { get; init; } = 500;

    /// <summary>The AUC's upper interval end below this means discrimination has fallen (refit due). Default 0.6; set it per model.</summary>
    public double AucFloor { get; init; } = 0.6;

    /// <summary>Per-model overrides of <see cref="AucFloor"/>.</summary>
    public Dictionary<string, double> AucFloors { get; init; } = new(StringComparer.Ordinal);

    /// <summary>Odds ratio the upward CUSUM looks for. Default 2.</summary>
    public double CusumUpOddsRatio { get; init; } = 2.0;

    /// <summary>Odds ratio the downward CUSUM looks for. Default 0.5.</summary>
    public double CusumDownOddsRatio { get; init; } = 0.5;

    /// <summary>
    /// The least in-control average run length the CUSUM thresholds are set for: labelled predictions per false alarm.
    /// Default 100,000. The thresholds are set for the larger of this and <see cref="CusumFalseAlarmDays"/> at the
    /// observed outcome rate.
    /// </summary>
    public double CusumRunLength { get; init; } = 100_000;

    /// <summary>
    /// The charts' false-alarm budget in time: one false alarm per chart per this many days of prediction time at the
    /// observed outcome rate (over the last week of prediction time, <see cref="Scorer.Statistics.Sequential.OutcomeRate"/>). Default 3,650 (one per chart per ten years: a right model is "watch" from a false alarm in about 1.6% of 30-day judged windows); 0 sets the thresholds from
    /// <see cref="CusumRunLength"/> alone.
    /// </summary>
    public double CusumFalseAlarmDays { get; init; } = 3_650;

    /// <summary>
    /// The most recent signals each chart keeps for the report, the status and the page; older ones are counted
    /// (<c>signalCount</c>, <c>scorer_monitor_cusum_signals_total</c>) but not kept. Default 1,000: a chart left
    /// signalling for weeks in a drift does not grow its state, its saves or the report.
    /// </summary>
    public int CusumSignalsKept { get; init; } = 1_000;

    /// <summary>
    /// The most recent labelled pairs a shadow comparison uses per window (live and shadow predictions of the same rows).
    /// Default 1,000,000 (about 40 MB while a report runs); a window holding more is compared over its latest pairs, and
    /// says so (<c>capped</c>).
    /// </summary>
    public int ShadowPairs { get; init; } = 1_000_000;

    /// <summary>
    /// The most recent labelled predictions of the window a recalibration is fitted on (9 bytes each while it runs).
    /// Default 2,000,000.
    /// </summary>
    public int RecalibrationRows { get; init; } = 2_000_000;

    /// <summary>Labelled predictions the charts read from the store in one page while they catch up (one page is held at a time). Default 50,000.</summary>
    public int ChartPageRows { get; init; } = 50_000;

    /// <summary>The last outcomes whose CUSUM values each chart keeps exactly for drawing its path. Default 256.</summary>
    public int CusumPathTail { get; init; } = 256;

    /// <summary>
    /// Days of prediction time over which each chart keeps, per hour, its lowest and highest value for drawing its path
    /// (before the exact tail). Default 30, the longest window; a path asked for over a longer one starts there.
    /// </summary>
    public int CusumPathDays { get; init; } = 30;

    /// <summary>How many of the most recent labelled probabilities the thresholds are computed from. Default 2,000.</summary>
    public int CusumSample { get; init; } = 2_000;

    /// <summary>Labelled predictions needed before the charts start (to set their thresholds). Default 200.</summary>
    public int CusumMinSample { get; init; } = 200;

    /// <summary>The thresholds are set again when the PSI of recent probabilities against the sample they came from exceeds this. Default 0.1.</summary>
    public double CusumResampleShift { get; init; } = 0.1;

    /// <summary>EWMA weight of each outcome. Default 0.01 (common practice: 0.005 to 0.02).</summary>
    public double EwmaLambda { get; init; } = 0.01;

    /// <summary>EWMA control limit in standard deviations. Default 3 (common practice).</summary>
    public double EwmaLimit { get; init; } = 3.0;

    /// <summary>How often every version's reports are refreshed for the metrics, the page and the event streams. Default 15 s.</summary>
    public TimeSpan ReportInterval { get; init; } = TimeSpan.FromSeconds(15);

    /// <summary>Where status changes are posted as JSON (optional); retried with backoff.</summary>
    public Uri? Webhook { get; init; }

    /// <summary>How often the charts and the implicit negatives catch up with the store. Default 1 s.</summary>
    public TimeSpan PollInterval { get; init; } = TimeSpan.FromSeconds(1);

    /// <summary>
    /// A window with at most this many labelled predictions (all of them in the row cache) is reported exactly over its
    /// rows; a larger one, or one reaching back past what the cache holds, is merged from the stored summaries. The row
    /// cache holds at most this many rows per version (plus a quarter before it evicts the oldest). Default 1,000,000.
    /// </summary>
    public int ExactRows { get; init; } = 1_000_000;

    /// <summary>Summary buckets are an hour long for predictions younger than this, a (UTC) day long after. Default 2 days.</summary>
    public TimeSpan HourlyBucketsFor { get; init; } = TimeSpan.FromDays(2);

    /// <summary>Summary buckets older than this are deleted (null: kept, a day each, for the "all" window). Default null.</summary>
    public TimeSpan? SummaryRetention { get; init; }

    /// <summary>Changes of the labelled feed the summaries take in per page (one save each). Default 50,000.</summary>
    public int SummaryPageRows { get; init; } = 50_000;

    public double AucFloorOf(string model) => AucFloors.TryGetValue(model, out var floor) ? floor : AucFloor;

    /// <summary>Every problem of the settings, each naming the setting.</summary>
    public IReadOnlyList<string> Validate()
    {
        var problems = new List<string>();
        if (!(Level > 0 && Level < 1))
        {
            problems.Add("Scorer:Monitor:Level must be strictly between 0 and 1.");
        }

        if (!Windows.ContainsKey(DefaultWindow))
        {
            problems.Add($"Scorer:Monitor:DefaultWindow '{DefaultWindow}' is not one of Scorer:Monitor:Windows ({string.Join(", ", Windows.Keys)}).");
        }

        if (!Windows.ContainsKey(JudgedWindow))
        {
            problems.Add($"Scorer:Monitor:JudgedWindow '{JudgedWindow}' is not one of Scorer:Monitor:Windows ({string.Join(", ", Windows.Keys)}).");
        }

        foreach (var (name, span) in Windows)
        {
            if (span is { } s && s <= TimeSpan.Zero)
            {
                problems.Add($"Scorer:Monitor:Windows:{name} must be a positive duration.");
            }
        }

        if (ReportInterval < TimeSpan.FromMilliseconds(100) || PollInterval < TimeSpan.FromMilliseconds(10))
        {
            problems.Add("Scorer:Monitor:ReportInterval must be at least 100 ms and Scorer:Monitor:PollInterval at least 10 ms.");
        }

        if (ExactRows < 0 || SummaryPageRows < 1)
        {
            problems.Add("Scorer:Monitor:ExactRows must be 0 or more and Scorer:Monitor:SummaryPageRows at least 1.");
        }

        if (HourlyBucketsFor < TimeSpan.Zero || SummaryRetention is { } r && r <= TimeSpan.Zero)
        {
            problems.Add("Scorer:Monitor:HourlyBucketsFor must not be negative and Scorer:Monitor:SummaryRetention must be positive when given.");
        }

        if (Webhook is { } hook && !(hook.IsAbsoluteUri && (hook.Scheme == Uri.UriSchemeHttp || hook.Scheme == Uri.UriSchemeHttps)))
        {
            problems.Add("Scorer:Monitor:Webhook must be an absolute http or https URL.");
        }

        if (CusumUpOddsRatio <= 1)
        {
            problems.Add("Scorer:Monitor:CusumUpOddsRatio must be above 1.");
        }

        if (CusumDownOddsRatio is <= 0 or >= 1)
        {
            problems.Add("Scorer:Monitor:CusumDownOddsRatio must be between 0 and 1.");
        }

        if (CusumRunLength < 10)
        {
            problems.Add("Scorer:Monitor:CusumRunLength must be at least 10.");
        }

        if (!(CusumFalseAlarmDays >= 0) || double.IsInfinity(CusumFalseAlarmDays))
        {
            problems.Add("Scorer:Monitor:CusumFalseAlarmDays must be 0 (off) or a positive number of days.");
        }

        if (EwmaLambda is <= 0 or >= 1)
        {
            problems.Add("Scorer:Monitor:EwmaLambda must be between 0 and 1.");
        }

        if (PsiModerate <= 0 || PsiLarge <= PsiModerate)
        {
            problems.Add("Scorer:Monitor:PsiModerate must be positive and below Scorer:Monitor:PsiLarge.");
        }

        if (RecalibrationRows < 100 || RecalibrationRows > 100_000_000)
        {
            problems.Add("Scorer:Monitor:RecalibrationRows must be 100 to 100,000,000.");
        }

        if (ChartPageRows < 1 || ChartPageRows > 10_000_000)
        {
            problems.Add("Scorer:Monitor:ChartPageRows must be 1 to 10,000,000.");
        }

        if (ShadowPairs < 100 || ShadowPairs > 100_000_000)
        {
            problems.Add("Scorer:Monitor:ShadowPairs must be 100 to 100,000,000.");
        }

        if (CusumSignalsKept < 1)
        {
            problems.Add("Scorer:Monitor:CusumSignalsKept must be at least 1.");
        }

        if (CusumPathTail < 2 || CusumPathTail > 100_000 || CusumPathDays < 1 || CusumPathDays > 3_660)
        {
            problems.Add("Scorer:Monitor:CusumPathTail must be 2 to 100,000 and Scorer:Monitor:CusumPathDays 1 to 3,660.");
        }

        if (MinEvents < 1 || CusumMinSample < 10 || CusumSample < CusumMinSample)
        {
            problems.Add("Scorer:Monitor:MinEvents must be at least 1, CusumMinSample at least 10, and CusumSample at least CusumMinSample.");
        }

        return problems;
    }
}
