using System.Diagnostics;
using System.Net;
using System.Net.Sockets;
using Grpc.Core;
using Grpc.Health.V1;
using Grpc.Net.Client;

namespace Fleet.Server.Tests;

/// <summary>
/// The server as a separate operating-system process (<c>dotnet Fleet.Server.dll</c>), so a test can kill it with
/// SIGKILL mid-write and start another on the same data directory and ports.
/// </summary>
internal sealed class ServerProcess : IAsyncDisposable
{
    private readonly Process _process;

    private ServerProcess(Process process) => _process = process;

    public bool HasExited => _process.HasExited;

    /// <summary>Four free loopback ports: gRPC, metrics, silo, gateway.</summary>
    public static int[] FreePorts()
    {
        var listeners = Enumerable.Range(0, 4).Select(_ => new TcpListener(IPAddress.Loopback, 0)).ToList();
        listeners.ForEach(l => l.Start());
        var ports = listeners.Select(l => ((IPEndPoint)l.LocalEndpoint).Port).ToArray();
        listeners.ForEach(l => l.Stop());
        return ports;
    }

    public static Uri Address(int[] ports) => new($"http://127.0.0.1:{ports[0]}");

    public static ServerProcess Start(string dataDirectory, int[] ports, params string[] extraArguments)
    {
        var server = Path.Combine(AppContext.BaseDirectory, "Fleet.Server.dll");
        var start = new ProcessStartInfo("dotnet")
        {
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
            WorkingDirectory = AppContext.BaseDirectory,
        };
        start.ArgumentList.Add(server);
        foreach (var argument in new[]
                 {
                     $"--Fleet:Server:DataDirectory={dataDirectory}",
                     "--Fleet:Server:ListenAddress=127.0.0.1",
                     $"--Fleet:Server:GrpcPort={ports[0]}",
                     $"--Fleet:Server:MetricsPort={ports[1]}",
                     $"--Fleet:Server:SiloPort={ports[2]}",
                     $"--Fleet:Server:GatewayPort={ports[3]}",
                     "--Fleet:LiveView:Port=-1",
                     "--Fleet:Security:AllowAnonymous=true",
                     "--Logging:LogLevel:Default=Warning",
                 }.Concat(extraArguments))
        {
            start.ArgumentList.Add(argument);
        }

        var process = Process.Start(start) ?? throw new InvalidOperationException("could not start the server process");
        // Drain output so the child never blocks on a full pipe.
        process.OutputDataReceived += (_, _) => { };
        process.ErrorDataReceived += (_, _) => { };
        process.BeginOutputReadLine();
        process.BeginErrorReadLine();
        return new ServerProcess(process);
    }

    /// <summary>Polls the standard gRPC health service until it answers SERVING.</summary>
    public async Task WaitReadyAsync(Uri address, TimeSpan timeout)
    {
        using var channel = GrpcChannel.ForAddress(address);
        var health = new Health.HealthClient(channel);
        var deadline = DateTime.UtcNow + timeout;
        while (true)
        {
            if (_process.HasExited)
            {
                throw new InvalidOperationException($"the server process exited with code {_process.ExitCode}");
            }

            try
            {
                var response = await health.CheckAsync(new HealthCheckRequest(), deadline: DateTime.UtcNow.AddSeconds(2));
                if (response.Status == HealthCheckResponse.Types.ServingStatus.Serving)
                {
                    return;
                }
            }
            catch (RpcException) when (DateTime.UtcNow < deadline)
            {
                // Not listening yet.
            }

            if (DateTime.UtcNow >= deadline)
            {
                throw new TimeoutException("the server process did not become ready");
            }

            await Task.Delay(100);
        }
    }

    /// <summary>SIGKILL on Linux (Process.Kill): no shutdown code runs, buffers are not flushed.</summary>
    public async Task KillAsync()
    {
        _process.Kill(entireProcessTree: true);
        await _process.WaitForExitAsync().WaitAsync(TimeSpan.FromSeconds(30));
    }

    public async ValueTask DisposeAsync()
    {
        if (!_process.HasExited)
        {
            await KillAsync();
        }

        _process.Dispose();
    }
}
