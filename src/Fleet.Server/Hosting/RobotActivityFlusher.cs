using Fleet.Grains.Registry;

namespace Fleet.Server.Hosting;

/// <summary>Writes robots' last-seen marks to the registry every few seconds (see <see cref="RobotActivityLog"/>).</summary>
internal sealed partial class RobotActivityFlusher(RobotActivityLog log, ILogger<RobotActivityFlusher> logger) : BackgroundService
{
    public static readonly TimeSpan Period = TimeSpan.FromSeconds(5);

    protected override async Task ExecuteAsync(CancellationToken stoppingToken)
    {
        using var timer = new PeriodicTimer(Period);
        try
        {
            while (await timer.WaitForNextTickAsync(stoppingToken))
            {
                Flush();
            }
        }
        catch (OperationCanceledException) when (stoppingToken.IsCancellationRequested)
        {
            // Stopping: the log flushes what is left when it is disposed.
        }
    }

    private void Flush()
    {
        try
        {
            log.Flush();
        }
        catch (Exception e) when (e is System.Data.Common.DbException or IOException or TimeoutException)
        {
            LogFlushFailed(logger, e);
        }
    }

    [LoggerMessage(1, LogLevel.Warning, "Could not record when robots were last seen; will retry")]
    private static partial void LogFlushFailed(ILogger logger, Exception exception);
}
