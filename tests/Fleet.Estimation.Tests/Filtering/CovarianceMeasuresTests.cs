using Fleet.Estimation.Filtering;
using MathNet.Numerics.LinearAlgebra;

namespace Fleet.Estimation.Tests.Filtering;

public class CovarianceMeasuresTests
{
    [Fact]
    public void HorizontalSigma_RandomCovariances_MatchesMathNetEigenvalues()
    {
        // Reference: MathNet.Numerics' symmetric eigen-decomposition of the 2×2 horizontal block.
        var random = new Random(3);
        for (var trial = 0; trial < 200; trial++)
        {
            var a = Matrix<double>.Build.Dense(4, 4, (_, _) => random.NextDouble() - 0.5);
            var p = (a * a.Transpose()) + (0.01 * Matrix<double>.Build.DenseIdentity(4));
            var expected = Math.Sqrt(p.SubMatrix(0, 2, 0, 2).Evd(Symmetricity.Symmetric).EigenValues.Real().Maximum());

            Assert.Equal(expected, CovarianceMeasures.HorizontalSigma(p.ToRowMajorArray(), 4), 12);
        }
    }
}
