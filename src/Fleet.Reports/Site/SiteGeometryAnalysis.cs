using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;
using Fleet.Reports.Rendering;

namespace Fleet.Reports.Site;

/// <summary>Settings of the commissioning geometry analysis.</summary>
public sealed record SiteGeometryOptions
{
    /// <summary>Tag heights (m above the floor, site z) at which the maps are computed.</summary>
    public IReadOnlyList<double> TagHeights { get; init; } = [0.5];

    /// <summary>Single-link (TOA) range noise 1-σ (m) for the CRLB maps; DOP does not depend on it.</summary>
    public double SigmaToaMetres { get; init; } = 0.1;

    /// <summary>Cell size of the maps (m).</summary>
    public double GridStepMetres { get; init; } = 1.0;

    /// <summary>An anchor farther than this from the tag is not heard (m). 35 m is the simulator's default; set it from site trials.</summary>
    public double MaxRangeMetres { get; init; } = 35.0;

    /// <summary>
    /// An anchor whose straight line to the tag runs through more than this length of racks (summed over the site
    /// file's racks, m) is not counted. 0 demands clear line of sight; infinity ignores racks. The default, 1.5 m,
    /// lets a link cross about one rack row (such links are usually heard, with NLOS delay) but not two.
    /// </summary>
    public double RackPathToleranceMetres { get; init; } = 1.5;

    /// <summary>A cell with fewer usable anchors than this is a coverage hole (4: a 3-D fix, or a 2-D fix with one spare).</summary>
    public int MinimumAnchors { get; init; } = 4;

    /// <summary>A cell whose height-known HDOP exceeds this is a coverage hole (dimensionless).</summary>
    public double HdopLimit { get; init; } = 2.0;

    /// <summary>Half-angle (degrees) of the antenna's main lobe around its boresight, for the "floor in lobe" figure.</summary>
    public double LobeHalfAngleDegrees { get; init; } = 60.0;

    /// <summary>An anchor whose boresight is more than this many degrees from the direction to the floor centre "points away".</summary>
    public double PointsAwayDegrees { get; init; } = 90.0;
}

/// <summary>Why a grid cell is or is not covered, in order of precedence from the bottom up.</summary>
public enum CoverageClass
{
    /// <summary>Enough anchors, HDOP within the limit, inside the anchor hull.</summary>
    Covered = 0,

    /// <summary>Covered, but outside the plan-view convex hull of the anchors (constellation edge).</summary>
    OutsideHull = 1,

    /// <summary>Hole: height-known HDOP above the limit.</summary>
    HighHdop = 2,

    /// <summary>Hole: fewer usable anchors than the minimum.</summary>
    FewAnchors = 3,

    /// <summary>Hole: no 2-D fix at all (fewer than three usable anchors or singular geometry).</summary>
    NoFix = 4,

    /// <summary>The tag point lies inside a rack: not drivable, not scored.</summary>
    InsideRack = 5,
}

/// <summary>A connected set of hole cells (4-neighbour) at one tag height.</summary>
public sealed record CoverageHole(
    string Id,
    double TagHeight,
    PlanRect Bounds,
    int Cells,
    double AreaSquareMetres,
    int NoFixCells,
    int FewAnchorCells,
    int HighHdopCells,
    double WorstHdop,
    int FewestAnchors)
{
    /// <summary>The dominant cause in words.</summary>
    public string Reason => NoFixCells >= Math.Max(FewAnchorCells, HighHdopCells) ? "no fix (< 3 usable anchors)"
        : FewAnchorCells >= HighHdopCells ? "few usable anchors"
        : "high HDOP";
}

