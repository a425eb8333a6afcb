using System.Diagnostics;
using Fleet.Contracts.V1;
using Fleet.Grains;
using Fleet.Grains.Telemetry;
using Fleet.Server.Recording;
using Grpc.Core;
using Microsoft.Extensions.Options;
using SampleKind = Fleet.Contracts.V1.SampleKind;

namespace Fleet.Server.Grpc;

/// <summary>
/// Ingest: splits each batch by robot, sends every robot's share to its grain in one call (all robots in parallel),
/// and acknowledges the batch with counts and reasons.
/// </summary>
internal sealed class IngestGrpcService(
    IGrainFactory grains,
    SiteDirectory sites,
    FleetInstruments instruments,
    IngestRecorder recorder,
    IOptions<FleetServerOptions> options) : IngestService.IngestServiceBase
{
    /// <summary>At most this many rejected samples are itemised per acknowledgement.</summary>
    public const int MaxItemisedRejections = 256;

    public override async Task StreamMeasurements(
        IAsyncStreamReader<StreamMeasurementsRequest> requestStream,
        IServerStreamWriter<StreamMeasurementsResponse> responseStream,
        ServerCallContext context)
    {
        await foreach (var request in requestStream.ReadAllAsync(context.CancellationToken))
        {
            Validate(request.Batch, "batch");
            var ack = await IngestAsync(request.Batch);
            await responseStream.WriteAsync(new StreamMeasurementsResponse { Ack = ack });
        }
    }

    public override async Task<SubmitMeasurementsResponse> SubmitMeasurements(SubmitMeasurementsRequest request, ServerCallContext context)
    {
        Validate(request.Batch, "batch");
        if (!sites.Exists(request.Batch.SiteId))
        {
            GrpcErrors.ThrowNotFound($"site '{request.Batch.SiteId}' does not exist");
        }

        return new SubmitMeasurementsResponse { Ack = await IngestAsync(request.Batch) };
    }

    private async Task<BatchAck> IngestAsync(MeasurementBatch batch)
    {
        var received = Stopwatch.GetTimestamp();
        using var activity = FleetInstruments.ActivitySource.StartActivity("fleet.ingest.batch");
        activity?.SetTag(FleetInstrumentNames.Site, batch.SiteId);
        activity?.SetTag("fleet.batch.id", batch.BatchId);
        activity?.SetTag("fleet.batch.robots", batch.Robots.Count);

        if (options.Value.NoopIngest)
        {
            return NoopAck(batch);
        }

        var siteExists = sites.Exists(batch.SiteId);
        if (siteExists)
        {
            recorder.Record(batch);
        }

        var results = new Task<RobotBatchResult>[batch.Robots.Count];
        for (var k = 0; k < batch.Robots.Count; k++)
        {
            var samples = batch.Robots[k];
            var robotBatch = ToRobotBatch(samples, received);
            if (siteExists && FleetIds.IsValidId(samples.RobotId))
            {
                results[k] = grains.GetGrain<IRobotGrain>(GrainKeys.Robot(batch.SiteId, samples.RobotId)).Ingest(robotBatch);
                continue;
            }

            // Rejected before reaching a grain, so counted here.
            var rejected = RobotBatchResult.RejectAll(robotBatch, siteExists ? SampleRejectionReason.InvalidRobot : SampleRejectionReason.UnknownSite);
            instruments.RecordMeasurements(batch.SiteId, null, 0, 0, 0, rejected.RejectedByReason);
            results[k] = Task.FromResult(rejected);
        }

        await Task.WhenAll(results);
        var ack = ToAck(batch, results);
        activity?.SetTag("fleet.batch.accepted", ack.Accepted + ack.DownWeighted);
        activity?.SetTag("fleet.batch.rejected", ack.Rejected);
        return ack;
    }

    private static BatchAck NoopAck(MeasurementBatch batch)
    {
        var ack = new BatchAck { BatchId = batch.BatchId };
        foreach (var robot in batch.Robots)
        {
            ack.Accepted += (uint)(robot.Tdoa.Count + robot.Odometry.Count);
        }

        return ack;
    }

    private static void Validate(MeasurementBatch? batch, string field)
    {
        if (batch is null)
        {
            GrpcErrors.ThrowInvalidArgument(field, "is required");
        }

        var violations = new Violations();
        violations.SiteId($"{field}.site_id", batch.SiteId);
        violations.ThrowIfAny();
    }

    private static RobotBatch ToRobotBatch(RobotSamples samples, long received)
    {
        var n = samples.Tdoa.Count;
        var times = new double[n];
        var a = new string[n];
        var b = new string[n];
        var values = new double[n];
        for (var i = 0; i < n; i++)
        {
            var s = samples.Tdoa[i];
            times[i] = ProtoTime.ToSeconds(s.SampleTime);
            a[i] = s.AnchorA;
            b[i] = s.AnchorB;
            values[i] = s.DistanceDifference;
        }

        var m = samples.Odometry.Count;
        var odometryTimes = new double[m];
        var speeds = new double[m];
        var yawRates = new double[m];
        for (var j = 0; j < m; j++)
        {
            var s = samples.Odometry[j];
            odometryTimes[j] = ProtoTime.ToSeconds(s.SampleTime);
            speeds[j] = s.ForwardSpeed;
            yawRates[j] = s.YawRate;
        }

        return new RobotBatch
        {
            TdoaTimes = times,
            AnchorA = a,
            AnchorB = b,
            DistanceDifferences = values,
            OdometryTimes = odometryTimes,
            ForwardSpeeds = speeds,
            YawRates = yawRates,
            ReceivedTimestamp = received,
        };
    }

    private static BatchAck ToAck(MeasurementBatch batch, Task<RobotBatchResult>[] results)
    {
        var ack = new BatchAck { BatchId = batch.BatchId };
        Span<int> byReason = stackalloc int[RobotBatchResult.ReasonCount];
        for (var k = 0; k < results.Length; k++)
        {
            var r = results[k].Result;
            ack.Accepted += (uint)r.Accepted;
            ack.DownWeighted += (uint)r.DownWeighted;
            ack.Buffered += (uint)r.Buffered;
            ack.Rejected += (uint)r.Rejected;
            for (var reason = 0; reason < r.RejectedByReason.Length && reason < byReason.Length; reason++)
            {
                byReason[reason] += r.RejectedByReason[reason];
            }

            ack.RejectionsTruncated |= r.RejectionsTruncated;
            foreach (var item in r.Rejections)
            {
                if (ack.Rejections.Count >= MaxItemisedRejections)
                {
                    ack.RejectionsTruncated = true;
                    break;
                }

                ack.Rejections.Add(new SampleRejection
                {
                    RobotId = batch.Robots[k].RobotId,
                    Kind = item.Kind == Grains.SampleKind.Tdoa ? SampleKind.Tdoa : SampleKind.Odometry,
                    Index = (uint)item.Index,
                    Reason = (RejectionReason)(int)item.Reason,
                });
            }
        }

        for (var reason = 1; reason < byReason.Length; reason++)
        {
            if (byReason[reason] > 0)
            {
                ack.RejectedByReason.Add(new RejectionCount { Reason = (RejectionReason)reason, Count = (uint)byReason[reason] });
            }
        }

        return ack;
    }
}
