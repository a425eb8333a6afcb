#!/usr/bin/python3
"""Load on the unary ingest call from an external HTTP/2 load generator: h2load (Debian's nghttp2-client).

The request body is built here, independently of Fleet: a SubmitMeasurementsRequest serialised by the Python
protobuf runtime, framed as gRPC over HTTP/2 specifies (grpc/grpc doc/PROTOCOL-HTTP2.md: a 1-byte compressed flag 0,
a 4-byte big-endian length, the message). h2load sends it N times over a few connections with the gRPC headers
(content-type: application/grpc, te: trailers) and an API key. The check asserts that every request succeeded at the
HTTP/2 level (h2load's "succeeded" count and 2xx statuses) and, because h2load does not read trailers, that the
server's own call counter (Prometheus text from its metrics port) recorded exactly N SubmitMeasurements calls with
gRPC status OK and none with any other status. It prints h2load's request rate.

Usage: h2load_ingest.py [--server-dll PATH] [--requests N] [--clients C] [--streams M].
Prints "h2load: N passed, M failed"; exits non-zero on any failure.
"""
import argparse
import hashlib
import os
import re
import shutil
import struct
import subprocess
import sys
import tempfile
import time
import urllib.request

from outside_checks import (ANCHORS, REPO, TAG, T0, Checks, distance, free_port, generate_stubs, print_server_log,
                            stop_processes, timestamp)

API_KEY = "h2load-gateway-key"
METHOD = "fleet.v1.IngestService/SubmitMeasurements"


def request_body():
    from fleet.v1 import ingest_service_pb2, measurements_pb2
    batch = measurements_pb2.MeasurementBatch(site_id="h2-site", batch_id=1)
    robot = batch.robots.add(robot_id="tug-31")
    for k in range(20):
        a, b = k % len(ANCHORS), (k + 2) % len(ANCHORS)
        robot.tdoa.add(sample_time=timestamp(T0 + k * 0.02), anchor_a=ANCHORS[a][0], anchor_b=ANCHORS[b][0],
                       distance_difference=distance(b, TAG) - distance(a, TAG))
    message = ingest_service_pb2.SubmitMeasurementsRequest(batch=batch).SerializeToString()
    return b"\x00" + struct.pack(">I", len(message)) + message


def setup_site(address):
    import grpc
    from fleet.v1 import geometry_pb2, site_service_pb2, site_service_pb2_grpc
    channel = grpc.insecure_channel(address)
    grpc.channel_ready_future(channel).result(timeout=60)
    sites = site_service_pb2_grpc.SiteServiceStub(channel)
    metadata = (("x-api-key", API_KEY),)
    sites.CreateSite(site_service_pb2.CreateSiteRequest(site_id="h2-site"), metadata=metadata, timeout=30)
    put = site_service_pb2.PutAnchorMapRequest(site_id="h2-site")
    for anchor_id, x, y, z in ANCHORS:
        put.anchors.add(anchor_id=anchor_id, position=geometry_pb2.Vector3(x=x, y=y, z=z))
    sites.PutAnchorMap(put, metadata=metadata, timeout=30)
    channel.close()


