using System.Text.Json;

namespace Fleet.Cli.Tests;

[Collection(CliCollection.Name)]
public class BiasCommandTests
{
    private static void Simulate(TempFolder dir, string layout, int seed, params string[] extra)
    {
        var (code, _, error) = CliRunner.Run(["simulate", "--layout", layout, "--robots", "3", "--duration", "30", "--seed", seed.ToString(System.Globalization.CultureInfo.InvariantCulture),
            "--site-out", dir.File(layout + ".json"), "--log-out", dir.File(layout + ".jsonl"), .. extra]);
        Assert.True(code == 0, error);
    }

    [Fact]
    public void TrainEvalExport_RoundTrip_Works()
    {
        using var dir = new TempFolder();
        Simulate(dir, "harbor-tall", 1);
        Simulate(dir, "harbor-cross", 2);
        Simulate(dir, "harbor-low", 3, "--no-nlos");

        var (code, output, error) = CliRunner.Run("bias", "train",
            "--site", dir.File("harbor-tall.json"), "--log", dir.File("harbor-tall.jsonl"),
            "--site", dir.File("harbor-cross.json"), "--log", dir.File("harbor-cross.jsonl"),
            "--out", dir.File("model.fbm"), "--epochs", "15", "--seed", "3");
        Assert.True(code == 0, error);
        Assert.Contains("WholeLayouts", output);

        (code, output, error) = CliRunner.Run("bias", "eval", "--model", dir.File("model.fbm"),
            "--site", dir.File("harbor-low.json"), "--log", dir.File("harbor-low.jsonl"), "--json");
        Assert.True(code == 0, error);
        var root = JsonDocument.Parse(output).RootElement;
        var residuals = root.GetProperty("residuals");

        // The model corrects a layout it never saw: the TDOA residual scatter must shrink.
        Assert.True(residuals.GetProperty("robust_sigma_after_m").GetDouble() < residuals.GetProperty("robust_sigma_before_m").GetDouble());
        Assert.Equal(8, root.GetProperty("anchors").GetArrayLength());
        Assert.True(root.GetProperty("with_model").TryGetProperty("rmse_horizontal_m", out _));

        (code, _, error) = CliRunner.Run("bias", "export-onnx", dir.File("model.fbm"), dir.File("model.onnx"));
        Assert.True(code == 0, error);
        Assert.True(new FileInfo(dir.File("model.onnx")).Length > 1000);

        (code, output, error) = CliRunner.Run("replay", dir.File("harbor-low.json"), dir.File("harbor-low.jsonl"), "--bias-model", dir.File("model.fbm"), "--json");
        Assert.True(code == 0, error);
        Assert.EndsWith("model.fbm", JsonDocument.Parse(output).RootElement.GetProperty("bias_model").GetString());
    }

    [Fact]
    public void Eval_CorruptModel_FailsClearlyWithTheFileNamed()
    {
        using var dir = new TempFolder();
        Simulate(dir, "harbor-tall", 1);
        File.WriteAllBytes(dir.File("broken.fbm"), [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12]);

        var (code, _, error) = CliRunner.Run("bias", "eval", "--model", dir.File("broken.fbm"),
            "--site", dir.File("harbor-tall.json"), "--log", dir.File("harbor-tall.jsonl"));

        Assert.Equal(2, code);
        Assert.Contains("broken.fbm", error);
    }

    [Fact]
    public void Train_UnpairedSiteAndLog_IsAUsageError()
    {
        using var dir = new TempFolder();
        Simulate(dir, "harbor-tall", 1);

        var (code, _, error) = CliRunner.Run("bias", "train", "--site", dir.File("harbor-tall.json"),
            "--log", dir.File("harbor-tall.jsonl"), "--log", dir.File("harbor-tall.jsonl"), "--out", dir.File("m.fbm"));

        Assert.Equal(2, code);
        Assert.Contains("pair up", error);
    }
}
