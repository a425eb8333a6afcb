using System.Globalization;
using System.Text.Json;
using Fleet.Server.LiveView;
using OpenQA.Selenium;
using OpenQA.Selenium.Chrome;
using Xunit.Abstractions;

namespace Fleet.Server.Tests;

/// <summary>A fact that runs only where Debian's chromium and chromium-driver are installed (.ci/run installs them).</summary>
public sealed class ChromiumFactAttribute : FactAttribute
{
    public const string Browser = "/usr/bin/chromium";
    public const string Driver = "/usr/bin/chromedriver";

    public ChromiumFactAttribute()
    {
        if (!File.Exists(Browser) || !File.Exists(Driver))
        {
            Skip = $"needs {Browser} and {Driver}: apt-get install chromium chromium-driver (.ci/run installs them)";
        }
    }
}

/// <summary>
/// The live view in a real browser: headless Chromium (the outside reference: a browser engine that shares no code
/// with Fleet) loads the page from a running server fed by a simulated fleet over real gRPC, and the page's own
/// state (window.fleetView) is read through WebDriver.
/// </summary>
public sealed class LiveViewBrowserTests(ITestOutputHelper output)
{
    private const string SiteId = "harbor-point";
    private const int Robots = 24;
    private static readonly TimeSpan Patience = TimeSpan.FromSeconds(90);

    [ChromiumFact]
    public async Task LivePage_SimulatedFleet_RobotsMoveAndEllipsesRender()
    {
        var dataDirectory = ServerHarness.NewDataDirectory();
        await using var feed = new SimulatedFleetFeed(Robots, seed: 11, Path.Combine(dataDirectory, "site"));
        await using var server = await ServerHarness.StartAsync(dataDirectory, new Dictionary<string, string?>
        {
            [$"Fleet:LiveView:SiteFiles:{SiteId}"] = feed.SiteFilePath,
        });
        await feed.StartAsync(server, SiteId, speed: 2);
        var url = LiveViewEndpoints.GetAddress(server.App, SiteId)!;
        output.WriteLine($"live view at {url}");

        using var browser = StartChromium();
        browser.Navigate().GoToUrl(url);

        // Every simulated robot appears in the page with a pose and a finite 1-σ ellipse.
        await PollAsync(browser, "return window.fleetView && window.fleetView.robotsDrawn;", v => Convert.ToInt64(v, CultureInfo.InvariantCulture) >= Robots);
        var first = ReadRobots(browser);
        Assert.Equal(Robots, first.Count);
        Assert.All(first.Values, r => Assert.True(double.IsFinite(r.X) && double.IsFinite(r.Y)));

        // Robots move: a later read of the page's state has most robots elsewhere (the simulator drives them along aisles).
        Dictionary<string, RobotInPage> later = first;
        await PollAsync(browser, "return 0;", _ =>
        {
            later = ReadRobots(browser);
            return first.Count(f => later.TryGetValue(f.Key, out var l) && double.Hypot(l.X - f.Value.X, l.Y - f.Value.Y) > 0.2) >= Robots / 2;
        });
        var moved = first.Count(f => double.Hypot(later[f.Key].X - f.Value.X, later[f.Key].Y - f.Value.Y) > 0.2);
        output.WriteLine($"{moved} of {Robots} robots moved more than 0.2 m between two reads");

        // Ellipses render: the frame drew a 1-σ and a 2-σ ellipse per robot with a finite covariance, and the canvas
        // (read back as pixels by Chromium itself) is not blank.
        await PollAsync(browser, "return window.fleetView.ellipsesDrawn;", v => Convert.ToInt64(v, CultureInfo.InvariantCulture) >= 2 * Robots);
        var inkedPixels = Convert.ToInt64(((IJavaScriptExecutor)browser).ExecuteScript(
            "const c = document.getElementById('floor'); const d = c.getContext('2d').getImageData(0, 0, c.width, c.height).data;" +
            "let n = 0; for (let i = 3; i < d.length; i += 4) { if (d[i] > 0) n++; } return n;"), CultureInfo.InvariantCulture);
        Assert.True(inkedPixels > 10_000, $"canvas has only {inkedPixels} drawn pixels");

        // The plan carries the site file's racks and the anchors, and the legend states units.
        var anchorRows = Convert.ToInt64(((IJavaScriptExecutor)browser).ExecuteScript("return document.querySelectorAll('#anchor-table tbody tr').length;"), CultureInfo.InvariantCulture);
        Assert.Equal(feed.Generator.Layout.Anchors.Count, anchorRows);
        var barMax = browser.FindElement(By.Id("bar-max")).Text;
        Assert.EndsWith("m/m", barMax, StringComparison.Ordinal);

        SaveScreenshot(browser, "live-view.png");
        browser.FindElement(By.Id("magnify")).Click();
        browser.FindElement(By.Id("show-labels")).Click();
        await PollAsync(browser, "return window.fleetView.framesDrawn;", v => Convert.ToInt64(v, CultureInfo.InvariantCulture) > 0);
        SaveScreenshot(browser, "live-view-ellipses-x10.png");
        await feed.StopAsync();
    }

