#!/usr/bin/python3
"""CI check of the sample coordinator (examples/coordinator/fleet_coordinator.py) against a running server.

Starts the embedded server, places four robots (tags standing still, noiseless TDOAs) so that exactly one pair is
within the clearance, runs the coordinator as its own process for a few seconds while ingest goes on, and checks:
  1. the snapshot and the pose stream each flag exactly the expected pair;
  2. the coordinator's ellipse distance agrees with an independent computation: SciPy's SLSQP minimising |x - y|^2
     subject to both points lying in their 3-sigma ellipses (Debian's python3-scipy, python3-numpy), to 1 mm;
  3. for circular covariances it equals the closed form |mu2 - mu1| - 3 s1 - 3 s2.
Prints "coordinator: N passed, M failed".
"""
import json
import math
import os
import subprocess
import sys
import tempfile
import threading
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "examples", "coordinator"))
from outside_checks import ANCHORS, REPO, Checks, distance, free_port, generate_stubs, timestamp  # noqa: E402
import fleet_coordinator  # noqa: E402

SITE = "py-coordinator"
CLEARANCE = 0.5
# amr-00 and amr-01 stand 0.35 m apart (flagged); the others are metres away from everyone.
SPOTS = {"amr-00": (5.0, 5.0, 1.0), "amr-01": (5.35, 5.0, 1.0), "amr-02": (13.0, 4.0, 1.0), "amr-03": (13.0, 9.0, 1.0)}
EXPECTED = {("amr-00", "amr-01")}
T0 = 1_700_000_000.0


def scipy_ellipse_distance(mu1, s1, mu2, s2, scale=3.0):
    """Independent: min |x - y| with (x - mu1)^T S1^-1 (x - mu1) <= scale^2 and the same for y, by SciPy's SLSQP."""
    import numpy as np
    from scipy.optimize import minimize
    mu1, mu2 = np.array(mu1), np.array(mu2)
    i1, i2 = np.linalg.inv(np.array(s1)), np.linalg.inv(np.array(s2))
    constraints = [
        {"type": "ineq", "fun": lambda z: scale ** 2 - (z[:2] - mu1) @ i1 @ (z[:2] - mu1)},
        {"type": "ineq", "fun": lambda z: scale ** 2 - (z[2:] - mu2) @ i2 @ (z[2:] - mu2)},
    ]
    result = minimize(lambda z: float((z[:2] - z[2:]) @ (z[:2] - z[2:])), np.concatenate([mu1, mu2]), method="SLSQP",
                      constraints=constraints, options={"ftol": 1e-14, "maxiter": 500})
    return math.sqrt(max(result.fun, 0.0))


