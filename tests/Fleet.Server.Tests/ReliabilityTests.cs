using System.Buffers.Binary;
using System.Net;
using System.Net.Http.Headers;
using System.Net.Sockets;
using Fleet.Contracts.V1;
using Fleet.Server.Benchmarking;
using Google.Protobuf;
using Grpc.Core;

namespace Fleet.Server.Tests;

/// <summary>Faults a server must survive: fuzzed gRPC payloads, malformed HTTP/2 frames, subscribers hanging up, a short soak.</summary>
[Trait("Category", "Reliability")]
public sealed class ReliabilityTests(SharedServer shared) : IClassFixture<SharedServer>
{
    private const string Site = "reliability";

    private ServerHarness Server => shared.Server;

    [Fact]
    public async Task SubmitMeasurements_FuzzedPayloads_EveryCallGetsAStatusAndTheNextValidCallSucceeds()
    {
        await EnsureSiteAsync();
        var valid = ValidRequest().ToByteArray();
        var random = new Random(11);
        using var http = NewHttp2Client();
        var statuses = new Dictionary<string, int>();
        const int cases = 120;
        for (var i = 0; i < cases; i++)
        {
            var (payload, compressedFlag, declaredLength) = (i % 4) switch
            {
                0 => (RandomBytes(random, random.Next(0, 512)), (byte)0, (int?)null),
                1 => (Mutate(valid, random), (byte)0, null),
                2 => (valid.AsSpan(0, random.Next(0, valid.Length)).ToArray(), (byte)0, valid.Length),
                _ => (valid, (byte)(random.Next(2) == 0 ? 1 : 7), (int?)(random.Next(2) == 0 ? null : int.MaxValue)),
            };

            // gRPC over HTTP/2 message framing: 1-byte compressed flag, 4-byte big-endian length, message
            // (grpc/grpc doc/PROTOCOL-HTTP2.md, "Length-Prefixed-Message").
            var body = new byte[5 + payload.Length];
            body[0] = compressedFlag;
            BinaryPrimitives.WriteUInt32BigEndian(body.AsSpan(1), (uint)(declaredLength ?? payload.Length));
            payload.CopyTo(body, 5);
            using var request = new HttpRequestMessage(HttpMethod.Post, new Uri(FleetServerHost.GetGrpcAddress(Server.App), "/fleet.v1.IngestService/SubmitMeasurements"))
            {
                Version = HttpVersion.Version20,
                VersionPolicy = HttpVersionPolicy.RequestVersionExact,
                Content = new ByteArrayContent(body),
            };
            request.Content.Headers.ContentType = new MediaTypeHeaderValue("application/grpc");
            request.Headers.TryAddWithoutValidation("te", "trailers");
            using var response = await http.SendAsync(request).WaitAsync(TimeSpan.FromSeconds(30));
            await response.Content.ReadAsByteArrayAsync();
            var status = response.TrailingHeaders.TryGetValues("grpc-status", out var trailer) ? trailer.First()
                : response.Headers.TryGetValues("grpc-status", out var header) ? header.First() : "none";
            statuses[status] = statuses.GetValueOrDefault(status) + 1;
        }

        // Every fuzzed call was answered with a gRPC status (trailers-only responses carry it in the headers).
        Assert.DoesNotContain("none", statuses.Keys);
        Assert.Equal(cases, statuses.Values.Sum());
        var ack = await Server.Ingest.SubmitMeasurementsAsync(ValidRequest(), deadline: Deadline());
        Assert.Equal(10U, ack.Ack.Accepted + ack.Ack.DownWeighted + ack.Ack.Buffered + ack.Ack.Rejected);
    }

