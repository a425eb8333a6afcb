using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;
using Fleet.Estimation.Measurements;

namespace Fleet.Estimation.Filtering;

/// <summary>Outcome of <see cref="TdoaMultilateration.Solve"/>.</summary>
public enum MultilaterationStatus
{
    /// <summary>Converged to a finite position with a finite covariance.</summary>
    Solved,

    /// <summary>Fewer usable measurements or distinct anchor pairs than the problem needs.</summary>
    TooFewMeasurements,

    /// <summary>The differences do not determine the position (too few independent differences, singular normal matrix).</summary>
    InsufficientGeometry,

    /// <summary>No start point converged within the iteration limit.</summary>
    DidNotConverge,
}

/// <summary>Settings of <see cref="TdoaMultilateration.Solve"/>.</summary>
public sealed class MultilaterationOptions
{
    /// <summary>When set, the tag height is held at this site z (m) and only x, y are solved (planar mode).</summary>
    public double? FixedHeight { get; init; }

    /// <summary>M-estimator used by the iteratively reweighted solve. Default Huber.</summary>
    public RobustKernel Kernel { get; init; } = RobustKernel.Huber;

    /// <summary>Tuning constant; null = the kernel's 95 %-efficiency constant.</summary>
    public double? KernelConstant { get; init; }

    /// <summary>
    /// Nominal sigma of one TDOA (m). Floors the robust scale (s = max(1.482602·MAD, σ)) so a near-exact fit cannot
    /// shrink the scale to zero, and scales the reported covariance (JᵀWJ)⁻¹σ². Default 0.1.
    /// </summary>
    public double SigmaMetres { get; init; } = 0.1;

    /// <summary>Iteration limit per start point. Default 60.</summary>
    public int MaxIterations { get; init; } = 60;

    /// <summary>Step size (m) below which a start point has converged. Default 1e-7.</summary>
    public double ToleranceMetres { get; init; } = 1e-7;

    /// <summary>Extra start point tried before the built-in ones (e.g. the last known position).</summary>
    public Vector3D? InitialGuess { get; init; }

    /// <summary>Start height (m) in 3-D mode; default one metre below the lowest anchor used.</summary>
    public double? SeedHeight { get; init; }
}

/// <summary>Result of a multilateration. <see cref="Covariance"/> is 3×3 row-major (m²); in planar mode the z row and column are zero (held).</summary>
public sealed class MultilaterationResult
{
    public MultilaterationStatus Status { get; init; }

    public bool Converged => Status == MultilaterationStatus.Solved;

    /// <summary>Tag position in the site frame (m); NaN components when not solved.</summary>
    public Vector3D Position { get; init; } = new(double.NaN, double.NaN, double.NaN);

    public double[] Covariance { get; init; } = new double[9];

    /// <summary>Iterations of the chosen start point.</summary>
    public int Iterations { get; init; }

    /// <summary>Root-mean-square residual over all used measurements (m), outliers included.</summary>
    public double RmsResidual { get; init; } = double.NaN;

    /// <summary>1.482602·MAD of the residuals at the solution (m), a robust estimate of the TDOA noise.</summary>
    public double RobustScale { get; init; } = double.NaN;

    /// <summary>Measurements that passed the input checks.</summary>
    public int MeasurementsUsed { get; init; }

    /// <summary>Distinct unordered anchor pairs among the used measurements.</summary>
    public int DistinctPairs { get; init; }

    /// <summary>Independent differences: anchors involved minus connected components of the pair graph.</summary>
    public int IndependentDifferences { get; init; }

    /// <summary>Final IRLS weight of each used measurement, in input order of the used ones.</summary>
    public double[] Weights { get; init; } = [];
}

