namespace Fleet.Estimation.Anchors;

public enum IssueSeverity
{
    Warning,
    Error,
}

/// <summary>Stable machine-readable codes for anchor-map problems.</summary>
public enum AnchorMapIssueCode
{
    EmptyId,
    DuplicateId,
    NonFiniteValue,
    CoincidentAnchors,
    TooFewAnchors,
    SmallVerticalSpread,
    CollinearOrCoplanar,
}

/// <summary>One finding of anchor-map validation. <see cref="AnchorIds"/> names the anchors concerned.</summary>
public sealed record AnchorMapIssue(IssueSeverity Severity, AnchorMapIssueCode Code, string Message, IReadOnlyList<string> AnchorIds)
{
    public override string ToString() => $"{Severity.ToString().ToLowerInvariant()}: {Message}";
}
