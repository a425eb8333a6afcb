using Fleet.Grains.Registry;

namespace Fleet.Server.Cluster;

/// <summary>Writes robots' last poses to the registry about once a second (see <see cref="RobotPoseLog"/>), and what is left at shutdown.</summary>
internal sealed partial class RobotPoseFlusher(RobotPoseLog log, ILogger<RobotPoseFlusher> logger) : BackgroundService
{
    public static readonly TimeSpan Period = TimeSpan.FromSeconds(1);

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
            // Stopping: flushed below.
        }
    }

    public override async Task StopAsync(CancellationToken cancellationToken)
    {
        await base.StopAsync(cancellationToken);
        Flush();
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

    [LoggerMessage(1, LogLevel.Warning, "Could not save robots' last poses; will retry")]
    private static partial void LogFlushFailed(ILogger logger, Exception exception);
}
