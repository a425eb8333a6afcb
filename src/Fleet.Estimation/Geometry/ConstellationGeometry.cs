using MathNet.Numerics.LinearAlgebra;

namespace Fleet.Estimation.Geometry;

/// <summary>
/// Dilution of precision of a TDOA constellation at one point (dimensionless: position error RMS per metre of
/// single-link range noise). With a known tag height (<c>fixedHeight</c>), only x and y are estimated:
/// <see cref="Vertical"/> is 0 and <see cref="Position"/> equals <see cref="Horizontal"/>.
/// When the geometry is singular (too few anchors, all anchors in a line/plane through the tag…) every value is
/// NaN and <see cref="IsSingular"/> is true.
/// </summary>
public readonly record struct TdoaDilution(double Horizontal, double Vertical, double Position, bool IsSingular)
{
    internal static TdoaDilution Singular => new(double.NaN, double.NaN, double.NaN, true);
}

/// <summary>
/// Cramér–Rao lower bound on the covariance of an unbiased TDOA position estimate.
/// <see cref="Covariance"/> is row-major, <see cref="Dimension"/>×<see cref="Dimension"/> (3: x, y, z; 2: x, y
/// when the height is known), in m². <see cref="HorizontalRms"/> = √(Cxx + Cyy) and <see cref="VerticalRms"/> = √Czz
/// (0 when the height is known), in metres. All NaN with <see cref="IsSingular"/> set when the Fisher information
/// matrix is singular.
/// </summary>
public sealed record PositionBound(double[] Covariance, int Dimension, double HorizontalRms, double VerticalRms, bool IsSingular)
{
    /// <summary>Entry (row, col) of <see cref="Covariance"/>.</summary>
    public double this[int row, int col] => Covariance[(row * Dimension) + col];
}

/// <summary>Which quantity a constellation map shows.</summary>
public enum GeometryMapQuantity
{
    /// <summary>Horizontal DOP (dimensionless).</summary>
    HorizontalDop,

    /// <summary>Vertical DOP (dimensionless); 0 everywhere when the height is known.</summary>
    VerticalDop,

    /// <summary>Position DOP (dimensionless).</summary>
    PositionDop,

    /// <summary>Horizontal CRLB RMS (metres) for the given single-link range noise.</summary>
    HorizontalCrlbRms,

    /// <summary>Vertical CRLB RMS (metres) for the given single-link range noise.</summary>
    VerticalCrlbRms,
}

/// <summary>
/// Geometry quality of an anchor constellation for TDOA positioning: DOP and the Cramér–Rao bound.
/// <para>
/// Model: M anchors sᵢ, tag at u. All differences are taken against anchor 1 (the first in the list):
/// dᵢ = ‖u−sᵢ‖ − ‖u−s₁‖, i = 2…M. Row i of the Jacobian G is (u−sᵢ)ᵀ/‖u−sᵢ‖ − (u−s₁)ᵀ/‖u−s₁‖.
/// Independent single-link range errors of standard deviation σ make the differences correlated with covariance
/// Q = σ²(I + 11ᵀ). The bound is (GᵀQ⁻¹G)⁻¹ (Y. T. Chan and K. C. Ho, "A simple and efficient estimator for
/// hyperbolic location", IEEE Trans. Signal Process. 42(8), 1994) and the DOP is the same matrix with σ = 1.
/// This TDOA DOP equals the DOP of TOA with an unknown clock offset (S. Shin and T. Sung, IEEE Trans. AES 38(1), 2002),
/// so it does not depend on which anchor is the reference.
/// </para>
/// Not a hot path: allocates small MathNet matrices.
/// </summary>
public static class ConstellationGeometry
{
    /// <summary>Relative eigenvalue threshold below which the information matrix is treated as singular.</summary>
    public const double SingularityTolerance = 1e-10;

    /// <summary>
    /// DOP of the TDOA constellation <paramref name="anchors"/> (site frame, m) at <paramref name="point"/>.
    /// With <paramref name="fixedHeight"/> the tag height is known (ground robot): the point's z is replaced by it
    /// and only x, y are estimated (2-D HDOP). Anchors coinciding with the point are singular.
    /// </summary>
    public static TdoaDilution TdoaDop(IReadOnlyList<Vector3D> anchors, Vector3D point, double? fixedHeight = null)
    {
        var bound = Crlb(anchors, point, 1.0, fixedHeight);
        if (bound.IsSingular)
        {
            return TdoaDilution.Singular;
        }

        var position = Math.Sqrt((bound.HorizontalRms * bound.HorizontalRms) + (bound.VerticalRms * bound.VerticalRms));
        return new TdoaDilution(bound.HorizontalRms, bound.VerticalRms, position, false);
    }

