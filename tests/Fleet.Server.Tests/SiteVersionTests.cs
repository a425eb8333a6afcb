using Fleet.Contracts.V1;
using Google.Protobuf;
using Google.Rpc;
using Grpc.Core;

namespace Fleet.Server.Tests;

/// <summary>Anchor-map and bias-model versions: stored, activated, rolled back, and pushed to running robots.</summary>
public sealed class SiteVersionTests(SharedServer shared) : IClassFixture<SharedServer>
{
    private ServerHarness Server => shared.Server;

    [Fact]
    public async Task PutAnchorMap_NewVersionWithExtraAnchor_RunningRobotUsesItWithoutRestart()
    {
        const string site = "map-push";
        await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = site }, deadline: Deadline());
        var v1 = TestScenario.AnchorMapRequest(site);
        v1.Anchors.RemoveAt(5); // HP-A06 is not installed yet
        await Server.Sites.PutAnchorMapAsync(v1, deadline: Deadline());

        // The robot's filter is loaded with v1: samples naming HP-A06 are rejected as unknown anchors.
        var first = await SubmitAsync(site, 0, 150);
        Assert.Contains(first.RejectedByReason, r => r.Reason == RejectionReason.UnknownAnchor && r.Count > 0);

        var v2 = await Server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(site), deadline: Deadline());
        Assert.Equal(2U, v2.AnchorMap.Version);

        // The site grain pushes v2 to the loaded robot (one-way); poll briefly until a batch has no unknown anchors.
        BatchAck? later = null;
        for (var attempt = 0; attempt < 50; attempt++)
        {
            later = await SubmitAsync(site, 150 + (attempt * 15), 15);
            if (later.RejectedByReason.All(r => r.Reason != RejectionReason.UnknownAnchor))
            {
                break;
            }

            await Task.Delay(50);
        }

        Assert.NotNull(later);
        Assert.DoesNotContain(later.RejectedByReason, r => r.Reason == RejectionReason.UnknownAnchor);
        var siteInfo = await Server.Sites.GetSiteAsync(new GetSiteRequest { SiteId = site }, deadline: Deadline());
        Assert.Equal(2U, siteInfo.Site.AnchorMapVersion);
    }

    [Fact]
    public async Task UploadBiasModel_ActivateAndRollBack_TracksActiveVersion()
    {
        const string site = "bias-versions";
        await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = site }, deadline: Deadline());
        await Server.Sites.PutAnchorMapAsync(TestScenario.AnchorMapRequest(site), deadline: Deadline());
        var model = ByteString.CopyFrom(TestModels.ZeroModelBytes());

        var first = await Server.Sites.UploadBiasModelAsync(new UploadBiasModelRequest { SiteId = site, Model = model, Description = "first", Activate = true }, deadline: Deadline());
        var second = await Server.Sites.UploadBiasModelAsync(new UploadBiasModelRequest { SiteId = site, Model = model, Description = "second", Activate = true }, deadline: Deadline());
        Assert.Equal(1U, first.BiasModel.Version);
        Assert.Equal(2U, second.BiasModel.Version);
        Assert.Equal((ulong)model.Length, second.BiasModel.SizeBytes);
        Assert.Equal(Convert.ToHexStringLower(System.Security.Cryptography.SHA256.HashData(model.ToByteArray())), second.BiasModel.Sha256);

        var rolledBack = await Server.Sites.RollBackBiasModelAsync(new RollBackBiasModelRequest { SiteId = site }, deadline: Deadline());
        Assert.Equal(1U, rolledBack.Site.BiasModelVersion);
        var none = await Server.Sites.RollBackBiasModelAsync(new RollBackBiasModelRequest { SiteId = site }, deadline: Deadline());
        Assert.Equal(0U, none.Site.BiasModelVersion);
        var nothingLeft = await Assert.ThrowsAsync<RpcException>(() =>
            Server.Sites.RollBackBiasModelAsync(new RollBackBiasModelRequest { SiteId = site }, deadline: Deadline()).ResponseAsync);
        Assert.Equal(StatusCode.FailedPrecondition, nothingLeft.StatusCode);

        var activated = await Server.Sites.ActivateBiasModelAsync(new ActivateBiasModelRequest { SiteId = site, Version = 2 }, deadline: Deadline());
        Assert.Equal(2U, activated.Site.BiasModelVersion);
        var list = await Server.Sites.ListBiasModelsAsync(new ListBiasModelsRequest { SiteId = site }, deadline: Deadline());
        Assert.Equal([false, true], list.BiasModels.Select(m => m.Active));

        var missing = await Assert.ThrowsAsync<RpcException>(() =>
            Server.Sites.ActivateBiasModelAsync(new ActivateBiasModelRequest { SiteId = site, Version = 9 }, deadline: Deadline()).ResponseAsync);
        Assert.Equal(StatusCode.NotFound, missing.StatusCode);

        // Robots keep running with the active model.
        var ack = await SubmitAsync(site, 0, 50);
        Assert.Equal(50U, ack.Accepted + ack.DownWeighted + ack.Buffered + ack.Rejected);
    }

    [Fact]
    public async Task UploadBiasModel_NotAModel_ReturnsInvalidArgumentOnModelField()
    {
        const string site = "bias-garbage";
        await Server.Sites.CreateSiteAsync(new CreateSiteRequest { SiteId = site }, deadline: Deadline());
        var e = await Assert.ThrowsAsync<RpcException>(() => Server.Sites.UploadBiasModelAsync(new UploadBiasModelRequest
        {
            SiteId = site,
            Model = ByteString.CopyFromUtf8("definitely not a model"),
        }, deadline: Deadline()).ResponseAsync);
        Assert.Equal(StatusCode.InvalidArgument, e.StatusCode);
        Assert.Contains(e.GetRpcStatus()!.GetDetail<BadRequest>()!.FieldViolations, v => v.Field == "model");
    }

    private async Task<BatchAck> SubmitAsync(string site, int start, int count)
    {
        var batch = new MeasurementBatch { SiteId = site };
        batch.Robots.Add(TestScenario.StaticTagSamples("tug-05", (9.0, 6.0, 0.5), start, count));
        return (await Server.Ingest.SubmitMeasurementsAsync(new SubmitMeasurementsRequest { Batch = batch }, deadline: Deadline())).Ack;
    }

    private static DateTime Deadline() => DateTime.UtcNow.AddSeconds(30);
}
