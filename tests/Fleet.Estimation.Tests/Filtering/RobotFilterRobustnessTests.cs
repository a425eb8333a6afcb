using Fleet.Estimation.Anchors;
using Fleet.Estimation.Bias;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;
using MathNet.Numerics.LinearAlgebra;
using Xunit.Abstractions;

namespace Fleet.Estimation.Tests.Filtering;

/// <summary>Garbage input, time disorder, allocation and state-machine behaviour of <see cref="RobotFilter"/>.</summary>
public class RobotFilterRobustnessTests(ITestOutputHelper output)
{
    private static readonly Vector3D Lever = new(0.3, 0.1, 0.45);

    [Theory]
    [InlineData(MotionModelKind.PlanarOdometry, 1)]
    [InlineData(MotionModelKind.ConstantVelocity3D, 2)]
    public void Submit_SeededFuzzMixedWithGoodData_NeverBreaksAndReconverges(MotionModelKind motion, int seed)
    {
        // ≥ 5,000 garbage inputs mixed with good data: no exception, the state never goes NaN, the covariance stays
        // symmetric positive definite (MathNet Cholesky), and good data afterwards brings the track back.
        var map = TestSites.Hall();
        var run = new SyntheticRun { Map = map, Truth = SyntheticRun.Circle(new Vector3D(15, 10, 0), 6, 1.0), Lever = Lever, Duration = 300, Seed = seed };
        var good = run.Generate();
        var filter = new RobotFilter(map, new FilterOptions { Motion = motion, TagLeverArm = Lever });
        var reasons = new Dictionary<string, int>();
        filter.StateChanged += (_, to, reason) =>
        {
            if (to == TrackingState.Lost)
            {
                reasons[reason] = reasons.GetValueOrDefault(reason) + 1;
            }
        };
        var rng = new Random(seed * 31);
        var garbage = 0;
        var gi = 0;
        var fuzzEnd = run.StartTime + 240;
        while (gi < good.Count && good[gi].Time < fuzzEnd)
        {
            if (rng.NextDouble() < 0.5)
            {
                SyntheticRun.Submit(filter, good[gi++]);
            }
            else
            {
                var t = double.IsNaN(filter.LastTime) ? run.StartTime : filter.LastTime;
                SubmitGarbage(filter, rng, t, map.Count);
                garbage++;
            }

            AssertSane(filter);
        }

        Assert.True(garbage >= 5000, $"only {garbage} garbage inputs");

        // Good data only from here on.
        var pose = new PoseEstimate();
        SimEvent last = default;
        for (; gi < good.Count; gi++)
        {
            SyntheticRun.Submit(filter, good[gi]);
            last = good[gi];
        }

        filter.GetPose(pose);
        var error = (pose.TagPosition - last.TruthTag).HorizontalLength;
        output.WriteLine($"{motion}: {garbage} garbage inputs, final state {filter.State}, error {error:F3} m, re-inits {filter.Counters.Reinitialisations}, rejected {filter.Counters.Rejected}");
        output.WriteLine("losses: " + string.Join(", ", reasons.Select(kv => $"{kv.Key} × {kv.Value}")));
        Assert.Equal(TrackingState.Locked, filter.State);
        Assert.True(error < 0.3, $"error {error}");
    }

    [Theory]
    [InlineData(MotionModelKind.PlanarOdometry)]
    [InlineData(MotionModelKind.ConstantVelocity3D)]
    public void Submit_EventsShuffledWithinLag_GiveTheInOrderResult(MotionModelKind motion)
    {
        // Every event is delivered up to 0.08 s late (lag 0.1 s): the rollback/replay must reproduce the in-order
        // state and covariance to 1e-9.
        var (events, inOrder, shuffled) = CircleRunWithTwinFilters(motion, seed: 4);

        foreach (var e in events)
        {
            SyntheticRun.Submit(inOrder, e);
        }

        var rng = new Random(5);
        var delivery = events.Select(e => (Event: e, At: e.Time + (0.08 * rng.NextDouble()))).OrderBy(p => p.At).ToList();
        var outOfOrder = 0;
        foreach (var (e, _) in delivery)
        {
            // The constant-velocity model ignores odometry, so only its TDOAs can be reordered.
            if (e.Time < shuffled.LastTime && (!e.IsOdometry || motion == MotionModelKind.PlanarOdometry))
            {
                outOfOrder++;
            }

            var result = SyntheticRun.Submit(shuffled, e);
            Assert.NotEqual(RejectionReason.TooLate, result.Reason);
        }

        output.WriteLine($"{motion}: {outOfOrder} of {events.Count} events arrived out of order");
        Assert.True(outOfOrder > events.Count / 10);
        Assert.Equal(outOfOrder, shuffled.Counters.ReorderedApplied);
        AssertSameEstimate(inOrder, shuffled);
    }

