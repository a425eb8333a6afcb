using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;

namespace Fleet.Simulation.Tests;

public class MeasurementGeneratorTests
{
    private static readonly SimulationOptions Short = new() { DurationSeconds = 20, RobotCount = 4 };

    [Fact]
    public void Generate_SameSeed_GivesIdenticalRecords()
    {
        var first = new MeasurementGenerator(Short with { Seed = 42 }).Generate().ToList();
        var second = new MeasurementGenerator(Short with { Seed = 42 }).Generate().ToList();

        Assert.NotEmpty(first);
        Assert.Equal(first.Count, second.Count);
        for (var i = 0; i < first.Count; i++)
        {
            Assert.Equal(first[i], second[i]);
        }
    }

    [Fact]
    public void Generate_EnumeratedTwice_GivesIdenticalRecords()
    {
        var generator = new MeasurementGenerator(Short with { Seed = 5 });
        Assert.Equal(generator.Generate().ToList(), generator.Generate().ToList());
    }

    [Fact]
    public void Generate_DifferentSeed_GivesDifferentRecords()
    {
        var a = new MeasurementGenerator(Short with { Seed = 1 }).Generate().OfType<TdoaRecord>().Take(200).ToList();
        var b = new MeasurementGenerator(Short with { Seed = 2 }).Generate().OfType<TdoaRecord>().Take(200).ToList();
        Assert.NotEqual(a, b);
    }

    [Fact]
    public void Generate_Stream_RobotsFirstThenTimeOrdered()
    {
        var records = new MeasurementGenerator(Short).Generate().ToList();

        Assert.All(records.Take(4), r => Assert.IsType<RobotRecord>(r));
        Assert.DoesNotContain(records.Skip(4), r => r is RobotRecord);
        var previous = double.NegativeInfinity;
        foreach (var record in records.Skip(4))
        {
            var t = Time(record);
            Assert.True(t >= previous, $"time went back from {previous} to {t}");
            Assert.InRange(t, 0.0, Short.DurationSeconds);
            previous = t;
        }
    }

    [Fact]
    public void Generate_ConstantVelocityRobots_DeclaredAndSendNoOdometry()
    {
        var options = Short with { RobotCount = 4, ConstantVelocityFraction = 0.5 };
        var records = new MeasurementGenerator(options).Generate().ToList();

        var robots = records.OfType<RobotRecord>().ToList();
        Assert.Equal(["tug-01", "tug-02", "tug-03", "tug-04"], robots.Select(r => r.Robot));
        Assert.Equal(2, robots.Count(r => r.Motion == MotionModelKind.ConstantVelocity3D));
        foreach (var robot in robots)
        {
            var odometry = records.OfType<OdometryRecord>().Count(r => r.Robot == robot.Robot);
            if (robot.Motion == MotionModelKind.ConstantVelocity3D)
            {
                Assert.Equal(0, odometry);
            }
            else
            {
                // 20 Hz for 20 s.
                Assert.InRange(odometry, 395, 401);
            }

            Assert.Equal(new Vector3D(0.1, 0, 0.45), robot.TagOffset);
        }
    }

    [Fact]
    public void Generate_Rates_MatchOptions()
    {
        var options = Short with { TdoaRateHz = 60, DropoutProbability = 0, RackAttenuationLengthMetres = double.PositiveInfinity };
        var records = new MeasurementGenerator(options).Generate().ToList();
        foreach (var robot in records.OfType<RobotRecord>())
        {
            var tdoa = records.OfType<TdoaRecord>().Count(r => r.Robot == robot.Robot);
            var truth = records.OfType<TruthRecord>().Count(r => r.Robot == robot.Robot);

            // Candidates can be missing when fewer than two anchors are heard; that is rare.
            Assert.InRange(tdoa, 0.9 * 60 * 20, (60 * 20) + 1);
            Assert.InRange(truth, 199, 201);
        }
    }

