using BenchmarkDotNet.Attributes;
using Fleet.Performance;

namespace Fleet.Benchmarks;

/// <summary>Bias correction of one TDOA (two links through a 3 × 30 tanh network). Target: ≤ 1 µs, 0 B allocated.</summary>
[Config(typeof(FleetBenchmarkConfig))]
public class BiasInferenceBenchmarks
{
    private const int Batch = 1024;
    private BiasBenchmarkScenario _scenario = null!;

    [GlobalSetup]
    public void Setup() => _scenario = new BiasBenchmarkScenario(new FilterBenchmarkScenario());

    [Benchmark(OperationsPerInvoke = Batch)]
    public double PredictTdoaBias()
    {
        var sum = 0.0;
        for (var i = 0; i < Batch; i++)
        {
            sum += _scenario.Predict(i);
        }

        return sum;
    }
}
