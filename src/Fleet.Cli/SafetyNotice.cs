namespace Fleet.Cli;

/// <summary>The caution printed at start-up by every command that produces poses.</summary>
internal static class SafetyNotice
{
    public const string Text =
        "CAUTION: Fleet is not a safety system. Its poses support traffic coordination only; people protection relies on "
        + "certified safety functions on the vehicles, local codes and licensed practice (see ISO 3691-4).";
}