    // DESIGN.md: ddiff = |p − b| − |p − a|. With every error off, the value must be exactly that for the
    // tag position, and must agree with the truth records (linear interpolation between 10 Hz samples).
    [Fact]
    public void Generate_NoiseFree_DdiffIsDistanceToBMinusDistanceToA()
    {
        var options = Short.NoiseFree() with { RobotCount = 2, ConstantVelocityFraction = 0 };
        var generator = new MeasurementGenerator(options);
        var map = generator.Layout.Anchors;
        var items = generator.GenerateDetailed().ToList();
        var truths = items.Select(i => i.Record).OfType<TruthRecord>().ToList();

        var checkedCount = 0;
        foreach (var item in items)
        {
            if (item.Record is not TdoaRecord tdoa)
            {
                continue;
            }

            var a = map[map.IndexOf(tdoa.AnchorA)].Position;
            var b = map[map.IndexOf(tdoa.AnchorB)].Position;
            var p = item.Tdoa!.TagPosition;
            var expected = Vector3D.Distance(p, b) - Vector3D.Distance(p, a);
            Assert.Equal(expected, tdoa.DistanceDifference, 1e-12);

            var before = truths.LastOrDefault(t => t.Robot == tdoa.Robot && t.Time <= tdoa.Time);
            var after = truths.FirstOrDefault(t => t.Robot == tdoa.Robot && t.Time > tdoa.Time);
            if (before is null || after is null)
            {
                continue;
            }

            var f = (tdoa.Time - before.Time) / (after.Time - before.Time);
            var q = before.TagPosition + (f * (after.TagPosition - before.TagPosition));
            var fromTruth = Vector3D.Distance(q, b) - Vector3D.Distance(q, a);
            Assert.Equal(fromTruth, tdoa.DistanceDifference, 0.03);
            if (Math.Abs(fromTruth) > 1.0)
            {
                // The opposite sign convention would be off by 2|ddiff|.
                Assert.True(Math.Abs(tdoa.DistanceDifference + fromTruth) > 1.0);
            }

            checkedCount++;
        }

        Assert.True(checkedCount > 1000, $"only {checkedCount} TDOAs checked");
    }

    [Fact]
    public void Generate_NoiseFree_OdometryIsTrueMotion()
    {
        var options = Short.NoiseFree() with { RobotCount = 1, ConstantVelocityFraction = 0, DurationSeconds = 40 };
        var records = new MeasurementGenerator(options).Generate().ToList();
        var odometry = records.OfType<OdometryRecord>().ToList();
        var truths = records.OfType<TruthRecord>().ToList();

        Assert.All(odometry, o => Assert.InRange(o.ForwardSpeed, 0.0, options.MaxCruiseSpeed + 1e-9));

        // Dead reckoning the reference point from the first truth with the odometry reproduces the truth closely.
        var start = truths[0];
        var yaw = start.Yaw;
        var lever = Rotation3D.FromYaw(yaw).Apply(options.TagOffset);
        double x = start.TagPosition.X - lever.X, y = start.TagPosition.Y - lever.Y, t = start.Time;
        foreach (var o in odometry.Where(o => o.Time > start.Time))
        {
            var dt = o.Time - t;
            yaw += o.YawRate * dt;
            x += o.ForwardSpeed * Math.Cos(yaw) * dt;
            y += o.ForwardSpeed * Math.Sin(yaw) * dt;
            t = o.Time;
        }

        var end = truths[^1];
        var endLever = Rotation3D.FromYaw(end.Yaw).Apply(options.TagOffset);
        Assert.Equal(end.TagPosition.X - endLever.X, x, 0.5);
        Assert.Equal(end.TagPosition.Y - endLever.Y, y, 0.5);
    }

    [Fact]
    public void Generate_DefaultScenario_AtLeastTenPercentNlos()
    {
        var infos = new MeasurementGenerator(new SimulationOptions()).GenerateDetailed()
            .Where(i => i.Tdoa is not null).Select(i => i.Tdoa!).ToList();

        var fraction = infos.Count(i => i.IsNlos) / (double)infos.Count;
        Assert.InRange(fraction, 0.10, 0.60);
    }

    [Fact]
    public void Generate_NlosExcess_PositiveExactlyWhenLinkCrossesRack()
    {
        var generator = new MeasurementGenerator(Short);
        var map = generator.Layout.Anchors;
        var racks = generator.Layout.Racks;
        var nlosLinks = 0;
        foreach (var item in generator.GenerateDetailed())
        {
            if (item.Record is not TdoaRecord tdoa)
            {
                continue;
            }

            var info = item.Tdoa!;
            var lengthA = MeasurementGenerator.LengthInsideRacks(racks, map[map.IndexOf(tdoa.AnchorA)].Position, info.TagPosition);
            var lengthB = MeasurementGenerator.LengthInsideRacks(racks, map[map.IndexOf(tdoa.AnchorB)].Position, info.TagPosition);
            Assert.Equal(lengthA, info.RackLengthA, 1e-12);
            Assert.Equal(lengthB, info.RackLengthB, 1e-12);
            Assert.Equal(lengthA > 0, info.NlosExcessA > 0);
            Assert.Equal(lengthB > 0, info.NlosExcessB > 0);
            Assert.True(info.NlosExcessA >= 0 && info.NlosExcessB >= 0);
            Assert.Equal(lengthA > 0 || lengthB > 0, info.IsNlos);
            nlosLinks += (lengthA > 0 ? 1 : 0) + (lengthB > 0 ? 1 : 0);
        }

        Assert.True(nlosLinks > 100);
    }

