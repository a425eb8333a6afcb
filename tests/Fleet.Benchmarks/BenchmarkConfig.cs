using BenchmarkDotNet.Configs;
using BenchmarkDotNet.Diagnosers;
using BenchmarkDotNet.Jobs;

namespace Fleet.Benchmarks;

/// <summary>One config for every suite: memory diagnoser on, a short job that fits a shared 2-core machine.</summary>
internal sealed class FleetBenchmarkConfig : ManualConfig
{
    public FleetBenchmarkConfig()
    {
        AddJob(Job.ShortRun.WithId("short"));
        AddDiagnoser(MemoryDiagnoser.Default);
        WithOptions(ConfigOptions.DisableOptimizationsValidator);
    }
}
