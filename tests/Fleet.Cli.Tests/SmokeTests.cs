namespace Fleet.Cli.Tests;

public class SmokeTests
{
    [Fact]
    public void Assembly_Loads() => Assert.NotNull(typeof(SmokeTests).Assembly);
}
