using Fleet.Contracts.V1;
using Fleet.Estimation.Geometry;
using Fleet.Grains;
using Fleet.Server.Validation;
using Google.Protobuf.WellKnownTypes;
using Google.Rpc;
using Grpc.Core;
using EstimationAnchor = Fleet.Estimation.Anchors.Anchor;
using EstimationAnchorMap = Fleet.Estimation.Anchors.AnchorMap;
using SampleKind = Fleet.Grains.SampleKind;

namespace Fleet.Server.Tests.Validation;

public sealed class IngestBatchValidatorTests
{
    // Server clock of these tests: 2023-11-14T22:13:20Z.
    private const double Now = 1_700_000_000;

    // Two anchors 10 m apart on the x axis (baseline 10 m) and a third off axis.
    private static readonly EstimationAnchorMap Map = EstimationAnchorMap.Create("unit", [
        new EstimationAnchor("A", new Vector3D(0, 0, 3), Vector3D.Zero),
        new EstimationAnchor("B", new Vector3D(10, 0, 3), Vector3D.Zero),
        new EstimationAnchor("C", new Vector3D(0, 8, 6), Vector3D.Zero),
    ]);

    private static IngestBatchValidator Validator(FleetValidationOptions? options = null) =>
        new(options ?? new FleetValidationOptions(), reorderWindowSeconds: 0.1, new FixedClock(Now));

    [Theory]
    // Triangle inequality: | |p − b| − |p − a| | ≤ |a − b| = 10 m for any p; default margin 0.5 m (from memory: the
    // baseline bound of a TDOA is textbook geometry, the margin is ours).
    [InlineData(10.0, SampleRejectionReason.None)]
    [InlineData(-10.49, SampleRejectionReason.None)]
    [InlineData(10.51, SampleRejectionReason.ImpossibleValue)]
    [InlineData(-25.0, SampleRejectionReason.ImpossibleValue)]
    public void Screen_DistanceDifferenceAgainstBaseline_RejectsBeyondBaselinePlusMargin(double ddiff, SampleRejectionReason expected)
    {
        var batch = Batch(Robot("r1", Tdoa(Now - 1, "A", "B", ddiff)));

        var robot = Assert.Single(Validator().Screen(batch, Map, 0));

        Assert.Equal(expected, robot.Rejections.Count == 0 ? SampleRejectionReason.None : Assert.Single(robot.Rejections).Reason);
    }

    [Fact]
    public void Screen_WithMapVersion_PassedSamplesCarryTheirAnchorIndicesInThatVersion()
    {
        // Index i of sample k must be the map's own index of the id it names (AnchorMap.IndexOf), after a bad sample
        // in between was set aside.
        var batch = Batch(Robot("r1", Tdoa(Now - 1, "C", "A", 1.0), Tdoa(Now - 0.9, "A", "Z9", 1.0), Tdoa(Now - 0.8, "B", "C", -2.0)));

        var robot = Assert.Single(Validator().Screen(batch, new ActiveAnchorMap(Map, 7), 0));
        var unversioned = Assert.Single(Validator().Screen(batch, Map, 0));

        Assert.Equal(7, robot.Batch.AnchorMapVersion);
        Assert.Equal([Map.IndexOf("C"), Map.IndexOf("B")], robot.Batch.AnchorIndexA);
        Assert.Equal([Map.IndexOf("A"), Map.IndexOf("C")], robot.Batch.AnchorIndexB);
        Assert.Equal(["C", "B"], robot.Batch.AnchorA);
        Assert.Equal(2, robot.OriginalIndex(SampleKind.Tdoa, 1));
        Assert.Equal(0, unversioned.Batch.AnchorMapVersion);
        Assert.Empty(unversioned.Batch.AnchorIndexA);
    }

    [Fact]
    public void Screen_ConfiguredMargin_MovesTheImpossibleBound()
    {
        var batch = Batch(Robot("r1", Tdoa(Now - 1, "A", "B", 11.5)));

        var strict = Validator().Screen(batch, Map, 0)[0];
        var lax = Validator(new FleetValidationOptions { DistanceDifferenceMarginMetres = 2.0 }).Screen(batch, Map, 0)[0];

        Assert.Equal(SampleRejectionReason.ImpossibleValue, Assert.Single(strict.Rejections).Reason);
        Assert.Empty(lax.Rejections);
    }

