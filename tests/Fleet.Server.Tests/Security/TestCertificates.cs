using System.Net;
using System.Net.Security;
using System.Security.Cryptography;
using System.Security.Cryptography.X509Certificates;

namespace Fleet.Server.Tests.Security;

/// <summary>
/// A throw-away test CA and a server certificate it signed for 127.0.0.1 and localhost, made with
/// <see cref="CertificateRequest"/>, written as PEM files; and a client-side check that trusts only that CA.
/// </summary>
public sealed class TestCertificates : IDisposable
{
    public TestCertificates(string directory)
    {
        Directory.CreateDirectory(directory);
        using var caKey = ECDsa.Create(ECCurve.NamedCurves.nistP256);
        var caRequest = new CertificateRequest("CN=Fleet Test CA", caKey, HashAlgorithmName.SHA256);
        caRequest.CertificateExtensions.Add(new X509BasicConstraintsExtension(true, false, 0, true));
        caRequest.CertificateExtensions.Add(new X509KeyUsageExtension(X509KeyUsageFlags.KeyCertSign | X509KeyUsageFlags.CrlSign, true));
        var now = DateTimeOffset.UtcNow;
        Ca = caRequest.CreateSelfSigned(now.AddDays(-1), now.AddDays(30));

        using var serverKey = ECDsa.Create(ECCurve.NamedCurves.nistP256);
        var serverRequest = new CertificateRequest("CN=localhost", serverKey, HashAlgorithmName.SHA256);
        var names = new SubjectAlternativeNameBuilder();
        names.AddIpAddress(IPAddress.Loopback);
        names.AddDnsName("localhost");
        serverRequest.CertificateExtensions.Add(names.Build());
        serverRequest.CertificateExtensions.Add(new X509BasicConstraintsExtension(false, false, 0, false));
        serverRequest.CertificateExtensions.Add(new X509EnhancedKeyUsageExtension([new Oid("1.3.6.1.5.5.7.3.1")], false)); // serverAuth
        using var signed = serverRequest.Create(Ca, now.AddDays(-1), now.AddDays(7), [1, 2, 3, 4]);
        Server = signed.CopyWithPrivateKey(serverKey);

        CaPath = Path.Combine(directory, "ca.pem");
        CertificatePath = Path.Combine(directory, "server.pem");
        KeyPath = Path.Combine(directory, "server.key");
        PfxPath = Path.Combine(directory, "server.pfx");
        File.WriteAllText(CaPath, Ca.ExportCertificatePem());
        File.WriteAllText(CertificatePath, Server.ExportCertificatePem());
        File.WriteAllText(KeyPath, serverKey.ExportPkcs8PrivateKeyPem());
        File.WriteAllBytes(PfxPath, Server.Export(X509ContentType.Pkcs12, "pfx-password"));
    }

    public X509Certificate2 Ca { get; }

    public X509Certificate2 Server { get; }

    public string CaPath { get; }

    public string CertificatePath { get; }

    public string KeyPath { get; }

    public string PfxPath { get; }

    /// <summary>
    /// A client handler that accepts the server only if its chain ends at the test CA and its name matches
    /// (SslPolicyErrors.RemoteCertificateNameMismatch is never waived).
    /// </summary>
    public SocketsHttpHandler ClientHandler() => new()
    {
        SslOptions = new SslClientAuthenticationOptions
        {
            RemoteCertificateValidationCallback = (_, certificate, _, errors) =>
            {
                if (certificate is null || (errors & ~SslPolicyErrors.RemoteCertificateChainErrors) != SslPolicyErrors.None)
                {
                    return false;
                }

                using var chain = new X509Chain();
                chain.ChainPolicy.TrustMode = X509ChainTrustMode.CustomRootTrust;
                chain.ChainPolicy.CustomTrustStore.Add(Ca);
                chain.ChainPolicy.RevocationMode = X509RevocationMode.NoCheck;
                return chain.Build(X509CertificateLoader.LoadCertificate(certificate.GetRawCertData()));
            },
        },
        EnableMultipleHttp2Connections = true,
    };

    public void Dispose()
    {
        Ca.Dispose();
        Server.Dispose();
    }
}