/// <summary>
/// Robust TDOA multilateration for a first fix: damped Gauss–Newton (Levenberg–Marquardt) inside iteratively
/// reweighted least squares, started from several points (anchor centroid and four points around it at tag height)
/// to avoid local minima; the start with the smallest robust loss wins. Tukey and Cauchy solves first converge under
/// Huber weights (common practice: a convex start for redescending estimators). Allocates; meant for rare use.
/// Requirements: planar mode needs ≥ 3 distinct anchor pairs and ≥ 2 independent differences; 3-D needs ≥ 4 distinct
/// pairs and ≥ 3 independent differences.
/// </summary>
public static class TdoaMultilateration
{
    /// <summary>Solves for the tag position from <paramref name="burst"/> (measurement times are ignored: the tag is assumed static over the burst).</summary>
    public static MultilaterationResult Solve(AnchorMap map, ReadOnlySpan<TdoaMeasurement> burst, MultilaterationOptions options)
    {
        ArgumentNullException.ThrowIfNull(map);
        ArgumentNullException.ThrowIfNull(options);
        if (!(options.SigmaMetres > 0) || !double.IsFinite(options.SigmaMetres))
        {
            throw new ArgumentOutOfRangeException(nameof(options), options.SigmaMetres, "SigmaMetres must be positive and finite");
        }

        if (options.FixedHeight is { } fh && !double.IsFinite(fh))
        {
            throw new ArgumentOutOfRangeException(nameof(options), fh, "FixedHeight must be finite");
        }

        var planar = options.FixedHeight.HasValue;
        var dim = planar ? 2 : 3;

        // Keep the usable measurements.
        var used = new List<TdoaMeasurement>(burst.Length);
        foreach (var m in burst)
        {
            if (double.IsFinite(m.DistanceDifference) && m.AnchorA >= 0 && m.AnchorA < map.Count && m.AnchorB >= 0
                && m.AnchorB < map.Count && m.AnchorA != m.AnchorB
                && Math.Abs(m.DistanceDifference) <= TdoaMeasurementModel.MaximumMagnitude(map[m.AnchorA], map[m.AnchorB]) + 1.0)
            {
                used.Add(m);
            }
        }

        var (pairs, independent) = CountGeometry(used, map.Count);
        if (used.Count < dim + 1 || pairs < dim + 1)
        {
            return new MultilaterationResult
            {
                Status = MultilaterationStatus.TooFewMeasurements,
                MeasurementsUsed = used.Count,
                DistinctPairs = pairs,
                IndependentDifferences = independent,
            };
        }

        if (independent < dim)
        {
            return new MultilaterationResult
            {
                Status = MultilaterationStatus.InsufficientGeometry,
                MeasurementsUsed = used.Count,
                DistinctPairs = pairs,
                IndependentDifferences = independent,
            };
        }

        var problem = new Problem(map, used, options, planar);
        var seeds = BuildSeeds(map, used, options, planar);

        SeedSolution? best = null;
        foreach (var seed in seeds)
        {
            var s = problem.Run(seed);
            if (s is null)
            {
                continue;
            }

            if (best is null || s.Loss < best.Loss - 1e-12)
            {
                best = s;
            }
        }

        if (best is null)
        {
            return new MultilaterationResult
            {
                Status = MultilaterationStatus.DidNotConverge,
                MeasurementsUsed = used.Count,
                DistinctPairs = pairs,
                IndependentDifferences = independent,
            };
        }

        var cov = problem.Covariance(best);
        var status = cov is null ? MultilaterationStatus.InsufficientGeometry : MultilaterationStatus.Solved;
        return new MultilaterationResult
        {
            Status = status,
            Position = status == MultilaterationStatus.Solved ? best.Position : new Vector3D(double.NaN, double.NaN, double.NaN),
            Covariance = cov ?? new double[9],
            Iterations = best.Iterations,
            RmsResidual = best.Rms,
            RobustScale = best.Scale,
            MeasurementsUsed = used.Count,
            DistinctPairs = pairs,
            IndependentDifferences = independent,
            Weights = best.Weights,
        };
    }

    /// <summary>Distinct unordered pairs and rank of the difference set (anchors involved minus connected components).</summary>
    internal static (int Pairs, int Independent) CountGeometry(List<TdoaMeasurement> used, int anchorCount)
    {
        var pairSet = new HashSet<long>();
        var parent = new Dictionary<int, int>();

        int Find(int i)
        {
            while (parent[i] != i)
            {
                parent[i] = parent[parent[i]];
                i = parent[i];
            }

            return i;
        }

        foreach (var m in used)
        {
            var lo = Math.Min(m.AnchorA, m.AnchorB);
            var hi = Math.Max(m.AnchorA, m.AnchorB);
            pairSet.Add(((long)lo * anchorCount) + hi);
            parent.TryAdd(lo, lo);
            parent.TryAdd(hi, hi);
            var ra = Find(lo);
            var rb = Find(hi);
            if (ra != rb)
            {
                parent[ra] = rb;
            }
        }

        var components = 0;
        foreach (var key in parent.Keys)
        {
            if (Find(key) == key)
            {
                components++;
            }
        }

        return (pairSet.Count, parent.Count - components);
    }

