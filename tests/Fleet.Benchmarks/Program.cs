using BenchmarkDotNet.Running;
using Fleet.Benchmarks;

BenchmarkSwitcher.FromAssembly(typeof(FleetBenchmarkConfig).Assembly).Run(args);
