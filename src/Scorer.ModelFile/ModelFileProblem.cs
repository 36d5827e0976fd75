namespace Scorer.ModelFile;

public enum ProblemSeverity
{
    Error,
    Warning,
}

/// <summary>One problem found in a model file: where (a JSON path such as <c>$.terms[2].factors[0].level</c>) and why.</summary>
public sealed record ModelFileProblem(string Path, string Reason, ProblemSeverity Severity = ProblemSeverity.Error, string? Hint = null)
{
    public override string ToString()
    {
        var kind = Severity == ProblemSeverity.Error ? "error" : "warning";
        return Hint is null ? $"{kind} {Path}: {Reason}" : $"{kind} {Path}: {Reason} ({Hint})";
    }
}

/// <summary>A bound of the reader (<see cref="ModelFileReaderOptions"/>) that a file broke.</summary>
public enum ModelFileLimit
{
    /// <summary><see cref="ModelFileReaderOptions.MaxBytes"/>.</summary>
    Bytes,

    /// <summary><see cref="ModelFileReaderOptions.MaxTerms"/> (terms, covariance rows or entries of a row).</summary>
    Terms,
}

/// <summary>What loading a model file gave: the document when it is valid, and every problem found.</summary>
public sealed record ModelFileLoadResult(ModelDocument? Document, IReadOnlyList<ModelFileProblem> Problems)
{
    /// <summary>The bound the file broke, when it was refused for its size rather than for what it says.</summary>
    public ModelFileLimit? Limit { get; init; }

    public bool IsValid => Document is not null;
    public IEnumerable<ModelFileProblem> Errors => Problems.Where(p => p.Severity == ProblemSeverity.Error);
    public IEnumerable<ModelFileProblem> Warnings => Problems.Where(p => p.Severity == ProblemSeverity.Warning);
}

/// <summary>Thrown by <see cref="ModelFileReader.ReadValid(Stream, ModelFileReaderOptions?)"/> when a file has errors; lists them all.</summary>
public sealed class ModelFileException(IReadOnlyList<ModelFileProblem> problems)
    : Exception("The model file is invalid:" + Environment.NewLine + string.Join(Environment.NewLine, problems.Select(p => "  " + p)))
{
    public IReadOnlyList<ModelFileProblem> Problems { get; } = problems;
}
