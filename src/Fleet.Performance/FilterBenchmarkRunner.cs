using System.Diagnostics;

namespace Fleet.Performance;

/// <summary>Side-by-side figures of one run of <see cref="FilterBenchmarkRunner"/>.</summary>
public sealed record FilterBenchmarkResult(
    double NsPerUpdate,
    double NsPerUpdateReference,
    double Speedup,
    double BytesPerUpdate,
    double BytesPerUpdateReference,
    double NsPerBiasCorrection,
    double BytesPerBiasCorrection,
    long Updates,
    long ReferenceUpdates,
    int Rounds);

/// <summary>
/// Times the Fleet robust update against the MathNet reference in the same process, alternating short rounds
/// of each (and of bias-model inference) so that machine noise hits all alike; reports medians over rounds. Allocation is measured with
/// <see cref="GC.GetAllocatedBytesForCurrentThread"/> around the timed loops.
/// </summary>
public static class FilterBenchmarkRunner
{
    public static FilterBenchmarkResult Run(int rounds = 7, int updatesPerRound = 40_000, int referenceUpdatesPerRound = 2_000)
    {
        var scenario = new FilterBenchmarkScenario();
        var fleet = scenario.CreateFleetFilter();
        var reference = scenario.CreateReference();
        long fleetIndex = 0, referenceIndex = 0;

        // Warm up both (JIT, tiered compilation) before timing.
        for (var i = 0; i < 20_000; i++)
        {
            fleet.Submit(scenario.At(fleetIndex++));
        }

        for (var i = 0; i < 500; i++)
        {
            reference.Update(scenario.At(referenceIndex++));
        }

        var bias = new BiasBenchmarkScenario(scenario);
        var sink = 0.0;
        for (var i = 0; i < 20_000; i++)
        {
            sink += bias.Predict(i);
        }

        var fleetNs = new double[rounds];
        var biasNs = new double[rounds];
        var biasBytes = new double[rounds];
        var referenceNs = new double[rounds];
        var fleetBytes = new double[rounds];
        var referenceBytes = new double[rounds];
        for (var round = 0; round < rounds; round++)
        {
            var bytes0 = GC.GetAllocatedBytesForCurrentThread();
            var start = Stopwatch.GetTimestamp();
            for (var i = 0; i < updatesPerRound; i++)
            {
                fleet.Submit(scenario.At(fleetIndex++));
            }

            fleetNs[round] = Stopwatch.GetElapsedTime(start).TotalNanoseconds / updatesPerRound;
            fleetBytes[round] = (double)(GC.GetAllocatedBytesForCurrentThread() - bytes0) / updatesPerRound;

            bytes0 = GC.GetAllocatedBytesForCurrentThread();
            start = Stopwatch.GetTimestamp();
            for (var i = 0; i < referenceUpdatesPerRound; i++)
            {
                reference.Update(scenario.At(referenceIndex++));
            }

            referenceNs[round] = Stopwatch.GetElapsedTime(start).TotalNanoseconds / referenceUpdatesPerRound;
            referenceBytes[round] = (double)(GC.GetAllocatedBytesForCurrentThread() - bytes0) / referenceUpdatesPerRound;

            bytes0 = GC.GetAllocatedBytesForCurrentThread();
            start = Stopwatch.GetTimestamp();
            for (var i = 0; i < updatesPerRound; i++)
            {
                sink += bias.Predict(i);
            }

            biasNs[round] = Stopwatch.GetElapsedTime(start).TotalNanoseconds / updatesPerRound;
            biasBytes[round] = (double)(GC.GetAllocatedBytesForCurrentThread() - bytes0) / updatesPerRound;
        }

        GC.KeepAlive(sink);

        var fleetMedian = Median(fleetNs);
        var referenceMedian = Median(referenceNs);
        return new FilterBenchmarkResult(
            fleetMedian,
            referenceMedian,
            referenceMedian / fleetMedian,
            Median(fleetBytes),
            Median(referenceBytes),
            Median(biasNs),
            Median(biasBytes),
            (long)rounds * updatesPerRound,
            (long)rounds * referenceUpdatesPerRound,
            rounds);
    }

    private static double Median(double[] values)
    {
        var sorted = (double[])values.Clone();
        Array.Sort(sorted);
        return sorted[sorted.Length / 2];
    }
}
