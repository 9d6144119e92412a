//! The client side of a connection: one [`Connection`] to a brakeledger server holding a client
//! per service, and [`explain`], which turns a gRPC status (with its field violations) into an
//! error a person can act on.

use anyhow::Context;
use brakeledger_proto::v1 as pb;
use tonic::metadata::{Ascii, MetadataValue};
use tonic::service::interceptor::InterceptedService;
use tonic::service::Interceptor;
use tonic::transport::{Channel, Endpoint};
use tonic_types::StatusExt;

/// Where client subcommands connect, and the bearer token they present (if any).
#[derive(Clone, PartialEq, Eq)]
pub struct ServerTarget {
    /// Server URL, e.g. `http://127.0.0.1:50051` (or `https://` for a TLS server).
    pub url: String,
    /// Bearer token for servers that require one.
    pub token: Option<String>,
    /// TLS settings for `https://` servers.
    pub tls: ClientTls,
}

/// How a client checks a TLS server and proves itself to one that asks.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ClientTls {
    /// PEM CA certificate(s) to trust for the server; default: the public web PKI roots.
    pub ca_file: Option<std::path::PathBuf>,
    /// PEM client certificate, for servers that require one.
    pub cert_file: Option<std::path::PathBuf>,
    /// PEM key of the client certificate.
    pub key_file: Option<std::path::PathBuf>,
}

impl ClientTls {
    /// The tonic TLS settings for a server named `domain`.
    fn tonic_config(&self, domain: &str) -> anyhow::Result<tonic::transport::ClientTlsConfig> {
        let read = |path: &std::path::Path| std::fs::read(path).with_context(|| format!("reading {}", path.display()));
        let mut config = tonic::transport::ClientTlsConfig::new().domain_name(domain);
        config = match &self.ca_file {
            Some(ca) => config.ca_certificate(tonic::transport::Certificate::from_pem(read(ca)?)),
            None => config.with_webpki_roots(),
        };
        match (&self.cert_file, &self.key_file) {
            (Some(cert), Some(key)) => Ok(config.identity(tonic::transport::Identity::from_pem(read(cert)?, read(key)?))),
            (None, None) => Ok(config),
            _ => anyhow::bail!("--client-cert and --client-key go together"),
        }
    }
}

impl std::fmt::Debug for ServerTarget {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        // Never print the token itself.
        f.debug_struct("ServerTarget").field("url", &self.url).field("token", &self.token.as_ref().map(|_| "…")).finish()
    }
}

impl ServerTarget {
    /// A server that needs no token.
    pub fn open(url: impl Into<String>) -> Self {
        Self { url: url.into(), token: None, tls: ClientTls::default() }
    }
}

/// Adds `authorization: Bearer <token>` to every call when a token is set.
#[derive(Clone, Default)]
pub struct BearerToken(Option<MetadataValue<Ascii>>);

impl Interceptor for BearerToken {
    fn call(&mut self, mut request: tonic::Request<()>) -> Result<tonic::Request<()>, tonic::Status> {
        if let Some(value) = &self.0 {
            request.metadata_mut().insert("authorization", value.clone());
        }
        Ok(request)
    }
}

impl std::fmt::Debug for Connection {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("Connection { .. }")
    }
}

/// A channel whose calls carry the bearer token.
pub type AuthChannel = InterceptedService<Channel, BearerToken>;

/// Clients of every brakeledger service over one channel.
#[derive(Clone)]
pub struct Connection {
    /// FleetService.
    pub fleet: pb::fleet_service_client::FleetServiceClient<AuthChannel>,
    /// TelemetryService.
    pub telemetry: pb::telemetry_service_client::TelemetryServiceClient<AuthChannel>,
    /// MaintenanceService.
    pub maintenance: pb::maintenance_service_client::MaintenanceServiceClient<AuthChannel>,
    /// ForecastService.
    pub forecast: pb::forecast_service_client::ForecastServiceClient<AuthChannel>,
    /// AccessService.
    pub access: pb::access_service_client::AccessServiceClient<AuthChannel>,
    /// BackupService.
    pub backup: pb::backup_service_client::BackupServiceClient<AuthChannel>,
}

impl Connection {
    /// Connects to `target` (a URL such as `http://127.0.0.1:50051`, and a token if set).
    pub async fn open(target: &ServerTarget) -> anyhow::Result<Self> {
        let server = target.url.as_str();
        let token = match &target.token {
            Some(token) => Some(
                format!("Bearer {token}").parse::<MetadataValue<Ascii>>().context("the token has characters a header cannot carry")?,
            ),
            None => None,
        };
        // A bare host:port (no scheme) means plain HTTP/2, as the default does.
        let url = if server.contains("://") { server.to_owned() } else { format!("http://{server}") };
        let mut endpoint = Endpoint::from_shared(url)
            .with_context(|| format!("'{server}' is not a server URL (expected e.g. http://127.0.0.1:50051 or 127.0.0.1:50051)"))?
            .connect_timeout(std::time::Duration::from_secs(10));
        if endpoint.uri().scheme_str() == Some("https") {
            let domain = endpoint.uri().host().unwrap_or("localhost").to_owned();
            endpoint = endpoint.tls_config(target.tls.tonic_config(&domain)?).context("TLS settings")?;
        }
        let channel = endpoint
            .connect()
            .await
            .with_context(|| format!("cannot connect to the brakeledger server at {server} (is it running? see --server)"))?;
        Ok(Self::over(channel, BearerToken(token)))
    }