    [Theory]
    [InlineData(MotionModelKind.PlanarOdometry)]
    [InlineData(MotionModelKind.ConstantVelocity3D)]
    public void Submit_BatchesDeliveredTwice_GiveTheOnceDeliveredResult(MotionModelKind motion)
    {
        // A gateway re-sends every batch of 12 events after it went through (its acknowledgement was lost). A Kalman
        // update assumes each measurement's noise is independent of every other's; applying one twice counts its
        // information twice (textbook, from memory: Bar-Shalom et al., Estimation with Applications to Tracking and
        // Navigation, ch. 5). So the twice-delivered run must end in exactly the once-delivered state and covariance.
        var (events, once, twice) = CircleRunWithTwinFilters(motion, seed: 6);

        foreach (var e in events)
        {
            SyntheticRun.Submit(once, e);
        }

        var duplicates = 0;
        foreach (var batch in events.Chunk(12))
        {
            foreach (var e in batch)
            {
                SyntheticRun.Submit(twice, e);
            }

            foreach (var e in batch)
            {
                var again = SyntheticRun.Submit(twice, e);
                Assert.True(again.Reason is RejectionReason.Duplicate or RejectionReason.TooLate || again.Outcome == UpdateOutcome.Ignored, again.ToString());
                duplicates += again.Reason == RejectionReason.Duplicate ? 1 : 0;
            }
        }

        Assert.True(duplicates > events.Count / 4, $"{duplicates} duplicates of {events.Count}");
        AssertSameEstimate(once, twice);
    }

    [Fact]
    public void Submit_SampleSentAgainWhileAcquiring_IsRejectedDuplicate()
    {
        // Before the first fix the samples wait in the initialisation burst; a repeated one would weigh twice in it.
        var map = TestSites.Hall();
        var filter = new RobotFilter(map, new FilterOptions { Motion = MotionModelKind.ConstantVelocity3D });
        var tag = new Vector3D(10, 5, 0.5);
        var first = new TdoaMeasurement(1.00, 0, 1, Ddiff(map, tag, 0, 1));
        var second = new TdoaMeasurement(1.02, 1, 2, Ddiff(map, tag, 1, 2));

        Assert.NotEqual(RejectionReason.Duplicate, filter.Submit(first).Reason);
        Assert.NotEqual(RejectionReason.Duplicate, filter.Submit(second).Reason);
        Assert.Equal(RejectionReason.Duplicate, filter.Submit(first).Reason);
        Assert.Equal(RejectionReason.Duplicate, filter.Submit(second).Reason);
        Assert.Equal(TrackingState.Acquiring, filter.State);
    }

    [Fact]
    public void Submit_OlderThanLag_IsRejectedTooLateWithoutChangingState()
    {
        var (filter, events) = TrackedFilter(MotionModelKind.PlanarOdometry, 5);
        var before = filter.StateVector.ToArray();
        var t = filter.LastTime;
        var late = new TdoaMeasurement(t - 0.15, 0, 1, 1.0);
        Assert.Equal(RejectionReason.TooLate, filter.Submit(late).Reason);
        Assert.Equal(RejectionReason.TooLate, filter.SubmitOdometry(new OdometryMeasurement(t - 0.3, 1, 0)).Reason);
        Assert.Equal(before, filter.StateVector.ToArray());
        Assert.Equal(t, filter.LastTime);
        Assert.Equal(2, filter.Counters.RejectedFor(RejectionReason.TooLate));
    }

