using System.CommandLine;
using Fleet.Estimation.Evaluation;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;

namespace Fleet.Cli.Commands;

/// <summary>Filter options shared by the commands that run filters (replay, demo, bias eval).</summary>
internal sealed class FilterChoice
{
    public const string Plain = "plain";

    public Option<string> Update { get; } = new("--update")
    {
        Description = "Measurement update: huber, cauchy, tukey (robust M-estimation) or plain (least squares, no gate)",
        DefaultValueFactory = _ => "huber",
    };

    public Option<double> Sigma { get; } = new("--sigma")
    {
        Description = "TDOA noise 1-σ assumed by the filter (m)",
        DefaultValueFactory = _ => new FilterOptions().TdoaSigmaMetres,
    };

    public Option<double> ReorderLag { get; } = new("--reorder-lag")
    {
        Description = "How late (s) a measurement may arrive and still be applied in time order",
        DefaultValueFactory = _ => new FilterOptions().ReorderLagSeconds,
    };

    public FilterChoice() => Update.AcceptOnlyFromAmong("huber", "cauchy", "tukey", Plain);

    public void AddTo(Command command)
    {
        command.Options.Add(Update);
        command.Options.Add(Sigma);
        command.Options.Add(ReorderLag);
    }

    public static RobustKernel KernelOf(string update) => update switch
    {
        "cauchy" => RobustKernel.Cauchy,
        "tukey" => RobustKernel.Tukey,
        Plain => RobustKernel.LeastSquares,
        _ => RobustKernel.Huber,
    };

    public Func<MotionModelKind, Vector3D, FilterOptions> OptionsFactory(ParseResult parse) =>
        OptionsFactory(parse.GetValue(Update)!, parse.GetValue(Sigma), parse.GetValue(ReorderLag));

    public static Func<MotionModelKind, Vector3D, FilterOptions> OptionsFactory(string update, double sigma, double reorderLag)
    {
        var kernel = KernelOf(update);
        return (motion, lever) => new FilterOptions
        {
            Motion = motion,
            Kernel = kernel,

            // "plain" is the textbook EKF: least squares and no outlier gate, for comparison.
            GateEnabled = update != Plain,
            TdoaSigmaMetres = sigma,
            ReorderLagSeconds = reorderLag,
            TagLeverArm = lever,

            // Logs describe ground robots: a TDOA-only tag still rides at its lever-arm height above the floor.
            HoldTagHeight = true,
        };
    }

    public static EvaluationSettings Settings(Func<MotionModelKind, Vector3D, FilterOptions> options) => new() { OptionsFor = options };
}
