using Fleet.Estimation.Filtering;
using MathNet.Numerics.LinearAlgebra;

namespace Fleet.Estimation.Tests.Filtering;

/// <summary>Textbook Kalman cases (CHECKS.md §3) replayed through the same helper the robot filter uses.</summary>
public class KalmanMathTests
{
    [Fact]
    public void UpdateScalar_BuildingHeight_MatchesWorkedExample()
    {
        // A. Becker, kalmanfilter.net "Kalman Filter in one dimension", Example 5 (CHECKS.md §3 case A).
        double[] z = [48.54, 47.11, 55.01, 55.15, 49.89, 40.85, 46.72, 50.05, 51.27, 49.95];
        Span<double> x = [60.0];
        Span<double> p = [225.0];
        Span<double> h = [1.0];
        for (var i = 0; i < z.Length; i++)
        {
            var s = KalmanMath.UpdateScalar(x, p, h, z[i] - x[0], 25.0, 1);
            if (i == 0)
            {
                Assert.Equal(0.9, 225.0 / s, 12);
                Assert.Equal(49.686, x[0], 3);
                Assert.Equal(22.5, p[0], 9);
            }
        }

        Assert.Equal(49.5699, x[0], 3);
        Assert.Equal(1.0 / ((1.0 / 225) + (10.0 / 25)), p[0], 9);
        Assert.Equal(2.4725, p[0], 4);
    }

    [Fact]
    public void SequentialScalarUpdates_ConstantAcceleration_MatchWorkedExample()
    {
        // kalmanfilter.net "Multidimensional KF examples", Example 9 (vehicle location; CHECKS.md §3 case B).
        // State (x, vx, ax, y, vy, ay); the 2-D measurement with diagonal R is applied as two scalar updates,
        // which equals the vector update because the measurement noises are independent.
        const int n = 6;
        const double dt = 1, sigmaA = 0.2, r = 9.0;
        var f = new double[36];
        var q = new double[36];
        for (var axis = 0; axis < 2; axis++)
        {
            var o = axis * 3;
            double[,] fb = { { 1, dt, 0.5 * dt * dt }, { 0, 1, dt }, { 0, 0, 1 } };
            double[,] qb =
            {
                { Math.Pow(dt, 4) / 4, Math.Pow(dt, 3) / 2, dt * dt / 2 },
                { Math.Pow(dt, 3) / 2, dt * dt, dt },
                { dt * dt / 2, dt, 1 },
            };
            for (var i = 0; i < 3; i++)
            {
                for (var j = 0; j < 3; j++)
                {
                    f[((o + i) * n) + o + j] = fb[i, j];
                    q[((o + i) * n) + o + j] = sigmaA * sigmaA * qb[i, j];
                }
            }
        }

        var x = new double[n];
        var p = new double[36];
        for (var i = 0; i < n; i++)
        {
            p[(i * n) + i] = 500;
        }

        KalmanMath.Predict(x, p, f, q, n);
        Assert.Equal(1125.01, p[0], 2);
        Assert.Equal(1000.04, p[7], 2);
        Assert.Equal(500.04, p[14], 2);

        double[][] measurements = [[-393.66, 300.4], [-375.93, 301.78]];
        double[] hx = [1, 0, 0, 0, 0, 0];
        double[] hy = [0, 0, 0, 1, 0, 0];
        for (var k = 0; k < measurements.Length; k++)
        {
            if (k == 0)
            {
                // Gain of the x-block at the first update.
                var s = p[0] + r;
                Assert.Equal(0.9921, p[0] / s, 4);
                Assert.Equal(0.6614, p[6] / s, 4);
                Assert.Equal(0.2205, p[12] / s, 4);
            }

            KalmanMath.UpdateScalar(x, p, hx, measurements[k][0] - x[0], r, n);
            KalmanMath.UpdateScalar(x, p, hy, measurements[k][1] - x[3], r, n);
            KalmanMath.Predict(x, p, f, q, n);
        }

        double[] expected = [-277.78, 148.34, 94.53, 249.77, -85.93, -63.65];
        for (var i = 0; i < n; i++)
        {
            Assert.True(Math.Abs(expected[i] - x[i]) < 0.01, $"state {i}: {x[i]} vs {expected[i]}");
        }
    }

