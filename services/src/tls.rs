//! TLS for the gRPC listener (rustls), with certificates reloaded on SIGHUP and optional
//! client-certificate verification.
//!
//! `[tls] cert_file` and `key_file` (PEM) turn TLS on; `client_ca_file` (PEM) makes the server
//! require a client certificate signed by one of those CAs (mutual TLS). The files are read at
//! start and again by [`TlsReloader::reload`] (the server calls it on SIGHUP): a reload that
//! fails (missing file, bad PEM, key not matching) is logged and the previous certificates stay
//! in use, so a half-renewed certificate never takes the service down. Connections already
//! open keep the certificate they were accepted with; new ones get the new one.
//!
//! Handshakes run in their own tasks (bounded by [`HANDSHAKE_TIMEOUT`]), so a slow or hostile
//! client never holds up the accept loop.

use std::path::{Path, PathBuf};
use std::sync::{Arc, RwLock};
use std::time::Duration;

use tokio::net::{TcpListener, TcpStream};
use tokio_rustls::rustls;
use tokio_rustls::server::TlsStream;
use tokio_rustls::TlsAcceptor;
use tokio_stream::wrappers::ReceiverStream;

use crate::config::TlsConfig;

/// Longest a TLS handshake may take before the connection is dropped.
pub const HANDSHAKE_TIMEOUT: Duration = Duration::from_secs(10);

/// Handshaken connections waiting for the server to take them.
const ACCEPTED_QUEUE: usize = 64;

/// Why TLS could not be set up.
#[derive(Debug, thiserror::Error)]
pub enum TlsError {
    /// A file could not be read or holds no usable PEM.
    #[error("{what} {path}: {message}")]
    File {
        /// Which setting.
        what: &'static str,
        /// The file.
        path: PathBuf,
        /// What is wrong.
        message: String,
    },
    /// Only one of cert_file and key_file is set.
    #[error("[tls] needs both cert_file and key_file")]
    Incomplete,
    /// rustls refused the certificates.
    #[error("TLS configuration: {0}")]
    Rustls(#[from] rustls::Error),
    /// The client CA list could not be used.
    #[error("[tls] client_ca_file: {0}")]
    ClientVerifier(String),
}

fn file_error(what: &'static str, path: &Path, message: impl ToString) -> TlsError {
    TlsError::File { what, path: path.to_owned(), message: message.to_string() }
}

fn read_certificates(what: &'static str, path: &Path) -> Result<Vec<rustls::pki_types::CertificateDer<'static>>, TlsError> {
    use rustls::pki_types::pem::PemObject;
    let certificates = rustls::pki_types::CertificateDer::pem_file_iter(path)
        .map_err(|e| file_error(what, path, e))?
        .collect::<Result<Vec<_>, _>>()
        .map_err(|e| file_error(what, path, e))?;
    if certificates.is_empty() {
        return Err(file_error(what, path, "holds no PEM certificate"));
    }
    Ok(certificates)
}

/// Builds a rustls server configuration from the files named in `config`.
pub fn server_config(config: &TlsConfig) -> Result<Arc<rustls::ServerConfig>, TlsError> {
    use rustls::pki_types::pem::PemObject;
    let (Some(cert_file), Some(key_file)) = (&config.cert_file, &config.key_file) else {
        return Err(TlsError::Incomplete);
    };
    let chain = read_certificates("[tls] cert_file", cert_file)?;
    let key = rustls::pki_types::PrivateKeyDer::from_pem_file(key_file).map_err(|e| file_error("[tls] key_file", key_file, e))?;
    let provider = Arc::new(rustls::crypto::ring::default_provider());
    let builder = rustls::ServerConfig::builder_with_provider(Arc::clone(&provider)).with_safe_default_protocol_versions()?;
    let builder = match &config.client_ca_file {
        None => builder.with_no_client_auth(),
        Some(ca_file) => {
            let mut roots = rustls::RootCertStore::empty();
            for ca in read_certificates("[tls] client_ca_file", ca_file)? {
                roots.add(ca).map_err(|e| file_error("[tls] client_ca_file", ca_file, e))?;
            }
            let verifier = rustls::server::WebPkiClientVerifier::builder_with_provider(Arc::new(roots), provider)
                .build()
                .map_err(|e| TlsError::ClientVerifier(e.to_string()))?;
            builder.with_client_cert_verifier(verifier)
        }
    };
    let mut server = builder.with_single_cert(chain, key)?;
    // gRPC runs over HTTP/2.
    server.alpn_protocols = vec![b"h2".to_vec()];
    Ok(Arc::new(server))
}

/// The TLS configuration in force, replaced by [`TlsReloader::reload`].
pub struct TlsReloader {
    settings: TlsConfig,
    current: RwLock<Arc<rustls::ServerConfig>>,
}

impl std::fmt::Debug for TlsReloader {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("TlsReloader").field("settings", &self.settings).finish()
    }
}

impl TlsReloader {
    /// Reads the files once; fails when they cannot serve.
    pub fn new(settings: TlsConfig) -> Result<Self, TlsError> {
        let current = server_config(&settings)?;
        Ok(Self { settings, current: RwLock::new(current) })
    }

    /// The configuration new connections are accepted with.
    pub fn current(&self) -> Arc<rustls::ServerConfig> {
        Arc::clone(&self.current.read().unwrap_or_else(|poisoned| poisoned.into_inner()))
    }

    /// Reads the files again; on failure the previous configuration stays in force.
    pub fn reload(&self) -> Result<(), TlsError> {
        let fresh = server_config(&self.settings)?;
        *self.current.write().unwrap_or_else(|poisoned| poisoned.into_inner()) = fresh;
        Ok(())
    }
}

/// Accepts TCP connections on `listener` and yields them once their TLS handshake is done.
pub fn incoming(listener: TcpListener, tls: Arc<TlsReloader>) -> ReceiverStream<Result<TlsStream<TcpStream>, std::io::Error>> {
    let (accepted, stream) = tokio::sync::mpsc::channel(ACCEPTED_QUEUE);
    tokio::spawn(async move {
        loop {
            let (tcp, peer) = tokio::select! {
                _ = accepted.closed() => return,
                next = listener.accept() => match next {
                    Ok(connection) => connection,
                    Err(error) => {
                        // Out of file descriptors and the like: wait a moment, keep serving.
                        tracing::warn!(%error, "accepting a connection failed");
                        tokio::time::sleep(Duration::from_millis(50)).await;
                        continue;
                    }
                },
            };
            let _ = tcp.set_nodelay(true);
            let acceptor = TlsAcceptor::from(tls.current());
            let accepted = accepted.clone();
            tokio::spawn(async move {
                match tokio::time::timeout(HANDSHAKE_TIMEOUT, acceptor.accept(tcp)).await {
                    Ok(Ok(stream)) => {
                        let _ = accepted.send(Ok(stream)).await;
                    }
                    Ok(Err(error)) => tracing::info!(%peer, %error, "TLS handshake refused"),
                    Err(_) => tracing::info!(%peer, "TLS handshake timed out"),
                }
            });
        }
    });
    ReceiverStream::new(stream)
}
