using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;
using Fleet.Simulation;

namespace Fleet.Data.Tests;

public class SiteFileTests
{
    [Theory]
    [InlineData("harbor-tall")]
    [InlineData("harbor-low")]
    [InlineData("harbor-ring")]
    [InlineData("harbor-cross")]
    public void ToJson_ThenParse_RoundTripsLayout(string name)
    {
        var layout = WarehouseSites.Build(name);
        var json = SiteFile.ToJson(layout);
        var back = SiteFile.ParseJson(json, "site.json");

        AssertSameLayout(layout, back);

        // Stable formatting: writing again gives the same text.
        Assert.Equal(json, SiteFile.ToJson(back));
    }

    [Fact]
    public void WriteAndRead_File_RoundTripsIncludingAntennaDelay()
    {
        var anchors = WarehouseSites.Build(WarehouseSites.Ring).Anchors.Anchors
            .Select((a, i) => new Anchor(a.Id, a.Position, a.OrientationDegrees, i * 0.0123456789)).ToList();
        var layout = new SiteLayout(AnchorMap.Create("harbor-ring", anchors), HarborPointHall.Racks, HarborPointHall.Floor);
        var path = Path.Combine(Path.GetTempPath(), $"fleet-site-{Guid.NewGuid():N}.json");
        try
        {
            SiteFile.Write(path, layout);
            AssertSameLayout(layout, SiteFile.Read(path));
        }
        finally
        {
            File.Delete(path);
        }
    }

    [Fact]
    public void Read_YamlFile_MatchesJson()
    {
        const string yaml = """
            # Harbor Point DC, test corner
            site: harbor-yaml
            anchors:
              - id: HP-Y01
                position: [0.3, 0.3, 9.5]
                orientation_deg: [32, 25, 0]
              - id: HP-Y02
                position: [39.7, 0.3, 3.0]
                orientation_deg: [148, 3, 0]
                antenna_delay_m: 0.012
              - id: HP-Y03
                position:
                  - 39.7
                  - 24.7
                  - 9.5
                orientation_deg: [-148, 18, 90]
              - id: HP-Y04
                position: [0.3, 24.7, 3.0]
                orientation_deg: [-32, 3, 0]
                note: ignored
            racks:
              - { min: [4, 7.5, 0], max: [11.5, 8.7, 6.5] }
            floor: { min: [0, 0, 0], max: [40, 25, 0] }
            """;
        var path = Path.Combine(Path.GetTempPath(), $"fleet-site-{Guid.NewGuid():N}.yaml");
        try
        {
            File.WriteAllText(path, yaml);
            var layout = SiteFile.Read(path);

            Assert.Equal("harbor-yaml", layout.SiteId);
            Assert.Equal(4, layout.Anchors.Count);
            Assert.Equal(new Vector3D(39.7, 24.7, 9.5), layout.Anchors[2].Position);
            Assert.Equal(new Vector3D(-148, 18, 90), layout.Anchors[2].OrientationDegrees);
            Assert.Equal(0.012, layout.Anchors[1].AntennaDelayMetres);
            Assert.Single(layout.Racks);
            Assert.Equal(new Vector3D(40, 25, 0), layout.Floor!.Value.Max);

            // The JSON written from it reads back to the same layout.
            AssertSameLayout(layout, SiteFile.ParseJson(SiteFile.ToJson(layout)));
        }
        finally
        {
            File.Delete(path);
        }
    }

    [Fact]
    public void ParseJson_SyntaxError_ReportsFileAndLine()
    {
        const string json = "{\n  \"site\": \"x\",\n  \"anchors\": [\n    { \"id\": \"A\" \"position\": [0, 0, 0] }\n  ]\n}\n";
        var e = Assert.Throws<FleetDataException>(() => SiteFile.ParseJson(json, "bad.json"));

        Assert.Equal(4, Assert.Single(e.Errors).Line);
        Assert.StartsWith("bad.json:4: invalid JSON", e.Message);
    }

    [Fact]
    public void ParseJson_MissingFields_ReportsEachWithLine()
    {
        const string json = """
            {
              "site": "x",
              "anchors": [
                { "id": "A1", "position": [0, 0, 3], "orientation_deg": [0, 0, 0] },
                { "id": "A2",
                  "orientation_deg": [0, 0, 0] },
                { "position": [5, 0, 3], "orientation_deg": [0, 0, 0] },
                { "id": "A4", "position": [5, 5, 3], "orientation_deg": [0, 0] }
              ]
            }
            """;
        var e = Assert.Throws<FleetDataException>(() => SiteFile.ParseJson(json, "site.json"));

        Assert.Equal(3, e.Errors.Count);
        Assert.Contains(e.Errors, d => d.Line == 5 && d.Message.Contains("missing field 'position'"));
        Assert.Contains(e.Errors, d => d.Line == 7 && d.Message.Contains("missing field 'id'"));
        Assert.Contains(e.Errors, d => d.Line == 8 && d.Message.Contains("'orientation_deg' must be an array of 3 numbers"));
        Assert.Contains("site.json:5: ", e.Message);
    }