/// <summary>
/// Maps at one tag height, all indexed [iy, ix] on <see cref="Frame"/>. DOP values are dimensionless (metres of
/// position error per metre of single-link range noise); CRLB values are metres. NaN marks singular geometry and
/// rack cells. Only usable anchors (in range, and in line of sight when racks block) enter each cell's DOP.
/// </summary>
public sealed record HeightGeometry(
    double TagHeight,
    GridFrame Frame,
    double[,] HdopKnownHeight,
    double[,] CrlbHorizontalKnownHeight,
    double[,] Hdop3D,
    double[,] Vdop3D,
    int[,] UsableAnchors,
    CoverageClass[,] Coverage,
    IReadOnlyList<CoverageHole> Holes)
{
    public int CountOf(CoverageClass c)
    {
        var n = 0;
        foreach (var v in Coverage)
        {
            n += v == c ? 1 : 0;
        }

        return n;
    }

    /// <summary>Cells not inside racks (the drivable floor).</summary>
    public int OpenCells => Coverage.Length - CountOf(CoverageClass.InsideRack);

    /// <summary>Hole cells (no fix, few anchors, high HDOP).</summary>
    public int HoleCells => CountOf(CoverageClass.NoFix) + CountOf(CoverageClass.FewAnchors) + CountOf(CoverageClass.HighHdop);

    /// <summary>Open cells outside the anchors' plan-view hull, holes included.</summary>
    public int OutsideHullCells { get; init; }

    /// <summary>Value of <paramref name="map"/> at the cell containing (x, y); NaN outside the grid.</summary>
    public double ValueAt(double[,] map, double x, double y) => Frame.TryCell(x, y, out var ix, out var iy) ? map[iy, ix] : double.NaN;
}

/// <summary>Where an anchor's antenna points relative to the floor.</summary>
public sealed record AnchorAim(string AnchorId, double AngleToFloorCentreDegrees, double FloorFractionInLobe, bool PointsAway);

/// <summary>One line of the geometry findings: severity "warning", "info" or "ok", a stable code and a message with units.</summary>
public sealed record GeometryFinding(string Severity, string Code, string Message);

/// <summary>Result of <see cref="SiteGeometryAnalysis.Analyse"/>.</summary>
public sealed record SiteGeometry(
    SiteLayout Layout,
    SiteGeometryOptions Options,
    PlanRect Floor,
    IReadOnlyList<PlanPoint> Hull,
    IReadOnlyList<HeightGeometry> Heights,
    IReadOnlyList<AnchorAim> Aims,
    IReadOnlyList<GeometryFinding> Findings);

/// <summary>
/// Commissioning geometry of a site: DOP and CRLB maps at tag heights, coverage holes, constellation edge and
/// anchor aim. DOP/CRLB come from <see cref="ConstellationGeometry"/> (Chan–Ho bound with Q = σ²(I + 11ᵀ)).
/// Not a hot path.
/// </summary>
public static class SiteGeometryAnalysis
{
    public static SiteGeometry Analyse(SiteLayout layout, SiteGeometryOptions options)
    {
        ArgumentNullException.ThrowIfNull(layout);
        ArgumentNullException.ThrowIfNull(options);
        if (options.TagHeights.Count == 0 || options.TagHeights.Any(h => !double.IsFinite(h)))
        {
            throw new ArgumentException("need at least one finite tag height", nameof(options));
        }

        var floor = FloorPlanScene.FloorOf(layout);
        var frame = GridFrame.Covering(floor, options.GridStepMetres);
        var hull = ConvexHull.Of(layout.Anchors.Anchors.Select(a => new PlanPoint(a.Position.X, a.Position.Y)));
        var heights = options.TagHeights.Select(h => AtHeight(layout, options, frame, hull, h)).ToArray();
        var aims = Aims(layout, options, frame, options.TagHeights.Min());
        var findings = Findings(layout, options, heights, aims);
        return new SiteGeometry(layout, options, floor, hull, heights, aims, findings);
    }