    [Fact]
    public void Submit_LateButOlderThanRing_IsRejectedTooLate()
    {
        // A long lag with a tiny ring: the history, not the lag, limits the rollback.
        var map = TestSites.Hall();
        var filter = new RobotFilter(map, new FilterOptions { Motion = MotionModelKind.ConstantVelocity3D, ReorderLagSeconds = 1.0, ReorderCapacity = 4 });
        filter.SeedPose(0, new Vector3D(10, 5, 0.5), 0, 0.1, 1);
        for (var k = 1; k <= 10; k++)
        {
            filter.Submit(new TdoaMeasurement(k * 0.05, 0, 1, Ddiff(map, new Vector3D(10, 5, 0.5), 0, 1)));
        }

        Assert.Equal(RejectionReason.TooLate, filter.Submit(new TdoaMeasurement(0.2, 2, 3, Ddiff(map, new Vector3D(10, 5, 0.5), 2, 3))).Reason);
        Assert.NotEqual(RejectionReason.TooLate, filter.Submit(new TdoaMeasurement(0.41, 2, 3, Ddiff(map, new Vector3D(10, 5, 0.5), 2, 3))).Reason);
    }

    [Theory]
    [InlineData(MotionModelKind.PlanarOdometry, 0.05)]
    [InlineData(MotionModelKind.PlanarOdometry, 3.0)]
    [InlineData(MotionModelKind.ConstantVelocity3D, 0.05)]
    public void Submit_SteadyState_DoesNotAllocate(MotionModelKind motion, double seedYawSigma)
    {
        // 10,000 steady-state submissions (TDOA and odometry, some out of order, some gated) plus pose reads;
        // planar with a known heading, planar with an unknown heading (static robot: never aligns), constant velocity.
        var (filter, _) = TrackedFilter(motion, 5, bias: new ConstantBias(), seedYawSigma: seedYawSigma);
        var map = filter.AnchorMap;
        var pose = new PoseEstimate();
        var rng = new Random(3);
        var t = filter.LastTime;
        filter.GetPose(pose);
        var tag = pose.TagPosition;
        var inputs = new TdoaMeasurement[10_000];
        for (var i = 0; i < inputs.Length; i++)
        {
            var a = rng.Next(map.Count);
            var b = (a + 1 + rng.Next(map.Count - 1)) % map.Count;
            var time = t + ((i + 1) * 0.02) - (i % 7 == 3 ? 0.05 : 0);
            var value = Ddiff(map, tag, a, b) + (0.1 * (rng.NextDouble() - 0.5)) + (i % 13 == 5 ? 3.0 : 0);
            inputs[i] = new TdoaMeasurement(time, a, b, value);
        }

        // Warm up every path once.
        Run(filter, inputs.AsSpan(0, 200), pose);
        var reinitialisations = filter.Counters.Reinitialisations;
        var before = GC.GetAllocatedBytesForCurrentThread();
        Run(filter, inputs.AsSpan(200), pose);
        var allocated = GC.GetAllocatedBytesForCurrentThread() - before;
        Assert.Equal(0, allocated);
        Assert.Equal(reinitialisations, filter.Counters.Reinitialisations);
        Assert.Equal(TrackingState.Locked, filter.State);
        Assert.Equal(motion == MotionModelKind.PlanarOdometry && seedYawSigma < 1, filter.HeadingKnown);
        Assert.True(filter.Counters.ReorderedApplied > 100);
        Assert.True(filter.Counters.RejectedFor(RejectionReason.ChiSquareGate) > 100);

        static void Run(RobotFilter filter, ReadOnlySpan<TdoaMeasurement> inputs, PoseEstimate pose)
        {
            foreach (ref readonly var m in inputs)
            {
                filter.Submit(m);
                filter.SubmitOdometry(new OdometryMeasurement(m.Time + 0.001, 0, 0));
                filter.GetPose(pose);
                filter.PredictPose(m.Time + 0.05, pose);
            }
        }
    }

