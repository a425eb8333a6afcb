#!/usr/bin/python3
"""Real two-process Fleet cluster on loopback, checked by an independent Python gRPC client.

Two `Fleet.Server` processes join one Orleans cluster through PostgreSQL (clustering + shared site registry). The
client (Debian's python3-grpcio, stubs generated from protos/ at run time) creates a site with robots standing still
at known spots, streams their TDOAs through silo A, and checks:
  1. robots are spread over both silos (each process's fleet_robots_active gauge, scraped from /metrics);
  2. a WatchPoses stream on silo B receives every robot, GetPose through B answers for every robot, and
     GetFleetSnapshot through B covers all of them; every sample sent is acknowledged (no lost measurements);
     ListAuditEntries through B lists every admin change made through A (the audit log is on the shared database);
  3. silo B is killed with SIGKILL; ingest through A carries on (batches refused with UNAVAILABLE while membership
     declares B dead are retried), B's robots reactivate on A from their stored last pose, and a WatchPoses stream on A
     opened before the kill keeps receiving every robot. Prints how long that took.

Usage: cluster_check.py --postgres CONNSTR [--redis HOST:PORT] [--server-dll PATH]. CONNSTR is an Npgsql connection string (also read from
FLEET_TEST_POSTGRES). When PostgreSQL is not reachable it prints SKIP with the reason and exits 0 (.ci/run starts one
with tests/outside/postgres_service.sh, so in CI it always runs).
"""
import argparse
import math
import os
import re
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
import urllib.request

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from outside_checks import ANCHORS, REPO, Checks, distance, free_port, generate_stubs, timestamp  # noqa: E402

SITE = "py-cluster"
ROBOTS = 12
T0 = 1_700_000_000.0


