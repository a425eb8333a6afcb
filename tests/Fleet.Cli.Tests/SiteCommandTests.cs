using System.Text.Json;

namespace Fleet.Cli.Tests;

[Collection(CliCollection.Name)]
public class SiteCommandTests
{
    private static void Simulate(TempFolder dir, string name, int seed = 3, int robots = 2, int duration = 20)
    {
        var (code, _, error) = CliRunner.Run("simulate", "--robots", robots.ToString(System.Globalization.CultureInfo.InvariantCulture),
            "--duration", duration.ToString(System.Globalization.CultureInfo.InvariantCulture), "--seed", seed.ToString(System.Globalization.CultureInfo.InvariantCulture),
            "--site-out", dir.File(name + ".json"), "--log-out", dir.File(name + ".jsonl"));
        Assert.True(code == 0, error);
    }

    [Fact]
    public void SiteReport_SiteOnly_WritesMapsAndAnchorTable()
    {
        using var dir = new TempFolder();
        Simulate(dir, "site");

        var (code, output, error) = CliRunner.Run("site", "report", dir.File("site.json"), "--heights", "0.5,1.5", "--grid-step", "2", "--out", dir.File("report.html"));

        Assert.True(code == 0, error);
        Assert.Contains("2 tag height(s)", output);
        var html = File.ReadAllText(dir.File("report.html"));
        Assert.Contains("Geometry at tag height 0.5 m", html);
        Assert.Contains("Geometry at tag height 1.5 m", html);
        Assert.Contains("HP-A01", html);
        Assert.DoesNotContain("TDOA residuals", html);
    }

    [Fact]
    public void SiteReport_WithLogAndModel_AddsResidualsBeforeAfterAndBothReplays()
    {
        using var dir = new TempFolder();
        Simulate(dir, "site", robots: 3, duration: 30);
        var (code, _, error) = CliRunner.Run("bias", "train", "--site", dir.File("site.json"), "--log", dir.File("site.jsonl"),
            "--out", dir.File("model.fbm"), "--epochs", "3", "--hidden", "8");
        Assert.True(code == 0, error);

        (code, _, error) = CliRunner.Run("site", "report", dir.File("site.json"), "--log", dir.File("site.jsonl"), "--bias-model", dir.File("model.fbm"),
            "--grid-step", "2", "--out", dir.File("report.html"));

        Assert.True(code == 0, error);
        var html = File.ReadAllText(dir.File("report.html"));
        Assert.Contains("Bias-model validation against truth", html);
        Assert.Contains("RMSE after (m)", html);
        Assert.Contains("A: huber update, no bias model", html);
        Assert.Contains("B: huber update, bias model model.fbm", html);
        Assert.Contains("TDOAs heard (count)", html);
    }

    [Fact]
    public void SiteReport_WithLogWithoutModel_ShowsResidualsAndAccuracy()
    {
        using var dir = new TempFolder();
        Simulate(dir, "site");

        var (code, _, error) = CliRunner.Run("site", "report", dir.File("site.json"), "--log", dir.File("site.jsonl"), "--grid-step", "2", "--out", dir.File("report.html"));

        Assert.True(code == 0, error);
        var html = File.ReadAllText(dir.File("report.html"));
        Assert.Contains("TDOA residuals and tracking accuracy against truth", html);
        Assert.Contains("horizontal RMSE", html);
        Assert.DoesNotContain("RMSE after (m)", html);
    }

    [Fact]
    public void SiteReport_ModelWithoutLog_IsAParseError()
    {
        using var dir = new TempFolder();
        Simulate(dir, "site");

        var (code, _, error) = CliRunner.Run("site", "report", dir.File("site.json"), "--bias-model", dir.File("none.fbm"), "--out", dir.File("report.html"));

        Assert.NotEqual(0, code);
        Assert.Contains("--bias-model needs --log", error);
        Assert.False(File.Exists(dir.File("report.html")));
    }

    [Fact]
    public void Replay_ReportWithComparePlain_WritesBothConfigurationsAndKeepsJson()
    {
        using var dir = new TempFolder();
        Simulate(dir, "site");

        var (code, output, error) = CliRunner.Run("replay", dir.File("site.json"), dir.File("site.jsonl"), "--json",
            "--report", dir.File("replay.html"), "--compare-update", "plain");

        Assert.True(code == 0, error);

        // stdout is still exactly the replay JSON object of configuration A.
        var root = JsonDocument.Parse(output).RootElement;
        Assert.Equal("huber", root.GetProperty("update").GetString());
        Assert.Equal(2, root.GetProperty("robots").EnumerateObject().Count());
        Assert.Contains("replay.html", error);

        var html = File.ReadAllText(dir.File("replay.html"));
        Assert.Contains("A: huber update, no bias model", html);
        Assert.Contains("B: plain update, no bias model", html);
        Assert.Contains("B − A", html);
        Assert.Contains("NEES consistency", html);
    }

    [Fact]
    public void Replay_CompareWithoutReport_IsAParseError()
    {
        using var dir = new TempFolder();
        Simulate(dir, "site");

        var (code, _, error) = CliRunner.Run("replay", dir.File("site.json"), dir.File("site.jsonl"), "--compare-update", "plain");

        Assert.NotEqual(0, code);
        Assert.Contains("need --report", error);
    }
}
