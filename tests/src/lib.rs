//! Helpers for the end-to-end tests: start the real brakeledger server on a loopback port with a
//! temporary data directory (in-process, or as a separate process that can be killed), and make
//! the vehicles and trips the tests send.

pub mod bench;
pub mod dated_forecasts;
pub mod load;
pub mod raw;
pub mod small_disk;

use std::net::SocketAddr;
use std::path::Path;
use std::sync::Arc;
use std::time::Duration;

use brakeledger::auth::AccessPolicy;
use brakeledger::config::{AuthConfig, ForecastConfig, ServingConfig};
use brakeledger::state::AppState;
use brakeledger::store::sled_store::SledStore;
use brakeledger_proto::v1 as pb;
use prost_types::Timestamp;
use tokio::sync::oneshot;
use tonic::transport::Channel;

/// A server running in this process.
pub struct TestServer {
    /// Where it listens.
    pub addr: SocketAddr,
    /// A connected channel.
    pub channel: Channel,
    stop: Option<oneshot::Sender<()>>,
    task: Option<tokio::task::JoinHandle<()>>,
    /// The data directory (kept alive while the server runs).
    pub data_dir: Option<tempfile::TempDir>,
    /// The store, to know when the server's last handle on it is gone.
    store: std::sync::Weak<dyn brakeledger::store::Store>,
}

impl TestServer {
    /// Starts a server on 127.0.0.1:0 with a fresh temporary data directory.
    pub async fn start() -> Self {
        let dir = tempfile::tempdir().expect("temp dir");
        let mut server = Self::start_on(dir.path(), fast_forecasts()).await;
        server.data_dir = Some(dir);
        server
    }

    /// Starts a server with a fresh temporary data directory that requires tokens, its first
    /// operator token being `operator` (as if read from `[auth] operator_token_file`).
    pub async fn start_with_operator(operator: &str) -> Self {
        let dir = tempfile::tempdir().expect("temp dir");
        let mut server = Self::start_with(dir.path(), fast_forecasts(), Some(operator), ServingConfig::default()).await;
        server.data_dir = Some(dir);
        server
    }

    /// Starts a server on an existing data directory.
    pub async fn start_on(dir: &Path, forecast: ForecastConfig) -> Self {
        Self::start_with(dir, forecast, None, ServingConfig::default()).await
    }

    /// Starts a server on an existing data directory; with `operator`, tokens are required and
    /// `operator` is the first operator token.
    pub async fn start_with(dir: &Path, forecast: ForecastConfig, operator: Option<&str>, serving: ServingConfig) -> Self {
        let store = SledStore::open(dir).expect("open store");
        let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.expect("bind");
        let addr = listener.local_addr().expect("addr");
        let store: Arc<dyn brakeledger::store::Store> = Arc::new(store);
        let weak_store = Arc::downgrade(&store);
        let access = match operator {
            None => AccessPolicy::open(),
            Some(secret) => {
                let file = tempfile::NamedTempFile::new().expect("token file");
                std::fs::write(file.path(), secret).expect("write token file");
                let config = AuthConfig { operator_token_file: Some(file.path().to_owned()), insecure_no_auth: false };
                brakeledger::auth::bootstrap::set_up(&config, addr, Arc::clone(&store), None, brakeledger::convert::now_ms()).expect("access set-up").policy
            }
        };
        let state = AppState::new(store, forecast).with_access(access).with_serving(serving);
        let (stop, stopped) = oneshot::channel::<()>();
        let task = tokio::spawn(async move {
            brakeledger::server::run(listener, state, async {
                let _ = stopped.await;
            })
            .await
            .expect("server run");
        });
        let channel = connect(addr).await;
        Self { addr, channel, stop: Some(stop), task: Some(task), data_dir: None, store: weak_store }
    }

    /// A handle on a server running elsewhere (a [`ServerProcess`]): its clients only; `stop`
    /// does nothing to it.
    pub async fn attach(addr: SocketAddr) -> Self {
        let channel = connect(addr).await;
        let store: std::sync::Weak<dyn brakeledger::store::Store> = std::sync::Weak::<SledStore>::new();
        Self { addr, channel, stop: None, task: None, data_dir: None, store }
    }

    /// Begins a graceful stop without waiting: new calls are refused, open ones may finish.
    pub fn begin_stop(&mut self) {
        if let Some(stop) = self.stop.take() {
            let _ = stop.send(());
        }
    }

