using System.Collections.Concurrent;
using System.Text.Json;
using Fleet.Data;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;
using Fleet.Grains.Registry;
using Fleet.Reports.Rendering;
using Fleet.Reports.Site;
using Microsoft.Extensions.Options;

namespace Fleet.Server.LiveView;

/// <summary>
/// The static part of a site's live view as JSON: floor, racks (from a configured site file), anchors with their
/// boresight, and the height-known HDOP and horizontal CRLB maps at tag height from the commissioning analysis
/// (<see cref="SiteGeometryAnalysis"/>: only anchors in range and in line of sight through racks count).
/// Cached per site, anchor-map version and tag height; a new anchor map version gives a new plan.
/// </summary>
internal sealed class LiveViewFloorPlans(ISiteRegistry registry, IOptions<LiveViewOptions> options, ILogger<LiveViewFloorPlans> logger)
{
    /// <summary>Colour table sent to the page for the heat map (viridis, low = dark).</summary>
    private const int PaletteSize = 64;

    private readonly ConcurrentDictionary<(string SiteId, int Version, double Height), Lazy<byte[]>> _plans = new();

    /// <summary>The plan of <paramref name="siteId"/> at <paramref name="tagHeight"/> (null: configured default), or null when the site does not exist.</summary>
    /// <exception cref="ArgumentException">The tag height is not a finite number between −10 and 100 m.</exception>
    public byte[]? Get(string siteId, double? tagHeight)
    {
        if (tagHeight is { } h && !(double.IsFinite(h) && h >= -10 && h <= 100))
        {
            throw new ArgumentException("height must be a number of metres between -10 and 100", nameof(tagHeight));
        }

        var site = registry.GetSite(siteId);
        if (site is null)
        {
            return null;
        }

        var map = site.AnchorMapVersion > 0 ? registry.GetAnchorMap(siteId, site.AnchorMapVersion) : null;
        var (height, heightSource) = tagHeight is { } given ? (given, "requested") : DefaultTagHeight(siteId);
        var key = (siteId, map?.Version ?? 0, Math.Round(height, 3));
        var lazy = _plans.GetOrAdd(key, _ => new Lazy<byte[]>(() => Build(site, map, key.Item3, heightSource)));
        return lazy.Value;
    }

    private (double Height, string Source) DefaultTagHeight(string siteId)
    {
        if (options.Value.TagHeightMetres is { } configured)
        {
            return (configured, "configured");
        }

        // Ground robots' reference point is on the floor, so the tag height is the lever arm's z.
        var heights = registry.ListRobots(siteId, null, 1000).Select(r => r.TagOffset.Z).Where(double.IsFinite).Order().ToArray();
        return heights.Length == 0 ? (0.5, "default") : (heights[heights.Length / 2], "median of registered robots");
    }

    private byte[] Build(SiteEntry site, AnchorMapEntry? map, double tagHeight, string heightSource)
    {
        var o = options.Value;
        var notes = new List<string>();
        var anchors = map?.Anchors ?? [];
        IReadOnlyList<AxisAlignedBox> racks = [];
        AxisAlignedBox? floor = null;
        string? siteFile = null;
        if (o.SiteFiles.TryGetValue(site.SiteId, out var path) && !string.IsNullOrWhiteSpace(path))
        {
            try
            {
                var file = SiteFile.Read(path);
                racks = file.Racks;
                floor = file.Floor;
                siteFile = path;
            }
            catch (FleetDataException e)
            {
                logger.LogWarning("Live view: racks of site {Site} not shown: {Message}", site.SiteId, e.Message);
                notes.Add("racks not shown: " + e.Message);
            }
        }
        else
        {
            notes.Add("racks unknown: no site file configured (Fleet:LiveView:SiteFiles:" + site.SiteId + ")");
        }

        if (anchors.Count == 0)
        {
            notes.Add("the site has no anchor map yet");
        }

        var layout = new SiteLayout(AnchorMap.Create(site.SiteId, anchors), racks, floor);
        var plan = FloorPlanScene.FloorOf(layout);
        if (floor is null && anchors.Count > 0)
        {
            // No floor given: the anchors' bounding box with a margin, so robots near the edge stay on the canvas.
            plan = new PlanRect(plan.XMin - 2, plan.YMin - 2, plan.XMax + 2, plan.YMax + 2);
            layout = layout with { Floor = new AxisAlignedBox(new Vector3D(plan.XMin, plan.YMin, 0), new Vector3D(plan.XMax, plan.YMax, 0)) };
        }

        using var stream = new MemoryStream();
        using (var json = new Utf8JsonWriter(stream))
        {
            json.WriteStartObject();
            json.WriteString("site", site.SiteId);
            json.WriteString("displayName", string.IsNullOrWhiteSpace(site.DisplayName) ? site.SiteId : site.DisplayName);
            json.WriteNumber("anchorMapVersion", map?.Version ?? 0);
            json.WriteString("siteFile", siteFile);
            json.WriteNumber("updateRateHz", o.UpdateRateHz);
            json.WriteNumber("trailSeconds", o.TrailSeconds);
            json.WritePropertyName("floor");
            WriteRect(json, plan);

            json.WriteStartArray("racks");
            foreach (var rack in racks)
            {
                WriteRect(json, new PlanRect(rack.Min.X, rack.Min.Y, rack.Max.X, rack.Max.Y), rack.Max.Z);
            }

            json.WriteEndArray();
            json.WriteStartArray("anchors");
            foreach (var anchor in anchors)
            {
                var boresight = anchor.Rotation.XAxis;
                json.WriteStartObject();
                json.WriteString("id", anchor.Id);
                Number(json, "x", anchor.Position.X);
                Number(json, "y", anchor.Position.Y);
                Number(json, "z", anchor.Position.Z);
                Number(json, "yawDeg", anchor.OrientationDegrees.X);
                Number(json, "pitchDeg", anchor.OrientationDegrees.Y);
                Number(json, "rollDeg", anchor.OrientationDegrees.Z);
                Number(json, "bx", boresight.X);
                Number(json, "by", boresight.Y);
                Number(json, "bz", boresight.Z);
                json.WriteEndObject();
            }

            json.WriteEndArray();
            Number(json, "tagHeight", tagHeight);
            json.WriteString("tagHeightSource", heightSource);
            WriteMaps(json, layout, tagHeight, o);

            json.WriteStartArray("ellipses");
            foreach (var k in new[] { 1.0, 2.0 })
            {
                json.WriteStartObject();
                json.WriteNumber("k", k);
                Number(json, "probability", CovarianceEllipse.ProbabilityInside(k));
                json.WriteEndObject();
            }

            json.WriteEndArray();
            json.WriteStartArray("notes");
            foreach (var note in notes)
            {
                json.WriteStringValue(note);
            }

            json.WriteEndArray();
            json.WriteEndObject();
        }

        return stream.ToArray();
    }

