using System.Text.Json;

namespace Fleet.Cli.Tests;

[Collection(CliCollection.Name)]
public class ReplayCommandTests
{
    [Fact]
    public void SimulateThenReplay_Json_HasTheDocumentedKeys()
    {
        using var dir = new TempFolder();
        var (code, _, error) = CliRunner.Run("simulate", "--robots", "2", "--duration", "20", "--seed", "4",
            "--site-out", dir.File("site.json"), "--log-out", dir.File("log.jsonl"));
        Assert.True(code == 0, error);

        (code, var output, error) = CliRunner.Run("replay", dir.File("site.json"), dir.File("log.jsonl"), "--json");
        Assert.True(code == 0, error);
        using var json = JsonDocument.Parse(output);
        var root = json.RootElement;
        foreach (var key in new[] { "rmse_horizontal_m", "rmse_vertical_m", "rmse_3d_m", "rejection_rate", "nees_in_band_fraction", "measurements" })
        {
            Assert.True(root.TryGetProperty(key, out _), $"missing key {key}");
        }

        Assert.True(root.GetProperty("measurements").GetInt64() > 1000);
        Assert.True(root.GetProperty("rmse_horizontal_m").GetDouble() is > 0 and < 1.0);
        Assert.Equal(2, root.GetProperty("robots").EnumerateObject().Count());
    }

    [Fact]
    public void Replay_MalformedLine_IsReportedWithFileAndLineAndTheRestIsUsed()
    {
        using var dir = new TempFolder();
        CliRunner.Run("simulate", "--robots", "1", "--duration", "10", "--site-out", dir.File("site.json"), "--log-out", dir.File("log.jsonl"));
        var lines = File.ReadAllLines(dir.File("log.jsonl")).ToList();
        lines.Insert(2, "{\"type\":\"tdoa\",\"t\":\"soon\"");
        File.WriteAllLines(dir.File("bad.jsonl"), lines);

        var (code, output, error) = CliRunner.Run("replay", dir.File("site.json"), dir.File("bad.jsonl"), "--json");

        Assert.Equal(0, code);
        Assert.Contains(dir.File("bad.jsonl") + ":3:", error);
        Assert.True(JsonDocument.Parse(output).RootElement.GetProperty("measurements").GetInt64() > 100);
    }

    [Fact]
    public void Replay_MissingLog_FailsWithTheFileNamed()
    {
        using var dir = new TempFolder();
        CliRunner.Run("simulate", "--robots", "1", "--duration", "5", "--site-out", dir.File("site.json"), "--log-out", dir.File("log.jsonl"));

        var (code, _, error) = CliRunner.Run("replay", dir.File("site.json"), dir.File("nope.jsonl"));

        Assert.Equal(2, code);
        Assert.Contains("nope.jsonl", error);
    }

    [Fact]
    public void Replay_BadSiteFile_FailsWithFileAndLine()
    {
        using var dir = new TempFolder();
        File.WriteAllText(dir.File("site.json"), "{ \"site\": \"x\",\n  \"anchors\": [\n    { \"id\": \"A\", \"position\": [0, 0] }\n  ]\n}\n");
        File.WriteAllText(dir.File("log.jsonl"), "");

        var (code, _, error) = CliRunner.Run("replay", dir.File("site.json"), dir.File("log.jsonl"));

        Assert.Equal(2, code);
        Assert.Contains(dir.File("site.json") + ":3", error);
    }

    [Fact]
    public void Replay_PlainUpdate_IsAccepted()
    {
        using var dir = new TempFolder();
        CliRunner.Run("simulate", "--robots", "1", "--duration", "10", "--site-out", dir.File("site.json"), "--log-out", dir.File("log.jsonl"));

        var (code, output, error) = CliRunner.Run("replay", dir.File("site.json"), dir.File("log.jsonl"), "--update", "plain");

        Assert.True(code == 0, error);
        Assert.Contains("update plain", output);
    }
}
