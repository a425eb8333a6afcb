using Fleet.Contracts.V1;

namespace Fleet.Server.Tests;

public sealed class RestartTests
{
    private static readonly TimeSpan Timeout = TimeSpan.FromSeconds(30);

    [Fact]
    public async Task Restart_SameDataDirectory_KeepsSitesAnchorMapsAndRobots()
    {
        var dataDirectory = ServerHarness.NewDataDirectory();
        try
        {
            await using (var first = await ServerHarness.StartAsync(dataDirectory))
            {
                await first.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = "harbor-point", DisplayName = "Harbor Point DC" }, deadline: Deadline());
                await first.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest("harbor-point"), deadline: Deadline());
                await first.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest("harbor-point"), deadline: Deadline());
                await first.Sites.PutRobotAsync(new PutRobotRequest
                {
                    SiteId = "harbor-point",
                    RobotId = "tug-07",
                    TagOffset = new Vector3 { X = 0.1, Z = 0.45 },
                    MotionModel = MotionModel.PlanarOdometry,
                }, deadline: Deadline());
            }

            await using var second = await ServerHarness.StartAsync(dataDirectory);
            var site = (await second.Sites.GetSiteAsync(new GetSiteRequest { SiteId = "harbor-point" }, deadline: Deadline())).Site;
            Assert.Equal("Harbor Point DC", site.DisplayName);
            Assert.Equal(2U, site.AnchorMapVersion);

            var map = (await second.Sites.GetAnchorMapAsync(new GetAnchorMapRequest { SiteId = "harbor-point", Version = 1 }, deadline: Deadline())).AnchorMap;
            Assert.Equal(TestScenario.Anchors.Length, map.Anchors.Count);
            Assert.Equal("HP-A03", map.Anchors[2].AnchorId);
            Assert.InRange(map.Anchors[2].Position.Z, 3.5 - 1e-12, 3.5 + 1e-12);

            var robot = Assert.Single((await second.Sites.ListRobotsAsync(new ListRobotsRequest { SiteId = "harbor-point" }, deadline: Deadline())).Robots);
            Assert.Equal("tug-07", robot.RobotId);
            Assert.InRange(robot.TagOffset.Z, 0.45 - 1e-12, 0.45 + 1e-12);
            Assert.Equal(MotionModel.PlanarOdometry, robot.MotionModel);
        }
        finally
        {
            try
            {
                Directory.Delete(dataDirectory, recursive: true);
            }
            catch (IOException)
            {
                // Left for the OS to clean.
            }
        }
    }

    private static DateTime Deadline() => DateTime.UtcNow.Add(Timeout);
}
