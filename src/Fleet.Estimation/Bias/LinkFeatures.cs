using System.Runtime.CompilerServices;
using Fleet.Estimation.Anchors;
using Fleet.Estimation.Geometry;

namespace Fleet.Estimation.Bias;

/// <summary>Which pose features a link-bias model sees.</summary>
public enum LinkFeatureSet
{
    /// <summary>Tag direction in the anchor's body frame uses the anchor's surveyed orientation (the default).</summary>
    Full = 0,

    /// <summary>
    /// Ablation: the tag direction "in the anchor frame" is computed as if every anchor had identity orientation
    /// (i.e. in the site frame). Same feature count as <see cref="Full"/>; used to show what orientation buys.
    /// </summary>
    WithoutAnchorOrientation = 1,
}

/// <summary>
/// Feature vector of one anchor–tag link for the learned bias model. Allocation-free.
/// <para>Layout (<see cref="Count"/> = 7 floats, same for every <see cref="LinkFeatureSet"/>):</para>
/// <list type="number">
/// <item>[0] distance |p − a| in metres (geometric, without antenna delay);</item>
/// <item>[1..3] unit direction of the tag seen from the anchor, in the anchor body frame
/// (Rᵀ·(p − a)/|p − a|; x = boresight, z = antenna up);</item>
/// <item>[4..6] unit direction of the anchor seen from the tag, in the tag frame (robot yaw about site z only).</item>
/// </list>
/// <para>
/// Angle encoding: each direction is written as its direction cosines (cos el·cos az, cos el·sin az, sin el),
/// which is a smooth, one-to-one encoding of azimuth az and elevation el. Unlike raw angles it has no wrap at ±π
/// and no singular azimuth at the poles, and it needs no trigonometric calls on the hot path.
/// </para>
/// <para>A coincident tag and anchor (distance 0) writes zero directions rather than NaN.</para>
/// </summary>
public static class LinkFeatures
{
    /// <summary>Feature count of <see cref="LinkFeatureSet.Full"/>.</summary>
    public const int CountFull = 7;

    /// <summary>Feature count of <see cref="LinkFeatureSet.WithoutAnchorOrientation"/> (same layout, identity orientation).</summary>
    public const int CountWithoutAnchorOrientation = 7;

    /// <summary>Largest feature count over all sets; scratch buffers of this length fit any set.</summary>
    public const int Count = 7;

    /// <summary>Feature count for <paramref name="set"/>.</summary>
    public static int CountFor(LinkFeatureSet set) => set switch
    {
        LinkFeatureSet.Full => CountFull,
        LinkFeatureSet.WithoutAnchorOrientation => CountWithoutAnchorOrientation,
        _ => throw new ArgumentOutOfRangeException(nameof(set), set, "unknown link feature set"),
    };

    /// <summary>Short human-readable names of the features, in order (for reports and model headers).</summary>
    public static IReadOnlyList<string> Names { get; } =
        ["distance_m", "tag_in_anchor_x", "tag_in_anchor_y", "tag_in_anchor_z", "anchor_in_tag_x", "anchor_in_tag_y", "anchor_in_tag_z"];

    /// <summary>
    /// Writes the features of the link between anchor <paramref name="anchorIndex"/> of <paramref name="map"/> and a tag
    /// at <paramref name="tagPosition"/> (site frame, m) on a robot with yaw <paramref name="robotYaw"/> (rad, about +z).
    /// </summary>
    /// <exception cref="ArgumentException"><paramref name="destination"/> is shorter than the feature count.</exception>
    [MethodImpl(MethodImplOptions.AggressiveInlining)]
    public static void Write(AnchorMap map, int anchorIndex, in Vector3D tagPosition, double robotYaw, LinkFeatureSet set, Span<float> destination)
    {
        var anchor = map[anchorIndex];
        Write(anchor.Position, anchor.Rotation, tagPosition, robotYaw, set, destination);
    }

    /// <summary>
    /// Writes the features of one link given the anchor's position (site frame, m) and body→site rotation.
    /// See the type remarks for the layout. NaN inputs propagate to NaN features.
    /// </summary>
    public static void Write(in Vector3D anchorPosition, in Rotation3D anchorRotation, in Vector3D tagPosition, double robotYaw,
        LinkFeatureSet set, Span<float> destination)
    {
        if (destination.Length < Count)
        {
            throw new ArgumentException($"destination needs {Count} elements", nameof(destination));
        }

        var delta = tagPosition - anchorPosition;
        var distance = delta.Length;
        var inverse = distance > 0 ? 1.0 / distance : 0.0;

        // Tag seen from the anchor, in the anchor body frame (or the site frame for the ablation).
        var tagInAnchor = set == LinkFeatureSet.WithoutAnchorOrientation ? delta : anchorRotation.ApplyInverse(delta);

        // Anchor seen from the tag: −delta rotated by Rz(yaw)ᵀ.
        double c = Math.Cos(robotYaw), s = Math.Sin(robotYaw);
        var ax = -delta.X;
        var ay = -delta.Y;
        var anchorInTagX = (c * ax) + (s * ay);
        var anchorInTagY = (-s * ax) + (c * ay);
        var anchorInTagZ = -delta.Z;

        destination[0] = (float)distance;
        destination[1] = (float)(tagInAnchor.X * inverse);
        destination[2] = (float)(tagInAnchor.Y * inverse);
        destination[3] = (float)(tagInAnchor.Z * inverse);
        destination[4] = (float)(anchorInTagX * inverse);
        destination[5] = (float)(anchorInTagY * inverse);
        destination[6] = (float)(anchorInTagZ * inverse);
    }
}
