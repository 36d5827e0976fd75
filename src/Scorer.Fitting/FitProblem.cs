namespace Scorer.Fitting;

/// <summary>Why a fit cannot be made or trusted; <see cref="Subject"/> names the column, term or level concerned.</summary>
public sealed record FitProblem(string Subject, string Reason)
{
    public override string ToString() => Subject.Length == 0 ? Reason : $"{Subject}: {Reason}";
}

/// <summary>Thrown when the data or the design cannot give a valid fit; lists every problem found.</summary>
public sealed class FitException(IReadOnlyList<FitProblem> problems)
    : Exception("The model cannot be fitted:" + Environment.NewLine + string.Join(Environment.NewLine, problems.Select(p => "  " + p)))
{
    public IReadOnlyList<FitProblem> Problems { get; } = problems;

    public FitException(string subject, string reason)
        : this([new FitProblem(subject, reason)])
    {
    }
}
