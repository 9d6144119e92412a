//! TLS over real connections, with certificates made at test time (rcgen): a client that
//! trusts the server's CA is served, a plain-text client is not; with a client CA configured,
//! a client without a certificate is refused at the handshake and one with a certificate is
//! served; a reload picks up a new certificate for new connections.

use std::path::Path;
use std::sync::Arc;

use brakeledger::cli::client::{ClientTls, Connection, ServerTarget};
use brakeledger::config::TlsConfig;
use brakeledger::state::AppState;
use brakeledger::store::sled_store::SledStore;
use brakeledger::tls::TlsReloader;
use brakeledger_proto::v1 as pb;
use rcgen::{BasicConstraints, CertificateParams, CertifiedIssuer, IsCa, KeyPair};

/// A CA, and a certificate it signed for `names`, written as PEM files in `dir` with `prefix`.
struct Pki {
    ca: std::path::PathBuf,
    cert: std::path::PathBuf,
    key: std::path::PathBuf,
}

fn make_pki(dir: &Path, prefix: &str, names: &[&str]) -> Pki {
    let mut ca_params = CertificateParams::new(Vec::<String>::new()).expect("ca params");
    ca_params.is_ca = IsCa::Ca(BasicConstraints::Unconstrained);
    let ca = CertifiedIssuer::self_signed(ca_params, KeyPair::generate().expect("ca key")).expect("ca");
    let key = KeyPair::generate().expect("key");
    let leaf = CertificateParams::new(names.iter().map(|n| (*n).to_owned()).collect::<Vec<_>>()).expect("params").signed_by(&key, &ca).expect("leaf");
    let pki = Pki { ca: dir.join(format!("{prefix}-ca.pem")), cert: dir.join(format!("{prefix}-cert.pem")), key: dir.join(format!("{prefix}-key.pem")) };
    std::fs::write(&pki.ca, ca.pem()).expect("write");
    std::fs::write(&pki.cert, leaf.pem()).expect("write");
    std::fs::write(&pki.key, key.serialize_pem()).expect("write");
    pki
}

/// Starts a TLS server (open access) in this process; its address and the reloader.
async fn tls_server(config: TlsConfig) -> (std::net::SocketAddr, Arc<TlsReloader>, tempfile::TempDir) {
    let dir = tempfile::tempdir().expect("dir");
    let store = Arc::new(SledStore::open(dir.path()).expect("store"));
    let tls = Arc::new(TlsReloader::new(config).expect("tls"));
    let state = AppState::new(store, brakeledger_tests::fast_forecasts()).with_tls(Arc::clone(&tls));
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.expect("bind");
    let addr = listener.local_addr().expect("addr");
    tokio::spawn(async move {
        let _ = brakeledger::server::run(listener, state, std::future::pending()).await;
    });
    (addr, tls, dir)
}

async fn upsert(addr: std::net::SocketAddr, scheme: &str, tls: ClientTls) -> anyhow::Result<()> {
    let target = ServerTarget { url: format!("{scheme}://localhost:{}", addr.port()), token: None, tls };
    let mut connection = Connection::open(&target).await?;
    connection
        .fleet
        .upsert_fleet(pb::UpsertFleetRequest { fleet: Some(pb::Fleet { fleet_id: "north".into(), time_zone: "UTC".into(), display_name: String::new() }) })
        .await?;
    Ok(())
}

#[tokio::test]
async fn a_client_trusting_the_ca_is_served_and_plain_text_is_not() {
    let dir = tempfile::tempdir().expect("dir");
    let server_pki = make_pki(dir.path(), "server", &["localhost"]);
    let config = TlsConfig { cert_file: Some(server_pki.cert.clone()), key_file: Some(server_pki.key.clone()), client_ca_file: None };
    let (addr, tls, _data) = tls_server(config).await;
    let trusting = ClientTls { ca_file: Some(server_pki.ca.clone()), ..ClientTls::default() };
    upsert(addr, "https", trusting.clone()).await.expect("TLS client served");
    assert!(upsert(addr, "http", ClientTls::default()).await.is_err(), "plain HTTP/2 is not served on a TLS port");
    let other = make_pki(dir.path(), "other", &["localhost"]);
    assert!(upsert(addr, "https", ClientTls { ca_file: Some(other.ca.clone()), ..ClientTls::default() }).await.is_err(), "a certificate from another CA is refused");

    // Renewal: new files, a reload, and new connections see the new certificate.
    std::fs::copy(&other.cert, &server_pki.cert).expect("copy");
    std::fs::copy(&other.key, &server_pki.key).expect("copy");
    tls.reload().expect("reload");
    upsert(addr, "https", ClientTls { ca_file: Some(other.ca.clone()), ..ClientTls::default() }).await.expect("the new certificate is served");
    assert!(upsert(addr, "https", trusting).await.is_err(), "the old certificate is gone");
    // A broken file keeps the certificate in force.
    std::fs::write(&server_pki.key, "not a key").expect("write");
    assert!(tls.reload().is_err());
    upsert(addr, "https", ClientTls { ca_file: Some(other.ca), ..ClientTls::default() }).await.expect("still served after a failed reload");
}

