namespace Fleet.Data.BiasModels;

/// <summary>
/// A bias model file is corrupt, truncated, of another format or version, or describes an inconsistent model.
/// The message names the file and what is wrong. No partially loaded model is ever returned.
/// </summary>
public sealed class BiasModelFileException : IOException
{
    public BiasModelFileException(string fileName, string problem, Exception? inner = null)
        : base($"bias model file '{fileName}': {problem}", inner)
    {
        FileName = fileName;
        Problem = problem;
    }

    /// <summary>Path or stream name of the file.</summary>
    public string FileName { get; }

    /// <summary>What is wrong, without the file name.</summary>
    public string Problem { get; }
}