    public static TheoryData<string, byte[]> MalformedFrames => new()
    {
        // RFC 9113 §4.1 frame layout: 24-bit length, 8-bit type, 8-bit flags, 31-bit stream id.
        { "SETTINGS with a length that is not a multiple of 6 (§6.5: FRAME_SIZE_ERROR)", Frame(0x4, 0, 0, new byte[5]) },
        { "HEADERS on stream 0 (§6.2: PROTOCOL_ERROR)", Frame(0x1, 0x4, 0, [0x82]) },
        { "DATA on an idle stream (§5.1: PROTOCOL_ERROR)", Frame(0x0, 0, 7, [1, 2, 3]) },
        { "PING with 7 bytes (§6.7: FRAME_SIZE_ERROR)", Frame(0x6, 0, 0, new byte[7]) },
        { "a frame longer than SETTINGS_MAX_FRAME_SIZE (§4.2: FRAME_SIZE_ERROR)", Frame(0x0, 0, 1, new byte[20_000]) },
        { "WINDOW_UPDATE with a zero increment on the connection (§6.9: PROTOCOL_ERROR)", Frame(0x8, 0, 0, new byte[4]) },
        { "seeded random bytes after the preface", RandomBytes(new Random(3), 300) },
    };

    [Theory]
    [MemberData(nameof(MalformedFrames))]
    public async Task RawHttp2_MalformedFrame_ConnectionClosedAndNextValidCallSucceeds(string what, byte[] frame)
    {
        await EnsureSiteAsync();
        using var tcp = new TcpClient();
        await tcp.ConnectAsync(IPAddress.Loopback, Server.Options.GrpcPort);
        var stream = tcp.GetStream();

        // Client connection preface: the magic string then a SETTINGS frame (RFC 9113 §3.4).
        await stream.WriteAsync("PRI * HTTP/2.0\r\n\r\nSM\r\n\r\n"u8.ToArray());
        await stream.WriteAsync(Frame(0x4, 0, 0, []));
        await stream.WriteAsync(frame);

        // The server ends the connection (GOAWAY then close, RFC 9113 §5.4.1): reading reaches the end.
        var buffer = new byte[4096];
        using var timeout = new CancellationTokenSource(TimeSpan.FromSeconds(30));
        var closed = false;
        try
        {
            while (await stream.ReadAsync(buffer, timeout.Token) > 0)
            {
            }

            closed = true;
        }
        catch (IOException)
        {
            closed = true;
        }

        Assert.True(closed, what);
        var ack = await Server.Ingest.SubmitMeasurementsAsync(ValidRequest(), deadline: Deadline());
        Assert.Equal(10U, ack.Ack.Accepted + ack.Ack.DownWeighted + ack.Ack.Buffered + ack.Ack.Rejected);
    }

    [Fact]
    public async Task WatchPoses_SubscribersHangUpMidStream_IngestGoesOnAndANewSubscriberGetsUpdates()
    {
        await EnsureSiteAsync();
        for (var round = 0; round < 10; round++)
        {
            using var hangUp = new CancellationTokenSource();
            using var call = Server.Poses.WatchPoses(new WatchPosesRequest { SiteId = Site }, cancellationToken: hangUp.Token);
            await Server.Ingest.SubmitMeasurementsAsync(ValidRequest(100 + (round * 10)), deadline: Deadline());
            Assert.True(await call.ResponseStream.MoveNext().WaitAsync(TimeSpan.FromSeconds(30)));
            await hangUp.CancelAsync();
        }

        using var watcher = Server.Poses.WatchPoses(new WatchPosesRequest { SiteId = Site }, deadline: Deadline());
        await Server.Ingest.SubmitMeasurementsAsync(ValidRequest(300), deadline: Deadline());
        Assert.True(await watcher.ResponseStream.MoveNext());
        Assert.Contains(watcher.ResponseStream.Current.Poses, p => p.RobotId == "tug-01");
    }

