using Fleet.Contracts.V1;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Grains;
using Fleet.Grains.Health;
using Fleet.Grains.Models;
using Fleet.Grains.Registry;
using Fleet.Grains.Streaming;
using Fleet.Server.Registry;
using Fleet.Server.Security;
using Fleet.Server.Validation;
using Grpc.Core;
using Anchor = Fleet.Contracts.V1.Anchor;
using AnchorMap = Fleet.Contracts.V1.AnchorMap;
using AuditAction = Fleet.Server.Registry.AuditAction;

namespace Fleet.Server.Grpc;

/// <summary>Site administration. Writes go to the registry first, then the site grain pushes the change to its robots.</summary>
internal sealed class SiteGrpcService(
    ISiteRegistry registry,
    IGrainFactory grains,
    IBiasModelLoader biasModelLoader,
    SiteModelCache models,
    AnchorHealthTracker anchorHealth,
    PoseHub hub,
    FleetAccess access,
    IAuditLog audit,
    ActiveAnchorMaps activeMaps,
    FleetValidationOptions limits) : SiteService.SiteServiceBase
{
    public const int MaxDisplayNameLength = 256;
    public const int MaxDescriptionLength = 1024;

    public override Task<CreateSiteResponse> CreateSite(CreateSiteRequest request, ServerCallContext context)
    {
        var violations = new Violations();
        violations.SiteId("site_id", request.SiteId);
        if (request.DisplayName.Length > MaxDisplayNameLength || request.DisplayName.Any(char.IsControl))
        {
            violations.Add("display_name", $"must be at most {MaxDisplayNameLength} characters, none of them control characters");
        }

        violations.ThrowIfAny();
        access.Require(context, FleetRole.Admin, request.SiteId);
        var site = Registry(() => registry.CreateSite(request.SiteId, request.DisplayName));
        Audit(context, AuditAction.CreateSite, site.SiteId, $"created site '{site.SiteId}' (display name '{site.DisplayName}')");
        return Task.FromResult(new CreateSiteResponse { Site = ToProto(site) });
    }

    public override Task<GetSiteResponse> GetSite(GetSiteRequest request, ServerCallContext context) =>
        Task.FromResult(new GetSiteResponse { Site = ToProto(RequireSite(context, FleetRole.Read, request.SiteId)) });

    public override Task<ListSitesResponse> ListSites(ListSitesRequest request, ServerCallContext context)
    {
        var after = ReadToken(request.PageToken);
        var size = Paging.Size(request.PageSize);
        var visible = new List<SiteEntry>(size + 1);
        var more = true;
        while (visible.Count <= size && more)
        {
            // Only sites the caller holds a role on; read on until the page is full or the registry has no more.
            var page = registry.ListSites(after, size + 1);
            more = page.Count > size;
            foreach (var site in page)
            {
                after = site.SiteId;
                if (access.CanSee(context, site.SiteId))
                {
                    visible.Add(site);
                    if (visible.Count > size)
                    {
                        break;
                    }
                }
            }
        }

        var response = new ListSitesResponse();
        response.Sites.Add(visible.Take(size).Select(ToProto));
        if (visible.Count > size)
        {
            response.NextPageToken = Paging.Token(visible[size - 1].SiteId);
        }

        return Task.FromResult(response);
    }

    public override async Task<PutAnchorMapResponse> PutAnchorMap(PutAnchorMapRequest request, ServerCallContext context)
    {
        Authorize(context, FleetRole.Admin, request.SiteId);
        var violations = new Violations();
        if (request.Anchors.Count == 0)
        {
            violations.Add("anchors", "must list at least one anchor");
        }
        else if (request.Anchors.Count > limits.MaxAnchorsPerMap)
        {
            violations.Add("anchors", $"has {request.Anchors.Count} anchors; at most {limits.MaxAnchorsPerMap}");
        }

        var anchors = new List<Estimation.Anchors.Anchor>(request.Anchors.Count);
        for (var i = 0; i < request.Anchors.Count; i++)
        {
            var a = request.Anchors[i];
            violations.Id($"anchors[{i}].anchor_id", a.AnchorId);
            if (a.Position is null)
            {
                violations.Add($"anchors[{i}].position", "is required");
            }
            else
            {
                violations.Finite($"anchors[{i}].position.x", a.Position.X);
                violations.Finite($"anchors[{i}].position.y", a.Position.Y);
                violations.Finite($"anchors[{i}].position.z", a.Position.Z);
            }

            if (a.OrientationDeg is { } o)
            {
                violations.Finite($"anchors[{i}].orientation_deg.x", o.X);
                violations.Finite($"anchors[{i}].orientation_deg.y", o.Y);
                violations.Finite($"anchors[{i}].orientation_deg.z", o.Z);
            }

            violations.Finite($"anchors[{i}].antenna_delay_m", a.AntennaDelayM);

            anchors.Add(new Estimation.Anchors.Anchor(a.AnchorId, ToVector(a.Position), ToVector(a.OrientationDeg), a.AntennaDelayM));
        }

        violations.ThrowIfAny();

        // The estimation core's validation names every error and the anchors concerned.
        foreach (var issue in Estimation.Anchors.AnchorMap.Validate(anchors))
        {
            if (issue.Severity == IssueSeverity.Error)
            {
                var index = issue.AnchorIds.Count > 0 ? anchors.FindIndex(x => x.Id == issue.AnchorIds[0]) : -1;
                violations.Add(index >= 0 ? $"anchors[{index}]" : "anchors", issue.Message);
            }
        }

        violations.ThrowIfAny();
        RequireSite(context, FleetRole.Admin, request.SiteId);
        var entry = Registry(() => registry.AddAnchorMap(request.SiteId, anchors));
        activeMaps.Invalidate(request.SiteId);
        Audit(context, AuditAction.PutAnchorMap, request.SiteId, $"anchor map v{entry.Version} with {anchors.Count} anchors, now active");
        await grains.GetGrain<ISiteGrain>(request.SiteId).Refresh();

        var response = new PutAnchorMapResponse { AnchorMap = ToProto(entry) };
        response.Warnings.Add(Estimation.Anchors.AnchorMap.Create(request.SiteId, anchors).Warnings.Select(w => w.Message));
        return response;
    }

    public override Task<GetAnchorMapResponse> GetAnchorMap(GetAnchorMapRequest request, ServerCallContext context)
    {
        RequireSite(context, FleetRole.Read, request.SiteId);
        var entry = registry.GetAnchorMap(request.SiteId, (int)request.Version);
        if (entry is null)
        {
            GrpcErrors.ThrowNotFound(request.Version == 0
                ? $"site '{request.SiteId}' has no anchor map"
                : $"site '{request.SiteId}' has no anchor map version {request.Version}");
        }

        return Task.FromResult(new GetAnchorMapResponse { AnchorMap = ToProto(entry) });
    }

    public override async Task<UploadBiasModelResponse> UploadBiasModel(UploadBiasModelRequest request, ServerCallContext context)
    {
        // Authorised before the model bytes are parsed: strangers' uploads cost no CPU.
        Authorize(context, FleetRole.Admin, request.SiteId);
        var violations = new Violations();
        if (request.Description.Length > MaxDescriptionLength || request.Description.Any(c => char.IsControl(c) && c != '\n'))
        {
            violations.Add("description", $"must be at most {MaxDescriptionLength} characters, no control characters but line breaks");
        }

        if (request.Model.IsEmpty)
        {
            violations.Add("model", "is required");
        }
        else
        {
            try
            {
                biasModelLoader.Load(request.Model.Memory);
            }
            catch (Exception e) when (e is InvalidDataException or ArgumentException or FormatException or NotSupportedException)
            {
                violations.Add("model", $"is not a Fleet bias model: {e.Message}");
            }
        }

        violations.ThrowIfAny();
        RequireSite(context, FleetRole.Admin, request.SiteId);
        var entry = Registry(() => registry.AddBiasModel(request.SiteId, request.Model.ToByteArray(), request.Description, request.Activate));
        Audit(context, AuditAction.UploadBiasModel, request.SiteId,
            $"bias model v{entry.Version} ({entry.SizeBytes} bytes, sha256 {entry.Sha256}){(request.Activate ? ", activated" : string.Empty)}");
        if (request.Activate)
        {
            await grains.GetGrain<ISiteGrain>(request.SiteId).Refresh();
        }

        return new UploadBiasModelResponse { BiasModel = ToProto(entry) };
    }

    public override async Task<ActivateBiasModelResponse> ActivateBiasModel(ActivateBiasModelRequest request, ServerCallContext context)
    {
        RequireSite(context, FleetRole.Admin, request.SiteId);
        var previous = registry.GetSite(request.SiteId)?.BiasModelVersion ?? 0;
        var site = Registry(() => registry.ActivateBiasModel(request.SiteId, (int)request.Version));
        Audit(context, AuditAction.ActivateBiasModel, request.SiteId, request.Version == 0
            ? $"bias correction off (was v{previous})"
            : $"bias model v{request.Version} active (was v{previous})");
        await grains.GetGrain<ISiteGrain>(request.SiteId).Refresh();
        return new ActivateBiasModelResponse { Site = ToProto(site) };
    }

    public override async Task<RollBackBiasModelResponse> RollBackBiasModel(RollBackBiasModelRequest request, ServerCallContext context)
    {
        RequireSite(context, FleetRole.Admin, request.SiteId);
        var previous = registry.GetSite(request.SiteId)?.BiasModelVersion ?? 0;
        var site = Registry(() => registry.RollBackBiasModel(request.SiteId));
        Audit(context, AuditAction.RollBackBiasModel, request.SiteId, $"rolled back from bias model v{previous} to v{site.BiasModelVersion}");
        await grains.GetGrain<ISiteGrain>(request.SiteId).Refresh();
        return new RollBackBiasModelResponse { Site = ToProto(site) };
    }

    public override Task<ListBiasModelsResponse> ListBiasModels(ListBiasModelsRequest request, ServerCallContext context)
    {
        RequireSite(context, FleetRole.Read, request.SiteId);
        var after = ReadToken(request.PageToken);
        var afterVersion = 0;
        if (after is not null && !int.TryParse(after, out afterVersion))
        {
            GrpcErrors.ThrowInvalidArgument("page_token", "is not a token this server issued");
        }

        var size = Paging.Size(request.PageSize);
        var page = registry.ListBiasModels(request.SiteId, afterVersion, size + 1);
        var response = new ListBiasModelsResponse();
        response.BiasModels.Add(page.Take(size).Select(ToProto));
        if (page.Count > size)
        {
            response.NextPageToken = Paging.Token(page[size - 1].Version.ToString(System.Globalization.CultureInfo.InvariantCulture));
        }

        return Task.FromResult(response);
    }

    public override async Task<PutRobotResponse> PutRobot(PutRobotRequest request, ServerCallContext context)
    {
        var violations = new Violations();
        violations.SiteId("site_id", request.SiteId);
        violations.Id("robot_id", request.RobotId);
        var offset = ToVector(request.TagOffset);
        if (!offset.IsFinite)
        {
            violations.Add("tag_offset", "must be finite");
        }
        else if (Math.Max(Math.Abs(offset.X), Math.Max(Math.Abs(offset.Y), Math.Abs(offset.Z))) > limits.MaxTagOffsetMetres)
        {
            violations.Add("tag_offset", $"must be within {limits.MaxTagOffsetMetres} m of the reference point on every axis");
        }

        MotionModelKind motion = MotionModelKind.PlanarOdometry;
        switch (request.MotionModel)
        {
            case MotionModel.ConstantVelocity:
                motion = MotionModelKind.ConstantVelocity3D;
                break;
            case MotionModel.PlanarOdometry:
                motion = MotionModelKind.PlanarOdometry;
                break;
            default:
                violations.Add("motion_model", "must be MOTION_MODEL_CONSTANT_VELOCITY or MOTION_MODEL_PLANAR_ODOMETRY");
                break;
        }

        violations.ThrowIfAny();
        RequireSite(context, FleetRole.Admin, request.SiteId);
        var robot = Registry(() => registry.PutRobot(request.SiteId, request.RobotId, offset, motion));
        Audit(context, AuditAction.PutRobot, request.SiteId, System.FormattableString.Invariant(
            $"robot '{request.RobotId}': tag offset ({offset.X}, {offset.Y}, {offset.Z}) m, motion {request.MotionModel}"));
        var attached = await grains.GetGrain<ISiteGrain>(request.SiteId).GetAttachedRobots();
        if (Array.BinarySearch(attached, request.RobotId, StringComparer.Ordinal) >= 0)
        {
            await grains.GetGrain<IRobotGrain>(GrainKeys.Robot(request.SiteId, request.RobotId)).ReloadSettings();
        }

        return new PutRobotResponse { Robot = ToProto(robot) };
    }

    public override Task<ListRobotsResponse> ListRobots(ListRobotsRequest request, ServerCallContext context)
    {
        RequireSite(context, FleetRole.Read, request.SiteId);
        var after = ReadToken(request.PageToken);
        var size = Paging.Size(request.PageSize);
        var page = registry.ListRobots(request.SiteId, after, size + 1);
        var response = new ListRobotsResponse();
        foreach (var robot in page.Take(size))
        {
            var proto = ToProto(robot);
            if (hub.Latest(request.SiteId, robot.RobotId) is { } pose)
            {
                proto.TrackingState = PoseGrpcService.ToProto(pose.State);
            }

            response.Robots.Add(proto);
        }

        if (page.Count > size)
        {
            response.NextPageToken = Paging.Token(page[size - 1].RobotId);
        }

        return Task.FromResult(response);
    }

    public override Task<ListAnchorHealthResponse> ListAnchorHealth(ListAnchorHealthRequest request, ServerCallContext context)
    {
        var site = RequireSite(context, FleetRole.Read, request.SiteId);
        var map = models.GetAnchorMap(site.SiteId, site.AnchorMapVersion);
        var response = new ListAnchorHealthResponse();
        if (map is null)
        {
            return Task.FromResult(response);
        }

        var after = ReadToken(request.PageToken);
        var size = Paging.Size(request.PageSize);
        var ids = map.Anchors.Select(a => a.Id).Order(StringComparer.Ordinal).Where(id => after is null || string.CompareOrdinal(id, after) > 0).ToList();
        foreach (var reading in anchorHealth.Read(site.SiteId, ids.Take(size).ToList()))
        {
            var proto = new AnchorHealth
            {
                AnchorId = reading.AnchorId,
                MeasurementsPerSecond = reading.MeasurementsPerSecond,
                MeanNormalizedResidual = reading.MeanNormalizedResidual,
                RejectionRatio = reading.RejectionRatio,
            };
            if (reading.LastHeard is { } heard)
            {
                proto.LastHeardTime = ProtoTime.FromDateTime(heard);
            }

            foreach (var finding in reading.Findings)
            {
                proto.Findings.Add(new AnchorHealthFinding { Flag = (AnchorHealthFlag)(int)finding.Flag, Reason = finding.Reason });
            }

            response.Anchors.Add(proto);
        }

        if (ids.Count > size)
        {
            response.NextPageToken = Paging.Token(ids[size - 1]);
        }

        return Task.FromResult(response);
    }

    /// <summary>The id's form (INVALID_ARGUMENT), then the caller's role on the site (PERMISSION_DENIED).</summary>
    private void Authorize(ServerCallContext context, FleetRole role, string siteId)
    {
        if (!FleetIds.IsValidSiteId(siteId))
        {
            GrpcErrors.ThrowInvalidArgument("site_id", "must be 1–64 characters of a–z, 0–9, '-' or '_', starting with a letter or digit");
        }

        access.Require(context, role, siteId);
    }

    /// <summary>Checks, in this order: the id's form (INVALID_ARGUMENT), the caller's role (PERMISSION_DENIED, so a stranger cannot probe which sites exist), existence (NOT_FOUND).</summary>
    private SiteEntry RequireSite(ServerCallContext context, FleetRole role, string siteId)
    {
        Authorize(context, role, siteId);
        var site = registry.GetSite(siteId);
        if (site is null)
        {
            GrpcErrors.ThrowNotFound($"site '{siteId}' does not exist");
        }

        return site;
    }

    private void Audit(ServerCallContext context, AuditAction action, string siteId, string details) =>
        audit.Append(FleetAccess.Describe(context), action, siteId, details);

    private static string? ReadToken(string token)
    {
        if (!Paging.TryReadToken(token, out var after))
        {
            GrpcErrors.ThrowInvalidArgument("page_token", "is not a token this server issued");
        }

        return after;
    }

    private static T Registry<T>(Func<T> operation)
    {
        try
        {
            return operation();
        }
        catch (RegistryException e)
        {
            GrpcErrors.ThrowFromRegistry(e);
            throw;
        }
    }

    private static Vector3D ToVector(Vector3? v) => v is null ? Vector3D.Zero : new Vector3D(v.X, v.Y, v.Z);

    private static Vector3 ToProto(Vector3D v) => new() { X = v.X, Y = v.Y, Z = v.Z };

    private static Site ToProto(SiteEntry site) => new()
    {
        SiteId = site.SiteId,
        DisplayName = site.DisplayName,
        CreateTime = ProtoTime.FromDateTime(site.CreatedAt),
        AnchorMapVersion = (uint)site.AnchorMapVersion,
        BiasModelVersion = (uint)site.BiasModelVersion,
    };

    private static AnchorMap ToProto(AnchorMapEntry entry)
    {
        var proto = new AnchorMap { SiteId = entry.SiteId, Version = (uint)entry.Version, CreateTime = ProtoTime.FromDateTime(entry.CreatedAt) };
        foreach (var a in entry.Anchors)
        {
            proto.Anchors.Add(new Anchor
            {
                AnchorId = a.Id,
                Position = ToProto(a.Position),
                OrientationDeg = ToProto(a.OrientationDegrees),
                AntennaDelayM = a.AntennaDelayMetres,
            });
        }

        return proto;
    }

    private static BiasModelVersion ToProto(BiasModelEntry entry) => new()
    {
        SiteId = entry.SiteId,
        Version = (uint)entry.Version,
        CreateTime = ProtoTime.FromDateTime(entry.CreatedAt),
        Description = entry.Description,
        SizeBytes = (ulong)entry.SizeBytes,
        Sha256 = entry.Sha256,
        Active = entry.Active,
    };

    private static Robot ToProto(RobotEntry robot) => new()
    {
        SiteId = robot.SiteId,
        RobotId = robot.RobotId,
        TagOffset = ToProto(robot.TagOffset),
        MotionModel = robot.Motion == MotionModelKind.ConstantVelocity3D ? MotionModel.ConstantVelocity : MotionModel.PlanarOdometry,
        FirstSeenTime = ProtoTime.FromDateTime(robot.FirstSeen),
        LastSeenTime = ProtoTime.FromDateTime(robot.LastSeen),
    };
}