    [Theory]
    [InlineData(MotionModelKind.PlanarOdometry)]
    [InlineData(MotionModelKind.ConstantVelocity3D)]
    public void Constructor_Footprint_IsAtMostEightKilobytes(MotionModelKind motion)
    {
        var map = TestSites.Hall();
        var options = new FilterOptions { Motion = motion };
        _ = new RobotFilter(map, options);
        var filters = new RobotFilter[200];

        // Bytes allocated by this thread only: other tests running in parallel cannot inflate it (a process-wide heap
        // reading can), and anything the constructor allocates and drops only makes the figure conservative.
        var before = GC.GetAllocatedBytesForCurrentThread();
        for (var i = 0; i < filters.Length; i++)
        {
            filters[i] = new RobotFilter(map, options);
        }

        var perFilter = (GC.GetAllocatedBytesForCurrentThread() - before) / (double)filters.Length;
        GC.KeepAlive(filters);
        output.WriteLine($"{motion}: {perFilter:F0} bytes per RobotFilter");
        Assert.True(perFilter <= 8192, $"{perFilter} bytes");
    }

    [Fact]
    public void Submit_InputChecks_RejectWithReasonBeforeTouchingState()
    {
        var (filter, _) = TrackedFilter(MotionModelKind.PlanarOdometry, 5);
        var before = filter.StateVector.ToArray();
        var t = filter.LastTime + 0.01;
        Assert.Equal(RejectionReason.NonFinite, filter.Submit(new TdoaMeasurement(t, 0, 1, double.NaN)).Reason);
        Assert.Equal(RejectionReason.NonFinite, filter.Submit(new TdoaMeasurement(double.PositiveInfinity, 0, 1, 0)).Reason);
        Assert.Equal(RejectionReason.UnknownAnchor, filter.Submit(new TdoaMeasurement(t, 0, 8, 0)).Reason);
        Assert.Equal(RejectionReason.UnknownAnchor, filter.Submit(new TdoaMeasurement(t, -1, 2, 0)).Reason);
        Assert.Equal(RejectionReason.SameAnchor, filter.Submit(new TdoaMeasurement(t, 3, 3, 0)).Reason);
        Assert.Equal(RejectionReason.ImpossibleValue, filter.Submit(new TdoaMeasurement(t, 0, 1, 40)).Reason);
        Assert.Equal(RejectionReason.TooFarInFuture, filter.Submit(new TdoaMeasurement(t + 1e6, 0, 1, 0)).Reason);
        Assert.Equal(RejectionReason.NonFinite, filter.SubmitOdometry(new OdometryMeasurement(t, double.NaN, 0)).Reason);
        Assert.Equal(RejectionReason.ImpossibleValue, filter.SubmitOdometry(new OdometryMeasurement(t, 1e300, 0)).Reason);
        Assert.Equal(before, filter.StateVector.ToArray());
        Assert.Equal(9, filter.Counters.Rejected);
    }

    [Fact]
    public void Submit_GrossOutlier_IsGatedAndReportsPriorNis()
    {
        var (filter, _) = TrackedFilter(MotionModelKind.PlanarOdometry, 5);
        var pose = new PoseEstimate();
        filter.GetPose(pose);
        var truth = filter.Submit(new TdoaMeasurement(filter.LastTime + 0.001, 0, 4, Ddiff(filter.AnchorMap, pose.TagPosition, 0, 4)));
        Assert.Equal(UpdateOutcome.Accepted, truth.Outcome);
        Assert.InRange(truth.NormalizedInnovationSquared, 0, 1);
        var outlier = filter.Submit(new TdoaMeasurement(filter.LastTime + 0.001, 0, 4, Ddiff(filter.AnchorMap, pose.TagPosition, 0, 4) + 2.0));
        Assert.Equal(RejectionReason.ChiSquareGate, outlier.Reason);
        Assert.True(outlier.NormalizedInnovationSquared > new FilterOptions().GateThreshold);
        var moderate = filter.Submit(new TdoaMeasurement(filter.LastTime + 0.001, 0, 4, Ddiff(filter.AnchorMap, pose.TagPosition, 0, 4) + 0.25));
        Assert.Equal(UpdateOutcome.DownWeighted, moderate.Outcome);
        Assert.InRange(moderate.Weight, 0.01, 0.99);
    }

