namespace Fleet.Data;

public enum DiagnosticSeverity
{
    Warning,
    Error,
}

/// <summary>One finding about an input file, located by its 1-based line (0 when no line applies).</summary>
public sealed record DataDiagnostic(string Source, long Line, DiagnosticSeverity Severity, string Message)
{
    /// <summary><c>path:line: message</c>, the form compilers use so editors can jump to it.</summary>
    public override string ToString() => Line > 0 ? $"{Source}:{Line}: {Message}" : $"{Source}: {Message}";
}

/// <summary>
/// A file Fleet could not read. <see cref="Exception.Message"/> lists every error, one <c>path:line: message</c> per line.
/// </summary>
public sealed class FleetDataException : Exception
{
    public FleetDataException(IReadOnlyList<DataDiagnostic> errors, Exception? inner = null)
        : base(string.Join(Environment.NewLine, errors), inner)
    {
        Errors = errors;
    }

    public FleetDataException(DataDiagnostic error, Exception? inner = null)
        : this([error], inner)
    {
    }

    public IReadOnlyList<DataDiagnostic> Errors { get; }
}
