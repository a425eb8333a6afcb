using System.Net.Security;
using System.Security.Cryptography.X509Certificates;
using Grpc.Core;
using Grpc.Core.Interceptors;
using Grpc.Net.Client;

namespace Fleet.Server.Clients;

/// <summary>
/// A client connection to a Fleet server: TLS trusting the system roots or only a given CA file (PEM), and an API key
/// sent as <c>x-api-key</c> on every call. Dispose to close the channel.
/// </summary>
public sealed class FleetClientConnection : IDisposable
{
    /// <summary>Environment variable the CLI reads the API key from when no option gives one.</summary>
    public const string ApiKeyVariable = "FLEET_API_KEY";

    private readonly GrpcChannel _channel;
    private readonly X509Certificate2? _ca;

    public FleetClientConnection(Uri address, string? apiKey = null, string? caFile = null)
    {
        var handler = new SocketsHttpHandler { EnableMultipleHttp2Connections = true };
        if (!string.IsNullOrEmpty(caFile))
        {
            _ca = X509Certificate2.CreateFromPemFile(caFile);
            var ca = _ca;
            handler.SslOptions = new SslClientAuthenticationOptions
            {
                // Only the given CA is trusted; a wrong host name is never waived.
                RemoteCertificateValidationCallback = (_, certificate, _, errors) =>
                {
                    if (certificate is null || (errors & ~SslPolicyErrors.RemoteCertificateChainErrors) != SslPolicyErrors.None)
                    {
                        return false;
                    }

                    using var chain = new X509Chain();
                    chain.ChainPolicy.TrustMode = X509ChainTrustMode.CustomRootTrust;
                    chain.ChainPolicy.CustomTrustStore.Add(ca);
                    chain.ChainPolicy.RevocationMode = X509RevocationMode.NoCheck;
                    return chain.Build(X509CertificateLoader.LoadCertificate(certificate.GetRawCertData()));
                },
            };
        }

        _channel = GrpcChannel.ForAddress(address, new GrpcChannelOptions { HttpHandler = handler });
        CallInvoker = string.IsNullOrEmpty(apiKey)
            ? _channel.CreateCallInvoker()
            : _channel.Intercept(metadata =>
            {
                metadata.Add(Security.ApiKeyAuthenticationHandler.HeaderName, apiKey);
                return metadata;
            });
    }

    /// <summary>Pass to any generated client: <c>new PoseService.PoseServiceClient(connection.CallInvoker)</c>.</summary>
    public CallInvoker CallInvoker { get; }

    public void Dispose()
    {
        _channel.Dispose();
        _ca?.Dispose();
    }
}
