using Fleet.Estimation.Anchors;

namespace Fleet.Reports.Rendering;

/// <summary>A point in plan view (site frame x, y; metres).</summary>
public readonly record struct PlanPoint(double X, double Y);

/// <summary>An axis-aligned rectangle in plan view (site frame, metres).</summary>
public readonly record struct PlanRect(double XMin, double YMin, double XMax, double YMax)
{
    public double Width => XMax - XMin;

    public double Height => YMax - YMin;

    public bool Contains(PlanPoint p) => p.X >= XMin && p.X <= XMax && p.Y >= YMin && p.Y <= YMax;

    public PlanRect Union(PlanRect other) =>
        new(Math.Min(XMin, other.XMin), Math.Min(YMin, other.YMin), Math.Max(XMax, other.XMax), Math.Max(YMax, other.YMax));
}

/// <summary>
/// A regular grid of square cells over a plan rectangle (site frame, metres). Cell (ix, iy) covers
/// [XMin + ix·Step, XMin + (ix+1)·Step] × [YMin + iy·Step, YMin + (iy+1)·Step]; values belong to the cell centre.
/// Arrays are indexed [iy, ix].
/// </summary>
public sealed record GridFrame(double XMin, double YMin, double Step, int Nx, int Ny)
{
    /// <summary>Cells of <paramref name="step"/> metres covering <paramref name="area"/> (the last row/column may overhang).</summary>
    public static GridFrame Covering(PlanRect area, double step)
    {
        if (!(step > 0) || !double.IsFinite(step))
        {
            throw new ArgumentOutOfRangeException(nameof(step), step, "grid step must be positive");
        }

        var nx = Math.Max(1, (int)Math.Ceiling((area.Width / step) - 1e-9));
        var ny = Math.Max(1, (int)Math.Ceiling((area.Height / step) - 1e-9));
        return new GridFrame(area.XMin, area.YMin, step, nx, ny);
    }

    /// <summary>Centre x (m) of column <paramref name="ix"/>.</summary>
    public double X(int ix) => XMin + ((ix + 0.5) * Step);

    /// <summary>Centre y (m) of row <paramref name="iy"/>.</summary>
    public double Y(int iy) => YMin + ((iy + 0.5) * Step);

    public double CellArea => Step * Step;

    /// <summary>Cell containing (x, y), or false when outside the grid.</summary>
    public bool TryCell(double x, double y, out int ix, out int iy)
    {
        ix = (int)Math.Floor((x - XMin) / Step);
        iy = (int)Math.Floor((y - YMin) / Step);
        return ix >= 0 && iy >= 0 && ix < Nx && iy < Ny;
    }
}

/// <summary>Plan-view glyph of an anchor: position, mounting height, and the plan (x, y) part of its unit boresight.</summary>
public sealed record AnchorGlyph(string Id, PlanPoint Position, double Height, PlanPoint BoresightPlan);

/// <summary>What a floor plan shows: floor outline, racks, anchors and optionally the anchors' plan-view convex hull.</summary>
public sealed record FloorPlanScene(PlanRect Floor, IReadOnlyList<PlanRect> Racks, IReadOnlyList<AnchorGlyph> Anchors)
{
    public IReadOnlyList<PlanPoint>? Hull { get; init; }

    /// <summary>
    /// Scene of a site layout. The floor is the site's floor when given, else the plan bounding box of anchors
    /// and racks. Boresight = body +x of each anchor's rotation (DESIGN.md conventions).
    /// </summary>
    public static FloorPlanScene FromLayout(SiteLayout layout, PlanRect floor, IReadOnlyList<PlanPoint>? hull = null)
    {
        var racks = layout.Racks.Select(r => new PlanRect(r.Min.X, r.Min.Y, r.Max.X, r.Max.Y)).ToArray();
        var anchors = layout.Anchors.Anchors.Select(a =>
        {
            var axis = a.Rotation.XAxis;
            return new AnchorGlyph(a.Id, new PlanPoint(a.Position.X, a.Position.Y), a.Position.Z, new PlanPoint(axis.X, axis.Y));
        }).ToArray();
        return new FloorPlanScene(floor, racks, anchors) { Hull = hull };
    }

    /// <summary>The floor of <paramref name="layout"/>, or the plan bounding box of anchors and racks when it has none.</summary>
    public static PlanRect FloorOf(SiteLayout layout)
    {
        if (layout.Floor is { } f)
        {
            return new PlanRect(f.Min.X, f.Min.Y, f.Max.X, f.Max.Y);
        }

        var xs = layout.Anchors.Anchors.Select(a => a.Position.X).Concat(layout.Racks.SelectMany(r => new[] { r.Min.X, r.Max.X })).ToArray();
        var ys = layout.Anchors.Anchors.Select(a => a.Position.Y).Concat(layout.Racks.SelectMany(r => new[] { r.Min.Y, r.Max.Y })).ToArray();
        return xs.Length == 0 ? new PlanRect(0, 0, 1, 1) : new PlanRect(xs.Min(), ys.Min(), xs.Max(), ys.Max());
    }
}

/// <summary>One category of a categorical cell layer; a null colour leaves the cell clear.</summary>
public sealed record CellCategory(string Label, string? Colour);

/// <summary>Cell values drawn under a floor plan.</summary>
public abstract record CellLayer(GridFrame Frame)
{
    /// <summary>Optional hover text per cell, [iy, ix].</summary>
    public string?[,]? Tooltips { get; init; }

    /// <summary>Cells not to draw at all (e.g. inside racks), [iy, ix]; null draws every cell.</summary>
    public bool[,]? Hidden { get; init; }
}

/// <summary>
/// A continuous quantity per cell, coloured with viridis from <see cref="Min"/> to <see cref="Max"/> (values beyond
/// are clamped and the colour bar says so). NaN cells are hatched and labelled <see cref="MissingLabel"/>.
/// </summary>
public sealed record ContinuousLayer(GridFrame Frame, double[,] Values, string Quantity, string Unit, double Min, double Max) : CellLayer(Frame)
{
    public string MissingLabel { get; init; } = "no fix (singular geometry)";
}

/// <summary>A category index per cell (−1 for none) with the category list for colours and legend.</summary>
public sealed record CategoricalLayer(GridFrame Frame, int[,] Categories, IReadOnlyList<CellCategory> Legend) : CellLayer(Frame);

/// <summary>A labelled outline drawn on the plan (e.g. a coverage hole).</summary>
public sealed record PlanHighlight(string Label, PlanRect Area);
