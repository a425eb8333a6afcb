using Fleet.Contracts.V1;
using Fleet.Grains;
using Fleet.Grains.Streaming;
using Fleet.Server.Security;
using Fleet.Server.Validation;
using Grpc.Core;
using Microsoft.Extensions.Options;

namespace Fleet.Server.Grpc;

/// <summary>Latest pose, pose streams and fleet snapshots. Streams read from the silo's <see cref="PoseHub"/>.</summary>
internal sealed class PoseGrpcService(
    IGrainFactory grains,
    SiteDirectory sites,
    PoseHub hub,
    FleetAccess access,
    FleetValidationOptions limits,
    IOptions<FleetServerOptions> options) : PoseService.PoseServiceBase
{
    public override async Task<GetPoseResponse> GetPose(GetPoseRequest request, ServerCallContext context)
    {
        var violations = new Violations();
        violations.SiteId("site_id", request.SiteId);
        violations.Id("robot_id", request.RobotId);
        violations.ThrowIfAny();
        access.Require(context, FleetRole.Read, request.SiteId);
        RequireSite(request.SiteId);

        var pose = await grains.GetGrain<IRobotGrain>(GrainKeys.Robot(request.SiteId, request.RobotId)).GetLatestPose();
        if (pose is null)
        {
            GrpcErrors.ThrowNotFound($"robot '{request.RobotId}' of site '{request.SiteId}' has no pose estimate");
        }

        return new GetPoseResponse { Pose = ToProto(pose) };
    }

    public override async Task WatchPoses(WatchPosesRequest request, IServerStreamWriter<WatchPosesResponse> responseStream, ServerCallContext context)
    {
        var filter = ToFilter(request);
        access.Require(context, FleetRole.Read, request.SiteId);
        RequireSite(request.SiteId);
        var o = options.Value;
        using var subscription = hub.Subscribe(filter, o.SubscriberQueueCapacity);

        // Start with what is known now, then follow updates.
        foreach (var pose in hub.LatestOfSite(request.SiteId))
        {
            if (filter.Matches(pose))
            {
                subscription.Offer(pose);
            }
        }

        var ct = context.CancellationToken;
        var buffer = new List<PoseSnapshot>(o.MaxPosesPerMessage);
        try
        {
            while (!ct.IsCancellationRequested)
            {
                buffer.Clear();
                var wait = subscription.Drain(buffer, o.MaxPosesPerMessage);
                if (buffer.Count == 0)
                {
                    await subscription.WaitAsync(wait, ct);
                    continue;
                }

                var response = new WatchPosesResponse { DroppedUpdates = (ulong)subscription.Dropped };
                foreach (var pose in buffer)
                {
                    response.Poses.Add(ToProto(pose));
                }

                // The only writer of this stream; producers never touch it, so a slow reader only grows drops.
                await responseStream.WriteAsync(response);
            }
        }
        catch (OperationCanceledException) when (ct.IsCancellationRequested)
        {
            // The client went away.
        }
        catch (InvalidOperationException) when (ct.IsCancellationRequested)
        {
            // The client hung up between the cancellation check and the write ("request is complete"): a normal end.
        }
    }

    public override async Task<GetFleetSnapshotResponse> GetFleetSnapshot(GetFleetSnapshotRequest request, ServerCallContext context)
    {
        var violations = new Violations();
        violations.SiteId("site_id", request.SiteId);
        if (request.Time is { } t && !TimestampRules.IsValid(t))
        {
            violations.Add("time", TimestampRules.InvalidDescription);
        }

        var requestedTime = request.Time is null ? double.NaN : ProtoTime.ToSeconds(request.Time);
        violations.ThrowIfAny();
        access.Require(context, FleetRole.Read, request.SiteId);
        RequireSite(request.SiteId);

        var robots = await grains.GetGrain<ISiteGrain>(request.SiteId).GetAttachedRobots();
        var time = requestedTime;
        if (double.IsNaN(time))
        {
            // Default: the newest time of validity among the site's robots, so nobody is extrapolated backwards far.
            // Asked of the robots themselves: in a cluster they live on every silo, not only in this one's hub.
            time = double.NegativeInfinity;
            var latest = await Task.WhenAll(robots.Select(r => grains.GetGrain<IRobotGrain>(GrainKeys.Robot(request.SiteId, r)).GetLatestPose()));
            foreach (var pose in latest)
            {
                if (pose is not null)
                {
                    time = Math.Max(time, pose.Time);
                }
            }
        }

        var response = new GetFleetSnapshotResponse();
        if (!double.IsFinite(time))
        {
            return response;
        }

        response.Time = ProtoTime.FromSeconds(time);
        var predictions = new Task<PoseSnapshot?>[robots.Length];
        for (var i = 0; i < robots.Length; i++)
        {
            predictions[i] = grains.GetGrain<IRobotGrain>(GrainKeys.Robot(request.SiteId, robots[i])).PredictPose(time);
        }

        await Task.WhenAll(predictions);
        foreach (var prediction in predictions)
        {
            var pose = prediction.Result;
            if (pose is not null && (request.IncludeLost || pose.State != RobotTrackState.Lost))
            {
                response.Poses.Add(ToProto(pose));
            }
        }

        return response;
    }

    private void RequireSite(string siteId)
    {
        if (!sites.Exists(siteId))
        {
            GrpcErrors.ThrowNotFound($"site '{siteId}' does not exist");
        }
    }

    private PoseFilter ToFilter(WatchPosesRequest request)
    {
        var violations = new Violations();
        violations.SiteId("site_id", request.SiteId);
        if (request.RobotIds.Count > limits.MaxWatchedRobots)
        {
            violations.Add("robot_ids", $"lists {request.RobotIds.Count} robots; at most {limits.MaxWatchedRobots}");
        }
        for (var i = 0; i < request.RobotIds.Count; i++)
        {
            violations.Id($"robot_ids[{i}]", request.RobotIds[i]);
        }

        if (!double.IsFinite(request.MaxRatePerRobotHz) || request.MaxRatePerRobotHz < 0)
        {
            violations.Add("max_rate_per_robot_hz", "must be a finite number ≥ 0");
        }

        Vec3? zoneMin = null, zoneMax = null;
        if (request.Zone is { } zone)
        {
            if (zone.Min is null || zone.Max is null)
            {
                violations.Add("zone", "needs both min and max");
            }
            else
            {
                zoneMin = new Vec3(zone.Min.X, zone.Min.Y, zone.Min.Z);
                zoneMax = new Vec3(zone.Max.X, zone.Max.Y, zone.Max.Z);
                foreach (var (name, v) in new[] { ("min.x", zone.Min.X), ("min.y", zone.Min.Y), ("min.z", zone.Min.Z), ("max.x", zone.Max.X), ("max.y", zone.Max.Y), ("max.z", zone.Max.Z) })
                {
                    violations.Finite($"zone.{name}", v);
                }

                if (zone.Min.X > zone.Max.X || zone.Min.Y > zone.Max.Y || zone.Min.Z > zone.Max.Z)
                {
                    violations.Add("zone", "min must not exceed max on any axis");
                }
            }
        }

        violations.ThrowIfAny();
        return new PoseFilter
        {
            SiteId = request.SiteId,
            RobotIds = request.RobotIds.Count > 0 ? request.RobotIds.ToHashSet(StringComparer.Ordinal) : null,
            ZoneMin = zoneMin,
            ZoneMax = zoneMax,
            MaxRatePerRobotHz = request.MaxRatePerRobotHz,
        };
    }

    internal static Pose ToProto(PoseSnapshot pose)
    {
        var proto = new Pose
        {
            SiteId = pose.SiteId,
            RobotId = pose.RobotId,
            ValidTime = ProtoTime.FromSeconds(pose.Time),
            Position = ToProto(pose.Position),
            TagPosition = ToProto(pose.TagPosition),
            Yaw = pose.Yaw,
            Velocity = ToProto(pose.Velocity),
            TrackingState = ToProto(pose.State),
            RecentRejectionRatio = pose.RecentRejectionRatio,
        };
        proto.Covariance.Add(pose.Covariance);
        return proto;
    }

    internal static TrackingState ToProto(RobotTrackState state) => state switch
    {
        RobotTrackState.Acquiring => TrackingState.Acquiring,
        RobotTrackState.Locked => TrackingState.Locked,
        RobotTrackState.Uncertain => TrackingState.Uncertain,
        RobotTrackState.Lost => TrackingState.Lost,
        _ => TrackingState.Unspecified,
    };

    private static Vector3 ToProto(Vec3 v) => new() { X = v.X, Y = v.Y, Z = v.Z };
}
