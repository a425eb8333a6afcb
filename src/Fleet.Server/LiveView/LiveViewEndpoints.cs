using System.Net;
using System.Net.Sockets;
using System.Text;
using Fleet.Grains.Registry;
using Fleet.Server.Hosting;
using Microsoft.AspNetCore.Server.Kestrel.Core;
using Microsoft.Extensions.Options;

namespace Fleet.Server.LiveView;

/// <summary>
/// The live floor view: <c>GET /view</c> lists the sites, <c>GET /view/{site}</c> is the page, <c>/assets/*</c> its
/// script and style (embedded in this assembly: no CDN, no external traffic), <c>GET /api/view/{site}/floor</c> the
/// static plan (JSON) and <c>GET /api/view/{site}/events</c> the live server-sent events. Everything is served only
/// on the live-view port (plain HTTP/1.1; see <see cref="LiveViewOptions"/>), never on the gRPC or metrics port.
/// </summary>
public static class LiveViewEndpoints
{
    private const string ContentSecurityPolicy =
        "default-src 'none'; script-src 'self'; style-src 'self'; connect-src 'self'; img-src 'self' data:; base-uri 'none'; form-action 'none'; frame-ancestors 'none'";

    /// <summary>Reads <c>Fleet:LiveView</c>, picks a free port for 0, and adds the HTTP/1.1 listener and the view's services.</summary>
    public static WebApplicationBuilder AddFleetLiveView(this WebApplicationBuilder builder, FleetServerOptions server)
    {
        var options = builder.Configuration.GetSection(LiveViewOptions.SectionName).Get<LiveViewOptions>() ?? new LiveViewOptions();
        // A negative port disables the view, as for the metrics port.
        options.Enabled &= options.Port >= 0;
        if (options.Enabled && options.Port == 0)
        {
            options.Port = FreePort();
        }

        builder.Services.AddSingleton(Options.Create(options));
        if (!options.Enabled)
        {
            return builder;
        }

        if (options.Port > 65535)
        {
            throw new InvalidOperationException($"{LiveViewOptions.SectionName}:Port must be 0 (pick a free port), 1–65535, or negative (off), not {options.Port}");
        }

        if (!(options.UpdateRateHz > 0) || !(options.GridStepMetres > 0) || !(options.SigmaToaMetres > 0) || !(options.TrailSeconds >= 0))
        {
            throw new InvalidOperationException($"{LiveViewOptions.SectionName}: UpdateRateHz, GridStepMetres and SigmaToaMetres must be positive, TrailSeconds not negative");
        }

        builder.WebHost.ConfigureKestrel(kestrel => FleetServiceCollectionExtensions.Listen(kestrel, server.ListenAddress, options.Port, HttpProtocols.Http1));
        builder.Services.AddSingleton<LiveViewFloorPlans>();
        builder.Services.AddSingleton<LiveViewEventStream>();
        return builder;
    }

    /// <summary>Maps the view's endpoints (no-op when disabled) and logs its address once the server has started.</summary>
    public static WebApplication MapFleetLiveView(this WebApplication app)
    {
        var options = app.Services.GetRequiredService<IOptions<LiveViewOptions>>().Value;
        if (!options.Enabled)
        {
            return app;
        }

        var port = options.Port;
        var view = app.MapGroup(string.Empty).AddEndpointFilter(async (context, next) =>
        {
            var http = context.HttpContext;
            if (http.Connection.LocalPort != port)
            {
                return Results.NotFound();
            }

            http.Response.Headers.ContentSecurityPolicy = ContentSecurityPolicy;
            http.Response.Headers.XContentTypeOptions = "nosniff";
            http.Response.Headers["Referrer-Policy"] = "no-referrer";
            return await next(context);
        });

        view.MapGet("/", () => Results.Redirect("/view"));
        view.MapGet("/view", (ISiteRegistry registry) => Results.Content(SiteListPage(registry), "text/html; charset=utf-8"));
        view.MapGet("/view/{siteId}", (string siteId, ISiteRegistry registry) => registry.GetSite(siteId) is null
            ? Results.Content(NotFoundPage(siteId), "text/html; charset=utf-8", Encoding.UTF8, StatusCodes.Status404NotFound)
            : Asset("live-view.html"));
        view.MapGet("/assets/{name}", (string name) => Asset(name));
        view.MapGet("/api/view/{siteId}/floor", (string siteId, string? height, LiveViewFloorPlans plans) =>
        {
            double? tagHeight = null;
            if (!string.IsNullOrEmpty(height))
            {
                if (!double.TryParse(height, System.Globalization.NumberStyles.Float, System.Globalization.CultureInfo.InvariantCulture, out var h))
                {
                    return Results.Problem("height must be a number of metres", statusCode: StatusCodes.Status400BadRequest);
                }

                tagHeight = h;
            }

            try
            {
                var plan = plans.Get(siteId, tagHeight);
                return plan is null
                    ? Results.Problem($"site '{siteId}' does not exist", statusCode: StatusCodes.Status404NotFound)
                    : Results.Bytes(plan, "application/json");
            }
            catch (ArgumentException e)
            {
                return Results.Problem(e.Message, statusCode: StatusCodes.Status400BadRequest);
            }
        });
        view.MapGet("/api/view/{siteId}/events", async (string siteId, HttpContext context, ISiteRegistry registry, LiveViewEventStream events) =>
        {
            if (registry.GetSite(siteId) is null)
            {
                return Results.Problem($"site '{siteId}' does not exist", statusCode: StatusCodes.Status404NotFound);
            }

            await events.RunAsync(context, siteId, context.RequestAborted);
            return Results.Empty;
        });

        app.Lifetime.ApplicationStarted.Register(() =>
            app.Logger.LogInformation("Live floor view: {Address}", GetAddress(app)));
        return app;
    }