    private static ChromeDriver StartChromium()
    {
        var options = new ChromeOptions { BinaryLocation = ChromiumFactAttribute.Browser };
        options.AddArguments("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--window-size=1600,1250",
            "--hide-scrollbars", "--no-first-run", "--disable-extensions", "--disable-background-networking", "--disable-component-update");
        var service = ChromeDriverService.CreateDefaultService(Path.GetDirectoryName(ChromiumFactAttribute.Driver)!, Path.GetFileName(ChromiumFactAttribute.Driver));
        service.SuppressInitialDiagnosticInformation = true;
        service.HideCommandPromptWindow = true;
        return new ChromeDriver(service, options, TimeSpan.FromSeconds(60));
    }

    private void SaveScreenshot(ChromeDriver browser, string name)
    {
        var directory = Path.Combine(AppContext.BaseDirectory, "TestResults");
        Directory.CreateDirectory(directory);
        var path = Path.Combine(directory, name);
        ((ITakesScreenshot)browser).GetScreenshot().SaveAsFile(path);
        output.WriteLine($"screenshot: {path}");
    }

    private static Dictionary<string, RobotInPage> ReadRobots(ChromeDriver browser)
    {
        var json = (string?)((IJavaScriptExecutor)browser).ExecuteScript(
            "return JSON.stringify(Object.values(window.fleetView.robots).map(r => ({ id: r.id, xOrNull: r.x, yOrNull: r.y, a: r.a, b: r.b, state: r.state })));");
        var robots = JsonSerializer.Deserialize<RobotInPage[]>(json ?? "[]", new JsonSerializerOptions { PropertyNameCaseInsensitive = true }) ?? [];
        return robots.ToDictionary(r => r.Id, StringComparer.Ordinal);
    }

    /// <summary>Polls <paramref name="script"/> until <paramref name="done"/> holds or <see cref="Patience"/> passes.</summary>
    private static async Task PollAsync(ChromeDriver browser, string script, Func<object?, bool> done)
    {
        var deadline = DateTime.UtcNow + Patience;
        object? last = null;
        while (DateTime.UtcNow < deadline)
        {
            last = ((IJavaScriptExecutor)browser).ExecuteScript(script);
            if (last is not null && done(last))
            {
                return;
            }

            await Task.Delay(200);
        }

        var error = ((IJavaScriptExecutor)browser).ExecuteScript("return window.fleetView && window.fleetView.error;");
        Assert.Fail($"page never satisfied `{script}` within {Patience.TotalSeconds} s (last value {last}; page error {error})");
    }

    private sealed record RobotInPage(string Id, double? XOrNull, double? YOrNull, double? A, double? B, string? State)
    {
        public double X => XOrNull ?? double.NaN;

        public double Y => YOrNull ?? double.NaN;
    }
}