    [Fact]
    public void StateChanged_LongSilenceThenData_LosesTrackAndReacquires()
    {
        var (filter, _) = TrackedFilter(MotionModelKind.PlanarOdometry, 5);
        var changes = new List<(TrackingState From, TrackingState To, string Reason)>();
        filter.StateChanged += (from, to, reason) => changes.Add((from, to, reason));
        var map = filter.AnchorMap;
        var t = filter.LastTime + 10;
        var tag = new Vector3D(20, 12, 0.45);
        var results = new List<UpdateResult>();
        var rng = new Random(8);
        for (var k = 0; k < 40; k++)
        {
            var a = rng.Next(8);
            var b = (a + 1 + rng.Next(7)) % 8;
            results.Add(filter.Submit(new TdoaMeasurement(t + (k * 0.025), a, b, Ddiff(map, tag, a, b))));
        }

        Assert.Equal(RejectionReason.TooFarInFuture, results[0].Reason);
        Assert.Contains(changes, c => c.To == TrackingState.Lost && c.Reason.Contains("time"));
        Assert.Contains(changes, c => c.From == TrackingState.Lost && c.To == TrackingState.Acquiring);
        Assert.Equal((TrackingState.Acquiring, TrackingState.Locked), (changes[^1].From, changes[^1].To));
        Assert.Equal(1, filter.Counters.Reinitialisations);
        Assert.Equal(2, filter.Counters.Initialisations);
        var pose = new PoseEstimate();
        filter.GetPose(pose);
        Assert.True((pose.TagPosition - tag).HorizontalLength < 0.05);
    }

    [Fact]
    public void Submit_LongRunOfInconsistentData_RecoversAtTheNewPosition()
    {
        // The robot is teleported (e.g. a wrong map version): every TDOA fails the gate at first. Each rejection past
        // a short run inflates P until the gate re-opens, so the filter either converges on the new position
        // directly or, failing that, declares divergence and re-acquires there; either way it ends locked on it.
        var (filter, _) = TrackedFilter(MotionModelKind.ConstantVelocity3D, 5);
        var lost = 0;
        filter.StateChanged += (_, to, _) => lost += to == TrackingState.Lost ? 1 : 0;
        var map = filter.AnchorMap;
        var t = filter.LastTime;
        var far = new Vector3D(2, 18, 0.45);
        var rng = new Random(9);
        for (var k = 1; k <= 200; k++)
        {
            var a = rng.Next(8);
            var b = (a + 1 + rng.Next(7)) % 8;
            filter.Submit(new TdoaMeasurement(t + (k * 0.025), a, b, Ddiff(map, far, a, b)));
        }

        Assert.True(lost <= 1, $"lost {lost} times");
        Assert.Equal(TrackingState.Locked, filter.State);
        var pose = new PoseEstimate();
        filter.GetPose(pose);
        Assert.True((pose.TagPosition - far).Length < 0.1);
    }

    [Fact]
    public void State_ManyRecentRejections_GoesUncertainThenRecovers()
    {
        var (filter, _) = TrackedFilter(MotionModelKind.PlanarOdometry, 5);
        var changes = new List<(TrackingState From, TrackingState To)>();
        filter.StateChanged += (from, to, _) => changes.Add((from, to));
        var map = filter.AnchorMap;
        var pose = new PoseEstimate();
        var rng = new Random(10);
        var t = filter.LastTime;

        // Alternate one good TDOA with two gross outliers: two thirds rejected, never 30 in a row.
        for (var k = 1; k <= 60; k++)
        {
            filter.GetPose(pose);
            var a = rng.Next(8);
            var b = (a + 1 + rng.Next(7)) % 8;
            var bad = k % 3 != 0;
            filter.Submit(new TdoaMeasurement(t + (k * 0.001), a, b, Ddiff(map, pose.TagPosition, a, b) + (bad ? 3.0 : 0.0)));
        }

        Assert.Equal(TrackingState.Uncertain, filter.State);
        Assert.InRange(filter.RecentRejectionRatio, 0.6, 0.7);
        for (var k = 61; k <= 120; k++)
        {
            filter.GetPose(pose);
            var a = rng.Next(8);
            var b = (a + 1 + rng.Next(7)) % 8;
            filter.Submit(new TdoaMeasurement(t + (k * 0.001), a, b, Ddiff(map, pose.TagPosition, a, b)));
        }

        Assert.Equal(TrackingState.Locked, filter.State);
        Assert.Equal([(TrackingState.Locked, TrackingState.Uncertain), (TrackingState.Uncertain, TrackingState.Locked)], changes);
        Assert.Equal(0, filter.Counters.Reinitialisations);
    }