    /// <summary>
    /// Address of the live view for a browser on this machine (e.g. http://127.0.0.1:8080/view/harbor-point), or null
    /// when it is disabled. Without <paramref name="siteId"/>: the site list.
    /// </summary>
    public static Uri? GetAddress(WebApplication app, string? siteId = null)
    {
        var options = app.Services.GetRequiredService<IOptions<LiveViewOptions>>().Value;
        if (!options.Enabled)
        {
            return null;
        }

        var listen = FleetServerHost.GetOptions(app).ListenAddress;
        var host = listen is "localhost" or "*" or "0.0.0.0" or "::" ? "127.0.0.1" : listen;
        host = host.Contains(':', StringComparison.Ordinal) ? $"[{host}]" : host;
        var path = siteId is null ? "/view" : "/view/" + Uri.EscapeDataString(siteId);
        return new Uri($"http://{host}:{options.Port}{path}");
    }

    private static IResult Asset(string name)
    {
        var contentType = Path.GetExtension(name) switch
        {
            ".html" => "text/html; charset=utf-8",
            ".js" => "text/javascript; charset=utf-8",
            ".css" => "text/css; charset=utf-8",
            _ => null,
        };
        var stream = contentType is null ? null : typeof(LiveViewEndpoints).Assembly.GetManifestResourceStream("Fleet.LiveView." + name);
        return stream is null ? Results.NotFound() : Results.Stream(stream, contentType);
    }

    private static string SiteListPage(ISiteRegistry registry)
    {
        var sb = new StringBuilder();
        sb.Append("<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>Fleet live view</title>")
            .Append("<link rel=\"stylesheet\" href=\"/assets/live-view.css\"></head><body class=\"site-list\"><h1>Fleet live view</h1>");
        var sites = registry.ListSites(null, 1000);
        if (sites.Count == 0)
        {
            sb.Append("<p>No sites yet. Create one with <code>SiteService.CreateSite</code> (or run <code>fleet demo</code>).</p>");
        }
        else
        {
            sb.Append("<ul>");
            foreach (var site in sites)
            {
                var id = WebUtility.HtmlEncode(site.SiteId);
                sb.Append("<li><a href=\"/view/").Append(WebUtility.HtmlEncode(Uri.EscapeDataString(site.SiteId))).Append("\">").Append(id).Append("</a>");
                if (!string.IsNullOrWhiteSpace(site.DisplayName))
                {
                    sb.Append(" — ").Append(WebUtility.HtmlEncode(site.DisplayName));
                }

                sb.Append("</li>");
            }

            sb.Append("</ul>");
        }

        sb.Append("<p class=\"caution\">").Append(WebUtility.HtmlEncode(SafetyNotice.Text)).Append("</p></body></html>");
        return sb.ToString();
    }

    private static string NotFoundPage(string siteId) =>
        "<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>Unknown site</title><link rel=\"stylesheet\" href=\"/assets/live-view.css\"></head>" +
        $"<body class=\"site-list\"><h1>Unknown site</h1><p>There is no site '{WebUtility.HtmlEncode(siteId)}'. <a href=\"/view\">All sites</a></p></body></html>";

    private static int FreePort()
    {
        using var listener = new TcpListener(IPAddress.Loopback, 0);
        listener.Start();
        return ((IPEndPoint)listener.LocalEndpoint).Port;
    }
}
