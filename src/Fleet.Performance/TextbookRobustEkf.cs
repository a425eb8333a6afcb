using Fleet.Estimation.Anchors;
using Fleet.Estimation.Filtering;
using Fleet.Estimation.Measurements;
using MathNet.Numerics.LinearAlgebra;

namespace Fleet.Performance;

/// <summary>
/// The reference the benchmarks compare against: a straightforward textbook robust EKF written on
/// MathNet.Numerics dense matrices, doing the same math as <see cref="RobotFilter"/> for the
/// constant-velocity model: predict with F and the white-acceleration Q, a chi-square gate on the prior NIS,
/// iterated reweighting with the Huber kernel and relinearisation, and the Joseph-form covariance update.
/// Written for clarity, not speed — which is the point of the comparison.
/// </summary>
public sealed class TextbookRobustEkf
{
    private readonly AnchorMap _map;
    private readonly double _measurementVariance;
    private readonly double _accelerationNoise;
    private readonly double _gate;
    private readonly double _kernelConstant;
    private readonly int _maxIterations;
    private Vector<double> _x;
    private Matrix<double> _p;
    private double _time;

    public TextbookRobustEkf(AnchorMap map, double sigma, double accelerationNoise, double gateThreshold, int maxIterations,
        double[] initialState, double[] initialCovariance, double time)
    {
        _map = map;
        _measurementVariance = sigma * sigma;
        _accelerationNoise = accelerationNoise;
        _gate = gateThreshold;
        _kernelConstant = RobustKernels.HuberConstant;
        _maxIterations = maxIterations;
        _x = Vector<double>.Build.DenseOfArray((double[])initialState.Clone());
        _p = Matrix<double>.Build.DenseOfRowMajor(6, 6, initialCovariance);
        _time = time;
    }

    public Vector<double> State => _x;

    public Matrix<double> Covariance => _p;

    public UpdateOutcome Update(in TdoaMeasurement m)
    {
        Predict(m.Time - _time);
        _time = m.Time;

        var a = _map[m.AnchorA].Position;
        var b = _map[m.AnchorB].Position;
        var prior = _x.Clone();
        var priorP = _p.Clone();
        var iterate = prior.Clone();
        Matrix<double> k = Matrix<double>.Build.Dense(6, 1);
        Matrix<double> h = Matrix<double>.Build.Dense(1, 6);
        var weight = 1.0;
        for (var i = 0; i < _maxIterations; i++)
        {
            h = Jacobian(iterate, a, b);
            var predicted = Predict(iterate, a, b);
            var innovation = m.DistanceDifference - predicted - (h * (prior - iterate))[0];
            var s = (h * priorP * h.Transpose())[0, 0] + _measurementVariance;
            if (i == 0 && innovation * innovation / s > _gate)
            {
                return UpdateOutcome.Rejected;
            }

            var u = innovation / Math.Sqrt(s) / _kernelConstant;
            var newWeight = Math.Abs(u) <= 1 ? 1.0 : 1.0 / Math.Abs(u);
            var rw = Matrix<double>.Build.Dense(1, 1, _measurementVariance / newWeight);
            var sw = (h * priorP * h.Transpose()) + rw;
            k = priorP * h.Transpose() * sw.Inverse();
            iterate = prior + (k.Column(0) * innovation);
            var settled = Math.Abs(newWeight - weight) < 1e-3 && i > 0;
            weight = newWeight;
            if (settled)
            {
                break;
            }
        }

        var identity = Matrix<double>.Build.DenseIdentity(6);
        var ikh = identity - (k * h);
        var rFinal = Matrix<double>.Build.Dense(1, 1, _measurementVariance / weight);
        _p = (ikh * priorP * ikh.Transpose()) + (k * rFinal * k.Transpose());
        _p = 0.5 * (_p + _p.Transpose());
        _x = iterate;
        return weight >= 0.99 ? UpdateOutcome.Accepted : UpdateOutcome.DownWeighted;
    }

    private void Predict(double dt)
    {
        if (dt <= 0)
        {
            return;
        }

        var f = Matrix<double>.Build.DenseIdentity(6);
        var q = Matrix<double>.Build.Dense(6, 6);
        var q11 = _accelerationNoise * dt * dt * dt / 3;
        var q12 = _accelerationNoise * dt * dt / 2;
        var q22 = _accelerationNoise * dt;
        for (var axis = 0; axis < 3; axis++)
        {
            f[axis, axis + 3] = dt;
            q[axis, axis] = q11;
            q[axis, axis + 3] = q12;
            q[axis + 3, axis] = q12;
            q[axis + 3, axis + 3] = q22;
        }

        _x = f * _x;
        _p = (f * _p * f.Transpose()) + q;
    }

    private static double Predict(Vector<double> x, Estimation.Geometry.Vector3D a, Estimation.Geometry.Vector3D b)
    {
        var p = Vector<double>.Build.DenseOfArray([x[0], x[1], x[2]]);
        var va = Vector<double>.Build.DenseOfArray([a.X, a.Y, a.Z]);
        var vb = Vector<double>.Build.DenseOfArray([b.X, b.Y, b.Z]);
        return (p - vb).L2Norm() - (p - va).L2Norm();
    }

    private static Matrix<double> Jacobian(Vector<double> x, Estimation.Geometry.Vector3D a, Estimation.Geometry.Vector3D b)
    {
        var p = Vector<double>.Build.DenseOfArray([x[0], x[1], x[2]]);
        var va = Vector<double>.Build.DenseOfArray([a.X, a.Y, a.Z]);
        var vb = Vector<double>.Build.DenseOfArray([b.X, b.Y, b.Z]);
        var ub = (p - vb) / (p - vb).L2Norm();
        var ua = (p - va) / (p - va).L2Norm();
        var row = ub - ua;
        var h = Matrix<double>.Build.Dense(1, 6);
        h[0, 0] = row[0];
        h[0, 1] = row[1];
        h[0, 2] = row[2];
        return h;
    }
}
