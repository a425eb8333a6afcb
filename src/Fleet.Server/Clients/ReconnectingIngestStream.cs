using System.Diagnostics;
using System.Threading.Channels;
using Fleet.Contracts.V1;
using Grpc.Core;

namespace Fleet.Server.Clients;

/// <summary>
/// A client's ingest stream that survives server restarts and broken connections. Batches are sent on one
/// <c>StreamMeasurements</c> call and kept until the server acknowledges them (matched by <c>batch_id</c>, which must be
/// unique among unacknowledged batches). When the call fails with a transient status, it reconnects after the
/// <see cref="IngestRetryPolicy"/> backoff and re-sends every unacknowledged batch in the original order before
/// anything new, so no acknowledged-or-pending batch is lost. Delivery is at least once: a batch the server processed
/// but whose acknowledgement was lost in the failure is sent again (the robot's filter rejects most of a repeated
/// batch as too late). At most <c>maxUnacknowledged</c> batches are in flight; <see cref="SendAsync"/> waits beyond that.
/// A non-transient status (e.g. INVALID_ARGUMENT) faults the stream: the next call throws it.
/// </summary>
public sealed class ReconnectingIngestStream : IAsyncDisposable
{
    private readonly IngestService.IngestServiceClient _client;
    private readonly IngestRetryPolicy _policy;
    private readonly Action<BatchAck>? _onAck;
    private readonly SemaphoreSlim _window;
    private readonly Lock _gate = new();
    private readonly LinkedList<Pending> _unacked = new();
    private readonly Dictionary<ulong, LinkedListNode<Pending>> _byId = [];
    private readonly Channel<Pending> _outgoing = Channel.CreateUnbounded<Pending>(new UnboundedChannelOptions { SingleReader = true });
    private readonly CancellationTokenSource _stop = new();
    private readonly Random _random;
    private readonly Task _loop;
    private TaskCompletionSource? _drained;
    private Exception? _fault;
    private long _nextSequence;
    private long _sent;
    private long _acknowledged;
    private long _resent;
    private long _reconnects;

    public ReconnectingIngestStream(IngestService.IngestServiceClient client, IngestRetryPolicy? policy = null, int maxUnacknowledged = 64, Action<BatchAck>? onAck = null, int? seed = null)
    {
        ArgumentNullException.ThrowIfNull(client);
        ArgumentOutOfRangeException.ThrowIfLessThan(maxUnacknowledged, 1);
        _client = client;
        _policy = policy ?? new IngestRetryPolicy();
        _onAck = onAck;
        _window = new SemaphoreSlim(maxUnacknowledged, maxUnacknowledged);
        _random = seed is { } s ? new Random(s) : Random.Shared;
        _loop = Task.Run(RunAsync);
    }

    /// <summary>Distinct batches handed to <see cref="SendAsync"/>.</summary>
    public long Sent => Interlocked.Read(ref _sent);

    /// <summary>Batches the server acknowledged (each counted once).</summary>
    public long Acknowledged => Interlocked.Read(ref _acknowledged);

    /// <summary>Batches sent again on a new stream after a failure.</summary>
    public long Resent => Interlocked.Read(ref _resent);

    /// <summary>Streams that failed and were replaced.</summary>
    public long Reconnects => Interlocked.Read(ref _reconnects);

    public int Unacknowledged
    {
        get
        {
            lock (_gate)
            {
                return _unacked.Count;
            }
        }
    }

    /// <summary>Queues <paramref name="batch"/> (not to be changed afterwards); waits while the in-flight window is full.</summary>
    public async Task SendAsync(MeasurementBatch batch, CancellationToken cancellationToken = default)
    {
        ArgumentNullException.ThrowIfNull(batch);
        ThrowIfFaulted();
        using var linked = CancellationTokenSource.CreateLinkedTokenSource(cancellationToken, _stop.Token);
        await _window.WaitAsync(linked.Token).ConfigureAwait(false);
        lock (_gate)
        {
            if (_fault is not null || _byId.ContainsKey(batch.BatchId))
            {
                _window.Release();
                ThrowIfFaulted();
                throw new ArgumentException($"batch_id {batch.BatchId} is still waiting for its acknowledgement", nameof(batch));
            }

            var pending = new Pending(batch, ++_nextSequence);
            _byId.Add(batch.BatchId, _unacked.AddLast(pending));
            _outgoing.Writer.TryWrite(pending);
        }

        Interlocked.Increment(ref _sent);
    }

    /// <summary>Waits until every batch sent so far is acknowledged.</summary>
    public async Task FlushAsync(CancellationToken cancellationToken = default)
    {
        while (true)
        {
            Task wait;
            lock (_gate)
            {
                ThrowIfFaulted();
                if (_unacked.Count == 0)
                {
                    return;
                }

                _drained ??= new TaskCompletionSource(TaskCreationOptions.RunContinuationsAsynchronously);
                wait = _drained.Task;
            }

            await wait.WaitAsync(cancellationToken).ConfigureAwait(false);
        }
    }

    /// <summary>Stops at once; batches not yet acknowledged are abandoned (call <see cref="FlushAsync"/> first).</summary>
    public async ValueTask DisposeAsync()
    {
        _outgoing.Writer.TryComplete();
        await _stop.CancelAsync().ConfigureAwait(false);
        try
        {
            await _loop.ConfigureAwait(false);
        }
        catch (OperationCanceledException)
        {
            // Stopped.
        }

        _stop.Dispose();
        _window.Dispose();
    }