    [Fact]
    public void SubmitOdometry_ConstantVelocityModel_IsIgnored()
    {
        var (filter, _) = TrackedFilter(MotionModelKind.ConstantVelocity3D, 2);
        var before = filter.StateVector.ToArray();
        var ignored = filter.Counters.Ignored;
        var r = filter.SubmitOdometry(new OdometryMeasurement(filter.LastTime + 0.01, 1.0, 0.1));
        Assert.Equal(UpdateOutcome.Ignored, r.Outcome);
        Assert.Equal(before, filter.StateVector.ToArray());
        Assert.Equal(ignored + 1, filter.Counters.Ignored);
    }

    [Fact]
    public void Options_Invalid_ThrowArgumentException()
    {
        var map = TestSites.Hall();
        Assert.Throws<ArgumentOutOfRangeException>(() => new RobotFilter(map, new FilterOptions { TdoaSigmaMetres = 0 }));
        Assert.Throws<ArgumentOutOfRangeException>(() => new RobotFilter(map, new FilterOptions { GateProbability = 1 }));
        Assert.Throws<ArgumentOutOfRangeException>(() => new RobotFilter(map, new FilterOptions { KernelConstant = double.NaN }));
        Assert.Throws<ArgumentOutOfRangeException>(() => new RobotFilter(map, new FilterOptions { ReorderCapacity = 1 }));
        Assert.Throws<ArgumentException>(() => new RobotFilter(map, new FilterOptions { MaxPredictionGapSeconds = 0.05 }));
        Assert.Throws<ArgumentOutOfRangeException>(() => new RobotFilter(map, new FilterOptions { TagLeverArm = new Vector3D(double.NaN, 0, 0) }));
    }

    [Fact]
    public void PredictPose_DoesNotChangeFilterAndMovesWithOdometry()
    {
        var (filter, _) = TrackedFilter(MotionModelKind.PlanarOdometry, 5);
        var before = filter.StateVector.ToArray();
        var now = new PoseEstimate();
        var ahead = new PoseEstimate();
        filter.GetPose(now);
        filter.PredictPose(filter.LastTime + 0.2, ahead);
        Assert.Equal(before, filter.StateVector.ToArray());
        Assert.Equal(filter.LastTime + 0.2, ahead.Time, 12);

        // About 1.2 m/s for 0.2 s along the heading.
        var moved = (ahead.Position - now.Position).HorizontalLength;
        Assert.InRange(moved, 0.2, 0.28);
        Assert.True(ahead[0, 0] > now[0, 0]);
    }

    [Fact]
    public void SetAnchorMap_NewVersion_KeepsTrackingWithNewIndices()
    {
        var (filter, _) = TrackedFilter(MotionModelKind.ConstantVelocity3D, 5);
        var old = filter.AnchorMap;

        // Same anchors, reversed order: index i now means old anchor 7 − i.
        var reversed = AnchorMap.Create(old.SiteId, old.Anchors.Reverse());
        filter.SetAnchorMap(reversed);
        var pose = new PoseEstimate();
        filter.GetPose(pose);
        var tag = pose.TagPosition;
        var r = filter.Submit(new TdoaMeasurement(filter.LastTime + 0.01, 0, 7, Ddiff(reversed, tag, 0, 7)));
        Assert.Equal(UpdateOutcome.Accepted, r.Outcome);
        Assert.InRange(r.NormalizedInnovationSquared, 0, 0.5);
    }