    private static List<Vector3D> BuildSeeds(AnchorMap map, List<TdoaMeasurement> used, MultilaterationOptions options, bool planar)
    {
        double minX = double.MaxValue, maxX = double.MinValue, minY = double.MaxValue, maxY = double.MinValue, minZ = double.MaxValue;
        double sx = 0, sy = 0;
        var count = 0;
        var seen = new HashSet<int>();
        foreach (var m in used)
        {
            foreach (var idx in (ReadOnlySpan<int>)[m.AnchorA, m.AnchorB])
            {
                if (!seen.Add(idx))
                {
                    continue;
                }

                var p = map[idx].Position;
                minX = Math.Min(minX, p.X);
                maxX = Math.Max(maxX, p.X);
                minY = Math.Min(minY, p.Y);
                maxY = Math.Max(maxY, p.Y);
                minZ = Math.Min(minZ, p.Z);
                sx += p.X;
                sy += p.Y;
                count++;
            }
        }

        var cx = sx / count;
        var cy = sy / count;
        var z = planar ? options.FixedHeight!.Value : options.SeedHeight ?? (minZ - 1.0);
        var hx = 0.25 * (maxX - minX);
        var hy = 0.25 * (maxY - minY);
        var seeds = new List<Vector3D>(6);
        if (options.InitialGuess is { IsFinite: true } guess)
        {
            seeds.Add(planar ? guess with { Z = z } : guess);
        }

        seeds.Add(new Vector3D(cx, cy, z));
        seeds.Add(new Vector3D(cx + hx, cy + hy, z));
        seeds.Add(new Vector3D(cx - hx, cy + hy, z));
        seeds.Add(new Vector3D(cx - hx, cy - hy, z));
        seeds.Add(new Vector3D(cx + hx, cy - hy, z));
        return seeds;
    }

    private sealed record SeedSolution(Vector3D Position, double Loss, double Rms, double Scale, int Iterations, double[] Weights);

    private sealed class Problem
    {
        private readonly Vector3D[] _a;
        private readonly Vector3D[] _b;
        private readonly double[] _da;
        private readonly double[] _db;
        private readonly double[] _z;
        private readonly double[] _r;
        private readonly double[] _w;
        private readonly double[] _scratch;
        private readonly Vector3D[] _g;
        private readonly MultilaterationOptions _options;
        private readonly bool _planar;
        private readonly int _dim;
        private readonly double _c;

        public Problem(AnchorMap map, List<TdoaMeasurement> used, MultilaterationOptions options, bool planar)
        {
            var n = used.Count;
            _a = new Vector3D[n];
            _b = new Vector3D[n];
            _da = new double[n];
            _db = new double[n];
            _z = new double[n];
            _r = new double[n];
            _w = new double[n];
            _scratch = new double[n];
            _g = new Vector3D[n];
            for (var i = 0; i < n; i++)
            {
                var a = map[used[i].AnchorA];
                var b = map[used[i].AnchorB];
                _a[i] = a.Position;
                _b[i] = b.Position;
                _da[i] = a.AntennaDelayMetres;
                _db[i] = b.AntennaDelayMetres;
                _z[i] = used[i].DistanceDifference;
            }

            _options = options;
            _planar = planar;
            _dim = planar ? 2 : 3;
            _c = options.KernelConstant ?? RobustKernels.StandardConstant(options.Kernel);
        }

        private int N => _z.Length;

        public SeedSolution? Run(Vector3D seed)
        {
            var p = seed;
            var kernel = _options.Kernel;
            var phaseKernel = kernel is RobustKernel.Tukey or RobustKernel.Cauchy ? RobustKernel.Huber : kernel;
            var phaseC = phaseKernel == kernel ? _c : RobustKernels.HuberConstant;
            var lambda = 1e-3;
            var converged = false;
            var iterations = 0;
            Span<double> a = stackalloc double[9];
            Span<double> g = stackalloc double[3];
            Span<double> delta = stackalloc double[3];

            for (var it = 0; it < _options.MaxIterations; it++)
            {
                iterations = it + 1;
                Residuals(p, withGradient: true);
                var scale = phaseKernel == RobustKernel.LeastSquares ? _options.SigmaMetres : Math.Max(MadScale(), _options.SigmaMetres);
                SetWeights(phaseKernel, phaseC, scale);
                var cost0 = WeightedCost();
                Normal(a, g);

                var accepted = false;
                var stepNorm = 0.0;
                for (var attempt = 0; attempt < 12; attempt++)
                {
                    if (!SolveDamped(a, g, lambda, delta))
                    {
                        lambda *= 10;
                        continue;
                    }

                    var trial = p + new Vector3D(delta[0], delta[1], _dim == 3 ? delta[2] : 0);
                    Residuals(trial, withGradient: false);
                    var cost1 = WeightedCost();
                    if (cost1 <= cost0 || cost0 - cost1 > -1e-15 * (1 + cost0))
                    {
                        stepNorm = Math.Sqrt((delta[0] * delta[0]) + (delta[1] * delta[1]) + (_dim == 3 ? delta[2] * delta[2] : 0));
                        p = trial;
                        lambda = Math.Max(lambda * 0.1, 1e-12);
                        accepted = true;
                        break;
                    }

                    lambda *= 10;
                }

                if (!p.IsFinite || p.Length > 1e7)
                {
                    return null;
                }

                if (!accepted || stepNorm < _options.ToleranceMetres)
                {
                    if (phaseKernel != kernel)
                    {
                        phaseKernel = kernel;
                        phaseC = _c;
                        lambda = 1e-3;
                        continue;
                    }

                    converged = true;
                    break;
                }
            }

            if (!converged)
            {
                return null;
            }

            // Final residuals, scale and weights at the solution.
            Residuals(p, withGradient: true);
            var mad = MadScale();
            var finalScale = kernel == RobustKernel.LeastSquares ? _options.SigmaMetres : Math.Max(mad, _options.SigmaMetres);
            SetWeights(kernel, _c, finalScale);
            var sumSq = 0.0;
            var loss = 0.0;
            for (var i = 0; i < N; i++)
            {
                sumSq += _r[i] * _r[i];
                loss += kernel == RobustKernel.LeastSquares
                    ? _r[i] * _r[i]
                    : RobustKernels.Loss(kernel, _r[i] / (_c * _options.SigmaMetres));
            }

            return new SeedSolution(p, loss, Math.Sqrt(sumSq / N), mad, iterations, (double[])_w.Clone());
        }