    [Fact]
    public void Screen_EachKindOfBadSample_RejectedAloneWithItsReasonAndOriginalIndex()
    {
        var robot = Robot("r1",
            Tdoa(Now - 2.00, "A", "B", 1.0),                 // 0 good
            Tdoa(Now - 1.99, "A", "B", double.NaN),          // 1 non-finite
            Tdoa(Now - 1.98, "A", "B", double.PositiveInfinity), // 2 non-finite
            Tdoa(Now - 1.97, "A", "A", 0.0),                 // 3 a == b
            Tdoa(Now - 1.96, "A", "Z9", 1.0),                // 4 unknown anchor
            Tdoa(Now + 3600, "A", "B", 1.0),                 // 5 an hour ahead of the server clock
            Tdoa(Now - 5.00, "A", "C", 1.0),                 // 6 3 s behind sample 4: beyond the 0.1 s window
            new TdoaSample { AnchorA = "A", AnchorB = "B", DistanceDifference = 1.0 }, // 7 no time
            new TdoaSample { SampleTime = new Timestamp { Seconds = (long)Now, Nanos = -5 }, AnchorA = "A", AnchorB = "B" }, // 8 invalid Timestamp
            Tdoa(Now - 1.95, "B", "C", 2.0));                // 9 good
        robot.Odometry.Add(Odometry(Now - 2.0, 1.0, 0.1));           // 0 good
        robot.Odometry.Add(Odometry(Now - 1.9, double.NaN, 0.1));    // 1 non-finite
        robot.Odometry.Add(Odometry(Now - 1.8, 45.0, 0.1));          // 2 45 m/s on a warehouse floor
        robot.Odometry.Add(Odometry(Now - 1.7, 1.0, -30.0));         // 3 30 rad/s yaw rate

        var screened = Assert.Single(Validator().Screen(Batch(robot), Map, 0));

        Assert.Equal(
        [
            (SampleKind.Tdoa, 1, SampleRejectionReason.InvalidValue),
            (SampleKind.Tdoa, 2, SampleRejectionReason.InvalidValue),
            (SampleKind.Tdoa, 3, SampleRejectionReason.SameAnchor),
            (SampleKind.Tdoa, 4, SampleRejectionReason.UnknownAnchor),
            (SampleKind.Tdoa, 5, SampleRejectionReason.TooFarInFuture),
            (SampleKind.Tdoa, 6, SampleRejectionReason.TooLate),
            (SampleKind.Tdoa, 7, SampleRejectionReason.InvalidValue),
            (SampleKind.Tdoa, 8, SampleRejectionReason.InvalidValue),
            (SampleKind.Odometry, 1, SampleRejectionReason.InvalidValue),
            (SampleKind.Odometry, 2, SampleRejectionReason.ImpossibleValue),
            (SampleKind.Odometry, 3, SampleRejectionReason.ImpossibleValue),
        ], screened.Rejections.Select(r => (r.Kind, r.Index, r.Reason)));

        // The good samples go on, and their indices map back to the request.
        Assert.Equal(2, screened.Batch.TdoaTimes.Length);
        Assert.Equal(0, screened.OriginalIndex(SampleKind.Tdoa, 0));
        Assert.Equal(9, screened.OriginalIndex(SampleKind.Tdoa, 1));
        Assert.Equal(0, screened.OriginalIndex(SampleKind.Odometry, 0));
        Assert.Single(screened.Batch.OdometryTimes);
    }

    [Fact]
    public void Screen_SortedSamplesSpanningSeconds_AllPass()
    {
        // A gateway batch covering 2 s of in-order samples is normal; only going back in time counts as late.
        var robot = Robot("r1", Enumerable.Range(0, 100).Select(k => Tdoa(Now - 3 + (k * 0.02), "A", "C", 1.0)).ToArray());

        var screened = Assert.Single(Validator().Screen(Batch(robot), Map, 0));

        Assert.Empty(screened.Rejections);
        Assert.Null(screened.TdoaIndices);
    }

    [Fact]
    public void Screen_NoAnchorMap_LeavesAnchorChecksToTheGrain()
    {
        var screened = Assert.Single(Validator().Screen(Batch(Robot("r1", Tdoa(Now - 1, "A", "Z9", 99.0))), map: null, 0));

        Assert.Empty(screened.Rejections);
    }