    [Fact]
    public void Reset_ReturnsToAcquiringWithNaNTime()
    {
        var (filter, _) = TrackedFilter(MotionModelKind.PlanarOdometry, 3);
        filter.Reset();
        Assert.Equal(TrackingState.Acquiring, filter.State);
        Assert.True(double.IsNaN(filter.LastTime));
        var pose = new PoseEstimate();
        filter.GetPose(pose);
        Assert.True(double.IsNaN(pose.Position.X));
        Assert.Equal(PoseEstimate.UnobservedVariance, pose[0, 0]);
    }

    [Fact]
    public void Submit_BiasModel_IsSubtractedBeforeUpdate()
    {
        // A constant +0.3 m bias on every pair: with the model installed the filter tracks the truth.
        var map = TestSites.Hall();
        var run = new SyntheticRun { Map = map, Truth = SyntheticRun.Static(new Vector3D(9, 13, 0)), Lever = Lever, Duration = 10, OdometryRate = 5, Seed = 12 };
        var events = run.Generate().Select(e => e.IsOdometry ? e : e with { Tdoa = e.Tdoa with { DistanceDifference = e.Tdoa.DistanceDifference + 0.3 } }).ToList();
        var filter = new RobotFilter(map, new FilterOptions { TagLeverArm = Lever }, new ConstantBias(0.3));
        foreach (var e in events)
        {
            SyntheticRun.Submit(filter, e);
        }

        var pose = new PoseEstimate();
        filter.GetPose(pose);
        Assert.True((pose.TagPosition - events[^1].TruthTag).HorizontalLength < 0.05, $"error {(pose.TagPosition - events[^1].TruthTag).HorizontalLength:F3} m");

        // Without the model the +0.3 m would be innovations of 3σ: most would be down-weighted or gated, not accepted.
        Assert.True(filter.Counters.Accepted > 0.8 * (run.TdoaCount - filter.Counters.Buffered), $"accepted {filter.Counters.Accepted} of {run.TdoaCount}, buffered {filter.Counters.Buffered}");
    }

    /// <summary>A 20-s circle in the test hall (10 % NLOS) and two identical filters seeded at its start.</summary>
    private static (List<SimEvent> Events, RobotFilter First, RobotFilter Second) CircleRunWithTwinFilters(MotionModelKind motion, int seed)
    {
        var map = TestSites.Hall();
        var run = new SyntheticRun { Map = map, Truth = SyntheticRun.Circle(new Vector3D(15, 10, 0), 6, 1.2), Lever = Lever, Duration = 20, NlosFraction = 0.1, Seed = seed };
        var options = new FilterOptions { Motion = motion, TagLeverArm = Lever };
        var (r0, y0, _, _) = run.Truth(0);
        var seedPosition = motion == MotionModelKind.PlanarOdometry ? r0 : run.TagAt(run.StartTime);
        var first = new RobotFilter(map, options);
        var second = new RobotFilter(map, options);
        first.SeedPose(run.StartTime - 0.01, seedPosition, y0, 0.2, 0.1);
        second.SeedPose(run.StartTime - 0.01, seedPosition, y0, 0.2, 0.1);
        return (run.Generate(), first, second);
    }

    /// <summary>Same time, state and covariance to 1e-9.</summary>
    private static void AssertSameEstimate(RobotFilter expected, RobotFilter actual)
    {
        Assert.Equal(expected.LastTime, actual.LastTime);
        for (var i = 0; i < expected.StateDimension; i++)
        {
            Assert.Equal(expected.StateVector[i], actual.StateVector[i], 9);
        }

        for (var i = 0; i < expected.CovarianceMatrix.Length; i++)
        {
            Assert.Equal(expected.CovarianceMatrix[i], actual.CovarianceMatrix[i], 9);
        }
    }