def call_counts(metrics_port):
    """SubmitMeasurements calls by gRPC status name, from rpc_server_call_duration_seconds_count."""
    with urllib.request.urlopen(f"http://127.0.0.1:{metrics_port}/metrics", timeout=10) as r:
        text = r.read().decode()
    counts = {}
    for line in text.splitlines():
        if line.startswith("rpc_server_call_duration_seconds_count{") and f'rpc_method="{METHOD}"' in line:
            status = re.search(r'rpc_status_code="([A-Z_]+)"', line).group(1)
            counts[status] = counts.get(status, 0) + int(float(line.rsplit(" ", 1)[1]))
    return counts


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--server-dll", default=os.path.join(REPO, "src", "Fleet.Server", "bin", "Release", "net10.0", "Fleet.Server.dll"))
    parser.add_argument("--requests", type=int, default=15000)
    parser.add_argument("--clients", type=int, default=4)
    parser.add_argument("--streams", type=int, default=16, help="concurrent streams per connection (h2load -m)")
    args = parser.parse_args()

    checks = Checks()
    if shutil.which("h2load") is None:
        checks.check("h2load installed (Debian nghttp2-client)", False)
        print(f"h2load: {checks.passed} passed, {checks.failed} failed")
        return 1

    work = tempfile.mkdtemp(prefix="fleet-h2load-")
    server = None
    try:
        generate_stubs(os.path.join(work, "stubs"))
        body = os.path.join(work, "submit.bin")
        with open(body, "wb") as f:
            f.write(request_body())
        grpc_port, metrics_port = free_port(), free_port()
        server = subprocess.Popen(
            ["dotnet", args.server_dll, f"--Fleet:Server:GrpcPort={grpc_port}", f"--Fleet:Server:MetricsPort={metrics_port}",
             f"--Fleet:Server:SiloPort={free_port()}", f"--Fleet:Server:GatewayPort={free_port()}",
             "--Fleet:Server:ListenAddress=127.0.0.1", f"--Fleet:Server:DataDirectory={os.path.join(work, 'data')}",
             "--Logging:LogLevel:Default=Warning",
             "--Fleet:Security:ApiKeys:0:Name=h2load", f"--Fleet:Security:ApiKeys:0:Sha256={hashlib.sha256(API_KEY.encode()).hexdigest()}",
             "--Fleet:Security:ApiKeys:0:Grants:0=admin:*", "--Fleet:Security:ApiKeys:0:Grants:1=ingest:*",
             # One client on purpose at full speed: a call budget far above what it can reach keeps the limiter in the path.
             "--Fleet:Security:RateLimit:CallsPerSecond=1000000", "--Fleet:Security:RateLimit:CallBurst=1000000"],
            stdout=open(os.path.join(work, "server.log"), "w"), stderr=subprocess.STDOUT)
        setup_site(f"127.0.0.1:{grpc_port}")

        command = ["h2load", "-n", str(args.requests), "-c", str(args.clients), "-m", str(args.streams), "-d", body,
                   "-H", "content-type: application/grpc", "-H", "te: trailers", "-H", f"x-api-key: {API_KEY}",
                   f"http://127.0.0.1:{grpc_port}/{METHOD}"]
        run = subprocess.run(command, capture_output=True, text=True, timeout=600)
        out = run.stdout
        requests = re.search(r"requests: (\d+) total, (\d+) started, (\d+) done, (\d+) succeeded, (\d+) failed, (\d+) errored", out)
        statuses = re.search(r"status codes: (\d+) 2xx, (\d+) 3xx, (\d+) 4xx, (\d+) 5xx", out)
        rate = re.search(r"finished in ([\d.]+\w+), ([\d.]+) req/s", out)
        checks.check("h2load ran", run.returncode == 0 and requests is not None, out[-2000:] + run.stderr[-1000:])
        if requests is not None:
            succeeded = int(requests.group(4))
            checks.check(f"h2load: all {args.requests} requests succeeded", succeeded == args.requests and int(requests.group(5)) == 0
                         and int(requests.group(6)) == 0, requests.group(0))
            checks.check("h2load: every HTTP status 2xx", statuses is not None and int(statuses.group(1)) == args.requests,
                         statuses.group(0) if statuses else "no status line")
        if rate is not None:
            print(f"h2load: {args.requests} unary SubmitMeasurements (20 TDOA each) over {args.clients} connections x {args.streams} streams: "
                  f"{rate.group(2)} req/s ({rate.group(1)})")

        # gRPC status lives in trailers, which h2load does not report: the server's call counter gives it.
        counts = {}
        deadline = time.time() + 15
        while time.time() < deadline:
            counts = call_counts(metrics_port)
            if counts.get("OK", 0) >= args.requests:
                break
            time.sleep(0.5)
        checks.check(f"grpc-status OK on all {args.requests} calls (server call counter)",
                     counts.get("OK", 0) == args.requests and sum(v for k, v in counts.items() if k != "OK") == 0, str(counts))
    except Exception as e:  # noqa: BLE001 - report any failure as a failed check
        checks.check("h2load check ran", False, repr(e))
        print_server_log(work)
    finally:
        stop_processes([server], work)

    print(f"h2load: {checks.passed} passed, {checks.failed} failed")
    return 1 if checks.failed else 0


if __name__ == "__main__":
    sys.exit(main())