    /// <summary>
    /// Cramér–Rao bound (GᵀQ⁻¹G)⁻¹ for TDOA positioning with single-link (TOA) range noise
    /// <paramref name="sigmaToaMetres"/> (m, &gt; 0). Each TDOA then has variance 2σ². See the class remarks.
    /// </summary>
    public static PositionBound Crlb(IReadOnlyList<Vector3D> anchors, Vector3D point, double sigmaToaMetres, double? fixedHeight = null)
    {
        ArgumentNullException.ThrowIfNull(anchors);
        if (!(sigmaToaMetres > 0) || !double.IsFinite(sigmaToaMetres))
        {
            throw new ArgumentOutOfRangeException(nameof(sigmaToaMetres), sigmaToaMetres, "range noise must be positive and finite");
        }

        var dim = fixedHeight.HasValue ? 2 : 3;
        if (fixedHeight.HasValue)
        {
            point = point with { Z = fixedHeight.Value };
        }

        var m = anchors.Count;
        if (m < dim + 1 || !point.IsFinite)
        {
            return SingularBound(dim);
        }

        var u = new Vector3D[m];
        for (var i = 0; i < m; i++)
        {
            var v = point - anchors[i];
            var length = v.Length;
            if (!(length > 1e-9) || !double.IsFinite(length))
            {
                return SingularBound(dim);
            }

            u[i] = v / length;
        }

        var g = Matrix<double>.Build.Dense(m - 1, dim);
        for (var i = 1; i < m; i++)
        {
            var row = u[i] - u[0];
            g[i - 1, 0] = row.X;
            g[i - 1, 1] = row.Y;
            if (dim == 3)
            {
                g[i - 1, 2] = row.Z;
            }
        }

        var sigma2 = sigmaToaMetres * sigmaToaMetres;
        var q = (Matrix<double>.Build.DenseIdentity(m - 1) + Matrix<double>.Build.Dense(m - 1, m - 1, 1.0)) * sigma2;

        // Q is symmetric positive definite (eigenvalues σ² and Mσ²), so Cholesky is safe.
        var qInvG = q.Cholesky().Solve(g);
        var information = g.TransposeThisAndMultiply(qInvG);
        information = 0.5 * (information + information.Transpose());

        var evd = information.Evd(Symmetricity.Symmetric);
        var eigen = evd.EigenValues;
        double min = double.PositiveInfinity, max = 0;
        for (var i = 0; i < eigen.Count; i++)
        {
            min = Math.Min(min, eigen[i].Real);
            max = Math.Max(max, Math.Abs(eigen[i].Real));
        }

        if (!(max > 0) || min <= SingularityTolerance * max)
        {
            return SingularBound(dim);
        }

        var covariance = information.Inverse();
        var flat = new double[dim * dim];
        for (var r = 0; r < dim; r++)
        {
            for (var c = 0; c < dim; c++)
            {
                // Symmetrise: the inverse of a symmetric matrix is symmetric up to rounding.
                flat[(r * dim) + c] = 0.5 * (covariance[r, c] + covariance[c, r]);
            }
        }

        var horizontal = Math.Sqrt(flat[0] + flat[dim + 1]);
        var vertical = dim == 3 ? Math.Sqrt(flat[8]) : 0.0;
        return new PositionBound(flat, dim, horizontal, vertical, false);
    }

    /// <summary>
    /// A map of <paramref name="quantity"/> over the rectangle [<paramref name="xMin"/>, <paramref name="xMax"/>] ×
    /// [<paramref name="yMin"/>, <paramref name="yMax"/>] (site frame, m) at tag height <paramref name="tagHeight"/>,
    /// sampled every <paramref name="step"/> metres starting at the minimum corner (the maximum is included when it
    /// falls on the grid). Result is indexed [iy, ix] with x = xMin + ix·step, y = yMin + iy·step. Singular cells are NaN.
    /// With <paramref name="heightKnown"/> the DOP/CRLB is the 2-D fixed-height variant.
    /// <paramref name="sigmaToaMetres"/> only matters for the CRLB quantities.
    /// </summary>
    public static double[,] Map(
        IReadOnlyList<Vector3D> anchors,
        double xMin,
        double xMax,
        double yMin,
        double yMax,
        double step,
        double tagHeight,
        GeometryMapQuantity quantity,
        bool heightKnown = false,
        double sigmaToaMetres = 0.1)
    {
        if (!(step > 0) || !(xMax >= xMin) || !(yMax >= yMin))
        {
            throw new ArgumentOutOfRangeException(nameof(step), "need step > 0 and max ≥ min");
        }

        var nx = GridCount(xMin, xMax, step);
        var ny = GridCount(yMin, yMax, step);
        var result = new double[ny, nx];
        double? fixedHeight = heightKnown ? tagHeight : null;
        for (var iy = 0; iy < ny; iy++)
        {
            for (var ix = 0; ix < nx; ix++)
            {
                var p = new Vector3D(xMin + (ix * step), yMin + (iy * step), tagHeight);
                var bound = Crlb(anchors, p, sigmaToaMetres, fixedHeight);
                var value = quantity switch
                {
                    GeometryMapQuantity.HorizontalDop => bound.HorizontalRms / sigmaToaMetres,
                    GeometryMapQuantity.VerticalDop => bound.VerticalRms / sigmaToaMetres,
                    GeometryMapQuantity.PositionDop => Math.Sqrt((bound.HorizontalRms * bound.HorizontalRms) + (bound.VerticalRms * bound.VerticalRms)) / sigmaToaMetres,
                    GeometryMapQuantity.HorizontalCrlbRms => bound.HorizontalRms,
                    GeometryMapQuantity.VerticalCrlbRms => bound.VerticalRms,
                    _ => throw new ArgumentOutOfRangeException(nameof(quantity)),
                };
                result[iy, ix] = value;
            }
        }

        return result;
    }

    /// <summary>Number of grid samples from min to max (inclusive when max lies on the grid, with a 1e-9 slack).</summary>
    public static int GridCount(double min, double max, double step) => (int)Math.Floor(((max - min) / step) + 1e-9) + 1;

    private static PositionBound SingularBound(int dim)
    {
        var covariance = new double[dim * dim];
        Array.Fill(covariance, double.NaN);
        return new PositionBound(covariance, dim, double.NaN, double.NaN, true);
    }
}