    private static (RobotFilter Filter, List<SimEvent> Events) TrackedFilter(MotionModelKind motion, double duration, ITdoaBiasModel? bias = null, double seedYawSigma = 0.05)
    {
        var map = TestSites.Hall();
        var truth = seedYawSigma < 1 ? SyntheticRun.Circle(new Vector3D(15, 10, 0), 6, 1.2) : SyntheticRun.Static(new Vector3D(21, 10, 0));
        var run = new SyntheticRun { Map = map, Truth = truth, Lever = Lever, Duration = duration, Seed = 77 };
        var events = run.Generate();
        var filter = new RobotFilter(map, new FilterOptions { Motion = motion, TagLeverArm = Lever }, bias);
        var (r0, y0, _, _) = run.Truth(0);
        filter.SeedPose(run.StartTime - 0.01, motion == MotionModelKind.PlanarOdometry ? r0 : run.TagAt(run.StartTime), y0, 0.1, seedYawSigma);
        foreach (var e in events)
        {
            SyntheticRun.Submit(filter, e);
        }

        Assert.Equal(TrackingState.Locked, filter.State);
        return (filter, events);
    }

    private static double Ddiff(AnchorMap map, Vector3D tag, int a, int b) =>
        TdoaMeasurementModel.Predict(tag, map[a].Position, map[a].AntennaDelayMetres, map[b].Position, map[b].AntennaDelayMetres);

    private static void SubmitGarbage(RobotFilter filter, Random rng, double t, int anchors)
    {
        var a = rng.Next(anchors);
        var b = (a + 1 + rng.Next(anchors - 1)) % anchors;
        switch (rng.Next(14))
        {
            case 0:
                filter.Submit(new TdoaMeasurement(t, a, b, double.NaN));
                break;
            case 1:
                filter.Submit(new TdoaMeasurement(t, a, b, rng.Next(2) == 0 ? double.PositiveInfinity : double.NegativeInfinity));
                break;
            case 2:
                filter.Submit(new TdoaMeasurement(t, a, b, rng.Next(2) == 0 ? 1e300 : -1e300));
                break;
            case 3:
                filter.Submit(new TdoaMeasurement(rng.Next(3) switch { 0 => double.NaN, 1 => double.PositiveInfinity, _ => 1e300 }, a, b, 0.5));
                break;
            case 4:
                filter.Submit(new TdoaMeasurement(t, rng.Next(2) == 0 ? -1 - rng.Next(5) : anchors + rng.Next(1000), b, 0.5));
                break;
            case 5:
                filter.Submit(new TdoaMeasurement(t, a, a, 0.0));
                break;
            case 6:
                filter.Submit(new TdoaMeasurement(t - (rng.NextDouble() * 100), a, b, 0.5));
                break;
            case 7:
                filter.Submit(new TdoaMeasurement(t + (rng.NextDouble() * 1e6), a, b, 0.5));
                break;
            case 8:
                // Plausible magnitude, wrong value.
                filter.Submit(new TdoaMeasurement(t + 0.001, a, b, (rng.NextDouble() - 0.5) * 20));
                break;
            case 9:
                filter.SubmitOdometry(new OdometryMeasurement(t, rng.Next(2) == 0 ? double.NaN : 1e300, 0));
                break;
            case 10:
                filter.SubmitOdometry(new OdometryMeasurement(t + (rng.NextDouble() * 1e5), 1, 0));
                break;
            case 11:
                filter.SubmitOdometry(new OdometryMeasurement(t - (rng.NextDouble() * 10), 5, 3));
                break;
            case 12:
                filter.Submit(new TdoaMeasurement(-1e300, a, b, 0.1));
                break;
            default:
                filter.Submit(new TdoaMeasurement(t, int.MaxValue, int.MinValue, 0.1));
                break;
        }
    }

    private static void AssertSane(RobotFilter filter)
    {
        if (filter.State == TrackingState.Acquiring)
        {
            return;
        }

        var n = filter.StateDimension;
        foreach (var v in filter.StateVector)
        {
            Assert.True(double.IsFinite(v));
        }

        var p = filter.CovarianceMatrix.ToArray();
        var m = Matrix<double>.Build.Dense(n, n, (i, j) => p[(i * n) + j]);
        for (var i = 0; i < n; i++)
        {
            for (var j = 0; j < n; j++)
            {
                Assert.Equal(m[i, j], m[j, i]);
            }
        }

        _ = m.Cholesky();
    }

    private sealed class ConstantBias(double value = 0.0) : ITdoaBiasModel
    {
        public double PredictTdoaBias(AnchorMap map, int anchorA, int anchorB, in Vector3D tagPosition, double robotYaw) => value;
    }
}
