using System.Text.RegularExpressions;
using System.Xml.Linq;
using Fleet.Estimation.Evaluation;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Measurements;
using Fleet.Reports.Rendering;
using Fleet.Reports.Site;
using Fleet.Reports.Tracking;
using Fleet.Simulation;

namespace Fleet.Reports.Tests;

/// <summary>The reports are self-contained HTML whose SVG parts are well-formed XML with legends and units.</summary>
public partial class HtmlOutputTests
{
    private const string SvgNamespace = "http://www.w3.org/2000/svg";

    private static readonly Lazy<(string SiteHtml, string ReplayHtml)> Reports = new(Build);

    public static TheoryData<string> Kinds => new() { "site", "replay" };

    [Theory]
    [MemberData(nameof(Kinds))]
    public void Report_EverySvg_ParsesAsXmlWithALegend(string kind)
    {
        var html = Html(kind);
        var svgs = SvgElements().Matches(html).Select(m => m.Value).ToArray();

        Assert.True(svgs.Length >= 4, $"only {svgs.Length} charts");
        foreach (var svg in svgs)
        {
            var root = XDocument.Parse(svg).Root!;
            Assert.Equal(XName.Get("svg", SvgNamespace), root.Name);
            Assert.Contains(root.Descendants(XName.Get("g", SvgNamespace)), g => ((string?)g.Attribute("class") ?? string.Empty).Split(' ').Contains("legend"));
        }
    }

    [Theory]
    [MemberData(nameof(Kinds))]
    public void Report_AxisLabels_CarryUnits(string kind)
    {
        var labels = SvgElements().Matches(Html(kind))
            .SelectMany(m => XDocument.Parse(m.Value).Descendants(XName.Get("text", SvgNamespace)))
            .Where(t => (string?)t.Attribute("class") == "axis-label")
            .Select(t => t.Value)
            .ToArray();

        Assert.NotEmpty(labels);
        Assert.All(labels, label => Assert.Matches(@"\((m|s|%|m/m)\)", label));
    }

    [Theory]
    [MemberData(nameof(Kinds))]
    public void Report_IsSelfContained(string kind)
    {
        var html = Html(kind);

        // Only the SVG namespace URI may appear; no scripts, stylesheets, images or fonts from elsewhere.
        Assert.All(Urls().Matches(html).Select(m => m.Value), url => Assert.Equal(SvgNamespace, url));
        Assert.DoesNotContain("<script", html, StringComparison.OrdinalIgnoreCase);
        Assert.DoesNotContain("<link", html, StringComparison.OrdinalIgnoreCase);
        Assert.DoesNotContain("<img", html, StringComparison.OrdinalIgnoreCase);
        Assert.DoesNotContain("@import", html, StringComparison.OrdinalIgnoreCase);
        Assert.DoesNotContain("src=", html, StringComparison.OrdinalIgnoreCase);
        Assert.StartsWith("<!DOCTYPE html>", html, StringComparison.Ordinal);
    }

    [Fact]
    public void ReplayReport_TwoRuns_ShowsBothAndTheDeltaTable()
    {
        var html = Reports.Value.ReplayHtml;

        Assert.Contains("A: huber update", html);
        Assert.Contains("B: plain update", html);
        Assert.Contains("B − A", html);
        Assert.Contains("RMSE horizontal (m)", html);
    }

    [Fact]
    public void Charts_TextIsEscaped()
    {
        var svg = Charts.Line(new ChartSpec("a < b & \"c\"", "x (m)", "y (m)"), [new ChartSeries("<s>", [(0, 0), (1, 1)])]);

        Assert.Equal("a < b & \"c\"", (string?)XDocument.Parse(svg).Root!.Element(XName.Get("title", SvgNamespace)));
    }

    [Fact]
    public void Cdf_Points_EndAtOneHundredPercentAndNeverDecrease()
    {
        var values = Enumerable.Range(1, 1000).Select(i => i * 0.001).ToArray();

        var points = Charts.CdfPoints(values);

        Assert.Equal(100, points[^1].Y, 12);
        Assert.Equal(1.0, points[^1].X, 12);
        for (var i = 1; i < points.Count; i++)
        {
            Assert.True(points[i].Y >= points[i - 1].Y && points[i].X >= points[i - 1].X);
        }

        // Empirical CDF at the median sample (0.5 m) is 50 % (500 of 1000 samples ≤ 0.5).
        Assert.Contains(points, p => Math.Abs(p.X - 0.5) < 1e-12 && Math.Abs(p.Y - 50) < 1e-9);
    }

    [Fact]
    public void BinnedMean_EmptyBins_BreakTheLineOnce()
    {
        var points = TrackingSections.BinnedMean([0.0, 3.5], [1.0, 2.0], 1.0);

        Assert.Equal(3, points.Count);
        Assert.True(double.IsNaN(points[1].Y));
        Assert.Equal((3.5, 2.0), points[2]);
    }

    [Fact]
    public void BinnedMean_TwoBins_AveragesEach()
    {
        var points = TrackingSections.BinnedMean([0.0, 0.4, 1.0, 1.5], [1.0, 3.0, 10.0, 20.0], 1.0);

        Assert.Equal(2, points.Count);
        Assert.Equal((0.5, 2.0), points[0]);
        Assert.Equal((1.5, 15.0), points[1]);
    }

    private static string Html(string kind) => kind == "site" ? Reports.Value.SiteHtml : Reports.Value.ReplayHtml;

    private static (string, string) Build()
    {
        var generator = new MeasurementGenerator(new SimulationOptions { RobotCount = 2, DurationSeconds = 20, Seed = 5 });
        var records = generator.Generate().ToList();
        var layout = generator.Layout;
        EvaluationResult Run(RobustKernel kernel, bool gate)
        {
            var evaluation = new TrackingEvaluation(layout, new EvaluationSettings
            {
                OptionsFor = (motion, lever) => new FilterOptions { Motion = motion, Kernel = kernel, GateEnabled = gate, TagLeverArm = lever },
            });
            foreach (var r in records)
            {
                evaluation.Add(r);
            }

            return evaluation.Finish();
        }

        var a = new TrackingRun("A", "huber update, no bias model", Run(RobustKernel.Huber, true));
        var b = new TrackingRun("B", "plain update, no bias model", Run(RobustKernel.LeastSquares, false));
        var replay = ReplayHtmlReport.Render(new ReplayReportInput(layout.SiteId, "sim.jsonl", [a, b]) { Records = records.Count });

        var samples = Fleet.Estimation.Bias.Training.TrainingSampleExtractor.Extract(layout, records).Samples;
        var (perAnchor, overall) = BiasResidualStatistics.Compute(samples, null);
        var geometry = SiteGeometryAnalysis.Analyse(layout, new SiteGeometryOptions { TagHeights = [0.5, 1.5], GridStepMetres = 2 });
        var site = SiteReport.Render(new SiteReportInput(geometry, "site.json")
        {
            Log = LogSummary.From(records),
            LogSource = "sim.jsonl",
            Validation = new BiasValidation(perAnchor, overall, samples.Count, a, null, null),
        });
        return (site, replay);
    }

    [GeneratedRegex("<svg[ >].*?</svg>", RegexOptions.Singleline)]
    private static partial Regex SvgElements();

    [GeneratedRegex(@"https?://[^\s""'<>)]*")]
    private static partial Regex Urls();
}