    [Fact]
    public async Task SoakBenchmark_ShortRun_LosesNoAcknowledgement()
    {
        var result = await SoakBenchmark.RunAsync(new SoakBenchmarkOptions
        {
            Minutes = 10.0 / 60,
            Robots = 20,
            SimulatedTrajectories = 10,
            WarmupSeconds = 3,
            SubscriberChurnSeconds = 1,
        });
        Assert.Equal(0, result.LostAcknowledgements);
        Assert.Equal(result.BatchesSent, result.BatchesAcknowledged);
        Assert.True(result.Measurements > 0);
        Assert.True(result.ServerAnsweredAfterwards);
    }

    [Fact]
    public async Task SubmitMeasurements_BatchSentAgain_EverySampleRejectedDuplicateAndThePoseUnchanged()
    {
        // A gateway whose acknowledgement was lost sends the batch again (the retry policy keeps every unacknowledged
        // batch). The filter already used those samples; using them twice would shrink the covariance as if they were
        // independent new information (Kalman filter noise independence, textbook).
        await EnsureSiteAsync();
        const string robot = "resend-1";
        MeasurementBatch BatchAt(int start) => new() { SiteId = Site, Robots = { TestScenario.StaticTagSamples(robot, (9.2, 5.5, 0.5), start, 4) } };
        for (var start = 0; start < 80; start += 4)
        {
            await Server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = BatchAt(start) }, deadline: Deadline());
        }

        var before = (await Server.Poses.GetPoseAsync(new GetPoseRequest { SiteId = Site, RobotId = robot }, deadline: Deadline())).Pose;
        var again = (await Server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = BatchAt(76) }, deadline: Deadline())).Ack;
        var after = (await Server.Poses.GetPoseAsync(new GetPoseRequest { SiteId = Site, RobotId = robot }, deadline: Deadline())).Pose;

        Assert.Equal(0u, again.Accepted + again.DownWeighted + again.Buffered);
        Assert.Equal(4u, again.Rejected);
        Assert.All(again.Rejections, r => Assert.Equal(RejectionReason.Duplicate, r.Reason));
        Assert.Equal(before.Covariance, after.Covariance);
        Assert.Equal(before.ValidTime, after.ValidTime);
    }

    private async Task EnsureSiteAsync()
    {
        try
        {
            await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = Site }, deadline: Deadline());
            await Server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(Site), deadline: Deadline());
        }
        catch (RpcException e) when (e.StatusCode == StatusCode.AlreadyExists)
        {
            // Another test of the class made it.
        }
    }

    private static SubmitMeasurementsRequest ValidRequest(int start = 0)
    {
        var batch = new MeasurementBatch { SiteId = Site, BatchId = 1 };
        batch.Robots.Add(TestScenario.StaticTagSamples("tug-01", (8, 5, 0.5), start, 10));
        return new SubmitMeasurementsRequest { Batch = batch };
    }

    private static HttpClient NewHttp2Client() => new(new SocketsHttpHandler())
    {
        DefaultRequestVersion = HttpVersion.Version20,
        DefaultVersionPolicy = HttpVersionPolicy.RequestVersionExact,
    };

    private static byte[] Frame(byte type, byte flags, int streamId, byte[] payload)
    {
        var frame = new byte[9 + payload.Length];
        frame[0] = (byte)(payload.Length >> 16);
        frame[1] = (byte)(payload.Length >> 8);
        frame[2] = (byte)payload.Length;
        frame[3] = type;
        frame[4] = flags;
        BinaryPrimitives.WriteInt32BigEndian(frame.AsSpan(5), streamId & int.MaxValue);
        payload.CopyTo(frame, 9);
        return frame;
    }

    private static byte[] RandomBytes(Random random, int count)
    {
        var bytes = new byte[count];
        random.NextBytes(bytes);
        return bytes;
    }

    private static byte[] Mutate(byte[] valid, Random random)
    {
        var bytes = (byte[])valid.Clone();
        for (var k = random.Next(1, 8); k > 0; k--)
        {
            bytes[random.Next(bytes.Length)] = (byte)random.Next(256);
        }

        return bytes;
    }

    private static DateTime Deadline() => DateTime.UtcNow.AddSeconds(30);
}