    /// <summary>Indices of anchors usable at <paramref name="tag"/>: within range, and through at most the tolerated length of racks.</summary>
    public static List<int> UsableAnchors(SiteLayout layout, SiteGeometryOptions options, Vector3D tag)
    {
        var usable = new List<int>();
        var map = layout.Anchors;
        for (var i = 0; i < map.Count; i++)
        {
            var position = map[i].Position;
            if (Vector3D.Distance(position, tag) > options.MaxRangeMetres)
            {
                continue;
            }

            var inside = 0.0;
            foreach (var rack in layout.Racks)
            {
                inside += rack.SegmentLengthInside(tag, position);
            }

            // 1 µm slack: a line grazing a rack face is not blocked.
            if (inside <= options.RackPathToleranceMetres + 1e-6)
            {
                usable.Add(i);
            }
        }

        return usable;
    }

    private static HeightGeometry AtHeight(SiteLayout layout, SiteGeometryOptions options, GridFrame frame, IReadOnlyList<PlanPoint> hull, double height)
    {
        int nx = frame.Nx, ny = frame.Ny;
        var hdop2 = new double[ny, nx];
        var crlb2 = new double[ny, nx];
        var hdop3 = new double[ny, nx];
        var vdop3 = new double[ny, nx];
        var usableCount = new int[ny, nx];
        var coverage = new CoverageClass[ny, nx];
        var outside = 0;
        var sigma = options.SigmaToaMetres;
        for (var iy = 0; iy < ny; iy++)
        {
            for (var ix = 0; ix < nx; ix++)
            {
                var tag = new Vector3D(frame.X(ix), frame.Y(iy), height);
                if (layout.Racks.Any(r => r.Contains(tag)))
                {
                    hdop2[iy, ix] = crlb2[iy, ix] = hdop3[iy, ix] = vdop3[iy, ix] = double.NaN;
                    coverage[iy, ix] = CoverageClass.InsideRack;
                    continue;
                }

                var usable = UsableAnchors(layout, options, tag);
                usableCount[iy, ix] = usable.Count;
                var positions = usable.Select(i => layout.Anchors[i].Position).ToArray();
                var plane = ConstellationGeometry.Crlb(positions, tag, sigma, fixedHeight: height);
                var full = ConstellationGeometry.Crlb(positions, tag, sigma);
                crlb2[iy, ix] = plane.HorizontalRms;
                hdop2[iy, ix] = plane.HorizontalRms / sigma;
                hdop3[iy, ix] = full.HorizontalRms / sigma;
                vdop3[iy, ix] = full.VerticalRms / sigma;

                var inHull = ConvexHull.Contains(hull, new PlanPoint(tag.X, tag.Y), 1e-6);
                outside += inHull ? 0 : 1;
                coverage[iy, ix] = plane.IsSingular ? CoverageClass.NoFix
                    : usable.Count < options.MinimumAnchors ? CoverageClass.FewAnchors
                    : hdop2[iy, ix] > options.HdopLimit ? CoverageClass.HighHdop
                    : inHull ? CoverageClass.Covered
                    : CoverageClass.OutsideHull;
            }
        }

        var holes = FindHoles(frame, coverage, hdop2, usableCount, height);
        return new HeightGeometry(height, frame, hdop2, crlb2, hdop3, vdop3, usableCount, coverage, holes) { OutsideHullCells = outside };
    }

    private static bool IsHole(CoverageClass c) => c is CoverageClass.NoFix or CoverageClass.FewAnchors or CoverageClass.HighHdop;

