using BenchmarkDotNet.Attributes;
using Fleet.Estimation.Filtering;
using Fleet.Performance;

namespace Fleet.Benchmarks;

/// <summary>
/// One robust TDOA update (constant-velocity model, Huber kernel, gate, Joseph form) in Fleet against the
/// straightforward MathNet dense-matrix reference doing the same math. Target: ≥ 20× faster, 0 B allocated.
/// </summary>
[Config(typeof(FleetBenchmarkConfig))]
public class FilterUpdateBenchmarks
{
    private const int Batch = 1000;
    private FilterBenchmarkScenario _scenario = null!;
    private RobotFilter _fleet = null!;
    private TextbookRobustEkf _reference = null!;
    private long _fleetIndex;
    private long _referenceIndex;

    [GlobalSetup]
    public void Setup()
    {
        _scenario = new FilterBenchmarkScenario();
        _fleet = _scenario.CreateFleetFilter();
        _reference = _scenario.CreateReference();
    }

    [Benchmark(Baseline = true, OperationsPerInvoke = Batch)]
    public void ReferenceMathNetEkf()
    {
        for (var i = 0; i < Batch; i++)
        {
            _reference.Update(_scenario.At(_referenceIndex++));
        }
    }

    [Benchmark(OperationsPerInvoke = Batch)]
    public void FleetRobustUpdate()
    {
        for (var i = 0; i < Batch; i++)
        {
            _fleet.Submit(_scenario.At(_fleetIndex++));
        }
    }
}
