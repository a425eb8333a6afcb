#!/usr/bin/python3
"""Two real Fleet silos on one PostgreSQL carrying a 1,000-robot fleet, driven by the built `fleet bench cluster`.

Two `Fleet.Server` processes join one Orleans cluster through PostgreSQL (clustering + shared site registry), started
the same way as cluster_check.py but as their own cluster (ClusterId py-cluster-load), so they may share the database
cluster_check.py used: its dead silos sit under another cluster id and its site under another site id. Rate limits
are off (one client sends the whole fleet). `fleet bench cluster` spreads its gateway streams over both silos and
scrapes each silo's Prometheus endpoint; this script checks what the servers' own counters say:
  1. every sample sent was acknowledged (lost == 0) and no stream failed (e.g. UNAVAILABLE);
  2. both silos host robots (each one's fleet_robots_active gauge) and together they host the whole fleet;
then prints the measured figures (throughput, heap per robot, CPU per silo).

Usage: cluster_load.py --postgres CONNSTR [--robots N] [--seconds S] [--saturated-seconds S] [--server-dll PATH]
[--fleet-dll PATH] [--save-json PATH]. CONNSTR is an Npgsql connection string (also read from FLEET_TEST_POSTGRES). When PostgreSQL is
not reachable it prints SKIP with the reason and exits 0 (.ci/run starts one with tests/outside/postgres_service.sh).
The defaults keep the run near a minute on 2 cores; `--seconds 15 --saturated-seconds 6` are the command's own defaults.
"""
import argparse
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from cluster_check import skip_without_postgres, start_server, wait_ready  # noqa: E402
from outside_checks import REPO, Checks, print_server_log, stop_processes  # noqa: E402

SILOS = ("silo-a", "silo-b")


def gcdump_tool():
    """Microsoft's dotnet-gcdump (a .NET global tool; .ci/run installs it), or None."""
    return shutil.which("dotnet-gcdump") or next((p for p in [os.path.expanduser("~/.dotnet/tools/dotnet-gcdump")] if os.path.exists(p)), None)


def live_heap_bytes(tool, pid):
    """Live managed heap of a process after the full blocking collection dotnet-gcdump induces (its 'GC Heap bytes')."""
    report = subprocess.run([tool, "report", "-p", str(pid)], stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, timeout=120)
    match = re.search(r"^\s*([\d,]+)\s+GC Heap bytes", report.stdout, re.MULTILINE)
    if report.returncode != 0 or not match:
        raise RuntimeError(f"dotnet-gcdump report failed: {report.stdout[-500:]}")
    return int(match.group(1).replace(",", ""))

# One client sends the whole fleet; the per-client limits would throttle it. The watchdog's CPU-starvation warnings
# under full load are expected on 2 cores.
BENCH_ENV = {
    "Fleet__Cluster__ClusterId": "py-cluster-load",
    "Fleet__Security__RateLimit__CallsPerSecond": "0",
    "Fleet__Security__RateLimit__StreamMessagesPerSecond": "0",
    "Logging__LogLevel__Orleans.Runtime.Watchdog": "Error",
}


