using Fleet.Estimation.Bias;

namespace Fleet.Grains.Models;

/// <summary>Turns stored bias-model bytes into a model. Registered by the host.</summary>
public interface IBiasModelLoader
{
    /// <summary>Parses <paramref name="model"/>; throws <see cref="InvalidDataException"/> naming the problem when it is not a model.</summary>
    ITdoaBiasModel Load(ReadOnlyMemory<byte> model);

    /// <summary>
    /// An instance for one robot filter. Models that own scratch buffers are not thread-safe, and robot grains run
    /// concurrently, so each robot gets its own instance sharing the loaded weights.
    /// </summary>
    ITdoaBiasModel CreateInstance(ITdoaBiasModel loaded);
}
