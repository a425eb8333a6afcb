using Fleet.Estimation.Bias;
using Fleet.Estimation.Bias.Training;
using Fleet.Estimation.Filtering;

namespace Fleet.Estimation.Evaluation;

/// <summary>Residual statistics of TDOAs (measured − true, metres) that involve one anchor, before and after bias correction.</summary>
public sealed record AnchorResidualStatistics(
    string AnchorId,
    int Count,
    double MeanBefore,
    double RmseBefore,
    double RobustSigmaBefore,
    double MeanAfter,
    double RmseAfter,
    double RobustSigmaAfter);

/// <summary>
/// Per-anchor residuals of TDOA samples before and after a bias model. A TDOA counts for both of its anchors, with
/// its sign flipped for anchor A so that a positive mean always means "this anchor's link reads long".
/// Robust sigma is 1.482602·MAD (the normal-consistent MAD scale; common practice).
/// </summary>
public static class BiasResidualStatistics
{
    public static (IReadOnlyList<AnchorResidualStatistics> PerAnchor, AnchorResidualStatistics Overall) Compute(
        IReadOnlyList<TdoaTrainingSample> samples, ITdoaBiasModel? model)
    {
        var before = new Dictionary<string, List<double>>(StringComparer.Ordinal);
        var after = new Dictionary<string, List<double>>(StringComparer.Ordinal);
        var allBefore = new List<double>(samples.Count);
        var allAfter = new List<double>(samples.Count);
        foreach (var s in samples)
        {
            var bias = model?.PredictTdoaBias(s.Map, s.AnchorA, s.AnchorB, s.TagPosition, s.RobotYaw) ?? 0.0;
            if (!double.IsFinite(bias))
            {
                bias = 0;
            }

            var r0 = s.Target;
            var r1 = s.Target - bias;
            allBefore.Add(r0);
            allAfter.Add(r1);
            Add(before, s.Map[s.AnchorB].Id, r0);
            Add(after, s.Map[s.AnchorB].Id, r1);
            Add(before, s.Map[s.AnchorA].Id, -r0);
            Add(after, s.Map[s.AnchorA].Id, -r1);
        }

        var perAnchor = before.Keys.Order(StringComparer.Ordinal)
            .Select(id => Summarise(id, before[id], after[id]))
            .ToArray();
        return (perAnchor, Summarise("all", allBefore, allAfter));
    }

    private static void Add(Dictionary<string, List<double>> map, string id, double value)
    {
        if (!map.TryGetValue(id, out var list))
        {
            map[id] = list = [];
        }

        list.Add(value);
    }

    private static AnchorResidualStatistics Summarise(string id, List<double> before, List<double> after) => new(
        id,
        before.Count,
        Mean(before),
        Rms(before),
        RobustSigma(before),
        Mean(after),
        Rms(after),
        RobustSigma(after));

    private static double Mean(List<double> v) => v.Count == 0 ? double.NaN : v.Average();

    private static double Rms(List<double> v) => v.Count == 0 ? double.NaN : Math.Sqrt(v.Sum(x => x * x) / v.Count);

    private static double RobustSigma(List<double> v)
    {
        if (v.Count == 0)
        {
            return double.NaN;
        }

        var median = MathNet.Numerics.Statistics.Statistics.Median(v);
        var mad = MathNet.Numerics.Statistics.Statistics.Median(v.Select(x => Math.Abs(x - median)));
        return RobustKernels.MadToSigma * mad;
    }
}
