#!/usr/bin/python3
"""Sample traffic coordinator for Fleet: flags pairs of robots whose 3-sigma position ellipses come closer than a clearance.

It takes a fleet snapshot (GetFleetSnapshot: every robot of a site predicted to one common time), then follows the
site's pose stream (WatchPoses) and re-checks every pair a new pose touches. A robot's horizontal position is the
Gaussian N(mu, Sigma) with mu = (x, y) and Sigma the top-left 2x2 block of the pose's 7x7 row-major covariance
(x, y, z, yaw, vx, vy, vz; site frame, m). Its 3-sigma ellipse is {p : (p - mu)^T Sigma^-1 (p - mu) <= 9}.

The gap between two convex sets A and B is max over unit directions u of  min_{b in B} u.b - max_{a in A} u.a
(separating hyperplanes), and the support function of the ellipse is  max_{a in A} u.a = u.mu + 3 sqrt(u^T Sigma u).
So  distance = max(0, max_u [ u.(mu2 - mu1) - 3 sqrt(u^T Sigma1 u) - 3 sqrt(u^T Sigma2 u) ]), found by a fine grid over
the direction angle refined by golden-section search. Overlapping ellipses have distance 0.

Not a safety function: Fleet's poses support traffic coordination, never the protection of people (see the README).

Needs Debian's python3-grpcio and python3-grpc-tools; stubs are generated from protos/ at start.
Usage: fleet_coordinator.py --server 127.0.0.1:50051 --site harbor-point --clearance 0.5 [--duration S] [--json]
"""
import argparse
import glob
import json
import math
import os
import sys
import tempfile

REPO = os.path.abspath(os.path.join(os.path.dirname(__file__), "..", ".."))
SIGMA_SCALE = 3.0


def generate_stubs(protos_root=os.path.join(REPO, "protos")):
    """Compiles fleet/v1/*.proto with grpc_tools into a temporary folder and puts it on sys.path."""
    from grpc_tools import protoc
    import grpc_tools
    out = tempfile.mkdtemp(prefix="fleet-coordinator-stubs-")
    include = os.path.join(os.path.dirname(grpc_tools.__file__), "_proto")
    protos = sorted(glob.glob(os.path.join(protos_root, "fleet", "v1", "*.proto")))
    if protoc.main(["protoc", "-I" + protos_root, "-I" + include, "--python_out=" + out, "--grpc_python_out=" + out] + protos) != 0:
        raise RuntimeError("protoc failed on " + protos_root)
    sys.path.insert(0, out)


def horizontal(pose):
    """(mu, Sigma) of the robot's horizontal position: reference point and the x-y block of the covariance."""
    c = pose.covariance
    return (pose.position.x, pose.position.y), ((c[0], c[1]), (c[7], c[8]))


def _spread(sigma, ux, uy):
    """sqrt(u^T Sigma u), clamped at 0 against rounding."""
    return math.sqrt(max(0.0, ux * ux * sigma[0][0] + ux * uy * (sigma[0][1] + sigma[1][0]) + uy * uy * sigma[1][1]))


def ellipse_distance(mu1, sigma1, mu2, sigma2, scale=SIGMA_SCALE, grid=720):
    """Shortest distance (m) between the scale-sigma ellipses of two planar Gaussians; 0 when they overlap."""
    dx, dy = mu2[0] - mu1[0], mu2[1] - mu1[1]

    def gap(theta):
        ux, uy = math.cos(theta), math.sin(theta)
        return ux * dx + uy * dy - scale * (_spread(sigma1, ux, uy) + _spread(sigma2, ux, uy))

    step = 2 * math.pi / grid
    best = max(range(grid), key=lambda k: gap(k * step)) * step
    lo, hi = best - step, best + step
    ratio = (math.sqrt(5) - 1) / 2
    a, b = hi - ratio * (hi - lo), lo + ratio * (hi - lo)
    for _ in range(60):
        if gap(a) > gap(b):
            hi, b = b, a
            a = hi - ratio * (hi - lo)
        else:
            lo, a = a, b
            b = lo + ratio * (hi - lo)
    return max(0.0, gap((lo + hi) / 2), gap(best))


class Coordinator:
    """Keeps each robot's latest horizontal Gaussian and reports pairs closer than the clearance."""

    def __init__(self, clearance):
        self.clearance = clearance
        self.robots = {}
        self.flagged = {}

    def update(self, pose):
        """Takes a pose; returns the pairs involving its robot that are now flagged, as (a, b, distance)."""
        self.robots[pose.robot_id] = horizontal(pose)
        return self._check(pose.robot_id)

    def _check(self, robot):
        mu, sigma = self.robots[robot]
        flags = []
        for other, (mu2, sigma2) in self.robots.items():
            if other == robot:
                continue
            pair = tuple(sorted((robot, other)))
            # Cheap test first: centres farther apart than the clearance plus both ellipses' largest radii cannot be flagged.
            reach = SIGMA_SCALE * (math.sqrt(max(sigma[0][0], sigma[1][1]) * 2) + math.sqrt(max(sigma2[0][0], sigma2[1][1]) * 2))
            if math.dist(mu, mu2) > self.clearance + reach:
                self.flagged.pop(pair, None)
                continue
            d = ellipse_distance(mu, sigma, mu2, sigma2)
            if d < self.clearance:
                self.flagged[pair] = d
                flags.append((pair[0], pair[1], d))
            else:
                self.flagged.pop(pair, None)
        return flags


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--server", default="127.0.0.1:50051", help="host:port of any Fleet silo")
    parser.add_argument("--site", required=True)
    parser.add_argument("--clearance", type=float, default=0.5, help="metres between 3-sigma ellipses below which a pair is flagged")
    parser.add_argument("--duration", type=float, default=0, help="stop after this many seconds (0: run until interrupted)")
    parser.add_argument("--json", action="store_true", help="one JSON object per flag on stdout")
    args = parser.parse_args()
    if not (args.clearance >= 0 and math.isfinite(args.clearance)):
        parser.error("--clearance must be a finite number >= 0")

    generate_stubs()
    import grpc
    from fleet.v1 import pose_service_pb2, pose_service_pb2_grpc

    def report(source, flags):
        for a, b, d in flags:
            if args.json:
                print(json.dumps({"source": source, "pair": [a, b], "distance_m": round(d, 4)}), flush=True)
            else:
                print(f"{source}: {a} and {b} are {d:.2f} m apart at 3 sigma (clearance {args.clearance} m)", flush=True)

    channel = grpc.insecure_channel(args.server)
    poses = pose_service_pb2_grpc.PoseServiceStub(channel)
    coordinator = Coordinator(args.clearance)
    snapshot = poses.GetFleetSnapshot(pose_service_pb2.GetFleetSnapshotRequest(site_id=args.site), timeout=30)
    for pose in snapshot.poses:
        coordinator.robots[pose.robot_id] = horizontal(pose)
    report("snapshot", [(a, b, d) for r in list(coordinator.robots) for a, b, d in coordinator._check(r) if a == r])

    stream = poses.WatchPoses(pose_service_pb2.WatchPosesRequest(site_id=args.site))
    if args.duration > 0:
        import threading
        threading.Timer(args.duration, stream.cancel).start()
    try:
        for response in stream:
            for pose in response.poses:
                report("stream", coordinator.update(pose))
    except grpc.RpcError as e:
        if e.code() != grpc.StatusCode.CANCELLED:
            raise
    finally:
        channel.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