def run(args, checks, work):
    processes, logs, ports = [], [], []
    try:
        for name in SILOS:
            # Each silo in its own folder with its log as server.log, where print_server_log looks.
            folder = os.path.join(work, name)
            os.makedirs(folder)
            process, silo_ports, log = start_server(args.server_dll, "server", folder, args.postgres, extra_env=BENCH_ENV)
            processes.append(process)
            logs.append(log)
            ports.append(silo_ports)
        for silo_ports in ports:
            wait_ready(f"127.0.0.1:{silo_ports['grpc']}", 90).close()

        # Memory per robot from outside the process: live heap after a forced full collection, before and after the
        # fleet is loaded (the in-process gauge without a full collection only gives an upper bound).
        tool = gcdump_tool()
        heap_before = [live_heap_bytes(tool, p.pid) for p in processes] if tool else None

        command = ["dotnet", args.fleet_dll, "bench", "cluster", "--json", "--robots", str(args.robots),
                   "--seconds", str(args.seconds), "--saturated-seconds", str(args.saturated_seconds)]
        for silo_ports in ports:
            command += ["--server", f"http://127.0.0.1:{silo_ports['grpc']}", "--metrics", f"http://127.0.0.1:{silo_ports['metrics']}/metrics"]
        started = time.monotonic()
        bench = subprocess.run(command, stdout=subprocess.PIPE, text=True, timeout=600)
        print(f"cluster-load: fleet bench cluster took {time.monotonic() - started:.0f} s, exit code {bench.returncode}")
        result = json.loads(bench.stdout)
        if args.save_json:
            with open(args.save_json, "w") as f:
                f.write(bench.stdout)

        checks.check("every stream finished without an error (no UNAVAILABLE)", not result["errors"], "; ".join(result["errors"]))
        checks.check("every sample sent was acknowledged (lost == 0)", result["sent"] > 0 and result["lost"] == 0,
                     f"sent {result['sent']}, acknowledged {result['acknowledged']}, lost {result['lost']}")
        hosted = [s["robots_active"] for s in result["per_silo"]]
        checks.check("both silos host robots", len(hosted) == len(SILOS) and all(h > 0 for h in hosted), str(hosted))
        checks.check(f"together the silos host all {args.robots} robots", sum(hosted) == args.robots, f"{hosted} sum {sum(hosted)}")
        checks.check("fleet bench cluster exited 0", bench.returncode == 0, str(bench.returncode))
        if heap_before is not None:
            heap_after = [live_heap_bytes(tool, p.pid) for p in processes]
            for name, before, after, robots in zip(SILOS, heap_before, heap_after, hosted):
                per_robot = (after - before) / robots if robots else float("nan")
                print(f"cluster-load: {name} live heap after full GC {before / 1e6:.1f} -> {after / 1e6:.1f} MB, "
                      f"{per_robot:.0f} B per hosted robot (dotnet-gcdump)")
        else:
            print("cluster-load: dotnet-gcdump not installed; live heap per robot not measured")

        print(f"cluster-load: {result['silos']} silos, {result['robots']} robots, {result['streams']} streams; "
              f"sent {result['sent']}, acknowledged {result['acknowledged']}, lost {result['lost']}")
        print(f"cluster-load: paced {result['paced_measurements_per_s']:.0f} samples/s "
              f"({result['paced_offered_measurements_per_s']:.0f}/s offered, {result['paced_wall_seconds']:.1f} s for {args.seconds} s, "
              f"batches at most {result['paced_max_lag_ms']:.0f} ms late), "
              f"saturated {result['saturated_measurements_per_s']:.0f} samples/s, "
              f"{result['silo_cpu_us_per_measurement']:.1f} us silo CPU per sample, client {result['client_cpu_seconds']:.1f} CPU-s")
        for name, silo in zip(SILOS, result["per_silo"]):
            print(f"cluster-load: {name} robots {silo['robots_active']}, heap/robot {silo['heap_bytes_per_robot']:.0f} B, "
                  f"working set {silo['working_set_bytes'] / 1e6:.0f} MB, {silo['cpu_seconds']:.2f} CPU-s saturated, "
                  f"{silo['measurements_per_cpu_second']:.0f} samples/CPU-s")
    except Exception:
        for name in SILOS:
            print(f"--- {name} log (tail) ---")
            print_server_log(os.path.join(work, name))
        raise
    finally:
        stop_processes(processes, work)
        for log in logs:
            log.close()


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--server-dll", default=os.path.join(REPO, "src", "Fleet.Server", "bin", "Release", "net10.0", "Fleet.Server.dll"))
    parser.add_argument("--fleet-dll", default=os.path.join(REPO, "src", "Fleet.Cli", "bin", "Release", "net10.0", "fleet.dll"))
    parser.add_argument("--postgres", default=os.environ.get("FLEET_TEST_POSTGRES", ""))
    parser.add_argument("--robots", type=int, default=1000)
    parser.add_argument("--seconds", type=float, default=4)
    parser.add_argument("--saturated-seconds", type=float, default=2)
    parser.add_argument("--save-json", help="also write the command's JSON figures to this file")
    args = parser.parse_args()
    if skip_without_postgres("cluster-load", args.postgres):
        return 0

    work = tempfile.mkdtemp(prefix="fleet-cluster-load-")
    checks = Checks()
    try:
        run(args, checks, work)
    except Exception as e:  # report, then fail
        checks.check("cluster load run completed", False, repr(e))
    print(f"cluster-load: {checks.passed} passed, {checks.failed} failed")
    return 1 if checks.failed else 0


if __name__ == "__main__":
    sys.exit(main())