def main():
    work = tempfile.mkdtemp(prefix="fleet-coordinator-")
    checks = Checks()
    generate_stubs(os.path.join(work, "stubs"))
    import grpc
    from fleet.v1 import geometry_pb2, ingest_service_pb2, ingest_service_pb2_grpc, measurements_pb2
    from fleet.v1 import pose_service_pb2, pose_service_pb2_grpc, site_pb2, site_service_pb2, site_service_pb2_grpc

    # Closed form for circles: the gap between two discs is the centre distance minus both radii.
    d = fleet_coordinator.ellipse_distance((0, 0), ((0.01, 0), (0, 0.01)), (2, 0), ((0.04, 0), (0, 0.04)))
    checks.check("circles: distance = |mu2 - mu1| - 3 s1 - 3 s2 (closed form)", abs(d - (2 - 0.3 - 0.6)) < 1e-9, f"{d}")
    # SciPy on correlated, elongated ellipses in several relative placements.
    worst = 0.0
    for k in range(8):
        angle = k * math.pi / 4
        mu2 = (1.5 * math.cos(angle), 1.5 * math.sin(angle))
        s1 = ((0.04, 0.018), (0.018, 0.012))
        s2 = ((0.01, -0.006), (-0.006, 0.03))
        worst = max(worst, abs(fleet_coordinator.ellipse_distance((0, 0), s1, mu2, s2) - scipy_ellipse_distance((0, 0), s1, mu2, s2)))
    checks.check("ellipse distance agrees with SciPy SLSQP (1 mm) on correlated ellipses", worst < 1e-3, f"worst {worst:.2e} m")

    ports = {k: free_port() for k in ("grpc", "metrics", "silo", "gateway")}
    env = dict(os.environ, Fleet__Server__GrpcPort=str(ports["grpc"]), Fleet__Server__MetricsPort=str(ports["metrics"]),
               Fleet__Server__SiloPort=str(ports["silo"]), Fleet__Server__GatewayPort=str(ports["gateway"]),
               Fleet__Server__DataDirectory=os.path.join(work, "data"), Fleet__LiveView__Port="0", Fleet__Security__AllowAnonymous="true",
               Logging__LogLevel__Default="Warning")
    dll = os.path.join(REPO, "src", "Fleet.Server", "bin", "Release", "net10.0", "Fleet.Server.dll")
    server = subprocess.Popen(["dotnet", dll], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    stop = threading.Event()
    try:
        address = f"127.0.0.1:{ports['grpc']}"
        channel = grpc.insecure_channel(address)
        grpc.channel_ready_future(channel).result(timeout=90)
        sites = site_service_pb2_grpc.SiteServiceStub(channel)
        sites.CreateSite(site_service_pb2.CreateSiteRequest(site_id=SITE, display_name="Harbor Point DC"), timeout=30)
        put = site_service_pb2.PutAnchorMapRequest(site_id=SITE)
        for anchor_id, x, y, z in ANCHORS:
            put.anchors.add(anchor_id=anchor_id, position=geometry_pb2.Vector3(x=x, y=y, z=z))
        sites.PutAnchorMap(put, timeout=30)
        for robot in SPOTS:
            sites.PutRobot(site_service_pb2.PutRobotRequest(site_id=SITE, robot_id=robot, tag_offset=geometry_pb2.Vector3(z=SPOTS[robot][2]),
                                                            motion_model=site_pb2.MOTION_MODEL_CONSTANT_VELOCITY), timeout=30)
        ingest = ingest_service_pb2_grpc.IngestServiceStub(channel)
        pairs = [(a, b) for a in range(len(ANCHORS)) for b in range(a + 1, len(ANCHORS))]

        def feed():
            k = 0
            while not stop.is_set():
                batch = measurements_pb2.MeasurementBatch(site_id=SITE)
                for robot, p in SPOTS.items():
                    samples = batch.robots.add(robot_id=robot)
                    for j in range(k, k + 10):
                        a, b = pairs[j % len(pairs)]
                        samples.tdoa.add(sample_time=timestamp(T0 + j * 0.02), anchor_a=ANCHORS[a][0], anchor_b=ANCHORS[b][0],
                                         distance_difference=distance(b, p) - distance(a, p))
                k += 10
                ingest.SubmitMeasurements(ingest_service_pb2.SubmitMeasurementsRequest(batch=batch), timeout=30)
                time.sleep(0.2)

        feeder = threading.Thread(target=feed, daemon=True)
        feeder.start()
        time.sleep(3)

        run = subprocess.run([sys.executable, os.path.join(REPO, "examples", "coordinator", "fleet_coordinator.py"),
                              "--server", address, "--site", SITE, "--clearance", str(CLEARANCE), "--duration", "4", "--json"],
                             capture_output=True, text=True, timeout=120)
        flags = [json.loads(line) for line in run.stdout.splitlines() if line.startswith("{")]
        by_source = {s: {tuple(f["pair"]) for f in flags if f["source"] == s} for s in ("snapshot", "stream")}
        checks.check("coordinator exited cleanly", run.returncode == 0, run.stderr[-500:])
        checks.check("snapshot flags exactly the expected pair", by_source["snapshot"] == EXPECTED, str(by_source["snapshot"]))
        checks.check("pose stream flags exactly the expected pair", by_source["stream"] == EXPECTED, str(by_source["stream"]))

        # The distances the coordinator computes from real poses agree with SciPy's on the same covariances.
        snapshot = pose_service_pb2_grpc.PoseServiceStub(channel).GetFleetSnapshot(
            pose_service_pb2.GetFleetSnapshotRequest(site_id=SITE), timeout=30)
        gaussians = {p.robot_id: fleet_coordinator.horizontal(p) for p in snapshot.poses}
        checks.check("snapshot covers every robot", set(gaussians) == set(SPOTS), str(sorted(gaussians)))
        worst = 0.0
        names = sorted(gaussians)
        for i, a in enumerate(names):
            for b in names[i + 1:]:
                ours = fleet_coordinator.ellipse_distance(*gaussians[a], *gaussians[b])
                worst = max(worst, abs(ours - scipy_ellipse_distance(*gaussians[a], *gaussians[b])))
        checks.check("distances from real poses agree with SciPy SLSQP (1 mm)", worst < 1e-3, f"worst {worst:.2e} m")
        channel.close()
    except Exception as e:
        checks.check("coordinator run completed", False, repr(e))
    finally:
        stop.set()
        server.terminate()
        try:
            server.wait(timeout=30)
        except subprocess.TimeoutExpired:
            server.kill()
    print(f"coordinator: {checks.passed} passed, {checks.failed} failed")
    return 1 if checks.failed else 0


if __name__ == "__main__":
    sys.exit(main())
