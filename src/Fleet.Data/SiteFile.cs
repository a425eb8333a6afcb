using System.Globalization;
using System.Text;
using System.Text.Json;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Data;

/// <summary>
/// Reads and writes site files (DESIGN.md "Site file"): JSON, or YAML when the name ends in .yaml/.yml.
/// <code>
/// { "site": "harbor-tall",
///   "anchors": [ { "id": "HP-A01", "position": [0.3, 0.3, 9.5], "orientation_deg": [32, 25, 0], "antenna_delay_m": 0.0 } ],
///   "racks": [ { "min": [4, 7.5, 0], "max": [11.5, 8.7, 6.5] } ],
///   "floor": { "min": [0, 0, 0], "max": [40, 25, 0] } }
/// </code>
/// Required: <c>site</c>, <c>anchors</c> and per anchor <c>id</c>, <c>position</c> (m, site frame) and
/// <c>orientation_deg</c> (yaw, pitch, roll). Optional: <c>antenna_delay_m</c> (default 0), <c>racks</c>, <c>floor</c>.
/// Unknown fields are ignored, so files may carry notes or fields of later versions.
/// Every problem found (syntax, missing or mistyped fields, non-finite numbers, anchor-map validation errors such as
/// duplicate ids) is reported together in one <see cref="FleetDataException"/> as <c>path:line: message</c>.
/// </summary>
public static class SiteFile
{
    /// <summary>Reads a site file; the format follows the extension (.yaml/.yml → YAML, anything else → JSON).</summary>
    public static SiteLayout Read(string path)
    {
        byte[] bytes;
        try
        {
            bytes = File.ReadAllBytes(path);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            throw new FleetDataException(new DataDiagnostic(path, 0, DiagnosticSeverity.Error, "cannot read the file: " + e.Message), e);
        }

        return IsYaml(path) ? ParseYaml(Encoding.UTF8.GetString(bytes), path) : ParseJson(bytes, path);
    }

    /// <summary>Parses JSON text; <paramref name="source"/> names it in messages.</summary>
    public static SiteLayout ParseJson(string json, string source = "<json>") => ParseJson(Encoding.UTF8.GetBytes(json), source);

    public static SiteLayout ParseJson(byte[] utf8, string source = "<json>") => Map(DataNode.ParseJson(utf8, source), source);

    /// <summary>Parses YAML text; <paramref name="source"/> names it in messages.</summary>
    public static SiteLayout ParseYaml(string yaml, string source = "<yaml>") => Map(DataNode.ParseYaml(yaml, source), source);

    /// <summary>Writes <paramref name="layout"/> as JSON to <paramref name="path"/> (YAML is read but not written).</summary>
    public static void Write(string path, SiteLayout layout) => File.WriteAllText(path, ToJson(layout), new UTF8Encoding(false));

    /// <summary>
    /// Stable JSON text: two-space indent, one anchor or rack per line, fields in a fixed order, numbers in invariant
    /// culture with round-trip precision, <c>antenna_delay_m</c> only when non-zero.
    /// </summary>
    public static string ToJson(SiteLayout layout)
    {
        var sb = new StringBuilder();
        sb.Append("{\n  \"site\": ").Append(Quote(layout.SiteId)).Append(",\n  \"anchors\": [");
        var anchors = layout.Anchors.Anchors;
        for (var i = 0; i < anchors.Count; i++)
        {
            var a = anchors[i];
            sb.Append(i == 0 ? "\n" : ",\n");
            sb.Append("    { \"id\": ").Append(Quote(a.Id))
                .Append(", \"position\": ").Append(Triple(a.Position))
                .Append(", \"orientation_deg\": ").Append(Triple(a.OrientationDegrees));
            if (a.AntennaDelayMetres != 0)
            {
                sb.Append(", \"antenna_delay_m\": ").Append(Number(a.AntennaDelayMetres));
            }

            sb.Append(" }");
        }

        sb.Append(anchors.Count > 0 ? "\n  ]" : "]");
        if (layout.Racks.Count > 0)
        {
            sb.Append(",\n  \"racks\": [");
            for (var i = 0; i < layout.Racks.Count; i++)
            {
                sb.Append(i == 0 ? "\n" : ",\n").Append("    ").Append(Box(layout.Racks[i]));
            }

            sb.Append("\n  ]");
        }

        if (layout.Floor is { } floor)
        {
            sb.Append(",\n  \"floor\": ").Append(Box(floor));
        }

        sb.Append("\n}\n");
        return sb.ToString();
    }