    [Fact]
    public void Riccati_AlphaBetaLambdaOne_ReachesClosedFormSteadyState()
    {
        // Kalata (1984) tracking index (CHECKS.md §3 case C, formulas from memory): λ = 1 → α = 0.75, β = 0.5,
        // P⁻ = [[3, 2], [2, 2]], P⁺ = [[0.75, 0.5], [0.5, 1]] for R = T = σᵥ = 1 with the DWPA model.
        Span<double> x = [0, 0];
        Span<double> p = [10, 0, 0, 10];
        ReadOnlySpan<double> f = [1, 1, 0, 1];
        ReadOnlySpan<double> q = [0.25, 0.5, 0.5, 1];
        ReadOnlySpan<double> h = [1, 0];
        double alpha = 0, beta = 0;
        for (var i = 0; i < 500; i++)
        {
            KalmanMath.Predict(x, p, f, q, 2);
            alpha = p[0] / (p[0] + 1);
            beta = p[2] / (p[0] + 1);
            if (i == 499)
            {
                Assert.Equal(3, p[0], 9);
                Assert.Equal(2, p[1], 9);
                Assert.Equal(2, p[3], 9);
            }

            KalmanMath.UpdateScalar(x, p, h, 0, 1, 2);
        }

        Assert.Equal(0.75, alpha, 9);
        Assert.Equal(0.5, beta, 9);
        Assert.Equal(0.75, p[0], 9);
        Assert.Equal(0.5, p[1], 9);
        Assert.Equal(1.0, p[3], 9);
    }

    [Fact]
    public void Riccati_ScalarRandomWalk_ReachesGoldenRatio()
    {
        // Riccati closed form P⁻ = (Q + √(Q² + 4QR))/2 with Q = R = 1 → φ (CHECKS.md §3 case D).
        var phi = (1 + Math.Sqrt(5)) / 2;
        Span<double> x = [0];
        Span<double> p = [1];
        ReadOnlySpan<double> one = [1.0];
        for (var i = 0; i < 500; i++)
        {
            KalmanMath.Predict(x, p, one, one, 1);
            if (i == 499)
            {
                Assert.Equal(phi, p[0], 9);
            }

            var s = KalmanMath.UpdateScalar(x, p, one, 0, 1, 1);
            if (i == 499)
            {
                Assert.Equal(1 / phi, phi / s, 9);
            }
        }

        Assert.Equal(1 / phi, p[0], 9);
        Assert.Equal(0.6180340, p[0], 7);
    }

    [Theory]
    [InlineData(0.8, 0.8)]
    [InlineData(0.5, 1.25)]
    public void JosephUpdate_ScalarGain_MatchesHandComputation(double gain, double expected)
    {
        // Bucy & Joseph (1968), from memory (CHECKS.md §3 case E): P⁻ = 4, R = 1, H = 1.
        Span<double> p = [4.0];
        KalmanMath.JosephUpdate(p, [1.0], [gain], 1.0, 1);
        Assert.Equal(expected, p[0], 12);
    }

    [Fact]
    public void ShortForm_SuboptimalGain_DiffersFromJoseph()
    {
        // Case E: the short form (I − KH)P⁻ is only right for the optimal gain; with K = 0.5 it gives 2.0, not 1.25.
        const double k = 0.5;
        var shortForm = (1 - k) * 4.0;
        Span<double> p = [4.0];
        KalmanMath.JosephUpdate(p, [1.0], [k], 1.0, 1);
        Assert.Equal(2.0, shortForm, 12);
        Assert.NotEqual(shortForm, p[0], 6);
    }