    [Fact]
    public void ParseJson_MissingSiteAndAnchors_Reported()
    {
        var e = Assert.Throws<FleetDataException>(() => SiteFile.ParseJson("{\n\"racks\": []\n}", "s.json"));
        Assert.Contains(e.Errors, d => d.Message.Contains("missing field 'site'"));
        Assert.Contains(e.Errors, d => d.Message.Contains("missing field 'anchors'"));
    }

    [Fact]
    public void ParseJson_DuplicateIds_ReportsAnchorMapErrorAtRepeatedEntry()
    {
        const string json = """
            {
              "site": "x",
              "anchors": [
                { "id": "HP-A01", "position": [0, 0, 3], "orientation_deg": [0, 0, 0] },
                { "id": "HP-A02", "position": [9, 0, 3], "orientation_deg": [0, 0, 0] },
                { "id": "HP-A01", "position": [9, 9, 3], "orientation_deg": [0, 0, 0] },
                { "id": "HP-A04", "position": [0.01, 0, 3], "orientation_deg": [0, 0, 0] }
              ]
            }
            """;
        var e = Assert.Throws<FleetDataException>(() => SiteFile.ParseJson(json, "dup.json"));

        // Both anchor-map errors, each at its line: the duplicate and the coincident pair (HP-A01/HP-A04).
        Assert.Contains(e.Errors, d => d.Line == 6 && d.Message.Contains("'HP-A01' appears more than once"));
        Assert.Contains(e.Errors, d => d.Line == 7 && d.Message.Contains("apart"));
        Assert.Contains("dup.json:6: ", e.Message);
    }

    [Fact]
    public void ParseJson_NonFiniteNumber_ReportedWithLine()
    {
        const string json = """
            {
              "site": "x",
              "anchors": [
                { "id": "A1", "position": [0, 0, 1e999], "orientation_deg": [0, 0, 0] }
              ]
            }
            """;
        var e = Assert.Throws<FleetDataException>(() => SiteFile.ParseJson(json, "inf.json"));
        var error = Assert.Single(e.Errors);
        Assert.Equal(4, error.Line);
        Assert.Contains("not a finite number", error.Message);
    }

    [Fact]
    public void ParseYaml_NonFiniteAndWrongType_ReportedWithLine()
    {
        const string yaml = """
            site: y
            anchors:
              - id: A1
                position: [0, 0, .nan]
                orientation_deg: [0, 0, 0]
              - id: A2
                position: [1, 2, 3]
                orientation_deg: [0, north, 0]
            """;
        var e = Assert.Throws<FleetDataException>(() => SiteFile.ParseYaml(yaml, "s.yaml"));
        Assert.Contains(e.Errors, d => d.Line == 4 && d.Message.Contains("not a finite number"));
        Assert.Contains(e.Errors, d => d.Line == 8 && d.Message.Contains("must be a number"));
        Assert.Contains("s.yaml:4: ", e.Message);
    }

    [Fact]
    public void ParseYaml_SyntaxError_ReportsLine()
    {
        const string yaml = "site: y\nanchors:\n  - id: A1\n    position: [0, 0, 3\n";
        var e = Assert.Throws<FleetDataException>(() => SiteFile.ParseYaml(yaml, "broken.yaml"));
        Assert.StartsWith("broken.yaml:", e.Message);
        Assert.True(Assert.Single(e.Errors).Line >= 4);
    }

    [Fact]
    public void ParseJson_RackMinAboveMax_Reported()
    {
        const string json = """
            {
              "site": "x",
              "anchors": [],
              "racks": [ { "min": [5, 0, 0], "max": [4, 1, 6] } ]
            }
            """;
        var e = Assert.Throws<FleetDataException>(() => SiteFile.ParseJson(json, "r.json"));
        Assert.Equal(4, Assert.Single(e.Errors).Line);
    }

    [Fact]
    public void ParseJson_LowLayout_KeepsSmallVerticalSpreadWarning()
    {
        var layout = SiteFile.ParseJson(SiteFile.ToJson(WarehouseSites.Build(WarehouseSites.Low)));
        Assert.Contains(layout.Anchors.Warnings, w => w.Code == AnchorMapIssueCode.SmallVerticalSpread);
    }

    private static void AssertSameLayout(SiteLayout expected, SiteLayout actual)
    {
        Assert.Equal(expected.SiteId, actual.SiteId);
        Assert.Equal(expected.Anchors.Count, actual.Anchors.Count);
        for (var i = 0; i < expected.Anchors.Count; i++)
        {
            Assert.Equal(expected.Anchors[i], actual.Anchors[i]);
        }

        Assert.Equal(expected.Racks, actual.Racks);
        Assert.Equal(expected.Floor, actual.Floor);
    }
}