    private static bool IsYaml(string path) =>
        path.EndsWith(".yaml", StringComparison.OrdinalIgnoreCase) || path.EndsWith(".yml", StringComparison.OrdinalIgnoreCase);

    private static string Quote(string s) => JsonSerializer.Serialize(s);

    private static string Number(double v) => v.ToString("R", CultureInfo.InvariantCulture);

    private static string Triple(Vector3D v) => $"[{Number(v.X)}, {Number(v.Y)}, {Number(v.Z)}]";

    private static string Box(AxisAlignedBox b) => $"{{ \"min\": {Triple(b.Min)}, \"max\": {Triple(b.Max)} }}";

    private static SiteLayout Map(DataNode root, string source)
    {
        var errors = new List<DataDiagnostic>();
        void Error(long line, string message) => errors.Add(new DataDiagnostic(source, line, DiagnosticSeverity.Error, message));

        if (root.Kind != DataNodeKind.Object)
        {
            throw new FleetDataException(new DataDiagnostic(source, root.Line, DiagnosticSeverity.Error, $"a site file must be an object, found {DataNode.KindName(root.Kind)}"));
        }

        var site = root.Property("site");
        string siteId = string.Empty;
        if (site is null)
        {
            Error(root.Line, "missing field 'site'");
        }
        else if (site.Kind != DataNodeKind.String || string.IsNullOrWhiteSpace(site.Text))
        {
            Error(site.Line, "'site' must be a non-empty string");
        }
        else
        {
            siteId = site.Text;
        }

        var anchors = new List<Anchor>();
        var anchorLines = new List<long>();
        var anchorsNode = root.Property("anchors");
        if (anchorsNode is null)
        {
            Error(root.Line, "missing field 'anchors'");
        }
        else if (anchorsNode.Kind != DataNodeKind.Array)
        {
            Error(anchorsNode.Line, $"'anchors' must be an array, found {DataNode.KindName(anchorsNode.Kind)}");
        }
        else
        {
            for (var i = 0; i < anchorsNode.Items.Count; i++)
            {
                var node = anchorsNode.Items[i];
                var where = $"anchors[{i}]";
                if (node.Kind != DataNodeKind.Object)
                {
                    Error(node.Line, $"{where} must be an object, found {DataNode.KindName(node.Kind)}");
                    continue;
                }

                var idNode = node.Property("id");
                string? id = null;
                if (idNode is null)
                {
                    Error(node.Line, $"{where}: missing field 'id'");
                }
                else if (idNode.Kind is DataNodeKind.String or DataNodeKind.Number && !string.IsNullOrWhiteSpace(idNode.Text))
                {
                    id = idNode.Text;
                    where = $"anchor '{id}'";
                }
                else
                {
                    Error(idNode.Line, $"{where}: 'id' must be a non-empty string");
                }

                var position = RequiredVector(node, "position", where, Error);
                var orientation = RequiredVector(node, "orientation_deg", where, Error);
                var delay = 0.0;
                if (node.Property("antenna_delay_m") is { } delayNode)
                {
                    delay = FiniteNumber(delayNode, $"{where}: 'antenna_delay_m'", Error) ?? 0.0;
                }

                if (id is not null && position is not null && orientation is not null)
                {
                    anchors.Add(new Anchor(id, position.Value, orientation.Value, delay));
                    anchorLines.Add(node.Line);
                }
            }
        }

        var racks = new List<AxisAlignedBox>();
        if (root.Property("racks") is { } racksNode)
        {
            if (racksNode.Kind != DataNodeKind.Array)
            {
                Error(racksNode.Line, $"'racks' must be an array, found {DataNode.KindName(racksNode.Kind)}");
            }
            else
            {
                for (var i = 0; i < racksNode.Items.Count; i++)
                {
                    if (ReadBox(racksNode.Items[i], $"racks[{i}]", Error) is { } box)
                    {
                        racks.Add(box);
                    }
                }
            }
        }

        AxisAlignedBox? floor = null;
        if (root.Property("floor") is { } floorNode)
        {
            floor = ReadBox(floorNode, "floor", Error);
        }

        // Anchor-map validation (duplicate ids, coincident anchors…), each error located at the anchor it names.
        foreach (var issue in AnchorMap.Validate(anchors))
        {
            if (issue.Severity == IssueSeverity.Error)
            {
                Error(LineOfIssue(issue, anchors, anchorLines, root.Line), issue.Message);
            }
        }

        if (errors.Count > 0)
        {
            throw new FleetDataException(errors.OrderBy(e => e.Line).ToList());
        }

        try
        {
            return new SiteLayout(AnchorMap.Create(siteId, anchors), racks, floor);
        }
        catch (AnchorMapException e)
        {
            throw new FleetDataException(e.Errors.Select(x => new DataDiagnostic(source, root.Line, DiagnosticSeverity.Error, x.Message)).ToList(), e);
        }
    }

