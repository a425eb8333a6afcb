using System.Text;

namespace Fleet.Reports.Rendering;

/// <summary>
/// Writes SVG elements into a buffer; <see cref="ToSvg"/> wraps them in a standalone, XML-well-formed
/// <c>&lt;svg&gt;</c> element. All text goes through <see cref="Format.Escape"/>. Hover tooltips use SVG
/// <c>&lt;title&gt;</c> children, which browsers show natively (no script).
/// </summary>
internal sealed class SvgCanvas
{
    private static int _nextId;
    private readonly StringBuilder _body = new();
    private readonly StringBuilder _defs = new();

    /// <summary>Prefix for element ids, unique per chart, so several inline SVGs can share one HTML page.</summary>
    public string IdPrefix { get; } = "c" + Interlocked.Increment(ref _nextId).ToString(System.Globalization.CultureInfo.InvariantCulture);

    public void Define(string element) => _defs.Append(element);

    public void Raw(string element) => _body.Append(element);

    public void OpenGroup(string? cssClass = null, string? clipId = null)
    {
        _body.Append("<g");
        if (cssClass is not null)
        {
            _body.Append(" class=\"").Append(cssClass).Append('"');
        }

        if (clipId is not null)
        {
            _body.Append(" clip-path=\"url(#").Append(clipId).Append(")\"");
        }

        _body.Append('>');
    }

    public void CloseGroup() => _body.Append("</g>");

    public void Rect(double x, double y, double w, double h, string fill, string? stroke = null, double strokeWidth = 1,
        string? tooltip = null, string? extra = null)
    {
        _body.Append("<rect x=\"").Append(Format.Coord(x)).Append("\" y=\"").Append(Format.Coord(y))
            .Append("\" width=\"").Append(Format.Coord(Math.Max(0, w))).Append("\" height=\"").Append(Format.Coord(Math.Max(0, h)))
            .Append("\" fill=\"").Append(fill).Append('"');
        Stroke(stroke, strokeWidth, null);
        if (extra is not null)
        {
            _body.Append(' ').Append(extra);
        }

        Close("rect", tooltip);
    }

    public void Line(double x1, double y1, double x2, double y2, string stroke, double width = 1, string? dash = null, string? extra = null)
    {
        _body.Append("<line x1=\"").Append(Format.Coord(x1)).Append("\" y1=\"").Append(Format.Coord(y1))
            .Append("\" x2=\"").Append(Format.Coord(x2)).Append("\" y2=\"").Append(Format.Coord(y2)).Append('"');
        Stroke(stroke, width, dash);
        if (extra is not null)
        {
            _body.Append(' ').Append(extra);
        }

        _body.Append("/>");
    }

    public void Polyline(IEnumerable<(double X, double Y)> points, string stroke, double width = 1.5, string? dash = null,
        string fill = "none", bool closed = false, string? tooltip = null, string? extra = null)
    {
        _body.Append(closed ? "<polygon" : "<polyline").Append(" points=\"");
        var first = true;
        foreach (var (x, y) in points)
        {
            if (!first)
            {
                _body.Append(' ');
            }

            _body.Append(Format.Coord(x)).Append(',').Append(Format.Coord(y));
            first = false;
        }

        _body.Append("\" fill=\"").Append(fill).Append('"');
        Stroke(stroke, width, dash);
        _body.Append(" stroke-linejoin=\"round\"");
        if (extra is not null)
        {
            _body.Append(' ').Append(extra);
        }

        Close(closed ? "polygon" : "polyline", tooltip);
    }

    public void Circle(double cx, double cy, double r, string fill, string? stroke = null, double strokeWidth = 1, string? tooltip = null)
    {
        _body.Append("<circle cx=\"").Append(Format.Coord(cx)).Append("\" cy=\"").Append(Format.Coord(cy))
            .Append("\" r=\"").Append(Format.Coord(r)).Append("\" fill=\"").Append(fill).Append('"');
        Stroke(stroke, strokeWidth, null);
        Close("circle", tooltip);
    }

    /// <summary>Text at (x, y) baseline; <paramref name="anchor"/> is start, middle or end; optional rotation in degrees about (x, y).</summary>
    public void Text(double x, double y, string text, string anchor = "start", double size = 12, string? cssClass = null,
        double rotate = 0, string fill = "#222", string? weight = null, string? extra = null)
    {
        _body.Append("<text x=\"").Append(Format.Coord(x)).Append("\" y=\"").Append(Format.Coord(y))
            .Append("\" font-size=\"").Append(Format.Coord(size)).Append("\" text-anchor=\"").Append(anchor)
            .Append("\" fill=\"").Append(fill).Append('"');
        if (weight is not null)
        {
            _body.Append(" font-weight=\"").Append(weight).Append('"');
        }

        if (cssClass is not null)
        {
            _body.Append(" class=\"").Append(cssClass).Append('"');
        }

        if (rotate != 0)
        {
            _body.Append(" transform=\"rotate(").Append(Format.Coord(rotate)).Append(' ').Append(Format.Coord(x)).Append(' ')
                .Append(Format.Coord(y)).Append(")\"");
        }

        if (extra is not null)
        {
            _body.Append(' ').Append(extra);
        }

        _body.Append('>').Append(Format.Escape(text)).Append("</text>");
    }

    /// <summary>The finished standalone SVG element, <paramref name="width"/>×<paramref name="height"/> px.</summary>
    public string ToSvg(double width, double height, string label)
    {
        var sb = new StringBuilder(_body.Length + _defs.Length + 256);
        sb.Append("<svg xmlns=\"http://www.w3.org/2000/svg\" class=\"chart\" viewBox=\"0 0 ").Append(Format.Coord(width)).Append(' ')
            .Append(Format.Coord(height)).Append("\" width=\"").Append(Format.Coord(width)).Append("\" height=\"").Append(Format.Coord(height))
            .Append("\" role=\"img\" aria-label=\"").Append(Format.Escape(label)).Append("\">");
        sb.Append("<title>").Append(Format.Escape(label)).Append("</title>");
        if (_defs.Length > 0)
        {
            sb.Append("<defs>").Append(_defs).Append("</defs>");
        }

        sb.Append(_body).Append("</svg>");
        return sb.ToString();
    }

    private void Stroke(string? stroke, double width, string? dash)
    {
        if (stroke is null)
        {
            return;
        }

        _body.Append(" stroke=\"").Append(stroke).Append("\" stroke-width=\"").Append(Format.Coord(width)).Append('"');
        if (dash is not null)
        {
            _body.Append(" stroke-dasharray=\"").Append(dash).Append('"');
        }
    }

    private void Close(string element, string? tooltip)
    {
        if (tooltip is null)
        {
            _body.Append("/>");
            return;
        }

        _body.Append("><title>").Append(Format.Escape(tooltip)).Append("</title></").Append(element).Append('>');
    }
}