    [Fact]
    public void UpdateScalar_RandomConstant_MatchesRecomputedSequence()
    {
        // Welch & Bishop, "An Introduction to the Kalman Filter", UNC TR 95-041, random constant; values
        // recomputed (CHECKS.md §3 case F): Q = 1e-5, R = 0.01, P₀ = 1.
        Span<double> x = [0];
        Span<double> p = [1];
        ReadOnlySpan<double> one = [1.0];
        ReadOnlySpan<double> q = [1e-5];
        for (var k = 1; k <= 2000; k++)
        {
            KalmanMath.Predict(x, p, one, q, 1);
            KalmanMath.UpdateScalar(x, p, one, 0, 0.01, 1);
            switch (k)
            {
                case 1:
                    Assert.Equal(0.0099010, p[0], 7);
                    break;
                case 10:
                    Assert.Equal(0.0010273, p[0], 7);
                    break;
                case 50:
                    Assert.Equal(3.392e-4, p[0], 7);
                    break;
            }
        }

        Assert.Equal(3.1127e-4, p[0], 8);
    }

    [Fact]
    public void JosephUpdate_RandomInputs_MatchesDenseMatrixComputation()
    {
        // Reference: the textbook formula evaluated with MathNet dense matrices.
        var rng = new Random(11);
        const int n = 6;
        for (var trial = 0; trial < 200; trial++)
        {
            var a = Matrix<double>.Build.Dense(n, n, (_, _) => rng.NextDouble() - 0.5);
            var p0 = (a * a.Transpose()) + (0.1 * Matrix<double>.Build.DenseIdentity(n));
            var h = Vector<double>.Build.Dense(n, _ => rng.NextDouble() - 0.5);
            var k = Vector<double>.Build.Dense(n, _ => rng.NextDouble() - 0.5);
            var r = 0.01 + rng.NextDouble();

            var ikh = Matrix<double>.Build.DenseIdentity(n) - k.OuterProduct(h);
            var expected = (ikh * p0 * ikh.Transpose()) + (r * k.OuterProduct(k));

            var p = ToRowMajor(p0);
            KalmanMath.JosephUpdate(p, h.ToArray(), k.ToArray(), r, n);
            for (var i = 0; i < n * n; i++)
            {
                Assert.Equal(expected[i / n, i % n], p[i], 12);
            }
        }
    }

    [Fact]
    public void ConstantVelocityPredictInPlace_RandomInputs_MatchesDenseMatrixComputation()
    {
        // Reference: x ← F·x, P ← F·P·Fᵀ + Q with MathNet dense matrices, F and Q from the model's own builders
        // (white-acceleration Q, Bar-Shalom et al. 2001 §6.2; from memory).
        var rng = new Random(13);
        const int n = ConstantVelocityModel.StateDimension;
        for (var trial = 0; trial < 100; trial++)
        {
            var a = Matrix<double>.Build.Dense(n, n, (_, _) => rng.NextDouble() - 0.5);
            var p0 = (a * a.Transpose()) + (0.01 * Matrix<double>.Build.DenseIdentity(n));
            var x0 = Vector<double>.Build.Dense(n, _ => (rng.NextDouble() - 0.5) * 10);
            var dt = rng.NextDouble() * 0.5;
            var qh = rng.NextDouble() * 2;
            var qv = rng.NextDouble() * 0.2;
            var fArray = new double[n * n];
            var qArray = new double[n * n];
            ConstantVelocityModel.Transition(dt, fArray);
            ConstantVelocityModel.ProcessNoise(dt, qh, qv, qArray);
            var f = Matrix<double>.Build.DenseOfRowMajor(n, n, fArray);
            var expectedP = (f * p0 * f.Transpose()) + Matrix<double>.Build.DenseOfRowMajor(n, n, qArray);
            var expectedX = f * x0;

            var x = x0.ToArray();
            var p = ToRowMajor(p0);
            ConstantVelocityModel.PredictInPlace(x, p, dt, qh, qv);
            for (var i = 0; i < n; i++)
            {
                Assert.Equal(expectedX[i], x[i], 12);
            }

            for (var i = 0; i < n * n; i++)
            {
                Assert.Equal(expectedP[i / n, i % n], p[i], 12);
                Assert.Equal(p[((i % n) * n) + (i / n)], p[i], 15);
            }
        }
    }

