using System.Diagnostics;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;
using Fleet.Grains.Health;
using Fleet.Grains.Models;
using Fleet.Grains.Registry;
using Fleet.Grains.Streaming;
using Fleet.Grains.Telemetry;
using Microsoft.Extensions.Logging;
using Microsoft.Extensions.Options;

namespace Fleet.Grains;

/// <summary>
/// One robot's filter. Runs each batch through <see cref="RobotFilter"/> in time order, publishes the new pose to the
/// silo's <see cref="PoseHub"/>, and tallies per-anchor health. Site configuration arrives from the site grain.
/// </summary>
public sealed partial class RobotGrain(
    SiteModelCache models,
    ISiteRegistry registry,
    RobotActivityLog activityLog,
    PoseHub hub,
    AnchorHealthTracker anchorHealth,
    FleetInstruments instruments,
    IOptions<FleetGrainOptions> options,
    ILogger<RobotGrain> logger,
    RobotPoseLog? poseLog = null,
    IRobotPoseStore? poseStore = null,
    TimeProvider? timeProvider = null) : Grain, IRobotGrain
{
    private readonly PoseEstimate _pose = new();
    private readonly int[] _rejectedByReason = new int[RobotBatchResult.ReasonCount];
    private readonly List<SampleRejectionEntry> _rejections = [];

    private string _siteId = string.Empty;
    private string _robotId = string.Empty;
    private SiteConfig _config = new(string.Empty, false, 0, 0);
    private RobotEntry? _settings;
    private AnchorMap? _map;
    private int _mapVersion;
    private string[] _anchorIds = [];
    private RobotFilter? _filter;
    private AnchorTally[] _anchorTallies = [];
    private bool _seenSinceHeartbeat;

    // Outcome counts and per-anchor tallies are pushed to the instruments and the anchor-health tracker at most once
    // per FleetGrainOptions.TelemetryInterval, not once per batch: both take locks shared by every robot of the site.
    private readonly int[] _pendingRejectedByReason = new int[RobotBatchResult.ReasonCount];
    private int _pendingAccepted;
    private int _pendingDownWeighted;
    private int _pendingBuffered;
    private long _lastTelemetryFlush;

    public override async Task OnActivateAsync(CancellationToken cancellationToken)
    {
        (_siteId, _robotId) = GrainKeys.ParseRobot(this.GetPrimaryKeyString());
        _config = await GrainFactory.GetGrain<ISiteGrain>(_siteId).AttachRobot(_robotId);
        if (_config.Exists)
        {
            _settings = registry.GetRobot(_siteId, _robotId);
            activityLog.Mark(_siteId, _robotId);
        }

        BuildFilter();
        RestoreLastPose();
        instruments.RobotActivated(_siteId);
        var heartbeat = options.Value.RobotHeartbeat;
        this.RegisterGrainTimer(HeartbeatAsync, heartbeat, heartbeat);
    }

    public override Task OnDeactivateAsync(DeactivationReason reason, CancellationToken cancellationToken)
    {
        FlushTelemetry();
        hub.Forget(_siteId, _robotId);
        instruments.RobotDeactivated(_siteId);
        if (_config.Exists && _seenSinceHeartbeat)
        {
            activityLog.Mark(_siteId, _robotId);
        }

        // At shutdown the site grain goes away too; nothing to detach from.
        return reason.ReasonCode == DeactivationReasonCode.ShuttingDown
            ? Task.CompletedTask
            : GrainFactory.GetGrain<ISiteGrain>(_siteId).DetachRobot(_robotId);
    }

    public Task<RobotBatchResult> Ingest(RobotBatch batch)
    {
        using var activity = FleetInstruments.ActivitySource.StartActivity("fleet.robot.ingest");
        activity?.SetTag(FleetInstrumentNames.Site, _siteId);
        activity?.SetTag(FleetInstrumentNames.Robot, _robotId);
        activity?.SetTag("fleet.batch.samples", batch.Count);
        _seenSinceHeartbeat = true;

        RobotBatchResult result;
        if (!_config.Exists)
        {
            result = RobotBatchResult.RejectAll(batch, SampleRejectionReason.UnknownSite);
        }
        else if (_filter is null || _map is null)
        {
            result = RobotBatchResult.RejectAll(batch, SampleRejectionReason.NoAnchorMap);
        }
        else
        {
            result = Run(batch, _filter, _map);
        }

        _pendingAccepted += result.Accepted;
        _pendingDownWeighted += result.DownWeighted;
        _pendingBuffered += result.Buffered;
        for (var r = 0; r < _pendingRejectedByReason.Length; r++)
        {
            _pendingRejectedByReason[r] += result.RejectedByReason[r];
        }

        var now = Stopwatch.GetTimestamp();
        if (_lastTelemetryFlush == 0 || Stopwatch.GetElapsedTime(_lastTelemetryFlush, now) >= options.Value.TelemetryInterval)
        {
            FlushTelemetry();
            _lastTelemetryFlush = now;
        }

        return Task.FromResult(result);
    }

    public Task<PoseSnapshot?> GetLatestPose()
    {
        if (_filter is null || _filter.State == TrackingState.Acquiring)
        {
            return Task.FromResult<PoseSnapshot?>(null);
        }

        _filter.GetPose(_pose);
        return Task.FromResult<PoseSnapshot?>(Snapshot(_pose));
    }

    public Task<PoseSnapshot?> PredictPose(double time)
    {
        if (_filter is null || _filter.State == TrackingState.Acquiring || !double.IsFinite(time))
        {
            return Task.FromResult<PoseSnapshot?>(null);
        }

        _filter.PredictPose(time, _pose);
        return Task.FromResult<PoseSnapshot?>(Snapshot(_pose));
    }

    public Task ApplySiteConfig(SiteConfig config)
    {
        var previous = _config;
        _config = config;
        if (_filter is null || previous.AnchorMapVersion == 0 || !previous.Exists)
        {
            if (config.Exists && _settings is null)
            {
                _settings = registry.GetRobot(_siteId, _robotId);
                activityLog.Mark(_siteId, _robotId);
            }

            BuildFilter();
            return Task.CompletedTask;
        }

        if (config.AnchorMapVersion != previous.AnchorMapVersion)
        {
            var map = models.GetAnchorMap(_siteId, config.AnchorMapVersion);
            if (map is not null)
            {
                // The filter keeps its track across a map change; only the anchor geometry moves.
                _filter.SetAnchorMap(map);
                UseMap(map, config.AnchorMapVersion);
            }
        }

        if (config.BiasModelVersion != previous.BiasModelVersion)
        {
            _filter.SetBiasModel(LoadBiasModel(config.BiasModelVersion));
        }

        return Task.CompletedTask;
    }

    public Task ReloadSettings()
    {
        _settings = registry.GetRobot(_siteId, _robotId) ?? _settings;
        _filter = null;
        BuildFilter();
        return Task.CompletedTask;
    }

    private RobotBatchResult Run(RobotBatch batch, RobotFilter filter, AnchorMap map)
    {
        Array.Clear(_rejectedByReason);
        _rejections.Clear();
        int accepted = 0, downWeighted = 0, buffered = 0, rejected = 0;
        var truncated = false;

        // Anchor indices resolved by screening are used when they refer to the very map version this filter runs.
        var tdoaCount = batch.TdoaTimes.Length;
        var indexed = batch.AnchorMapVersion == _mapVersion && _mapVersion > 0
            && batch.AnchorIndexA.Length == tdoaCount && batch.AnchorIndexB.Length == tdoaCount
            && AllBelow(batch.AnchorIndexA, map.Count) && AllBelow(batch.AnchorIndexB, map.Count);

        // Merge the two sorted lists by time so odometry and TDOA reach the filter in order.
        int i = 0, j = 0;
        var odometryCount = batch.OdometryTimes.Length;
        while (i < tdoaCount || j < odometryCount)
        {
            UpdateResult update;
            SampleKind kind;
            int index;
            if (j < odometryCount && (i >= tdoaCount || batch.OdometryTimes[j] <= batch.TdoaTimes[i]))
            {
                kind = SampleKind.Odometry;
                index = j;
                update = filter.SubmitOdometry(new OdometryMeasurement(batch.OdometryTimes[j], batch.ForwardSpeeds[j], batch.YawRates[j]));
                j++;
            }
            else
            {
                kind = SampleKind.Tdoa;
                index = i;
                update = SubmitTdoa(filter, map, batch, indexed, i);
                i++;
            }

            switch (update.Outcome)
            {
                case UpdateOutcome.Accepted:
                    accepted++;
                    break;
                case UpdateOutcome.DownWeighted:
                    downWeighted++;
                    break;
                case UpdateOutcome.Buffered:
                    buffered++;
                    break;
                default:
                    rejected++;
                    var reason = update.Reason == RejectionReason.UnknownAnchor && kind == SampleKind.Tdoa
                        ? SampleRejectionReason.UnknownAnchor
                        : Map(update.Reason);
                    _rejectedByReason[(int)reason]++;
                    if (_rejections.Count < RobotBatchResult.MaxItemisedRejections)
                    {
                        _rejections.Add(new SampleRejectionEntry(kind, index, reason));
                    }
                    else
                    {
                        truncated = true;
                    }

                    break;
            }
        }

        if (batch.Count > 0 && filter.State != TrackingState.Acquiring)
        {
            filter.GetPose(_pose);
            var snapshot = Snapshot(_pose);
            hub.Publish(snapshot);
            poseLog?.Mark(snapshot);
            instruments.IngestLatency.Record(Stopwatch.GetElapsedTime(batch.ReceivedTimestamp).TotalSeconds,
                new KeyValuePair<string, object?>(FleetInstrumentNames.Site, _siteId));
        }

        return new RobotBatchResult
        {
            Accepted = accepted,
            DownWeighted = downWeighted,
            Buffered = buffered,
            Rejected = rejected,
            RejectedByReason = rejected == 0 ? RobotBatchResult.NoRejections : (int[])_rejectedByReason.Clone(),
            Rejections = _rejections.Count == 0 ? [] : [.. _rejections],
            RejectionsTruncated = truncated,
        };
    }

    /// <summary>Pushes accumulated outcome counts and per-anchor tallies out; called at most once per interval, on heartbeats and at deactivation.</summary>
    private void FlushTelemetry()
    {
        instruments.RecordMeasurements(_siteId, _robotId, _pendingAccepted, _pendingDownWeighted, _pendingBuffered, _pendingRejectedByReason);
        _pendingAccepted = _pendingDownWeighted = _pendingBuffered = 0;
        Array.Clear(_pendingRejectedByReason);
        if (_anchorIds.Length > 0 && _filter is not null)
        {
            anchorHealth.Record(_siteId, _anchorIds, _anchorTallies, _filter.LastTime);
            Array.Clear(_anchorTallies);
        }
    }

    private UpdateResult SubmitTdoa(RobotFilter filter, AnchorMap map, RobotBatch batch, bool indexed, int i)
    {
        int a, b;
        if (indexed)
        {
            (a, b) = (batch.AnchorIndexA[i], batch.AnchorIndexB[i]);
        }
        else if (!map.TryGetIndex(batch.AnchorA[i], out a) || !map.TryGetIndex(batch.AnchorB[i], out b))
        {
            return UpdateResult.Reject(RejectionReason.UnknownAnchor);
        }

        var update = filter.Submit(new TdoaMeasurement(batch.TdoaTimes[i], a, b, batch.DistanceDifferences[i]));
        ref var ta = ref _anchorTallies[a];
        ref var tb = ref _anchorTallies[b];
        if (update.Outcome == UpdateOutcome.Rejected)
        {
            ta.Rejected++;
            tb.Rejected++;
        }
        else
        {
            ta.Used++;
            tb.Used++;
            if (double.IsFinite(update.NormalizedInnovationSquared))
            {
                ta.NisSum += update.NormalizedInnovationSquared;
                tb.NisSum += update.NormalizedInnovationSquared;
                ta.NisCount++;
                tb.NisCount++;
            }
        }

        // ddiff = |p − b| − |p − a|: a long path to b makes the innovation positive, a long path to a negative.
        ta.AddScore(-update.StandardizedInnovation);
        tb.AddScore(update.StandardizedInnovation);

        return update;
    }

    private void BuildFilter()
    {
        var map = _config.Exists ? models.GetAnchorMap(_siteId, _config.AnchorMapVersion) : null;
        if (map is null)
        {
            _filter = null;
            _map = null;
            _mapVersion = 0;
            return;
        }

        var o = options.Value;
        var defaults = new FilterOptions();
        var filterOptions = new FilterOptions
        {
            Motion = _settings?.Motion ?? o.DefaultMotion,
            TagLeverArm = _settings?.TagOffset ?? Vector3D.Zero,
            Kernel = o.Kernel ?? defaults.Kernel,
            TdoaSigmaMetres = o.TdoaSigmaMetres ?? defaults.TdoaSigmaMetres,
            ReorderLagSeconds = o.ReorderLagSeconds ?? defaults.ReorderLagSeconds,
            // Only with a registered tag offset: an unknown robot's tag height is not known.
            HoldTagHeight = o.HoldTagHeight && _settings is not null,
        };
        _filter = new RobotFilter(map, filterOptions, LoadBiasModel(_config.BiasModelVersion));
        UseMap(map, _config.AnchorMapVersion);
    }

    /// <summary>
    /// Seeds the new filter from the robot's stored last pose (after a silo loss or restart), with the stored
    /// uncertainty grown by how far a ground robot can have driven since it was saved. Too old a pose is ignored.
    /// </summary>
    private void RestoreLastPose()
    {
        if (_filter is null || poseStore is null || !_config.Exists)
        {
            return;
        }

        StoredRobotPose? stored;
        try
        {
            stored = poseStore.GetPose(_siteId, _robotId);
        }
        catch (Exception e) when (e is System.Data.Common.DbException or IOException or InvalidOperationException)
        {
            LogRestoreFailed(logger, e, _siteId, _robotId);
            return;
        }

        if (stored is null || !double.IsFinite(stored.Time) || !double.IsFinite(stored.PositionSigma))
        {
            return;
        }

        var o = options.Value;
        var age = ((timeProvider ?? TimeProvider.System).GetUtcNow() - stored.SavedAt).TotalSeconds;
        if (age > o.LastPoseMaxAge.TotalSeconds)
        {
            return;
        }

        var sigma = stored.PositionSigma + (o.LastPoseSpeedBound * Math.Max(age, 0));
        var planar = _filter.Options.Motion == MotionModelKind.PlanarOdometry;
        var p = planar ? stored.Position : stored.TagPosition;
        var yawSigma = double.IsFinite(stored.YawSigma) && stored.YawSigma > 0 ? stored.YawSigma : double.PositiveInfinity;
        _filter.SeedPose(stored.Time, new Vector3D(p.X, p.Y, p.Z), double.IsFinite(stored.Yaw) ? stored.Yaw : 0, Math.Max(sigma, 0.05), yawSigma);
        LogRestored(logger, _siteId, _robotId, sigma, age);
    }

    private Estimation.Bias.ITdoaBiasModel? LoadBiasModel(int version)
    {
        try
        {
            return models.CreateBiasModel(_siteId, version);
        }
        catch (Exception e) when (e is InvalidDataException or ArgumentException or NotSupportedException)
        {
            // The bytes were checked at upload; a model that still fails must not take the robot down.
            LogBiasModelFailed(logger, e, _siteId, version);
            return null;
        }
    }

    private void UseMap(AnchorMap map, int version)
    {
        if (_anchorIds.Length > 0 && _filter is not null)
        {
            // Tallies belong to the old map's anchor indices: hand them over before the arrays are replaced.
            anchorHealth.Record(_siteId, _anchorIds, _anchorTallies, _filter.LastTime);
        }

        _map = map;
        _mapVersion = version;
        var ids = new string[map.Count];
        for (var k = 0; k < ids.Length; k++)
        {
            ids[k] = map[k].Id;
        }

        _anchorIds = ids;
        _anchorTallies = new AnchorTally[map.Count];
    }

    private async Task HeartbeatAsync(CancellationToken cancellationToken)
    {
        FlushTelemetry();
        var config = await GrainFactory.GetGrain<ISiteGrain>(_siteId).AttachRobot(_robotId);
        if (config != _config)
        {
            await ApplySiteConfig(config);
        }

        if (_seenSinceHeartbeat && _config.Exists)
        {
            _seenSinceHeartbeat = false;
            activityLog.Mark(_siteId, _robotId);
        }
    }

    private PoseSnapshot Snapshot(PoseEstimate pose) => new()
    {
        SiteId = _siteId,
        RobotId = _robotId,
        Time = pose.Time,
        Position = ToVec(pose.Position),
        TagPosition = ToVec(pose.TagPosition),
        Yaw = pose.Yaw,
        Velocity = ToVec(pose.Velocity),
        Covariance = (double[])pose.Covariance.Clone(),
        State = pose.State switch
        {
            TrackingState.Acquiring => RobotTrackState.Acquiring,
            TrackingState.Locked => RobotTrackState.Locked,
            TrackingState.Uncertain => RobotTrackState.Uncertain,
            TrackingState.Lost => RobotTrackState.Lost,
            _ => RobotTrackState.Unknown,
        },
        RecentRejectionRatio = pose.RecentRejectionRatio,
    };

    private static bool AllBelow(int[] indices, int count)
    {
        foreach (var k in indices)
        {
            if ((uint)k >= (uint)count)
            {
                return false;
            }
        }

        return true;
    }

    private static Vec3 ToVec(Vector3D v) => new(v.X, v.Y, v.Z);

    private static SampleRejectionReason Map(RejectionReason reason) => reason switch
    {
        RejectionReason.NonFinite => SampleRejectionReason.InvalidValue,
        RejectionReason.UnknownAnchor => SampleRejectionReason.UnknownAnchor,
        RejectionReason.SameAnchor => SampleRejectionReason.SameAnchor,
        RejectionReason.TooLate => SampleRejectionReason.TooLate,
        RejectionReason.TooFarInFuture => SampleRejectionReason.TooFarInFuture,
        RejectionReason.ImpossibleValue => SampleRejectionReason.ImpossibleValue,
        RejectionReason.ChiSquareGate => SampleRejectionReason.OutlierGate,
        RejectionReason.ZeroWeight => SampleRejectionReason.ZeroWeight,
        RejectionReason.NotInitialised => SampleRejectionReason.NotInitialised,
        RejectionReason.Duplicate => SampleRejectionReason.Duplicate,
        _ => SampleRejectionReason.InvalidValue,
    };

    [LoggerMessage(2, LogLevel.Information, "Robot {SiteId}/{RobotId} resumed from its last pose (1σ {Sigma:F2} m, saved {Age:F1} s ago)")]
    private static partial void LogRestored(ILogger logger, string siteId, string robotId, double sigma, double age);

    [LoggerMessage(3, LogLevel.Warning, "Robot {SiteId}/{RobotId}: last pose could not be read; starting from scratch")]
    private static partial void LogRestoreFailed(ILogger logger, Exception exception, string siteId, string robotId);

    [LoggerMessage(1, LogLevel.Warning, "Site {SiteId}: bias model v{Version} could not be loaded; running without bias correction")]
    private static partial void LogBiasModelFailed(ILogger logger, Exception exception, string siteId, int version);
}
