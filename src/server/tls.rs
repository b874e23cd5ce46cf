//! HTTPS for the service itself (`--tls-cert`, `--tls-key`): a rustls
//! server configuration from PEM files.

use std::path::Path;
use std::sync::Arc;

use anyhow::Context;
use rustls_pki_types::pem::PemObject;
use rustls_pki_types::{CertificateDer, PrivateKeyDer};
use tokio_rustls::TlsAcceptor;
use tokio_rustls::rustls::ServerConfig;

/// An acceptor for the certificate chain and key in these PEM files.
pub(super) fn acceptor(cert: &Path, key: &Path) -> anyhow::Result<TlsAcceptor> {
    let chain = CertificateDer::pem_file_iter(cert)
        .with_context(|| format!("reading the certificate {}", cert.display()))?
        .collect::<Result<Vec<_>, _>>()
        .with_context(|| format!("parsing the certificate {}", cert.display()))?;
    let key = PrivateKeyDer::from_pem_file(key)
        .with_context(|| format!("reading the private key {}", key.display()))?;
    let provider = Arc::new(tokio_rustls::rustls::crypto::ring::default_provider());
    let mut config = ServerConfig::builder_with_provider(provider)
        .with_safe_default_protocol_versions()
        .context("choosing TLS versions")?
        .with_no_client_auth()
        .with_single_cert(chain, key)
        .context("the certificate and key do not form a usable pair")?;
    config.alpn_protocols = vec![b"h2".to_vec(), b"http/1.1".to_vec()];
    Ok(TlsAcceptor::from(Arc::new(config)))
}