    /// Stops the server gracefully and waits for it.
    pub async fn stop(mut self) {
        if let Some(stop) = self.stop.take() {
            let _ = stop.send(());
        }
        if let Some(task) = self.task.take() {
            task.await.expect("server task");
        }
        // The transport's per-call tasks may still be dropping their handlers (and with them
        // the store) a moment after the server returned; wait (up to 20 s on a loaded machine), so
        // the directory can be reopened.
        for _ in 0..4000 {
            if self.store.strong_count() == 0 {
                return;
            }
            tokio::time::sleep(Duration::from_millis(5)).await;
        }
    }

    /// Fleet client.
    pub fn fleet(&self) -> pb::fleet_service_client::FleetServiceClient<Channel> {
        pb::fleet_service_client::FleetServiceClient::new(self.channel.clone())
    }
    /// Telemetry client.
    pub fn telemetry(&self) -> pb::telemetry_service_client::TelemetryServiceClient<Channel> {
        pb::telemetry_service_client::TelemetryServiceClient::new(self.channel.clone())
    }
    /// Maintenance client.
    pub fn maintenance(&self) -> pb::maintenance_service_client::MaintenanceServiceClient<Channel> {
        pb::maintenance_service_client::MaintenanceServiceClient::new(self.channel.clone())
    }
    /// Forecast client.
    pub fn forecast(&self) -> pb::forecast_service_client::ForecastServiceClient<Channel> {
        pb::forecast_service_client::ForecastServiceClient::new(self.channel.clone())
    }
}

/// Forecast settings that recompute quickly (small coalescing delay, fewer draws).
pub fn fast_forecasts() -> ForecastConfig {
    ForecastConfig { coalesce_ms: 20, monte_carlo_draws: 1000, ..ForecastConfig::default() }
}

/// The whole HTTP response (status line, headers, body) to `GET /metrics` from the metrics
/// listener at `addr`, as Prometheus would scrape it. Blocking.
pub fn scrape_metrics(addr: SocketAddr) -> std::io::Result<String> {
    use std::io::{Read, Write};
    let mut stream = std::net::TcpStream::connect(addr)?;
    stream.write_all(b"GET /metrics HTTP/1.1\r\nHost: localhost\r\nConnection: close\r\n\r\n")?;
    let mut text = String::new();
    stream.read_to_string(&mut text)?;
    Ok(text)
}

/// Connects to a server, retrying while it starts.
pub async fn connect(addr: SocketAddr) -> Channel {
    let endpoint = tonic::transport::Endpoint::from_shared(format!("http://{addr}")).expect("endpoint");
    for _ in 0..200 {
        if let Ok(channel) = endpoint.connect().await {
            return channel;
        }
        tokio::time::sleep(Duration::from_millis(25)).await;
    }
    panic!("server at {addr} did not accept connections");
}

/// A server in a child process (the `brakeledger-test-server` binary), which tests can kill.
pub struct ServerProcess {
    /// The child.
    pub child: std::process::Child,
    /// Where it listens.
    pub addr: SocketAddr,
    /// Lines it printed on stdout after the first (such as the web page's address).
    pub stdout_lines: Arc<std::sync::Mutex<Vec<String>>>,
}

impl ServerProcess {
    /// Starts `binary serve --data dir --listen 127.0.0.1:0` and reads the port it prints.
    pub fn spawn(binary: &Path, data_dir: &Path) -> Self {
        Self::spawn_with(binary, data_dir, &[]).unwrap_or_else(|output| panic!("server did not start: {output}"))
    }

    /// Starts `binary serve --data dir --listen 127.0.0.1:0 <extra>`; `Err` with what the process
    /// wrote to stderr when it exits instead of listening.
    pub fn spawn_with(binary: &Path, data_dir: &Path, extra: &[&std::ffi::OsStr]) -> Result<Self, String> {
        let mut args: Vec<&std::ffi::OsStr> = vec!["--data".as_ref(), data_dir.as_os_str()];
        args.extend_from_slice(extra);
        Self::spawn_serving(binary, &args)
    }

    /// Starts `binary serve --listen 127.0.0.1:0 --store url`: a replica on a shared
    /// PostgreSQL database.
    pub fn spawn_on_store(binary: &Path, url: &str) -> Self {
        Self::spawn_serving(binary, &["--store".as_ref(), url.as_ref()]).unwrap_or_else(|output| panic!("server did not start: {output}"))
    }