    private static List<CoverageHole> FindHoles(GridFrame frame, CoverageClass[,] coverage, double[,] hdop, int[,] usable, double height)
    {
        var seen = new bool[frame.Ny, frame.Nx];
        var regions = new List<CoverageHole>();
        var stack = new Stack<(int Ix, int Iy)>();
        for (var iy0 = 0; iy0 < frame.Ny; iy0++)
        {
            for (var ix0 = 0; ix0 < frame.Nx; ix0++)
            {
                if (seen[iy0, ix0] || !IsHole(coverage[iy0, ix0]))
                {
                    continue;
                }

                int cells = 0, noFix = 0, few = 0, high = 0, fewest = int.MaxValue;
                int minX = ix0, maxX = ix0, minY = iy0, maxY = iy0;
                var worst = double.NaN;
                stack.Push((ix0, iy0));
                seen[iy0, ix0] = true;
                while (stack.Count > 0)
                {
                    var (ix, iy) = stack.Pop();
                    cells++;
                    switch (coverage[iy, ix])
                    {
                        case CoverageClass.NoFix: noFix++; break;
                        case CoverageClass.FewAnchors: few++; break;
                        default: high++; break;
                    }

                    fewest = Math.Min(fewest, usable[iy, ix]);
                    if (double.IsFinite(hdop[iy, ix]) && !(hdop[iy, ix] <= worst))
                    {
                        worst = hdop[iy, ix];
                    }

                    (minX, maxX, minY, maxY) = (Math.Min(minX, ix), Math.Max(maxX, ix), Math.Min(minY, iy), Math.Max(maxY, iy));
                    foreach (var (dx, dy) in new[] { (1, 0), (-1, 0), (0, 1), (0, -1) })
                    {
                        int nx = ix + dx, ny = iy + dy;
                        if (nx >= 0 && ny >= 0 && nx < frame.Nx && ny < frame.Ny && !seen[ny, nx] && IsHole(coverage[ny, nx]))
                        {
                            seen[ny, nx] = true;
                            stack.Push((nx, ny));
                        }
                    }
                }

                var bounds = new PlanRect(frame.XMin + (minX * frame.Step), frame.YMin + (minY * frame.Step),
                    frame.XMin + ((maxX + 1) * frame.Step), frame.YMin + ((maxY + 1) * frame.Step));
                regions.Add(new CoverageHole(string.Empty, height, bounds, cells, cells * frame.CellArea, noFix, few, high, worst, fewest));
            }
        }

        return regions.OrderByDescending(r => r.Cells).ThenBy(r => r.Bounds.XMin).ThenBy(r => r.Bounds.YMin)
            .Select((r, i) => r with { Id = "H" + (i + 1).ToString(System.Globalization.CultureInfo.InvariantCulture) })
            .ToList();
    }

    private static List<AnchorAim> Aims(SiteLayout layout, SiteGeometryOptions options, GridFrame frame, double height)
    {
        var floor = FloorPlanScene.FloorOf(layout);
        var centre = new Vector3D((floor.XMin + floor.XMax) / 2, (floor.YMin + floor.YMax) / 2, height);
        var cosLobe = Math.Cos(options.LobeHalfAngleDegrees * Math.PI / 180);
        var aims = new List<AnchorAim>();
        foreach (var anchor in layout.Anchors.Anchors)
        {
            var boresight = anchor.Rotation.XAxis;
            var angle = AngleDegrees(boresight, centre - anchor.Position);
            int open = 0, inLobe = 0;
            for (var iy = 0; iy < frame.Ny; iy++)
            {
                for (var ix = 0; ix < frame.Nx; ix++)
                {
                    var p = new Vector3D(frame.X(ix), frame.Y(iy), height);
                    if (layout.Racks.Any(r => r.Contains(p)))
                    {
                        continue;
                    }

                    open++;
                    var d = p - anchor.Position;
                    var length = d.Length;
                    if (length > 1e-9 && Vector3D.Dot(boresight, d) / length >= cosLobe)
                    {
                        inLobe++;
                    }
                }
            }

            aims.Add(new AnchorAim(anchor.Id, angle, open == 0 ? double.NaN : (double)inLobe / open, angle > options.PointsAwayDegrees));
        }

        return aims;
    }

    private static double AngleDegrees(Vector3D a, Vector3D b)
    {
        var la = a.Length;
        var lb = b.Length;
        if (!(la > 1e-12) || !(lb > 1e-12))
        {
            return double.NaN;
        }

        return Math.Acos(Math.Clamp(Vector3D.Dot(a, b) / (la * lb), -1, 1)) * 180 / Math.PI;
    }