    private static void WriteMaps(Utf8JsonWriter json, SiteLayout layout, double tagHeight, LiveViewOptions o)
    {
        if (layout.Anchors.Count < 3)
        {
            json.WriteNull("grid");
            json.WriteStartArray("maps");
            json.WriteEndArray();
            return;
        }

        var geometry = SiteGeometryAnalysis.Analyse(layout, new SiteGeometryOptions
        {
            TagHeights = [tagHeight],
            GridStepMetres = o.GridStepMetres,
            SigmaToaMetres = o.SigmaToaMetres,
        });
        var at = geometry.Heights[0];
        var frame = at.Frame;
        json.WriteStartObject("grid");
        Number(json, "xMin", frame.XMin);
        Number(json, "yMin", frame.YMin);
        Number(json, "step", frame.Step);
        json.WriteNumber("nx", frame.Nx);
        json.WriteNumber("ny", frame.Ny);
        json.WriteEndObject();

        // One colour scale for both maps (CRLB = σ·HDOP), as in the commissioning report: up to twice the hole limit.
        var (min, max) = Range(at.HdopKnownHeight, geometry.Options.HdopLimit);
        var sigma = geometry.Options.SigmaToaMetres;
        json.WriteStartArray("maps");
        WriteMap(json, "hdop", "HDOP, tag height known", "m/m", "horizontal position error per metre of range noise; lower is better", at.HdopKnownHeight, min, max);
        WriteMap(json, "crlb", FormattableString.Invariant($"Horizontal CRLB RMS at σ = {sigma:0.###} m"), "m",
            "best achievable horizontal RMS error for the given single-link range noise; lower is better", at.CrlbHorizontalKnownHeight, min * sigma, max * sigma);
        json.WriteEndArray();

        json.WriteStartArray("palette");
        for (var i = 0; i < PaletteSize; i++)
        {
            json.WriteStringValue(Palette.Viridis(i / (double)(PaletteSize - 1)));
        }

        json.WriteEndArray();
        Number(json, "hdopHoleLimit", geometry.Options.HdopLimit);
    }

    private static void WriteMap(Utf8JsonWriter json, string key, string label, string unit, string meaning, double[,] values, double min, double max)
    {
        json.WriteStartObject();
        json.WriteString("key", key);
        json.WriteString("label", label);
        json.WriteString("unit", unit);
        json.WriteString("meaning", meaning);
        Number(json, "min", min);
        Number(json, "max", max);
        json.WriteStartArray("values");
        for (var iy = 0; iy < values.GetLength(0); iy++)
        {
            for (var ix = 0; ix < values.GetLength(1); ix++)
            {
                var v = values[iy, ix];
                if (double.IsFinite(v))
                {
                    json.WriteNumberValue(Math.Round(v, 4));
                }
                else
                {
                    json.WriteNullValue();
                }
            }
        }

        json.WriteEndArray();
        json.WriteEndObject();
    }

    private static (double Min, double Max) Range(double[,] map, double limit)
    {
        var values = map.Cast<double>().Where(double.IsFinite).ToArray();
        if (values.Length == 0)
        {
            return (0, 1);
        }

        var min = Math.Floor(values.Min() * 10) / 10;
        var max = Math.Ceiling(Math.Min(values.Max(), 2 * limit) * 10) / 10;
        return (min, Math.Max(max, min + 0.1));
    }

    private static void WriteRect(Utf8JsonWriter json, PlanRect rect, double? height = null)
    {
        json.WriteStartObject();
        Number(json, "xMin", rect.XMin);
        Number(json, "yMin", rect.YMin);
        Number(json, "xMax", rect.XMax);
        Number(json, "yMax", rect.YMax);
        if (height is { } h)
        {
            Number(json, "height", h);
        }

        json.WriteEndObject();
    }

    private static void Number(Utf8JsonWriter json, string name, double value)
    {
        if (double.IsFinite(value))
        {
            json.WriteNumber(name, Math.Round(value, 6));
        }
        else
        {
            json.WriteNull(name);
        }
    }
}
