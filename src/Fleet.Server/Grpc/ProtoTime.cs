using Google.Protobuf.WellKnownTypes;

namespace Fleet.Server.Grpc;

/// <summary>
/// Site-clock seconds (the filter's time axis) ↔ <see cref="Timestamp"/>: a Timestamp is seconds since the Unix epoch,
/// and so is site time. A double keeps ~0.2 µs resolution at present-day epochs, far finer than UWB timing needs.
/// </summary>
internal static class ProtoTime
{
    public static double ToSeconds(Timestamp? t) => t is null ? double.NaN : t.Seconds + (t.Nanos * 1e-9);

    public static Timestamp FromSeconds(double seconds)
    {
        var whole = Math.Floor(seconds);
        var nanos = (int)Math.Round((seconds - whole) * 1e9);
        if (nanos >= 1_000_000_000)
        {
            whole += 1;
            nanos -= 1_000_000_000;
        }

        return new Timestamp { Seconds = (long)whole, Nanos = nanos };
    }

    public static Timestamp FromDateTime(DateTimeOffset time) => Timestamp.FromDateTimeOffset(time);
}
