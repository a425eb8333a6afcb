using System.Diagnostics;
using Fleet.Contracts.V1;
using Fleet.Grains;
using Fleet.Grains.Telemetry;
using Fleet.Server.Recording;
using Fleet.Server.Security;
using Fleet.Server.Validation;
using Grpc.Core;
using Microsoft.Extensions.Options;
using SampleKind = Fleet.Contracts.V1.SampleKind;

namespace Fleet.Server.Grpc;

/// <summary>
/// Ingest: splits each batch by robot, sends every robot's share to its grain in one call (all robots in parallel),
/// and acknowledges the batch with counts and reasons.
/// </summary>
internal sealed class IngestGrpcService(
    RobotGrainReferences robotGrains,
    SiteDirectory sites,
    FleetInstruments instruments,
    IngestRecorder recorder,
    IngestBatchValidator validator,
    ActiveAnchorMaps anchorMaps,
    FleetAccess access,
    ClientRateLimits rateLimits,
    IOptions<FleetServerOptions> options) : IngestService.IngestServiceBase
{
    /// <summary>At most this many rejected samples are itemised per acknowledgement.</summary>
    public const int MaxItemisedRejections = 256;

    public override async Task StreamMeasurements(
        IAsyncStreamReader<StreamMeasurementsRequest> requestStream,
        IServerStreamWriter<StreamMeasurementsResponse> responseStream,
        ServerCallContext context)
    {
        try
        {
            await foreach (var request in requestStream.ReadAllAsync(context.CancellationToken))
            {
                // The call-rate limiter counts calls, not messages: each batch of a stream takes its own permit.
                await rateLimits.AcquireStreamMessageAsync(context);
                validator.ValidateStructure(request.Batch, "batch");
                access.Require(context, FleetRole.Ingest, request.Batch.SiteId);
                var ack = await IngestAsync(request.Batch);
                await responseStream.WriteAsync(new StreamMeasurementsResponse { Ack = ack });
            }
        }
        catch (Exception e) when (e is IOException or OperationCanceledException or InvalidOperationException && context.CancellationToken.IsCancellationRequested)
        {
            // The gateway hung up (reset or cancelled its stream): a normal end, not a server error. Batches it did not
            // see acknowledged are re-sent by its retry policy.
        }
    }

    public override async Task<SubmitMeasurementsResponse> SubmitMeasurements(SubmitMeasurementsRequest request, ServerCallContext context)
    {
        validator.ValidateStructure(request.Batch, "batch");
        access.Require(context, FleetRole.Ingest, request.Batch.SiteId);
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

        var screened = validator.Screen(batch, siteExists ? anchorMaps.GetActive(batch.SiteId) : default, received);
        var results = new Task<RobotBatchResult>?[screened.Length];
        Span<int> rejectedHere = stackalloc int[RobotBatchResult.ReasonCount];
        for (var k = 0; k < screened.Length; k++)
        {
            var robot = screened[k];
            if (!siteExists)
            {
                // Nothing of an unknown site reaches a grain: every sample the screening passed is rejected for the site.
                robot = screened[k] = ScreenedRobot.RejectAll(batch.Robots[k], SampleRejectionReason.UnknownSite, received);
            }

            // Rejected before reaching a grain, so counted here.
            for (var i = 0; i < robot.Rejections.Count; i++)
            {
                rejectedHere[(int)robot.Rejections[i].Reason]++;
            }

            if (!robot.IsEmpty)
            {
                results[k] = robotGrains.Get(batch.SiteId, robot.RobotId).Ingest(robot.Batch);
            }
        }

        instruments.RecordMeasurements(batch.SiteId, null, 0, 0, 0, rejectedHere);
        foreach (var task in results)
        {
            if (task is not null)
            {
                await task;
            }
        }

        var ack = ToAck(batch, screened, results);
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

    private static BatchAck ToAck(MeasurementBatch batch, ScreenedRobot[] screened, Task<RobotBatchResult>?[] results)
    {
        var ack = new BatchAck { BatchId = batch.BatchId };
        Span<int> byReason = stackalloc int[RobotBatchResult.ReasonCount];
        for (var k = 0; k < screened.Length; k++)
        {
            var robot = screened[k];
            for (var i = 0; i < robot.Rejections.Count; i++)
            {
                var item = robot.Rejections[i];
                ack.Rejected++;
                byReason[(int)item.Reason]++;
                AddRejection(ack, robot.RobotId, item.Kind, item.Index, item.Reason);
            }

            if (results[k] is not { } task)
            {
                continue;
            }

            var r = task.Result;
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
                AddRejection(ack, robot.RobotId, item.Kind, robot.OriginalIndex(item.Kind, item.Index), item.Reason);
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

    private static void AddRejection(BatchAck ack, string robotId, Grains.SampleKind kind, int index, SampleRejectionReason reason)
    {
        if (ack.Rejections.Count >= MaxItemisedRejections)
        {
            ack.RejectionsTruncated = true;
            return;
        }

        ack.Rejections.Add(new SampleRejection
        {
            RobotId = robotId,
            Kind = kind == Grains.SampleKind.Tdoa ? SampleKind.Tdoa : SampleKind.Odometry,
            Index = (uint)index,
            Reason = (RejectionReason)(int)reason,
        });
    }
}
