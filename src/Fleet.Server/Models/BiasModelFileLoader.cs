using Fleet.Data.BiasModels;
using Fleet.Estimation.Bias;
using Fleet.Grains.Models;

namespace Fleet.Server.Models;

/// <summary>Reads uploaded bias models in the Fleet bias-model file format (<see cref="BiasModelFile"/>).</summary>
internal sealed class BiasModelFileLoader : IBiasModelLoader
{
    public ITdoaBiasModel Load(ReadOnlyMemory<byte> model)
    {
        try
        {
            return BiasModelFile.Parse(model.Span, "uploaded model").Model;
        }
        catch (BiasModelFileException e)
        {
            throw new InvalidDataException(e.Message, e);
        }
    }

    /// <summary>Bias networks own scratch buffers: each robot gets a clone sharing the weights.</summary>
    public ITdoaBiasModel CreateInstance(ITdoaBiasModel loaded) => loaded is BiasNetwork network ? network.Clone() : loaded;
}