    [Fact]
    public void Generate_NlosDisabled_NoExcess()
    {
        var infos = new MeasurementGenerator(Short with { NlosEnabled = false }).GenerateDetailed()
            .Where(i => i.Tdoa is not null).Select(i => i.Tdoa!).ToList();
        Assert.All(infos, i => Assert.False(i.IsNlos));
        Assert.All(infos, i => Assert.Equal(0.0, i.NlosExcessMetres));
    }

    // Hand-computed slab intersections against the rack box (4, 7.5, 0)–(11.5, 8.7, 6.5) of the hall.
    [Theory]
    [InlineData(8, 2, 0.45, 8, 14, 0.45, 1.2)] // straight across the 1.2 m depth
    [InlineData(6, 5.5, 1, 10, 10.5, 1, 1.5367)] // t ∈ [0.4, 0.64] of |(4, 5, 0)| = 6.4031 → 0.24·6.4031
    [InlineData(8, 2, 9.5, 8, 14, 0.45, 1.5030)] // t ∈ [0.4583, 0.5583] of |(0, 12, −9.05)| = 15.030
    [InlineData(8, 2, 20, 8, 14, 0.45, 0.0)] // passes over the 6.5 m top
    [InlineData(2, 2, 0.45, 2, 14, 0.45, 0.0)] // end aisle, x = 2 < 4
    public void LengthInsideRacks_HandComputedSegments_Match(double ax, double ay, double az, double bx, double by, double bz, double expected)
    {
        AxisAlignedBox[] racks = [new(new Vector3D(4, 7.5, 0), new Vector3D(11.5, 8.7, 6.5))];
        Assert.Contains(racks[0], HarborPointHall.Racks);

        var length = MeasurementGenerator.LengthInsideRacks(racks, new Vector3D(ax, ay, az), new Vector3D(bx, by, bz));
        Assert.Equal(expected, length, 4);
    }

    [Fact]
    public void Generate_Robots_StayInAislesAndInsideHall()
    {
        var options = Short with { RobotCount = 6, DurationSeconds = 90 };
        foreach (var truth in new MeasurementGenerator(options).Generate().OfType<TruthRecord>())
        {
            var lever = Rotation3D.FromYaw(truth.Yaw).Apply(options.TagOffset);
            var reference = truth.TagPosition - lever;
            Assert.Equal(0.0, reference.Z, 1e-12);
            Assert.InRange(reference.X, 0.5, HarborPointHall.Length - 0.5);
            Assert.InRange(reference.Y, 0.5, HarborPointHall.Width - 0.5);
            foreach (var rack in HarborPointHall.Racks)
            {
                // 0.6 m clearance: half a robot width plus margin.
                var clearance = Math.Max(Math.Max(rack.Min.X - reference.X, reference.X - rack.Max.X), Math.Max(rack.Min.Y - reference.Y, reference.Y - rack.Max.Y));
                Assert.True(clearance > 0.6, $"{truth.Robot} at {reference} is {clearance:0.00} m from a rack");
            }
        }
    }

    [Fact]
    public void Options_Invalid_Throw()
    {
        Assert.Throws<ArgumentException>(() => new MeasurementGenerator(Short with { TdoaRateHz = 0 }));
        Assert.Throws<ArgumentException>(() => new MeasurementGenerator(Short with { DropoutProbability = 1.0 }));
        Assert.Throws<ArgumentException>(() => new MeasurementGenerator(Short with { Layout = "nowhere" }));
    }

    private static double Time(ObservationRecord record) => record switch
    {
        TdoaRecord r => r.Time,
        OdometryRecord r => r.Time,
        TruthRecord r => r.Time,
        _ => throw new InvalidOperationException(),
    };
}