#[tokio::test]
async fn with_a_client_ca_only_clients_with_a_certificate_are_served() {
    let dir = tempfile::tempdir().expect("dir");
    let server_pki = make_pki(dir.path(), "server", &["localhost"]);
    let client_pki = make_pki(dir.path(), "client", &["workshop-client"]);
    let config = TlsConfig { cert_file: Some(server_pki.cert.clone()), key_file: Some(server_pki.key.clone()), client_ca_file: Some(client_pki.ca.clone()) };
    let (addr, _tls, _data) = tls_server(config).await;
    let without = ClientTls { ca_file: Some(server_pki.ca.clone()), ..ClientTls::default() };
    assert!(upsert(addr, "https", without).await.is_err(), "no client certificate, no service");
    let stranger = make_pki(dir.path(), "stranger", &["someone"]);
    let wrong = ClientTls { ca_file: Some(server_pki.ca.clone()), cert_file: Some(stranger.cert), key_file: Some(stranger.key) };
    assert!(upsert(addr, "https", wrong).await.is_err(), "a certificate from another CA is refused");
    let with = ClientTls { ca_file: Some(server_pki.ca), cert_file: Some(client_pki.cert), key_file: Some(client_pki.key) };
    upsert(addr, "https", with).await.expect("client certificate accepted");
}

#[tokio::test]
async fn probes_that_cannot_speak_tls_use_the_plain_health_listener() {
    let dir = tempfile::tempdir().expect("dir");
    let server_pki = make_pki(dir.path(), "server", &["localhost"]);
    let config = TlsConfig { cert_file: Some(server_pki.cert.clone()), key_file: Some(server_pki.key.clone()), client_ca_file: None };
    // A free loopback port for the health listener.
    let health_addr = std::net::TcpListener::bind("127.0.0.1:0").expect("bind").local_addr().expect("addr");
    let serving = brakeledger::config::ServingConfig { health: brakeledger::config::HealthConfig { listen: Some(health_addr) }, ..Default::default() };
    let data = tempfile::tempdir().expect("dir");
    let store = Arc::new(SledStore::open(data.path()).expect("store"));
    let tls = Arc::new(TlsReloader::new(config).expect("tls"));
    let state = AppState::new(store, brakeledger_tests::fast_forecasts()).with_serving(serving).with_tls(tls);
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.expect("bind");
    tokio::spawn(async move {
        let _ = brakeledger::server::run(listener, state, std::future::pending()).await;
    });
    let channel = brakeledger_tests::connect(health_addr).await;
    let health = tonic_health::pb::health_client::HealthClient::new(channel.clone())
        .check(tonic_health::pb::HealthCheckRequest { service: "brakeledger.v1.FleetService".into() })
        .await
        .expect("plain-text health");
    assert_eq!(health.into_inner().status, 1, "SERVING");
    // Only health is there: the brakeledger services stay behind TLS.
    let refused = pb::fleet_service_client::FleetServiceClient::new(channel).get_fleet(pb::GetFleetRequest { fleet_id: "north".into() }).await.expect_err("not here");
    assert_eq!(refused.code(), tonic::Code::Unimplemented);
}

#[tokio::test]
async fn sighup_makes_the_running_server_process_read_renewed_files() {
    let dir = tempfile::tempdir().expect("dir");
    let first = make_pki(dir.path(), "first", &["localhost"]);
    let renewed = make_pki(dir.path(), "renewed", &["localhost"]);
    let (cert, key) = (dir.path().join("live-cert.pem"), dir.path().join("live-key.pem"));
    std::fs::copy(&first.cert, &cert).expect("copy");
    std::fs::copy(&first.key, &key).expect("copy");
    let config = dir.path().join("brakeledger.toml");
    std::fs::write(&config, format!("[tls]\ncert_file = {:?}\nkey_file = {:?}\n", cert.display().to_string(), key.display().to_string())).expect("config");
    let data = tempfile::tempdir().expect("data");
    let binary = std::path::PathBuf::from(env!("CARGO_BIN_EXE_brakeledger-test-server"));
    let server = brakeledger_tests::ServerProcess::spawn_with(&binary, data.path(), &["--config".as_ref(), config.as_os_str()]).expect("TLS server starts");
    let trusting = |pki: &Pki| ClientTls { ca_file: Some(pki.ca.clone()), ..ClientTls::default() };
    upsert(server.addr, "https", trusting(&first)).await.expect("served with the first certificate");
    assert!(upsert(server.addr, "https", trusting(&renewed)).await.is_err(), "not yet renewed");

    std::fs::copy(&renewed.cert, &cert).expect("copy");
    std::fs::copy(&renewed.key, &key).expect("copy");
    server.signal("HUP");
    // The signal is handled asynchronously: new connections see the new certificate soon after.
    let mut served = Err(anyhow::anyhow!("not tried"));
    for _ in 0..100 {
        served = upsert(server.addr, "https", trusting(&renewed)).await;
        if served.is_ok() {
            break;
        }
        tokio::time::sleep(std::time::Duration::from_millis(100)).await;
    }
    served.expect("the renewed certificate is served after SIGHUP");
    assert!(upsert(server.addr, "https", trusting(&first)).await.is_err(), "the first certificate is no longer served");
    assert!(server.terminate().success(), "SIGHUP did not stop the server; SIGTERM does, cleanly");
}
