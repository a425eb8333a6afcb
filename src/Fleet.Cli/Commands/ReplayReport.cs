using Fleet.Cli.Output;
using Fleet.Estimation.Evaluation;

namespace Fleet.Cli.Commands;

/// <summary>Turns an <see cref="EvaluationResult"/> into the replay table or the replay JSON object.</summary>
internal static class ReplayReport
{
    public static string Table(EvaluationResult result)
    {
        var table = new TextTable("robot", "scored", "rmse_h m", "rmse_v m", "rmse_3d m", "p95_h m", "reject %", "down-wt %", "nees in band", "tracked", "reinit");
        foreach (var (robot, errors) in result.PerRobot)
        {
            AddRow(table, robot, errors);
        }

        table.AddSeparator();
        AddRow(table, "all", result.Overall);
        return table.ToString();
    }

    private static void AddRow(TextTable table, string name, ErrorAccumulator e) => table.AddRow(
        name,
        e.Samples,
        e.RmseHorizontal,
        e.RmseVertical,
        e.Rmse3D,
        e.HorizontalPercentile(0.95),
        Percent(e.RejectionRate),
        Percent(e.DownWeightRate),
        Percent(e.NeesInBandFraction),
        Percent(e.TrackedFraction),
        e.Reinitialisations);

    private static string Percent(double fraction) =>
        double.IsNaN(fraction) ? "–" : (fraction * 100).ToString("0.0", System.Globalization.CultureInfo.InvariantCulture) + "%";

    /// <summary>The replay JSON object: overall figures at the top level, per robot under "robots".</summary>
    public static Dictionary<string, object?> Json(EvaluationResult result, string update, string? biasModel)
    {
        var json = Figures(result.Overall);
        json["update"] = update;
        json["bias_model"] = biasModel;
        json["records"] = result.Records;
        json["unknown_anchor_measurements"] = result.UnknownAnchorMeasurements;
        json["robots"] = result.PerRobot.ToDictionary(p => p.Key, p => Figures(p.Value));
        return json;
    }

    private static Dictionary<string, object?> Figures(ErrorAccumulator e) => new()
    {
        ["rmse_horizontal_m"] = CliJson.Round(e.RmseHorizontal),
        ["rmse_vertical_m"] = CliJson.Round(e.RmseVertical),
        ["rmse_3d_m"] = CliJson.Round(e.Rmse3D),
        ["p50_horizontal_m"] = CliJson.Round(e.HorizontalPercentile(0.5)),
        ["p95_horizontal_m"] = CliJson.Round(e.HorizontalPercentile(0.95)),
        ["rejection_rate"] = CliJson.Round(e.RejectionRate),
        ["down_weighted_rate"] = CliJson.Round(e.DownWeightRate),
        ["nees_in_band_fraction"] = CliJson.Round(e.NeesInBandFraction),
        ["tracked_fraction"] = CliJson.Round(e.TrackedFraction),
        ["reinitialisations"] = e.Reinitialisations,
        ["measurements"] = e.Measurements,
        ["scored_samples"] = e.Samples,
    };
}