    /// The vehicle, when it can be read (used only to name parts: pad or lining, rotor or
    /// drum; a failure leaves the generic names).
    pub async fn vehicle_if_any(&mut self, fleet_id: &str, vehicle_id: &str) -> Option<pb::Vehicle> {
        self.fleet
            .get_vehicle(pb::GetVehicleRequest { fleet_id: fleet_id.to_owned(), vehicle_id: vehicle_id.to_owned() })
            .await
            .ok()
            .and_then(|r| r.into_inner().vehicle)
    }

    /// Clients over an existing channel.
    pub fn over(channel: Channel, token: BearerToken) -> Self {
        Self {
            fleet: pb::fleet_service_client::FleetServiceClient::with_interceptor(channel.clone(), token.clone()),
            telemetry: pb::telemetry_service_client::TelemetryServiceClient::with_interceptor(channel.clone(), token.clone()),
            maintenance: pb::maintenance_service_client::MaintenanceServiceClient::with_interceptor(channel.clone(), token.clone()),
            forecast: pb::forecast_service_client::ForecastServiceClient::with_interceptor(channel.clone(), token.clone()),
            access: pb::access_service_client::AccessServiceClient::with_interceptor(channel.clone(), token.clone()),
            backup: pb::backup_service_client::BackupServiceClient::with_interceptor(channel, token),
        }
    }

    /// The fleet's time zone name as stored (defaults to UTC on the server).
    pub async fn fleet_time_zone(&mut self, fleet_id: &str) -> anyhow::Result<chrono_tz::Tz> {
        let response = self
            .fleet
            .get_fleet(pb::GetFleetRequest { fleet_id: fleet_id.to_owned() })
            .await
            .map_err(|s| explain(s, &format!("reading fleet '{fleet_id}'")))?
            .into_inner();
        let name = response.fleet.map(|f| f.time_zone).unwrap_or_default();
        if name.is_empty() {
            return Ok(chrono_tz::UTC);
        }
        name.parse().map_err(|e| anyhow::anyhow!("the server gave fleet '{fleet_id}' an unknown time zone '{name}': {e}"))
    }

    /// Every vehicle of a fleet, following the pages.
    pub async fn all_vehicles(&mut self, fleet_id: &str) -> anyhow::Result<Vec<pb::Vehicle>> {
        let mut vehicles = Vec::new();
        let mut page_token = String::new();
        loop {
            let page = self
                .fleet
                .list_vehicles(pb::ListVehiclesRequest { fleet_id: fleet_id.to_owned(), page_size: 1000, page_token })
                .await
                .map_err(|s| explain(s, &format!("listing the vehicles of fleet '{fleet_id}'")))?
                .into_inner();
            vehicles.extend(page.vehicles);
            if page.next_page_token.is_empty() {
                return Ok(vehicles);
            }
            page_token = page.next_page_token;
        }
    }
}

/// An error saying what was being done, the status code and message, and each offending field.
pub fn explain(status: tonic::Status, doing: &str) -> anyhow::Error {
    let mut message = format!("{doing}: the server answered {:?}: {}", status.code(), status.message());
    if status.code() == tonic::Code::Unauthenticated {
        message.push_str("\n  this server requires a token: give it with --token TOKEN or the BRAKELEDGER_TOKEN environment variable");
    }
    if let Some(bad_request) = status.get_details_bad_request() {
        for violation in bad_request.field_violations {
            message.push_str(&format!("\n  - {}: {}", violation.field, violation.description));
        }
    }
    anyhow::anyhow!(message)
}

#[cfg(test)]
mod tests {
    use super::*;
    use tonic_types::ErrorDetails;

    #[test]
    fn explain_lists_each_field_violation() {
        let mut details = ErrorDetails::new();
        details.add_bad_request_violation("vehicle.mass_kg", "must be greater than 0");
        details.add_bad_request_violation("vehicle.axles", "a vehicle needs at least one braked axle");
        let status = tonic::Status::with_error_details(tonic::Code::InvalidArgument, "2 invalid fields", details);
        let text = explain(status, "registering vehicle 'bus-1'").to_string();
        assert!(text.starts_with("registering vehicle 'bus-1': the server answered InvalidArgument: 2 invalid fields"), "{text}");
        assert!(text.contains("\n  - vehicle.mass_kg: must be greater than 0"), "{text}");
        assert!(text.contains("\n  - vehicle.axles: a vehicle needs at least one braked axle"), "{text}");
    }

    #[tokio::test]
    async fn a_bad_server_url_is_a_clear_error() {
        let error = Connection::open(&ServerTarget::open("not a url")).await.expect_err("must fail");
        assert!(format!("{error:#}").contains("'not a url' is not a server URL"), "{error:#}");
    }
}