        /// <summary>(JᵀWJ)⁻¹σ² at the solution, embedded in 3×3; null when singular.</summary>
        public double[]? Covariance(SeedSolution s)
        {
            Residuals(s.Position, withGradient: true);
            s.Weights.CopyTo(_w, 0);
            Span<double> a = stackalloc double[9];
            Span<double> g = stackalloc double[3];
            Normal(a, g);
            Span<double> inv = stackalloc double[9];
            if (!SmallMatrix.TryInvertSymmetric(a, _dim, inv))
            {
                return null;
            }

            var sigma2 = _options.SigmaMetres * _options.SigmaMetres;
            var cov = new double[9];
            for (var i = 0; i < _dim; i++)
            {
                for (var j = 0; j < _dim; j++)
                {
                    cov[(i * 3) + j] = inv[(i * _dim) + j] * sigma2;
                }
            }

            return cov;
        }

        private void Residuals(Vector3D p, bool withGradient)
        {
            for (var i = 0; i < N; i++)
            {
                var h = TdoaMeasurementModel.PredictWithGradient(p, _a[i], _da[i], _b[i], _db[i], out var grad);
                _r[i] = _z[i] - h;
                if (withGradient)
                {
                    _g[i] = grad;
                }
            }
        }

        private double MadScale()
        {
            var n = N;
            for (var i = 0; i < n; i++)
            {
                _scratch[i] = _r[i];
            }

            Array.Sort(_scratch);
            var median = Median(_scratch);
            for (var i = 0; i < n; i++)
            {
                _scratch[i] = Math.Abs(_r[i] - median);
            }

            Array.Sort(_scratch);
            return RobustKernels.MadToSigma * Median(_scratch);
        }

        private static double Median(double[] sorted)
        {
            var n = sorted.Length;
            return (n & 1) == 1 ? sorted[n / 2] : 0.5 * (sorted[(n / 2) - 1] + sorted[n / 2]);
        }

        private void SetWeights(RobustKernel kernel, double c, double scale)
        {
            for (var i = 0; i < N; i++)
            {
                _w[i] = RobustKernels.Weight(kernel, _r[i] / (c * scale));
            }
        }

        private double WeightedCost()
        {
            var cost = 0.0;
            for (var i = 0; i < N; i++)
            {
                cost += _w[i] * _r[i] * _r[i];
            }

            return cost;
        }

        private void Normal(Span<double> a, Span<double> g)
        {
            a.Clear();
            g.Clear();
            for (var i = 0; i < N; i++)
            {
                var w = _w[i];
                if (w <= 0)
                {
                    continue;
                }

                var gi = _g[i];
                ReadOnlySpan<double> row = [gi.X, gi.Y, gi.Z];
                for (var j = 0; j < _dim; j++)
                {
                    g[j] += w * row[j] * _r[i];
                    for (var k = 0; k < _dim; k++)
                    {
                        a[(j * _dim) + k] += w * row[j] * row[k];
                    }
                }
            }
        }

        private bool SolveDamped(ReadOnlySpan<double> a, ReadOnlySpan<double> g, double lambda, Span<double> delta)
        {
            Span<double> m = stackalloc double[9];
            var trace = 0.0;
            for (var j = 0; j < _dim; j++)
            {
                trace += a[(j * _dim) + j];
            }

            a[..(_dim * _dim)].CopyTo(m);
            for (var j = 0; j < _dim; j++)
            {
                m[(j * _dim) + j] += (lambda * a[(j * _dim) + j]) + (1e-12 * (trace + 1e-12));
            }

            return SmallMatrix.TrySolveSymmetric(m, g, _dim, delta);
        }
    }
}