def spot(r):
    """Robot r's tag: a grid inside the test hall, 1 m above the floor."""
    return (3.0 + 3.5 * (r % 4), 2.0 + 3.0 * (r // 4), 1.0)


def robot_id(r):
    return f"amr-{r:02d}"


def parse_connection_string(text):
    parts = dict(p.split("=", 1) for p in text.split(";") if "=" in p)
    lower = {k.lower(): v for k, v in parts.items()}
    return lower.get("host", "127.0.0.1"), int(lower.get("port", "5432"))


def skip_without_postgres(label, connection_string):
    """Prints SKIP and returns True when no PostgreSQL is given or it does not answer (.ci/run always starts one)."""
    if not connection_string:
        print(f"SKIP {label}: no PostgreSQL given (--postgres or FLEET_TEST_POSTGRES; .ci/run starts one)")
        return True
    host, port = parse_connection_string(connection_string)
    if not reachable(host, port):
        print(f"SKIP {label}: PostgreSQL not reachable at {host}:{port}")
        return True
    return False


def reachable(host, port):
    try:
        with socket.create_connection((host, port), timeout=2):
            return True
    except OSError:
        return False


def start_server(dll, name, work, postgres, redis=None, extra_env=None):
    """Starts one silo on free loopback ports; extra_env (e.g. another ClusterId) overrides the settings below."""
    ports = {k: free_port() for k in ("grpc", "metrics", "silo", "gateway")}
    env = dict(os.environ)
    env.update({
        "Fleet__Cluster__Clustering": "Redis" if redis else "PostgreSql",
        "Fleet__Cluster__ConnectionString": redis or postgres,
        "Fleet__Cluster__RegistryConnectionString": postgres,
        "Fleet__Cluster__ClusterId": "py-cluster-check",
        "Fleet__Cluster__ProbeTimeout": "00:00:01",
        "Fleet__Cluster__MissedProbesLimit": "2",
        "Fleet__Server__GrpcPort": str(ports["grpc"]),
        "Fleet__Server__MetricsPort": str(ports["metrics"]),
        "Fleet__LiveView__Port": "0",
        "Fleet__Security__AllowAnonymous": "true",
        "Fleet__Server__SiloPort": str(ports["silo"]),
        "Fleet__Server__GatewayPort": str(ports["gateway"]),
        "Fleet__Server__DataDirectory": os.path.join(work, name),
        "Logging__LogLevel__Default": "Warning",
        "Logging__LogLevel__Fleet": "Information",
    })
    env.update(extra_env or {})
    log = open(os.path.join(work, name + ".log"), "w")
    process = subprocess.Popen(["dotnet", dll], env=env, stdout=log, stderr=subprocess.STDOUT)
    return process, ports, log


def wait_ready(address, timeout):
    import grpc
    channel = grpc.insecure_channel(address)
    grpc.channel_ready_future(channel).result(timeout=timeout)
    return channel


def scrape_gauge(port, name):
    with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=10) as r:
        text = r.read().decode()
    total = 0.0
    for line in text.splitlines():
        if line.startswith(name + "{") or line.startswith(name + " "):
            total += float(line.rsplit(" ", 1)[1])
    return total


def scrape_names(port):
    with urllib.request.urlopen(f"http://127.0.0.1:{port}/metrics", timeout=10) as r:
        text = r.read().decode()
    return {re.split(r"[{ ]", line, maxsplit=1)[0] for line in text.splitlines() if line and not line.startswith("#")}


# Created on the first event, so absent from a healthy run's scrape; the name follows the same exporter rules.
FIRST_EVENT_ONLY = {"fleet_pose_updates_dropped_total"}


def deploy_metric_names():
    """Every Fleet metric name the dashboard and the alert rules use."""
    names = set()
    for path in ("deploy/grafana/dashboards/fleet.json", "deploy/prometheus/alerts.yml"):
        with open(os.path.join(REPO, path)) as f:
            names |= set(re.findall(r"\b(?:fleet|rpc_server)_[a-z_]+", f.read()))
    # Label names share the prefix; keep metric names only.
    return {n for n in names if n not in ("fleet_site", "fleet_anchor", "fleet_outcome", "fleet_rejection_reason", "fleet_tracking_state")}


def tdoa_batch(measurements_pb2, r, k0, count):
    batch = measurements_pb2.MeasurementBatch(site_id=SITE)
    robot = batch.robots.add(robot_id=robot_id(r))
    pairs = [(a, b) for a in range(len(ANCHORS)) for b in range(a + 1, len(ANCHORS))]
    for k in range(k0, k0 + count):
        a, b = pairs[k % len(pairs)]
        robot.tdoa.add(sample_time=timestamp(T0 + k * 0.02), anchor_a=ANCHORS[a][0], anchor_b=ANCHORS[b][0],
                       distance_difference=distance(b, spot(r)) - distance(a, spot(r)))
    return batch


class Watcher:
    """Reads a WatchPoses stream in the background; keeps each robot's latest pose and the time it arrived."""

    def __init__(self, channel, pose_service_pb2, pose_service_pb2_grpc):
        self.latest = {}
        self.arrived = {}
        self.lock = threading.Lock()
        self.call = pose_service_pb2_grpc.PoseServiceStub(channel).WatchPoses(pose_service_pb2.WatchPosesRequest(site_id=SITE))
        self.thread = threading.Thread(target=self._read, daemon=True)
        self.thread.start()

    def _read(self):
        import grpc
        try:
            for response in self.call:
                now = time.monotonic()
                with self.lock:
                    for pose in response.poses:
                        self.latest[pose.robot_id] = pose
                        self.arrived[pose.robot_id] = now
        except grpc.RpcError:
            pass

    def robots_since(self, since):
        with self.lock:
            return {r for r, t in self.arrived.items() if t >= since}


def poll(condition, timeout):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if condition():
            return True
        time.sleep(0.1)
    return condition()


def run(args, checks, work):
    import grpc
    from fleet.v1 import geometry_pb2, ingest_service_pb2, ingest_service_pb2_grpc, measurements_pb2
    from fleet.v1 import pose_service_pb2, pose_service_pb2_grpc, site_pb2, site_service_pb2, site_service_pb2_grpc
    from fleet.v1 import audit_service_pb2, audit_service_pb2_grpc

    a, a_ports, a_log = start_server(args.server_dll, "silo-a", work, args.postgres, args.redis)
    b, b_ports, b_log = start_server(args.server_dll, "silo-b", work, args.postgres, args.redis)
    try:
        channel_a = wait_ready(f"127.0.0.1:{a_ports['grpc']}", 90)
        channel_b = wait_ready(f"127.0.0.1:{b_ports['grpc']}", 90)
        sites = site_service_pb2_grpc.SiteServiceStub(channel_a)
        sites.CreateSite(site_service_pb2.CreateSiteRequest(site_id=SITE, display_name="Harbor Point DC"), timeout=30)
        put = site_service_pb2.PutAnchorMapRequest(site_id=SITE)
        for anchor_id, x, y, z in ANCHORS:
            put.anchors.add(anchor_id=anchor_id, position=geometry_pb2.Vector3(x=x, y=y, z=z))
        sites.PutAnchorMap(put, timeout=30)
        for r in range(ROBOTS):
            sites.PutRobot(site_service_pb2.PutRobotRequest(site_id=SITE, robot_id=robot_id(r), tag_offset=geometry_pb2.Vector3(z=spot(r)[2]),
                                                            motion_model=site_pb2.MOTION_MODEL_CONSTANT_VELOCITY), timeout=30)

        watch_b = Watcher(channel_b, pose_service_pb2, pose_service_pb2_grpc)
        watch_a = Watcher(channel_a, pose_service_pb2, pose_service_pb2_grpc)
        ingest_a = ingest_service_pb2_grpc.IngestServiceStub(channel_a)
        next_sample = [0] * ROBOTS
        sent = acked = 0

        # Steady phase: 5 s at 50 Hz per robot, one batch per robot every 0.2 s, all through silo A.
        start = time.monotonic()
        while time.monotonic() - start < 5.0:
            for r in range(ROBOTS):
                batch = tdoa_batch(measurements_pb2, r, next_sample[r], 10)
                ack = ingest_a.SubmitMeasurements(ingest_service_pb2.SubmitMeasurementsRequest(batch=batch), timeout=30).ack
                next_sample[r] += 10
                sent += 10
                acked += ack.accepted + ack.down_weighted + ack.buffered + ack.rejected
            time.sleep(0.2)
        checks.check("every sample acknowledged by the cluster (no lost measurements)", acked == sent, f"{acked} != {sent}")

        active_a = scrape_gauge(a_ports["metrics"], "fleet_robots_active")
        active_b = scrape_gauge(b_ports["metrics"], "fleet_robots_active")
        exported = scrape_names(a_ports["metrics"]) | scrape_names(b_ports["metrics"])
        missing = sorted(deploy_metric_names() - exported - FIRST_EVENT_ONLY)
        checks.check("dashboard and alert rules use only metric names the server exports", not missing, str(missing))
        checks.check("robots spread over both silos", active_a > 0 and active_b > 0 and active_a + active_b == ROBOTS,
                     f"A {active_a}, B {active_b}")
        checks.check("WatchPoses on silo B receives every robot (ingest went to A)",
                     poll(lambda: len(watch_b.robots_since(0)) == ROBOTS, 20), str(len(watch_b.robots_since(0))))

        poses = pose_service_pb2_grpc.PoseServiceStub(channel_b)
        errors = []
        for r in range(ROBOTS):
            pose = poses.GetPose(pose_service_pb2.GetPoseRequest(site_id=SITE, robot_id=robot_id(r)), timeout=30).pose
            errors.append(math.dist((pose.tag_position.x, pose.tag_position.y, pose.tag_position.z), spot(r)))
        # Closed form: noiseless TDOAs of a tag standing still, so the estimate must sit on its spot.
        checks.check("GetPose through B answers for every robot at its spot (5 cm)", max(errors) < 0.05, f"max error {max(errors):.3f} m")
        snapshot = poses.GetFleetSnapshot(pose_service_pb2.GetFleetSnapshotRequest(site_id=SITE), timeout=30)
        checks.check("GetFleetSnapshot through B covers robots of both silos", len(snapshot.poses) == ROBOTS, str(len(snapshot.poses)))

        # The admin changes were all made through A; in cluster mode the audit log is on the shared PostgreSQL, so B
        # lists them too (one site, one anchor map, every robot).
        audit = audit_service_pb2_grpc.AuditServiceStub(channel_b)
        listed = audit.ListAuditEntries(audit_service_pb2.ListAuditEntriesRequest(site_id=SITE, page_size=100), timeout=30).entries
        actions = sorted(audit_service_pb2.AuditAction.Name(e.action) for e in listed)
        expected = sorted(["AUDIT_ACTION_CREATE_SITE", "AUDIT_ACTION_PUT_ANCHOR_MAP"] + ["AUDIT_ACTION_PUT_ROBOT"] * ROBOTS)
        checks.check("ListAuditEntries through B lists every admin change made through A", actions == expected, str(actions))

        # Give the last-pose flush (about once a second) time to run, then kill B without warning.
        time.sleep(2.0)
        b.send_signal(signal.SIGKILL)
        b.wait(timeout=30)
        killed = time.monotonic()
        channel_b.close()

        # Ingest through A goes on; batches refused while B is being declared dead are retried (gRPC UNAVAILABLE).
        retried = 0
        recovered_at = None
        while time.monotonic() - killed < 60:
            for r in range(ROBOTS):
                batch = tdoa_batch(measurements_pb2, r, next_sample[r], 10)
                for _ in range(100):
                    try:
                        ingest_a.SubmitMeasurements(ingest_service_pb2.SubmitMeasurementsRequest(batch=batch), timeout=10)
                        break
                    except grpc.RpcError as e:
                        if e.code() not in (grpc.StatusCode.UNAVAILABLE, grpc.StatusCode.DEADLINE_EXCEEDED):
                            raise
                        retried += 1
                        time.sleep(0.2)
                next_sample[r] += 10
            time.sleep(0.2)
            if recovered_at is None and len(watch_a.robots_since(killed)) == ROBOTS:
                recovered_at = time.monotonic()
            if recovered_at is not None and time.monotonic() - recovered_at > 3:
                break
        recovery = None if recovered_at is None else recovered_at - killed
        print(f"cluster: silo B killed; every robot publishing again on A's stream after "
              f"{'never' if recovery is None else f'{recovery:.1f} s'}; {retried} batch retries")
        checks.check("after SIGKILL of B, A's pose stream keeps receiving every robot", recovery is not None)
        a_log.flush()
        with open(os.path.join(work, "silo-a.log")) as f:
            resumed = len(re.findall(r"resumed from its last pose", f.read()))
        checks.check("B's robots reactivated on A from their stored last pose", resumed >= active_b, f"{resumed} resumed, B had {active_b}")
        errors = []
        for r in range(ROBOTS):
            pose = watch_a.latest[robot_id(r)]
            errors.append(math.dist((pose.tag_position.x, pose.tag_position.y, pose.tag_position.z), spot(r)))
        checks.check("poses after the kill at every robot's spot (5 cm)", max(errors) < 0.05, f"max error {max(errors):.3f} m")
        watch_a.call.cancel()
        watch_b.call.cancel()
        channel_a.close()
    finally:
        for process in (a, b):
            if process.poll() is None:
                process.terminate()
                try:
                    process.wait(timeout=30)
                except subprocess.TimeoutExpired:
                    process.kill()
        a_log.close()
        b_log.close()


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--server-dll", default=os.path.join(REPO, "src", "Fleet.Server", "bin", "Release", "net10.0", "Fleet.Server.dll"))
    parser.add_argument("--postgres", default=os.environ.get("FLEET_TEST_POSTGRES", ""))
    parser.add_argument("--redis", default=os.environ.get("FLEET_TEST_REDIS", ""),
                        help="host:port: Redis membership instead of PostgreSQL (the registry stays on PostgreSQL)")
    args = parser.parse_args()
    if skip_without_postgres("cluster", args.postgres):
        return 0

    work = tempfile.mkdtemp(prefix="fleet-cluster-")
    checks = Checks()
    generate_stubs(os.path.join(work, "stubs"))
    try:
        run(args, checks, work)
    except Exception as e:  # report, then fail
        checks.check("cluster run completed", False, repr(e))
        for name in ("silo-a", "silo-b"):
            path = os.path.join(work, name + ".log")
            if os.path.exists(path):
                print(f"--- {name} log (tail) ---")
                with open(path) as f:
                    print("".join(f.readlines()[-30:]))
    print(f"cluster: {checks.passed} passed, {checks.failed} failed")
    return 1 if checks.failed else 0


if __name__ == "__main__":
    sys.exit(main())