    private static List<GeometryFinding> Findings(SiteLayout layout, SiteGeometryOptions options, IReadOnlyList<HeightGeometry> heights, IReadOnlyList<AnchorAim> aims)
    {
        var findings = new List<GeometryFinding>();
        foreach (var w in layout.Anchors.Warnings)
        {
            findings.Add(new GeometryFinding("warning", w.Code.ToString(), w.Message));
        }

        var anchors = layout.Anchors.Anchors;
        if (anchors.Count >= 2)
        {
            var zMin = anchors.Min(a => a.Position.Z);
            var zMax = anchors.Max(a => a.Position.Z);
            var spread = zMax - zMin;
            if (!layout.Anchors.Warnings.Any(w => w.Code == AnchorMapIssueCode.SmallVerticalSpread))
            {
                findings.Add(new GeometryFinding("ok", "VerticalSpread", FormattableString.Invariant(
                    $"anchor heights span {zMin:0.00}–{zMax:0.00} m (spread {spread:0.00} m ≥ {AnchorMap.WeakVerticalSpreadMetres} m): height is observable")));
            }
        }

        foreach (var h in heights)
        {
            var open = h.OpenCells;
            var area = h.Frame.CellArea;
            if (h.OutsideHullCells > 0)
            {
                findings.Add(new GeometryFinding("warning", "ConstellationEdge", FormattableString.Invariant(
                    $"tag height {h.TagHeight:0.0#} m: {h.OutsideHullCells} of {open} open cells ({100.0 * h.OutsideHullCells / open:0.0} %, {h.OutsideHullCells * area:0.#} m²) lie outside the plan-view hull of the anchors; positions there are extrapolated and error grows quickly")));
            }
            else
            {
                findings.Add(new GeometryFinding("ok", "ConstellationEdge", FormattableString.Invariant(
                    $"tag height {h.TagHeight:0.0#} m: the whole open floor lies inside the plan-view hull of the anchors")));
            }

            if (h.Holes.Count > 0)
            {
                var largest = h.Holes[0];
                findings.Add(new GeometryFinding("warning", "CoverageHoles", FormattableString.Invariant(
                    $"tag height {h.TagHeight:0.0#} m: {h.Holes.Count} coverage hole(s), {h.HoleCells * area:0.#} m² ({100.0 * h.HoleCells / Math.Max(1, open):0.0} % of the open floor); largest {largest.Id}: {largest.AreaSquareMetres:0.#} m² at x {largest.Bounds.XMin:0.#}–{largest.Bounds.XMax:0.#} m, y {largest.Bounds.YMin:0.#}–{largest.Bounds.YMax:0.#} m ({largest.Reason})")));
            }
            else
            {
                findings.Add(new GeometryFinding("ok", "CoverageHoles", FormattableString.Invariant(
                    $"tag height {h.TagHeight:0.0#} m: no coverage holes (every open cell hears ≥ {options.MinimumAnchors} anchors and has HDOP ≤ {options.HdopLimit:0.0#})")));
            }
        }

        foreach (var aim in aims.Where(a => a.PointsAway))
        {
            findings.Add(new GeometryFinding("warning", "BoresightAway", FormattableString.Invariant(
                $"anchor {aim.AnchorId}: boresight points away from the floor ({aim.AngleToFloorCentreDegrees:0} ° from the direction to the floor centre; {100 * aim.FloorFractionInLobe:0} % of the floor within ±{options.LobeHalfAngleDegrees:0} °): check its yaw/pitch in the site file and on the wall")));
        }

        if (!aims.Any(a => a.PointsAway) && aims.Count > 0)
        {
            findings.Add(new GeometryFinding("ok", "BoresightAway", FormattableString.Invariant(
                $"every anchor's boresight is within {options.PointsAwayDegrees:0} ° of the direction to the floor centre")));
        }

        return findings;
    }
}
