using Fleet.Estimation.Bias;
using Fleet.Grains.Models;

namespace Fleet.Server.Models;

/// <summary>
/// Reads uploaded bias-model bytes. The bias-model file format (Fleet.Data) is not in this build yet, so every
/// upload is refused with a message saying so; robots run without bias correction until it lands.
/// </summary>
internal sealed class BiasModelFileLoader : IBiasModelLoader
{
    public ITdoaBiasModel Load(ReadOnlyMemory<byte> model) =>
        throw new NotSupportedException("this server build cannot read bias-model files yet");

    public ITdoaBiasModel CreateInstance(ITdoaBiasModel loaded) => loaded;
}
