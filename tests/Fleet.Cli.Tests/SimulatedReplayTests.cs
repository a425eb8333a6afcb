using Fleet.Estimation.Evaluation;
using Fleet.Estimation.Filtering;
using Fleet.Simulation;

namespace Fleet.Cli.Tests;

/// <summary>
/// Seeded simulated Harbor Point runs through the same replay scoring as <c>fleet replay</c>
/// (<see cref="TrackingEvaluation"/>). Short runs so the whole class takes a few seconds.
/// </summary>
public class SimulatedReplayTests
{
    [Fact]
    public void Replay_NoNlosNoBias_RobustKernelsKeepCentimetreAccuracyWithoutReinitialisation()
    {
        // Clean Gaussian ranging (7 cm per link, so 10 cm per TDOA): the robust machinery must cost nothing.
        var options = new SimulationOptions
        {
            Layout = WarehouseSites.Tall,
            Seed = 3,
            RobotCount = 4,
            DurationSeconds = 30,
            ConstantVelocityFraction = 0,
            BiasAmplitudeMetres = 0,
            NlosEnabled = false,
            MultipathOutlierProbability = 0,
        };
        foreach (var kernel in new[] { RobustKernel.Huber, RobustKernel.Tukey, RobustKernel.LeastSquares })
        {
            var result = Replay(options, kernel);

            // Planar odometry robots at a few centimetres is what the filter achieved before the robustness work
            // (measured 3–4 cm); 10 cm leaves room for seeds, not for a regression to decimetres.
            Assert.True(result.Overall.RmseHorizontal < 0.10, $"{kernel}: rmse_h {result.Overall.RmseHorizontal:F3} m");
            Assert.Equal(0, result.Overall.Reinitialisations);
            Assert.True(result.Overall.TrackedFraction > 0.999, $"{kernel}: tracked {result.Overall.TrackedFraction:P1}");
        }
    }

    [Theory]
    [InlineData(WarehouseSites.Tall)]
    [InlineData(WarehouseSites.Low)]
    public void Replay_HeavyNlos_RobustRmseAtMostHalfOfPlainWithoutDivergence(string layout)
    {
        // NLOS-heavy hall: rack blockage on every link that crosses a rack, plus late reflections on 10 % of links
        // with a heavy tail (0.3 m + exponential, mean 3 m). Plain least squares (no gate) is dragged by every one of
        // them; the M-estimator with its gate must at least halve the error and never lose a robot.
        var options = new SimulationOptions
        {
            Layout = layout,
            Seed = 3,
            RobotCount = 6,
            DurationSeconds = 30,
            BiasAmplitudeMetres = 0,
            MultipathOutlierProbability = 0.10,
            MultipathMeanExcessMetres = 3.0,
        };
        long tdoa = 0, outliers = 0;
        foreach (var observation in new MeasurementGenerator(options).GenerateDetailed())
        {
            if (observation.Tdoa is { } info)
            {
                tdoa++;
                outliers += info.IsNlos || info.IsMultipathOutlier ? 1 : 0;
            }
        }

        Assert.True(outliers >= 0.10 * tdoa, $"only {outliers} of {tdoa} TDOAs are NLOS or multipath");

        var plain = Replay(options, RobustKernel.LeastSquares);
        foreach (var kernel in new[] { RobustKernel.Huber, RobustKernel.Cauchy, RobustKernel.Tukey })
        {
            var robust = Replay(options, kernel);
            Assert.True(robust.Overall.RmseHorizontal <= 0.5 * plain.Overall.RmseHorizontal, $"{kernel}: {robust.Overall.RmseHorizontal:F3} m vs plain {plain.Overall.RmseHorizontal:F3} m");
            Assert.Equal(0, robust.Overall.Reinitialisations);
            Assert.True(robust.Overall.TrackedFraction > 0.99, $"{kernel}: tracked {robust.Overall.TrackedFraction:P1}");
        }
    }

    private static EvaluationResult Replay(SimulationOptions options, RobustKernel kernel)
    {
        var generator = new MeasurementGenerator(options);
        var settings = new EvaluationSettings
        {
            // As `fleet replay --update plain`: least squares without a gate is the textbook comparison.
            OptionsFor = (motion, lever) => new FilterOptions
            {
                Motion = motion,
                Kernel = kernel,
                GateEnabled = kernel != RobustKernel.LeastSquares,
                TagLeverArm = lever,
                HoldTagHeight = true,
            },
        };
        var evaluation = new TrackingEvaluation(generator.Layout, settings);
        foreach (var record in generator.Generate())
        {
            evaluation.Add(record);
        }

        return evaluation.Finish();
    }
}
