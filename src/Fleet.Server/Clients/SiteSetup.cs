using Fleet.Contracts.V1;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Measurements;
using Grpc.Core;
using Anchor = Fleet.Contracts.V1.Anchor;
using AnchorMap = Fleet.Estimation.Anchors.AnchorMap;

namespace Fleet.Server.Clients;

/// <summary>Client-side helper: registers a site, its anchor map and its robots through the public API.</summary>
public static class SiteSetup
{
    /// <summary>
    /// Creates the site (an existing one is reused), puts the anchor map as a new version and puts every robot's
    /// tag offset and motion model. Returns the anchor-map version.
    /// </summary>
    public static async Task<uint> ApplyAsync(
        SiteService.SiteServiceClient sites, string siteId, AnchorMap map, IEnumerable<RobotRecord> robots,
        string displayName = "", CancellationToken cancellationToken = default)
    {
        try
        {
            await sites.CreateSiteAsync(new CreateSiteRequest { SiteId = siteId, DisplayName = displayName }, deadline: Deadline(), cancellationToken: cancellationToken);
        }
        catch (RpcException e) when (e.StatusCode == StatusCode.AlreadyExists)
        {
            // Reuse the existing site.
        }

        var response = await sites.PutAnchorMapAsync(ToRequest(siteId, map), deadline: Deadline(), cancellationToken: cancellationToken);
        foreach (var robot in robots)
        {
            await sites.PutRobotAsync(new PutRobotRequest
            {
                SiteId = siteId,
                RobotId = robot.Robot,
                TagOffset = new Vector3 { X = robot.TagOffset.X, Y = robot.TagOffset.Y, Z = robot.TagOffset.Z },
                MotionModel = robot.Motion == MotionModelKind.ConstantVelocity3D ? MotionModel.ConstantVelocity : MotionModel.PlanarOdometry,
            }, deadline: Deadline(), cancellationToken: cancellationToken);
        }

        return response.AnchorMap.Version;
    }

    public static PutAnchorMapRequest ToRequest(string siteId, AnchorMap map)
    {
        var request = new PutAnchorMapRequest { SiteId = siteId };
        foreach (var a in map.Anchors)
        {
            request.Anchors.Add(new Anchor
            {
                AnchorId = a.Id,
                Position = new Vector3 { X = a.Position.X, Y = a.Position.Y, Z = a.Position.Z },
                OrientationDeg = new Vector3 { X = a.OrientationDegrees.X, Y = a.OrientationDegrees.Y, Z = a.OrientationDegrees.Z },
                AntennaDelayM = a.AntennaDelayMetres,
            });
        }

        return request;
    }

    private static DateTime Deadline() => DateTime.UtcNow.AddSeconds(30);
}
