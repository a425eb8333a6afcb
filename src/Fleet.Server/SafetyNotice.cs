namespace Fleet.Server;

/// <summary>The caution every start of the server logs, and the README repeats.</summary>
public static class SafetyNotice
{
    public const string Text =
        "CAUTION: Fleet is not a safety system. Its poses support traffic coordination only; people protection relies on "
        + "certified safety functions on the vehicles, local codes and licensed practice (see ISO 3691-4).";
}