    /// Starts `binary serve --listen 127.0.0.1:0 <args>` and reads the port it prints; `Err`
    /// with what the process wrote to stderr when it exits instead of listening.
    pub fn spawn_serving(binary: &Path, args: &[&std::ffi::OsStr]) -> Result<Self, String> {
        use std::io::{BufRead, Read};
        let mut child = std::process::Command::new(binary)
            .args(["serve", "--listen", "127.0.0.1:0"])
            .args(args)
            .env("BRAKELEDGER_LOG", "warn")
            // A client token in the developer's shell is not the server's business.
            .env_remove("BRAKELEDGER_TOKEN")
            .stdout(std::process::Stdio::piped())
            .stderr(std::process::Stdio::piped())
            .spawn()
            .expect("spawn server process");
        let stdout = child.stdout.take().expect("stdout");
        let mut stderr = child.stderr.take().expect("stderr");
        let mut line = String::new();
        let mut stdout = std::io::BufReader::new(stdout);
        let _ = stdout.read_line(&mut line);
        let Some(addr) = line.trim().rsplit(' ').next().and_then(|a| a.parse().ok()) else {
            let mut output = String::new();
            let _ = stderr.read_to_string(&mut output);
            let _ = child.wait();
            return Err(format!("{line}{output}"));
        };
        // Keep reading stderr so the server never blocks on a full pipe; echo it for failures.
        std::thread::spawn(move || {
            for line in std::io::BufReader::new(stderr).lines().map_while(Result::ok) {
                eprintln!("[server] {line}");
            }
        });
        // Keep stdout open and its lines at hand (a closed pipe would fail the server's prints).
        let stdout_lines = Arc::new(std::sync::Mutex::new(Vec::new()));
        let kept = Arc::clone(&stdout_lines);
        std::thread::spawn(move || {
            for line in stdout.lines().map_while(Result::ok) {
                kept.lock().expect("stdout lines").push(line);
            }
        });
        Ok(Self { child, addr, stdout_lines })
    }

    /// Waits up to `limit` for a stdout line starting with `prefix`; returns the rest of it.
    pub fn wait_for_line(&self, prefix: &str, limit: Duration) -> Option<String> {
        let started = std::time::Instant::now();
        while started.elapsed() < limit {
            if let Some(line) = self.stdout_lines.lock().expect("stdout lines").iter().find(|l| l.starts_with(prefix)) {
                return Some(line[prefix.len()..].trim().to_owned());
            }
            std::thread::sleep(Duration::from_millis(20));
        }
        None
    }

    /// Sends a signal (`"TERM"`, `"INT"`, ...) without waiting.
    pub fn signal(&self, name: &str) {
        let pid = self.child.id().to_string();
        let sent = std::process::Command::new("kill").args([&format!("-{name}"), &pid]).status().expect("run kill");
        assert!(sent.success(), "kill -{name} {pid}");
    }

    /// Waits up to `limit` for the process to exit.
    pub fn wait_exit(&mut self, limit: Duration) -> Option<std::process::ExitStatus> {
        let started = std::time::Instant::now();
        while started.elapsed() < limit {
            if let Some(status) = self.child.try_wait().expect("try_wait") {
                return Some(status);
            }
            std::thread::sleep(Duration::from_millis(20));
        }
        None
    }

    /// Sends SIGTERM and waits for the process to exit; returns its exit status.
    pub fn terminate(mut self) -> std::process::ExitStatus {
        let pid = self.child.id().to_string();
        let sent = std::process::Command::new("kill").args(["-TERM", &pid]).status().expect("run kill");
        assert!(sent.success(), "kill -TERM {pid}");
        self.child.wait().expect("wait")
    }

    /// Kills the process with SIGKILL and reaps it.
    pub fn kill(mut self) {
        self.child.kill().expect("kill");
        let _ = self.child.wait();
    }
}

/// A timestamp from seconds since the Unix epoch.
pub fn ts(seconds: i64) -> Timestamp {
    Timestamp { seconds, nanos: 0 }
}

/// Seconds since the Unix epoch now.
pub fn now_s() -> i64 {
    chrono::Utc::now().timestamp()
}