    [Fact]
    public void Predict_RandomInputs_MatchesDenseMatrixComputation()
    {
        var rng = new Random(12);
        const int n = 6;
        for (var trial = 0; trial < 100; trial++)
        {
            var a = Matrix<double>.Build.Dense(n, n, (_, _) => rng.NextDouble() - 0.5);
            var p0 = a * a.Transpose();
            var f = Matrix<double>.Build.Dense(n, n, (_, _) => rng.NextDouble() - 0.5);
            var b = Matrix<double>.Build.Dense(n, n, (_, _) => rng.NextDouble() - 0.5);
            var q = b * b.Transpose();
            var x0 = Vector<double>.Build.Dense(n, _ => rng.NextDouble());

            var x = x0.ToArray();
            var p = ToRowMajor(p0);
            KalmanMath.Predict(x, p, ToRowMajor(f), ToRowMajor(q), n);
            var expectedP = (f * p0 * f.Transpose()) + q;
            var expectedX = f * x0;
            for (var i = 0; i < n; i++)
            {
                Assert.Equal(expectedX[i], x[i], 12);
            }

            for (var i = 0; i < n * n; i++)
            {
                Assert.Equal(expectedP[i / n, i % n], p[i], 12);
            }
        }
    }

    [Fact]
    public void UpdateScalar_TenThousandRandomUpdates_CovarianceStaysSymmetricPositiveDefinite()
    {
        // CHECKS.md §3: after 10⁴ random updates P must be symmetric and Cholesky must succeed (MathNet).
        var rng = new Random(13);
        const int n = 6;
        var x = new double[n];
        var p = new double[n * n];
        for (var i = 0; i < n; i++)
        {
            p[(i * n) + i] = 1;
        }

        var h = new double[n];
        var f = new double[n * n];
        var q = new double[n * n];
        for (var step = 0; step < 10_000; step++)
        {
            for (var i = 0; i < n; i++)
            {
                h[i] = (rng.NextDouble() - 0.5) * Math.Pow(10, rng.Next(-3, 3));
            }

            // Measurement noise over eight decades stresses the update's round-off.
            var r = Math.Pow(10, -8 + (8 * rng.NextDouble()));
            KalmanMath.UpdateScalar(x, p, h, rng.NextDouble() - 0.5, r, n);
            if (step % 10 == 9)
            {
                Array.Clear(f);
                Array.Clear(q);
                for (var i = 0; i < n; i++)
                {
                    for (var j = 0; j < n; j++)
                    {
                        f[(i * n) + j] = (i == j ? 1 : 0) + (0.01 * (rng.NextDouble() - 0.5));
                    }

                    q[(i * n) + i] = 1e-4;
                }

                KalmanMath.Predict(x, p, f, q, n);
            }
        }

        var m = Matrix<double>.Build.Dense(n, n, (i, j) => p[(i * n) + j]);
        for (var i = 0; i < n; i++)
        {
            for (var j = 0; j < n; j++)
            {
                Assert.Equal(m[i, j], m[j, i]);
            }
        }

        var cholesky = m.Cholesky();
        Assert.True(cholesky.Determinant > 0);
    }

    private static double[] ToRowMajor(Matrix<double> m)
    {
        var a = new double[m.RowCount * m.ColumnCount];
        for (var i = 0; i < m.RowCount; i++)
        {
            for (var j = 0; j < m.ColumnCount; j++)
            {
                a[(i * m.ColumnCount) + j] = m[i, j];
            }
        }

        return a;
    }
}
