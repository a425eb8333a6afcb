using Fleet.Contracts.V1;
using Fleet.Server;
using Fleet.Server.Clients;
using Fleet.Server.Security;
using Microsoft.Extensions.Configuration;

namespace Fleet.Cli.Tests;

/// <summary>`fleet serve` refuses to run open; `fleet audit` reads a secured server's audit log with an API key.</summary>
[Collection(CliCollection.Name)]
public sealed class SecuredServerCommandTests
{
    [Fact]
    public void Serve_NoAuthenticationConfigured_ExitsWithTheSecureByDefaultMessage()
    {
        using var folder = new TempFolder();

        var (code, _, error) = CliRunner.Run("serve", $"--Fleet:Server:DataDirectory={folder.Path}");

        Assert.Equal(2, code);
        Assert.Contains("refuses to start without authentication", error, StringComparison.Ordinal);
        Assert.Contains("--insecure-no-auth", error, StringComparison.Ordinal);
    }

    [Fact]
    public async Task Audit_AdminKey_PrintsTheChange_NoKeyIsUnauthenticated()
    {
        using var folder = new TempFolder();
        const string key = "cli-admin-key";
        await using var app = await FleetServerHost.StartAsync([], builder => builder.Configuration.AddInMemoryCollection(new Dictionary<string, string?>
        {
            ["Fleet:Server:DataDirectory"] = folder.Path,
            ["Fleet:Server:ListenAddress"] = "127.0.0.1",
            ["Fleet:Server:GrpcPort"] = "0",
            ["Fleet:Server:MetricsPort"] = "-1",
            ["Fleet:Server:SiloPort"] = "0",
            ["Fleet:Server:GatewayPort"] = "0",
            ["Logging:LogLevel:Default"] = "Warning",
            ["Fleet:Security:ApiKeys:0:Name"] = "commissioning",
            ["Fleet:Security:ApiKeys:0:Sha256"] = ApiKeyTable.Hash(key),
            ["Fleet:Security:ApiKeys:0:Grants:0"] = "admin:*",
        })).WaitAsync(TimeSpan.FromSeconds(90));
        var address = FleetServerHost.GetGrpcAddress(app);
        using (var connection = new FleetClientConnection(address, key))
        {
            await new SiteService.SiteServiceClient(connection.CallInvoker).CreateSiteAsync(new CreateSiteRequest { SiteId = "cli-audit" }, deadline: DateTime.UtcNow.AddSeconds(30));
        }

        var (code, output, auditError) = await Task.Run(() => CliRunner.Run("audit", "--server", address.ToString(), "--api-key", key));
        var (denied, _, error) = await Task.Run(() => CliRunner.Run("audit", "--server", address.ToString()));
        await app.StopAsync();

        Assert.True(code == 0, auditError);
        Assert.Contains("cli-audit", output, StringComparison.Ordinal);
        Assert.Contains("api-key:commissioning", output, StringComparison.Ordinal);
        Assert.Contains("create-site", output, StringComparison.Ordinal);
        Assert.Equal(2, denied);
        Assert.Contains("Unauthenticated", error, StringComparison.Ordinal);
    }
}
