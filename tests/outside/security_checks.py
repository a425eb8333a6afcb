#!/usr/bin/python3
"""Outside checks of the server's TLS and authorisation with an independent client (Debian's python3-grpcio).

The certificates come from the openssl command line (a throw-away CA and a server certificate it signed for
127.0.0.1), so neither side of the handshake is .NET code:

1. The TLS handshake succeeds against the test CA, and fails against a CA that did not sign the server.
2. A gateway key allowed to ingest into site py-a submits a batch there: OK.
3. The same key on site py-b (submit and stream), or reading poses of py-a (no read role): PERMISSION_DENIED.
4. No credential, or a wrong one: UNAUTHENTICATED. Health answers SERVING without a credential (probes).

Usage: security_checks.py [--server-dll PATH]. Prints "security: N passed, M failed"; exits non-zero on any failure.
"""
import argparse
import hashlib
import os
import subprocess
import sys
import tempfile

from outside_checks import (ANCHORS, REPO, TAG, T0, Checks, distance, free_port, generate_stubs, print_server_log,
                            stop_processes, timestamp)

KEYS = {"gateway-a": ("py-gateway-a-key", "ingest:py-a"), "admin": ("py-admin-key", "admin:*")}


def openssl(*args, cwd):
    subprocess.run(["openssl", *args], cwd=cwd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def make_certificates(directory):
    """A CA, a server certificate it signed (SAN 127.0.0.1 and localhost, serverAuth), and an unrelated CA."""
    ec = ["-newkey", "ec", "-pkeyopt", "ec_paramgen_curve:prime256v1", "-nodes"]
    for name in ("ca", "other-ca"):
        openssl("req", "-x509", *ec, "-keyout", f"{name}.key", "-out", f"{name}.pem", "-days", "2", "-subj", f"/CN=Fleet outside {name}",
                "-addext", "basicConstraints=critical,CA:TRUE", "-addext", "keyUsage=critical,keyCertSign,cRLSign", cwd=directory)
    openssl("req", *ec, "-keyout", "server.key", "-out", "server.csr", "-subj", "/CN=localhost", cwd=directory)
    with open(os.path.join(directory, "server.ext"), "w") as f:
        f.write("subjectAltName=IP:127.0.0.1,DNS:localhost\nextendedKeyUsage=serverAuth\nbasicConstraints=CA:FALSE\n")
    openssl("x509", "-req", "-in", "server.csr", "-CA", "ca.pem", "-CAkey", "ca.key", "-CAcreateserial", "-out", "server.pem",
            "-days", "2", "-extfile", "server.ext", cwd=directory)
    return {name: os.path.join(directory, name) for name in ("ca.pem", "other-ca.pem", "server.pem", "server.key")}


def code_of(call):
    import grpc
    try:
        call()
        return grpc.StatusCode.OK
    except grpc.RpcError as e:
        return e.code()


def run_client(address, files, checks):
    import grpc
    from fleet.v1 import geometry_pb2, ingest_service_pb2, ingest_service_pb2_grpc, measurements_pb2
    from fleet.v1 import pose_service_pb2, pose_service_pb2_grpc, site_service_pb2, site_service_pb2_grpc
    from outside_health import health_pb2, health_pb2_grpc

    def key(name):
        return (("x-api-key", KEYS[name][0]),)

    with open(files["ca.pem"], "rb") as f:
        channel = grpc.secure_channel(address, grpc.ssl_channel_credentials(root_certificates=f.read()))
    try:
        grpc.channel_ready_future(channel).result(timeout=60)
        checks.check("TLS handshake with the test CA", True)
    except grpc.FutureTimeoutError:
        checks.check("TLS handshake with the test CA", False)
        return

    with open(files["other-ca.pem"], "rb") as f:
        stranger = grpc.secure_channel(address, grpc.ssl_channel_credentials(root_certificates=f.read()))
    health_stub = health_pb2_grpc.HealthStub(stranger)
    refused = code_of(lambda: health_stub.Check(health_pb2.HealthCheckRequest(), timeout=10))
    checks.check("TLS handshake refused with a CA that did not sign the server", refused == grpc.StatusCode.UNAVAILABLE, str(refused))
    stranger.close()

    sites = site_service_pb2_grpc.SiteServiceStub(channel)
    for site_id in ("py-a", "py-b"):
        sites.CreateSite(site_service_pb2.CreateSiteRequest(site_id=site_id, display_name="Harbor Point DC"), metadata=key("admin"), timeout=30)
        put = site_service_pb2.PutAnchorMapRequest(site_id=site_id)
        for anchor_id, x, y, z in ANCHORS:
            put.anchors.add(anchor_id=anchor_id, position=geometry_pb2.Vector3(x=x, y=y, z=z))
        sites.PutAnchorMap(put, metadata=key("admin"), timeout=30)

    def batch(site_id):
        b = measurements_pb2.MeasurementBatch(site_id=site_id, batch_id=1)
        robot = b.robots.add(robot_id="tug-21")
        for k in range(10):
            a, c = k % len(ANCHORS), (k + 1) % len(ANCHORS)
            robot.tdoa.add(sample_time=timestamp(T0 + k * 0.02), anchor_a=ANCHORS[a][0], anchor_b=ANCHORS[c][0],
                           distance_difference=distance(c, TAG) - distance(a, TAG))
        return b

    ingest = ingest_service_pb2_grpc.IngestServiceStub(channel)
    response = ingest.SubmitMeasurements(ingest_service_pb2.SubmitMeasurementsRequest(batch=batch("py-a")), metadata=key("gateway-a"), timeout=30)
    ack = response.ack
    checks.check("allowed call succeeds (gateway key ingests into its site)",
                 ack.accepted + ack.down_weighted + ack.buffered + ack.rejected == 10, str(ack))

    def stream_to(site_id):
        return list(ingest.StreamMeasurements(iter([ingest_service_pb2.StreamMeasurementsRequest(batch=batch(site_id))]),
                                              metadata=key("gateway-a"), timeout=30))

    cross = code_of(lambda: ingest.SubmitMeasurements(ingest_service_pb2.SubmitMeasurementsRequest(batch=batch("py-b")),
                                                     metadata=key("gateway-a"), timeout=30))
    checks.check("cross-site submit is PERMISSION_DENIED", cross == grpc.StatusCode.PERMISSION_DENIED, str(cross))
    cross_stream = code_of(lambda: stream_to("py-b"))
    checks.check("cross-site stream is PERMISSION_DENIED", cross_stream == grpc.StatusCode.PERMISSION_DENIED, str(cross_stream))
    poses = pose_service_pb2_grpc.PoseServiceStub(channel)
    no_read = code_of(lambda: poses.GetFleetSnapshot(pose_service_pb2.GetFleetSnapshotRequest(site_id="py-a"), metadata=key("gateway-a"), timeout=30))
    checks.check("ingest-only key reading poses is PERMISSION_DENIED", no_read == grpc.StatusCode.PERMISSION_DENIED, str(no_read))

    missing = code_of(lambda: ingest.SubmitMeasurements(ingest_service_pb2.SubmitMeasurementsRequest(batch=batch("py-a")), timeout=30))
    checks.check("missing credential is UNAUTHENTICATED", missing == grpc.StatusCode.UNAUTHENTICATED, str(missing))
    wrong = code_of(lambda: sites.ListSites(site_service_pb2.ListSitesRequest(), metadata=(("x-api-key", "guessed"),), timeout=30))
    checks.check("wrong credential is UNAUTHENTICATED", wrong == grpc.StatusCode.UNAUTHENTICATED, str(wrong))
    health = health_pb2_grpc.HealthStub(channel).Check(health_pb2.HealthCheckRequest(service="readiness"), timeout=30)
    checks.check("health SERVING without a credential", health.status == health_pb2.HealthCheckResponse.SERVING, str(health.status))
    channel.close()


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--server-dll", default=os.path.join(REPO, "src", "Fleet.Server", "bin", "Release", "net10.0", "Fleet.Server.dll"))
    args = parser.parse_args()

    work = tempfile.mkdtemp(prefix="fleet-security-")
    checks = Checks()
    server = None
    try:
        generate_stubs(os.path.join(work, "stubs"))
        files = make_certificates(work)
        grpc_port = free_port()
        settings = [f"--Fleet:Server:GrpcPort={grpc_port}", "--Fleet:Server:MetricsPort=-1", f"--Fleet:Server:SiloPort={free_port()}",
                    f"--Fleet:Server:GatewayPort={free_port()}", "--Fleet:Server:ListenAddress=127.0.0.1",
                    f"--Fleet:Server:DataDirectory={os.path.join(work, 'data')}", "--Logging:LogLevel:Default=Warning",
                    f"--Fleet:Security:Tls:CertificatePath={files['server.pem']}", f"--Fleet:Security:Tls:KeyPath={files['server.key']}"]
        for i, (name, (secret, grant)) in enumerate(KEYS.items()):
            settings += [f"--Fleet:Security:ApiKeys:{i}:Name={name}",
                         f"--Fleet:Security:ApiKeys:{i}:Sha256={hashlib.sha256(secret.encode()).hexdigest()}",
                         f"--Fleet:Security:ApiKeys:{i}:Grants:0={grant}"]
        server = subprocess.Popen(["dotnet", args.server_dll, *settings],
                                  stdout=open(os.path.join(work, "server.log"), "w"), stderr=subprocess.STDOUT)
        run_client(f"127.0.0.1:{grpc_port}", files, checks)
    except Exception as e:  # noqa: BLE001 - report any failure as a failed check
        checks.check("security checks ran", False, repr(e))
        print_server_log(work)
    finally:
        stop_processes([server], work)

    print(f"security: {checks.passed} passed, {checks.failed} failed")
    return 1 if checks.failed else 0


if __name__ == "__main__":
    sys.exit(main())
