using System.Security.Cryptography.X509Certificates;

namespace Fleet.Server.Security;

/// <summary>Loads the gRPC endpoint's certificate from <see cref="TlsOptions"/>: PKCS#12 (.pfx/.p12) or PEM.</summary>
public static class FleetTls
{
    public static X509Certificate2? Load(TlsOptions tls)
    {
        if (!tls.IsConfigured)
        {
            return null;
        }

        var path = tls.CertificatePath!;
        if (!File.Exists(path))
        {
            throw new InvalidOperationException($"{FleetSecurityOptions.SectionName}:Tls:CertificatePath: '{path}' does not exist");
        }

        try
        {
            var head = File.ReadAllText(path).TrimStart();
            if (!head.StartsWith("-----BEGIN", StringComparison.Ordinal))
            {
                return X509CertificateLoader.LoadPkcs12FromFile(path, tls.Password);
            }

            var keyPath = string.IsNullOrWhiteSpace(tls.KeyPath) ? null : tls.KeyPath;
            var certificate = string.IsNullOrEmpty(tls.Password)
                ? X509Certificate2.CreateFromPemFile(path, keyPath)
                : X509Certificate2.CreateFromEncryptedPemFile(path, tls.Password, keyPath);
            if (!certificate.HasPrivateKey)
            {
                throw new InvalidOperationException($"{FleetSecurityOptions.SectionName}:Tls: the certificate '{path}' has no private key (set KeyPath)");
            }

            return certificate;
        }
        catch (System.Security.Cryptography.CryptographicException e)
        {
            throw new InvalidOperationException($"{FleetSecurityOptions.SectionName}:Tls: cannot load '{path}': {e.Message}", e);
        }
    }
}