/// A two-axle disc-braked vehicle (front axle takes 65 % of the friction energy).
pub fn two_axle_vehicle(fleet_id: &str, vehicle_id: &str) -> pb::Vehicle {
    let axle = |index: u32, share: f64| pb::AxleBrake {
        axle_index: index,
        brake_type: pb::BrakeType::Disc as i32,
        energy_share: share,
        friction_new_mm: 22.0,
        friction_min_mm: 3.0,
        disc_new_mm: 45.0,
        disc_min_mm: 39.0,
    };
    pb::Vehicle {
        fleet_id: fleet_id.into(),
        vehicle_id: vehicle_id.into(),
        vin: None,
        vehicle_class: "test-van".into(),
        mass_kg: 7_500.0,
        axles: vec![axle(1, 0.65), axle(2, 0.35)],
    }
}

/// A plausible trip `n` of a vehicle: one hour, 40 km, 30 MJ, ending `n` hours before `end_s`.
pub fn trip(fleet_id: &str, vehicle_id: &str, n: usize, end_s: i64) -> pb::TripSummary {
    let end = end_s - 3600 * n as i64;
    pb::TripSummary {
        fleet_id: fleet_id.into(),
        vehicle_id: vehicle_id.into(),
        trip_id: format!("trip-{n:06}"),
        start_time: Some(ts(end - 3000)),
        end_time: Some(ts(end)),
        distance_m: 40_000.0,
        friction_energy_j: 30.0e6,
        axle_energy_j: vec![],
        brake_applications: 120,
        regen_energy_j: None,
        hot_energy_j: None,
        retarder_energy_j: None,
    }
}

/// The stored form of a trip of a [`two_axle_vehicle`] sent without an axle split (its
/// configured 65/35 shares applied, as the service does): for benchmarks that feed the store
/// directly.
pub fn trip_record(t: &pb::TripSummary) -> brakeledger::store::TripRecord {
    brakeledger::store::TripRecord {
        fleet_id: t.fleet_id.clone(),
        vehicle_id: t.vehicle_id.clone(),
        trip_id: t.trip_id.clone(),
        start_ms: t.start_time.as_ref().map_or(0, |s| s.seconds * 1000),
        end_ms: t.end_time.as_ref().map_or(0, |s| s.seconds * 1000),
        distance_m: t.distance_m,
        friction_energy_j: t.friction_energy_j,
        axle_energy_j: vec![0.65 * t.friction_energy_j, 0.35 * t.friction_energy_j],
        axle_split_reported: false,
        brake_applications: t.brake_applications,
        regen_energy_j: None,
        hot_energy_j: 0.0,
    }
}

/// Registers a vehicle.
pub async fn register(server: &TestServer, vehicle: pb::Vehicle) {
    server
        .fleet()
        .upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(vehicle) })
        .await
        .expect("upsert vehicle");
}

/// Seconds in a day.
pub const DAY_S: i64 = 86_400;

/// True wear rates used by [`seed_vehicle`], mm/MJ: (front pad, front rotor, rear pad, rear
/// rotor) for a vehicle of `speed` 1.0. Invented test values, sized so a pad lasts about a year.
pub const TEST_WEAR_MM_PER_MJ: [f64; 4] = [0.0024, 0.00026, 0.0030, 0.00030];

/// Registers a two-axle vehicle and gives it `days` days of history ending yesterday: one trip
/// a day (30 MJ, 65/35 split by the configured shares), every part replaced at the start, and
/// inspections at the given days-before-today showing wear at `speed` × the test rates
/// (no gauge noise beyond a small deterministic wobble).
pub async fn seed_vehicle(server: &TestServer, vehicle_id: &str, days: i64, speed: f64, inspection_days_ago: &[i64]) {
    register(server, two_axle_vehicle("north", vehicle_id)).await;
    let today = now_s().div_euclid(DAY_S) * DAY_S;
    let trips = daily_trips(vehicle_id, 1..=days, today);
    let report = server.telemetry().push_trips(pb::PushTripsRequest { trips }).await.expect("push").into_inner();
    assert_eq!(report.accepted as i64, days, "seed trips accepted: {:?}", report.rejected.first());
    let mut maintenance = server.maintenance();
    for request in new_parts(vehicle_id, today - days * DAY_S + 3600) {
        maintenance.record_replacement(request).await.expect("replacement");
    }
    for &ago in inspection_days_ago {
        record_test_inspection(server, vehicle_id, days, speed, ago, None).await;
    }
}

