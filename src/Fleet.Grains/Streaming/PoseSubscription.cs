using System.Threading.Channels;

namespace Fleet.Grains.Streaming;

/// <summary>
/// A bounded latest-per-robot queue for one pose stream. <see cref="Offer"/> (publisher side) never waits: a newer
/// pose of a robot replaces its pending one, and when <c>capacity</c> robots are pending the oldest is evicted; both
/// count as drops. One writer loop calls <see cref="WaitAsync"/> then <see cref="Drain"/>. A per-robot rate cap
/// holds a robot's pose back until its next slot, still replacing it with newer ones meanwhile.
/// </summary>
public sealed class PoseSubscription : IDisposable
{
    private readonly PoseHub _hub;
    private readonly int _capacity;
    private readonly TimeProvider _time;
    private readonly long _minIntervalTicks;
    private readonly Lock _gate = new();
    private readonly Dictionary<string, PoseSnapshot> _pending = new(StringComparer.Ordinal);
    private readonly Queue<string> _order = new();
    private readonly Dictionary<string, long> _lastSent = new(StringComparer.Ordinal);
    private readonly Channel<byte> _signal = Channel.CreateBounded<byte>(new BoundedChannelOptions(1)
    {
        FullMode = BoundedChannelFullMode.DropWrite,
        SingleReader = true,
    });

    private long _dropped;
    private long _reportedDrops;
    private int _disposed;

    internal PoseSubscription(PoseHub hub, PoseFilter filter, int capacity, TimeProvider time)
    {
        ArgumentOutOfRangeException.ThrowIfLessThan(capacity, 1);
        _hub = hub;
        Filter = filter;
        _capacity = capacity;
        _time = time;
        _minIntervalTicks = filter.MaxRatePerRobotHz > 0
            ? (long)(time.TimestampFrequency / filter.MaxRatePerRobotHz)
            : 0;
    }

    public PoseFilter Filter { get; }

    /// <summary>Updates dropped so far (replaced or evicted before they were sent).</summary>
    public long Dropped => Interlocked.Read(ref _dropped);

    public int PendingCount
    {
        get
        {
            lock (_gate)
            {
                return _pending.Count;
            }
        }
    }

    /// <summary>Queues a pose; never blocks beyond a short lock.</summary>
    public void Offer(PoseSnapshot pose)
    {
        lock (_gate)
        {
            if (_pending.ContainsKey(pose.RobotId))
            {
                Interlocked.Increment(ref _dropped);
            }
            else
            {
                if (_pending.Count >= _capacity && _order.TryDequeue(out var oldest))
                {
                    _pending.Remove(oldest);
                    Interlocked.Increment(ref _dropped);
                }

                _order.Enqueue(pose.RobotId);
            }

            _pending[pose.RobotId] = pose;
        }

        _signal.Writer.TryWrite(0);
    }

    /// <summary>
    /// Moves up to <paramref name="max"/> sendable poses (oldest first) into <paramref name="into"/>. Returns how long
    /// until a rate-capped pose becomes sendable, or null when nothing is held back.
    /// </summary>
    public TimeSpan? Drain(List<PoseSnapshot> into, int max)
    {
        TimeSpan? wait = null;
        lock (_gate)
        {
            var now = _time.GetTimestamp();
            var n = _order.Count;
            for (var i = 0; i < n && into.Count < max; i++)
            {
                var robot = _order.Dequeue();
                if (_minIntervalTicks > 0 && _lastSent.TryGetValue(robot, out var last) && now - last < _minIntervalTicks)
                {
                    _order.Enqueue(robot);
                    var remaining = TimeSpan.FromSeconds((double)(_minIntervalTicks - (now - last)) / _time.TimestampFrequency);
                    wait = wait is null || remaining < wait ? remaining : wait;
                    continue;
                }

                into.Add(_pending[robot]);
                _pending.Remove(robot);
                if (_minIntervalTicks > 0)
                {
                    _lastSent[robot] = now;
                }
            }
        }

        if (Dropped != Interlocked.Read(ref _reportedDrops))
        {
            _hub.ReportDrops(this);
        }

        return wait;
    }

    /// <summary>Waits until something is offered, <paramref name="timeout"/> passes (null: no limit) or the token fires.</summary>
    public async ValueTask WaitAsync(TimeSpan? timeout, CancellationToken cancellationToken)
    {
        if (_signal.Reader.TryRead(out _))
        {
            return;
        }

        if (timeout is null)
        {
            await _signal.Reader.WaitToReadAsync(cancellationToken).ConfigureAwait(false);
            _signal.Reader.TryRead(out _);
            return;
        }

        using var cts = CancellationTokenSource.CreateLinkedTokenSource(cancellationToken);
        cts.CancelAfter(timeout.Value);
        try
        {
            await _signal.Reader.WaitToReadAsync(cts.Token).ConfigureAwait(false);
            _signal.Reader.TryRead(out _);
        }
        catch (OperationCanceledException) when (!cancellationToken.IsCancellationRequested)
        {
            // The rate-cap wait elapsed.
        }
    }

    internal long TakeUnreportedDrops()
    {
        var total = Dropped;
        var before = Interlocked.Exchange(ref _reportedDrops, total);
        return total - before;
    }

    public void Dispose()
    {
        if (Interlocked.Exchange(ref _disposed, 1) == 0)
        {
            _hub.Unsubscribe(this);
        }
    }
}