    [Fact]
    public void Screen_EmptyAndRepeatedRobotIds_RejectEveryOneOfTheirSamplesInvalidRobot()
    {
        var batch = Batch(
            Robot("r1", Tdoa(Now - 1, "A", "B", 1.0)),
            Robot(string.Empty, Tdoa(Now - 1, "A", "B", 1.0), Tdoa(Now - 1, "A", "C", 1.0)),
            Robot("r1", Tdoa(Now - 1, "A", "B", 1.0)));

        var screened = Validator().Screen(batch, Map, 0);

        Assert.Empty(screened[0].Rejections);
        Assert.Equal(2, screened[1].Rejections.Count(r => r.Reason == SampleRejectionReason.InvalidRobot));
        Assert.True(screened[1].IsEmpty);
        Assert.Equal(SampleRejectionReason.InvalidRobot, Assert.Single(screened[2].Rejections).Reason);
    }

    [Fact]
    public void ValidateStructure_OversizeAndMalformedBatch_InvalidArgumentWithEveryFieldViolation()
    {
        var options = new FleetValidationOptions { MaxRobotsPerBatch = 2, MaxSamplesPerBatch = 3 };
        var batch = new MeasurementBatch { SiteId = "Not A Site", ReceiveTime = new Timestamp { Seconds = (long)Now, Nanos = 1_000_000_000 } };
        for (var i = 0; i < 3; i++)
        {
            batch.Robots.Add(Robot($"r{i}", Tdoa(Now, "A", "B", 0), Tdoa(Now, "A", "B", 0)));
        }

        var e = Assert.Throws<RpcException>(() => Validator(options).ValidateStructure(batch, "batch"));

        // gRPC status codes (grpc/grpc doc/statuscodes.md): a malformed argument is INVALID_ARGUMENT; details are a
        // google.rpc.BadRequest (googleapis google/rpc/error_details.proto).
        Assert.Equal(StatusCode.InvalidArgument, e.StatusCode);
        var fields = e.GetRpcStatus()!.GetDetail<BadRequest>()!.FieldViolations.Select(v => v.Field).ToList();
        Assert.Equal(["batch.site_id", "batch.receive_time", "batch.robots", "batch.robots"], fields);
    }

    [Fact]
    public void ValidateStructure_MissingBatch_InvalidArgument()
    {
        var e = Assert.Throws<RpcException>(() => Validator().ValidateStructure(null, "batch"));

        Assert.Equal(StatusCode.InvalidArgument, e.StatusCode);
        Assert.Equal("batch", Assert.Single(e.GetRpcStatus()!.GetDetail<BadRequest>()!.FieldViolations).Field);
    }

    [Theory]
    // google/protobuf/timestamp.proto: seconds in [-62135596800, 253402300799], nanos in [0, 999999999].
    [InlineData(0L, 0, true)]
    [InlineData(253_402_300_799L, 999_999_999, true)]
    [InlineData(253_402_300_800L, 0, false)]
    [InlineData(-62_135_596_801L, 0, false)]
    [InlineData(0L, -1, false)]
    [InlineData(0L, 1_000_000_000, false)]
    public void IsValid_TimestampRange_FollowsTheWellKnownTypeDefinition(long seconds, int nanos, bool valid) =>
        Assert.Equal(valid, TimestampRules.IsValid(new Timestamp { Seconds = seconds, Nanos = nanos }));

    [Fact]
    public void Validate_NegativeMargin_NamesTheSetting()
    {
        var e = Assert.Throws<InvalidOperationException>(() => new FleetValidationOptions { DistanceDifferenceMarginMetres = -1 }.Validate());

        Assert.Contains("Fleet:Validation:DistanceDifferenceMarginMetres", e.Message, StringComparison.Ordinal);
    }

    private static MeasurementBatch Batch(params RobotSamples[] robots)
    {
        var batch = new MeasurementBatch { SiteId = "unit", BatchId = 1 };
        batch.Robots.Add(robots);
        return batch;
    }

    private static RobotSamples Robot(string id, params TdoaSample[] tdoa)
    {
        var robot = new RobotSamples { RobotId = id };
        robot.Tdoa.Add(tdoa);
        return robot;
    }

    private static TdoaSample Tdoa(double t, string a, string b, double ddiff) =>
        new() { SampleTime = TestScenario.Time(t), AnchorA = a, AnchorB = b, DistanceDifference = ddiff };

    private static OdometrySample Odometry(double t, double v, double w) =>
        new() { SampleTime = TestScenario.Time(t), ForwardSpeed = v, YawRate = w };

    private sealed class FixedClock(double unixSeconds) : TimeProvider
    {
        public override DateTimeOffset GetUtcNow() => DateTimeOffset.FromUnixTimeMilliseconds((long)(unixSeconds * 1000));
    }
}
