using System.CommandLine;
using System.Globalization;
using Fleet.Contracts.V1;
using Grpc.Core;

namespace Fleet.Cli.Commands;

/// <summary>`fleet audit`: prints a running server's audit log of admin changes (newest first), through ListAuditEntries.</summary>
internal static class AuditCommand
{
    public static Command Create()
    {
        var server = WatchCommand.ServerOption();
        var site = new Option<string?>("--site") { Description = "Only this site (default: every site the key administers)" };
        var limit = new Option<int>("--limit") { Description = "Print at most this many entries", DefaultValueFactory = _ => 100 };
        var (apiKey, caFile) = WatchCommand.ConnectionOptions();
        var command = new Command("audit", "Print a running server's audit log: who changed which site's map, models or robots, and when (admin role).")
        {
            server, site, limit, apiKey, caFile,
        };
        command.SetAction(async (parse, cancellationToken) =>
        {
            using var connection = WatchCommand.Connect(parse, server, apiKey, caFile);
            var client = new AuditService.AuditServiceClient(connection.CallInvoker);
            var remaining = parse.GetValue(limit);
            var token = string.Empty;
            try
            {
                do
                {
                    var page = await client.ListAuditEntriesAsync(
                        new ListAuditEntriesRequest { SiteId = parse.GetValue(site) ?? string.Empty, PageSize = (uint)Math.Clamp(remaining, 1, 1000), PageToken = token },
                        deadline: DateTime.UtcNow.AddSeconds(30), cancellationToken: cancellationToken);
                    foreach (var e in page.Entries.Take(remaining))
                    {
                        Console.WriteLine(string.Create(CultureInfo.InvariantCulture,
                            $"{e.Sequence,6} {e.ChangeTime.ToDateTimeOffset():yyyy-MM-dd HH:mm:ss}Z {e.SiteId,-16} {e.Principal,-28} {Name(e.Action),-20} {e.Details}"));
                        remaining--;
                    }

                    token = page.NextPageToken;
                }
                while (remaining > 0 && token.Length > 0);
            }
            catch (RpcException e) when (e.StatusCode != StatusCode.Cancelled)
            {
                Console.Error.WriteLine($"fleet: {e.Status.Detail} ({e.StatusCode})");
                return 2;
            }

            return 0;
        });
        return command;
    }

    private static string Name(AuditAction action) => action switch
    {
        AuditAction.CreateSite => "create-site",
        AuditAction.PutAnchorMap => "put-anchor-map",
        AuditAction.UploadBiasModel => "upload-bias-model",
        AuditAction.ActivateBiasModel => "activate-bias-model",
        AuditAction.RollBackBiasModel => "roll-back-bias-model",
        AuditAction.PutRobot => "put-robot",
        _ => "?",
    };
}