    private void ThrowIfFaulted()
    {
        if (_fault is { } fault)
        {
            throw new InvalidOperationException("the ingest stream failed: " + fault.Message, fault);
        }
    }

    private async Task RunAsync()
    {
        var failures = 0;
        var lastProgress = Stopwatch.GetTimestamp();
        while (!_stop.IsCancellationRequested)
        {
            using var attempt = CancellationTokenSource.CreateLinkedTokenSource(_stop.Token);
            using var call = _client.StreamMeasurements(cancellationToken: attempt.Token);
            var reader = ReadAcksAsync(call.ResponseStream, attempt.Token, () =>
            {
                failures = 0;
                lastProgress = Stopwatch.GetTimestamp();
            });
            var writer = WriteAsync(call.RequestStream, attempt.Token);
            await Task.WhenAny(reader, writer).ConfigureAwait(false);
            await attempt.CancelAsync().ConfigureAwait(false);
            var status = await OutcomeAsync(reader, writer).ConfigureAwait(false);
            if (_stop.IsCancellationRequested)
            {
                return;
            }

            if (status is { } code && !_policy.RetryableStatusCodes.Contains(code.StatusCode))
            {
                Fault(code);
                return;
            }

            Interlocked.Increment(ref _reconnects);
            if (Unacknowledged > 0 && Stopwatch.GetElapsedTime(lastProgress) > _policy.MaxOutage)
            {
                Fault(new TimeoutException($"no acknowledgement for {_policy.MaxOutage.TotalSeconds:F0} s"));
                return;
            }

            try
            {
                await Task.Delay(_policy.Backoff(failures++, _random), _stop.Token).ConfigureAwait(false);
            }
            catch (OperationCanceledException)
            {
                return;
            }
        }
    }

    /// <summary>
    /// Why a stream ended: the server's status when it sent a final one (null when only the connection broke, which
    /// is always worth another attempt).
    /// </summary>
    private static async Task<RpcException?> OutcomeAsync(Task reader, Task writer)
    {
        RpcException? status = null;
        foreach (var task in new[] { reader, writer })
        {
            try
            {
                await task.ConfigureAwait(false);
            }
            catch (RpcException e) when (e.StatusCode != StatusCode.Cancelled)
            {
                status ??= e;
            }
            catch (Exception e) when (e is RpcException or OperationCanceledException or IOException or InvalidOperationException or HttpRequestException or ObjectDisposedException)
            {
                // The connection broke or the other half was cancelled.
            }
        }

        return status;
    }

    private async Task ReadAcksAsync(IAsyncStreamReader<StreamMeasurementsResponse> responses, CancellationToken cancellationToken, Action progress)
    {
        while (await responses.MoveNext(cancellationToken).ConfigureAwait(false))
        {
            if (responses.Current.Ack is not { } ack)
            {
                continue;
            }

            bool known;
            lock (_gate)
            {
                known = _byId.Remove(ack.BatchId, out var node);
                if (known)
                {
                    _unacked.Remove(node!);
                    if (_unacked.Count == 0 && _drained is { } drained)
                    {
                        _drained = null;
                        drained.TrySetResult();
                    }
                }
            }

            if (known)
            {
                _window.Release();
                Interlocked.Increment(ref _acknowledged);
                progress();
                _onAck?.Invoke(ack);
            }
        }

        // The server ended the stream without a status error: reconnect like after a broken connection.
        throw new IOException("the server ended the ingest stream");
    }

    private async Task WriteAsync(IClientStreamWriter<StreamMeasurementsRequest> requests, CancellationToken cancellationToken)
    {
        List<Pending> resend;
        lock (_gate)
        {
            resend = [.. _unacked];
        }

        long highest = 0;
        foreach (var pending in resend)
        {
            await requests.WriteAsync(new StreamMeasurementsRequest { Batch = pending.Batch }, cancellationToken).ConfigureAwait(false);
            if (pending.Writes++ > 0)
            {
                Interlocked.Increment(ref _resent);
            }

            highest = pending.Sequence;
        }

        await foreach (var pending in _outgoing.Reader.ReadAllAsync(cancellationToken).ConfigureAwait(false))
        {
            // Already re-sent above from the unacknowledged list.
            if (pending.Sequence <= highest)
            {
                continue;
            }

            lock (_gate)
            {
                if (!_byId.ContainsKey(pending.Batch.BatchId))
                {
                    continue;
                }
            }

            await requests.WriteAsync(new StreamMeasurementsRequest { Batch = pending.Batch }, cancellationToken).ConfigureAwait(false);
            pending.Writes++;
            highest = pending.Sequence;
        }

        await requests.CompleteAsync().ConfigureAwait(false);
        await Task.Delay(Timeout.Infinite, cancellationToken).ConfigureAwait(false);
    }

    private void Fault(Exception fault)
    {
        lock (_gate)
        {
            _fault = fault;
            _drained?.TrySetException(new InvalidOperationException("the ingest stream failed: " + fault.Message, fault));
            _drained = null;
        }
    }

    private sealed class Pending(MeasurementBatch batch, long sequence)
    {
        public MeasurementBatch Batch { get; } = batch;

        public long Sequence { get; } = sequence;

        public int Writes { get; set; }
    }
}
