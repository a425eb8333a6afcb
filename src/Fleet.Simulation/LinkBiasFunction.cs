using Fleet.Estimation.Anchors;
using Fleet.Estimation.Bias;
using Fleet.Estimation.Geometry;

namespace Fleet.Simulation;

/// <summary>
/// The simulator's ground-truth line-of-sight ranging bias of one anchor–tag link (metres, added to the true
/// distance), as produced by antenna group delay that varies with direction. Shared by every anchor and tag
/// (one chip and antenna model), so it is learnable from the geometry alone:
/// <list type="bullet">
/// <item>direction of the tag in the anchor's body frame (R = Rz·Ry·Rx of the anchor's yaw, pitch, roll; +x boresight),</item>
/// <item>direction of the anchor in the tag's frame (the tag is level and turns with the robot's yaw),</item>
/// <item>the distance.</item>
/// </list>
/// The raw score is a fixed sum of low-order real harmonics of each direction. Written with the unit vector
/// (x, y, z) = (cos el·cos az, cos el·sin az, sin el), an azimuth harmonic of order m carries cosᵐ(el), which keeps the
/// function smooth at the poles. The bias is <see cref="AmplitudeMetres"/>·tanh(score), so |bias| &lt; amplitude.
/// Evaluation does not allocate.
/// </summary>
public sealed class LinkBiasFunction : ITdoaBiasModel
{
    /// <summary>Default amplitude bound (metres).</summary>
    public const double DefaultAmplitudeMetres = 0.3;

    public LinkBiasFunction(double amplitudeMetres = DefaultAmplitudeMetres)
    {
        if (!double.IsFinite(amplitudeMetres) || amplitudeMetres < 0)
        {
            throw new ArgumentOutOfRangeException(nameof(amplitudeMetres), amplitudeMetres, "amplitude must be finite and ≥ 0");
        }

        AmplitudeMetres = amplitudeMetres;
    }

    /// <summary>Upper bound on |bias| (metres). Zero disables the bias.</summary>
    public double AmplitudeMetres { get; }

    /// <summary>
    /// Bias (metres) of the range from <paramref name="anchor"/> to a tag at <paramref name="tagPosition"/> (site
    /// frame, m) on a robot with yaw <paramref name="robotYaw"/> (rad). Returns 0 when the tag sits on the anchor.
    /// </summary>
    public double Evaluate(Anchor anchor, Vector3D tagPosition, double robotYaw)
    {
        var toTag = tagPosition - anchor.Position;
        var distance = toTag.Length;
        if (!(distance > 1e-9) || AmplitudeMetres == 0)
        {
            return 0.0;
        }

        var inAnchor = anchor.Rotation.ApplyInverse(toTag / distance);

        // The anchor seen from the tag, in the robot's level body frame (x forward, z up).
        double c = Math.Cos(robotYaw), s = Math.Sin(robotYaw);
        var toAnchor = -toTag / distance;
        var tx = (c * toAnchor.X) + (s * toAnchor.Y);
        var ty = (-s * toAnchor.X) + (c * toAnchor.Y);
        var tz = toAnchor.Z;

        return AmplitudeMetres * Math.Tanh(Score(inAnchor.X, inAnchor.Y, inAnchor.Z, tx, ty, tz, distance));
    }

    /// <summary>Bias (metres) of ddiff = |p − b| − |p − a|: bias(b) − bias(a).</summary>
    public double EvaluateTdoa(Anchor anchorA, Anchor anchorB, Vector3D tagPosition, double robotYaw) =>
        Evaluate(anchorB, tagPosition, robotYaw) - Evaluate(anchorA, tagPosition, robotYaw);

    /// <inheritdoc/>
    public double PredictTdoaBias(AnchorMap map, int anchorA, int anchorB, in Vector3D tagPosition, double robotYaw) =>
        EvaluateTdoa(map[anchorA], map[anchorB], tagPosition, robotYaw);

    // Fixed coefficients, chosen once: a few tenths each so that typical |bias| is 0.1–0.2 m at amplitude 0.3 m.
    private static double Score(double ax, double ay, double az, double tx, double ty, double tz, double distance)
    {
        var anchorTerm =
            (0.30 * ay)                        // sin az · cos el: lopsided pattern
            + (0.20 * ((ax * ax) - (ay * ay))) // cos 2az · cos² el
            + (0.15 * 2 * ax * ay)             // sin 2az · cos² el
            + (0.20 * az)                      // sin el
            + (0.20 * (1 - ax));               // grows off boresight
        var tagTerm =
            (0.25 * tx)
            + (0.15 * ty)
            + (0.10 * ((tx * tx) - (ty * ty)))
            + (0.15 * tz);
        var distanceTerm = 0.10 * Math.Tanh((distance - 15.0) / 10.0);
        return anchorTerm + tagTerm + distanceTerm;
    }
}