/// Records inspections of all four parts `ago` days before today, with thickness following
/// the test wear rates (or `front_pad_mm` for the front pad when given).
pub async fn record_test_inspection(server: &TestServer, vehicle_id: &str, days: i64, speed: f64, ago: i64, front_pad_mm: Option<f64>) {
    let mut maintenance = server.maintenance();
    for request in test_inspections(vehicle_id, days, speed, ago, front_pad_mm) {
        maintenance.record_inspection(request).await.expect("inspection");
    }
}

/// One trip a day (30 MJ, ending 15:00 UTC) on each of the days `days_ago` before `today_s`,
/// with ids `day-<days ago>`.
pub fn daily_trips(vehicle_id: &str, days_ago: std::ops::RangeInclusive<i64>, today_s: i64) -> Vec<pb::TripSummary> {
    days_ago
        .map(|ago| {
            let mut t = trip("north", vehicle_id, 0, today_s - ago * DAY_S + 15 * 3600);
            t.trip_id = format!("day-{ago}");
            t
        })
        .collect()
}

/// Replacements of all four parts of a two-axle vehicle at `at_s` (ids `fit-<axle>-<component>`).
pub fn new_parts(vehicle_id: &str, at_s: i64) -> Vec<pb::RecordReplacementRequest> {
    let mut requests = Vec::new();
    for axle in 1..=2u32 {
        for component in [pb::Component::Friction, pb::Component::Disc] {
            requests.push(pb::RecordReplacementRequest {
                fleet_id: "north".into(),
                vehicle_id: vehicle_id.into(),
                replacement_id: format!("fit-{axle}-{}", component as i32),
                axle_index: axle,
                component: component as i32,
                new_thickness_mm: 0.0,
                replaced_at: Some(ts(at_s)),
            });
        }
    }
    requests
}

/// Inspections of all four parts `ago` days before today, with thickness following the test
/// wear rates × `speed` after `days - ago` days of one 30 MJ trip a day (or `front_pad_mm` for
/// the front pad when given).
pub fn test_inspections(vehicle_id: &str, days: i64, speed: f64, ago: i64, front_pad_mm: Option<f64>) -> Vec<pb::RecordInspectionRequest> {
    let today = now_s().div_euclid(DAY_S) * DAY_S;
    // Energy at each axle before the inspection day: one 30 MJ trip a day since the start.
    let days_run = (days - ago) as f64;
    let axle_mj = [30.0 * 0.65 * days_run, 30.0 * 0.35 * days_run];
    let new_mm = [22.0, 45.0];
    let mut requests = Vec::new();
    for axle in 1..=2u32 {
        for (c, component) in [pb::Component::Friction, pb::Component::Disc].into_iter().enumerate() {
            let rate = TEST_WEAR_MM_PER_MJ[(axle as usize - 1) * 2 + c] * speed;
            let wobble = 0.05 * ((ago as f64) * 1.7 + axle as f64).sin();
            let mut thickness = new_mm[c] - rate * axle_mj[axle as usize - 1] + wobble;
            if axle == 1 && c == 0 {
                thickness = front_pad_mm.unwrap_or(thickness);
            }
            requests.push(pb::RecordInspectionRequest {
                fleet_id: "north".into(),
                vehicle_id: vehicle_id.into(),
                inspection_id: format!("insp-{ago}-{axle}-{}", component as i32),
                axle_index: axle,
                component: component as i32,
                thickness_mm: thickness,
                measured_at: Some(ts(today - ago * DAY_S + 8 * 3600)),
            });
        }
    }
    requests
}

/// Waits until every forecast of fleet "north" reflects what is stored.
pub async fn wait_for_forecasts(server: &TestServer) {
    for _ in 0..600 {
        let fleet = server.fleet().get_fleet(pb::GetFleetRequest { fleet_id: "north".into() }).await.expect("get fleet").into_inner();
        if fleet.forecasts_pending == 0 {
            return;
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    panic!("forecasts still pending after 30 s");
}

/// A PostgreSQL database of its own for one test (see `ScratchDatabase::for_test`).
pub fn postgres_test_database() -> Option<brakeledger::store::postgres::scratch::ScratchDatabase> {
    brakeledger::store::postgres::scratch::ScratchDatabase::for_test("brakeledger_e2e")
}