    // A duplicate id is reported at its repeated entry; other issues at the last anchor they name.
    private static long LineOfIssue(AnchorMapIssue issue, List<Anchor> anchors, List<long> lines, long fallback)
    {
        long line = 0;
        foreach (var id in issue.AnchorIds)
        {
            var occurrences = 0;
            for (var i = 0; i < anchors.Count; i++)
            {
                if (anchors[i].Id != id)
                {
                    continue;
                }

                occurrences++;
                var wanted = issue.Code == AnchorMapIssueCode.DuplicateId ? 2 : 1;
                if (occurrences == wanted)
                {
                    line = Math.Max(line, lines[i]);
                    break;
                }
            }
        }

        return line > 0 ? line : fallback;
    }

    private static AxisAlignedBox? ReadBox(DataNode node, string where, Action<long, string> error)
    {
        if (node.Kind != DataNodeKind.Object)
        {
            error(node.Line, $"{where} must be an object with 'min' and 'max', found {DataNode.KindName(node.Kind)}");
            return null;
        }

        var min = RequiredVector(node, "min", where, error);
        var max = RequiredVector(node, "max", where, error);
        if (min is null || max is null)
        {
            return null;
        }

        if (min.Value.X > max.Value.X || min.Value.Y > max.Value.Y || min.Value.Z > max.Value.Z)
        {
            error(node.Line, $"{where}: 'min' must not exceed 'max' in any coordinate");
            return null;
        }

        return new AxisAlignedBox(min.Value, max.Value);
    }

    private static Vector3D? RequiredVector(DataNode parent, string name, string where, Action<long, string> error)
    {
        var node = parent.Property(name);
        if (node is null)
        {
            error(parent.Line, $"{where}: missing field '{name}'");
            return null;
        }

        if (node.Kind != DataNodeKind.Array || node.Items.Count != 3)
        {
            error(node.Line, $"{where}: '{name}' must be an array of 3 numbers");
            return null;
        }

        var x = FiniteNumber(node.Items[0], $"{where}: '{name}'[0]", error);
        var y = FiniteNumber(node.Items[1], $"{where}: '{name}'[1]", error);
        var z = FiniteNumber(node.Items[2], $"{where}: '{name}'[2]", error);
        return x is null || y is null || z is null ? null : new Vector3D(x.Value, y.Value, z.Value);
    }

    private static double? FiniteNumber(DataNode node, string what, Action<long, string> error)
    {
        if (node.Kind != DataNodeKind.Number)
        {
            error(node.Line, $"{what} must be a number, found {DataNode.KindName(node.Kind)}");
            return null;
        }

        if (!double.IsFinite(node.Number))
        {
            error(node.Line, $"{what} is not a finite number ({node.Text})");
            return null;
        }

        return node.Number;
    }
}
