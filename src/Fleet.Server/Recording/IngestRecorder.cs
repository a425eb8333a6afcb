using System.Collections.Concurrent;
using System.Threading.Channels;
using Fleet.Contracts.V1;
using Google.Protobuf;
using Microsoft.Extensions.Options;

namespace Fleet.Server.Recording;

/// <summary>
/// Optional raw recording of ingest, one file per site and server start:
/// <c>{RecordingDirectory}/{site}/{UTC start time}.fleetrec</c>, holding every accepted-for-processing
/// <see cref="MeasurementBatch"/> as a length-delimited protobuf message (varint length, then the message), in
/// arrival order. Writing happens on a background task fed by a bounded queue, so ingest never waits on the disk;
/// when the queue is full the batch is not recorded and <see cref="DroppedBatches"/> counts it. Files are only ever
/// appended to and every server start writes new ones, so a killed server can leave at most one torn record at the
/// end of each of its files; <see cref="RecordingReader"/> detects and skips it. The file is flushed to the operating
/// system whenever the queue runs empty, so a killed process (not a power cut) loses only batches still queued.
/// </summary>
public sealed partial class IngestRecorder : IAsyncDisposable
{
    public const string FileExtension = ".fleetrec";

    private readonly string? _directory;
    private readonly TimeProvider _time;
    private readonly ILogger<IngestRecorder> _logger;
    private readonly Channel<MeasurementBatch> _queue;
    private readonly Task _writer;
    private readonly ConcurrentDictionary<string, Stream> _files = new(StringComparer.Ordinal);
    private long _dropped;

    public IngestRecorder(IOptions<FleetServerOptions> options, TimeProvider time, ILogger<IngestRecorder> logger)
    {
        _directory = string.IsNullOrWhiteSpace(options.Value.RecordingDirectory) ? null : options.Value.RecordingDirectory;
        _time = time;
        _logger = logger;
        _queue = Channel.CreateBounded<MeasurementBatch>(new BoundedChannelOptions(4096)
        {
            FullMode = BoundedChannelFullMode.Wait,
            SingleReader = true,
        });
        _writer = _directory is null ? Task.CompletedTask : Task.Run(WriteLoopAsync);
    }

    public bool Enabled => _directory is not null;

    public long DroppedBatches => Interlocked.Read(ref _dropped);

    /// <summary>Queues a batch for recording (never blocks). Sets receive_time when the sender left it unset.</summary>
    public void Record(MeasurementBatch batch)
    {
        if (_directory is null)
        {
            return;
        }

        batch.ReceiveTime ??= Google.Protobuf.WellKnownTypes.Timestamp.FromDateTimeOffset(_time.GetUtcNow());
        if (!_queue.Writer.TryWrite(batch))
        {
            Interlocked.Increment(ref _dropped);
        }
    }

    /// <summary>Reads every batch of an intact recording (throws on a torn tail; see <see cref="RecordingReader"/> for damaged files).</summary>
    public static IEnumerable<MeasurementBatch> Read(Stream stream)
    {
        while (stream.Position < stream.Length)
        {
            yield return MeasurementBatch.Parser.ParseDelimitedFrom(stream);
        }
    }

    public async ValueTask DisposeAsync()
    {
        _queue.Writer.TryComplete();
        await _writer.ConfigureAwait(false);
        foreach (var file in _files.Values)
        {
            await file.DisposeAsync().ConfigureAwait(false);
        }
    }

    private async Task WriteLoopAsync()
    {
        var started = _time.GetUtcNow().ToString("yyyyMMdd'T'HHmmssfff'Z'", System.Globalization.CultureInfo.InvariantCulture);
        await foreach (var batch in _queue.Reader.ReadAllAsync().ConfigureAwait(false))
        {
            try
            {
                var file = _files.GetOrAdd(batch.SiteId, site =>
                {
                    var dir = Path.Combine(_directory!, site);
                    Directory.CreateDirectory(dir);
                    return CreateNewFile(dir, started);
                });
                batch.WriteDelimitedTo(file);
                if (_queue.Reader.Count == 0)
                {
                    await file.FlushAsync().ConfigureAwait(false);
                }
            }
            catch (IOException e)
            {
                Interlocked.Increment(ref _dropped);
                LogWriteFailed(_logger, e, batch.SiteId);
            }
        }
    }

    /// <summary>
    /// A file of its own (never appending behind a torn record another run left): a start time that is taken, e.g. by
    /// a server restarted within the same millisecond, gets a counter.
    /// </summary>
    private static FileStream CreateNewFile(string directory, string started)
    {
        for (var attempt = 0; ; attempt++)
        {
            var name = attempt == 0 ? started : $"{started}-{attempt}";
            try
            {
                return new FileStream(Path.Combine(directory, name + FileExtension), FileMode.CreateNew, FileAccess.Write, FileShare.Read, 1 << 16);
            }
            catch (IOException) when (attempt < 100 && File.Exists(Path.Combine(directory, name + FileExtension)))
            {
                // Taken: try the next name.
            }
        }
    }

    [LoggerMessage(1, LogLevel.Warning, "Recording of site {SiteId} failed; the batch was not recorded")]
    private static partial void LogWriteFailed(ILogger logger, Exception exception, string siteId);
}
