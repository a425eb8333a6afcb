using Fleet.Grains;
using Fleet.Grains.Registry;
using Microsoft.Extensions.Options;

namespace Fleet.Server.Hosting;

/// <summary>
/// Writes robots' last-seen marks and pose checkpoints to the registry every
/// <see cref="FleetGrainOptions.RegistryFlushInterval"/> (see <see cref="RobotActivityLog"/>).
/// </summary>
internal sealed partial class RobotActivityFlusher(RobotActivityLog log, IOptions<FleetGrainOptions> options, ILogger<RobotActivityFlusher> logger) : BackgroundService
{
    protected override async Task ExecuteAsync(CancellationToken stoppingToken)
    {
        using var timer = new PeriodicTimer(options.Value.RegistryFlushInterval);
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
