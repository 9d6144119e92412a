//! The planners' web page and gRPC-Web over the real `brakeledger` binary: the page in a real
//! headless Chromium driven through chromedriver (WebDriver), the page's answers to each kind of
//! token over plain HTTP, and a gRPC-Web call to ForecastService as a browser dashboard makes it.
//!
//! The browser test needs Debian's `chromium` and `chromium-driver` packages (/usr/bin/chromium,
//! /usr/bin/chromedriver). Without them it says how to install them and passes, unless
//! `BRAKELEDGER_REQUIRE_BROWSER=1` (set by .ci/run, which installs them), when it fails.
//! With `BRAKELEDGER_SCREENSHOTS_DIR=DIR` it saves its screenshots there as PNG files.

use std::path::{Path, PathBuf};
use std::time::Duration;

use brakeledger::exports::csv::{DUE_HEADER, PLAN_HEADER};
use brakeledger_proto::v1 as pb;
use brakeledger_tests::{now_s, register, seed_vehicle, ts, two_axle_vehicle, wait_for_forecasts, ServerProcess, TestServer};
use fantoccini::{Client, ClientBuilder, Locator};
use tokio::io::{AsyncReadExt, AsyncWriteExt};

use crate::auth::{create_token, two_fleets, with_token, OPERATOR};
use crate::exports::{parse_csv, parse_ics};

const CHROMIUM: &str = "/usr/bin/chromium";
const CHROMEDRIVER: &str = "/usr/bin/chromedriver";

fn binary() -> PathBuf {
    PathBuf::from(env!("CARGO_BIN_EXE_brakeledger-test-server"))
}

/// The binary serving on free loopback ports with tokens required and the web page on.
struct WebServer {
    process: ServerProcess,
    /// The page's base address, `http://127.0.0.1:PORT/`.
    base: String,
    _token_file: tempfile::NamedTempFile,
}

impl WebServer {
    fn start(data_dir: &Path) -> Self {
        let token_file = tempfile::NamedTempFile::new().expect("token file");
        std::fs::write(token_file.path(), OPERATOR).expect("write token file");
        let extra = ["--operator-token-file".as_ref(), token_file.path().as_os_str(), "--web-listen".as_ref(), "127.0.0.1:0".as_ref()];
        let process = ServerProcess::spawn_with(&binary(), data_dir, &extra).unwrap_or_else(|e| panic!("server did not start: {e}"));
        let base = process.wait_for_line("brakeledger web page on ", Duration::from_secs(20)).expect("the server prints the page's address");
        assert!(base.starts_with("http://127.0.0.1:") && base.ends_with('/'), "{base}");
        Self { process, base, _token_file: token_file }
    }
}

/// An HTTP answer: status, headers (names in lower case), body.
struct Reply {
    status: u16,
    headers: Vec<(String, String)>,
    body: String,
}

impl Reply {
    fn header(&self, name: &str) -> Option<&str> {
        self.headers.iter().find(|(n, _)| n == name).map(|(_, v)| v.as_str())
    }
}

/// One HTTP/1.1 request to the page over a fresh loopback connection.
async fn http(base: &str, method: &str, path: &str, headers: &[(&str, &str)], form: Option<&str>) -> Reply {
    let host = base.trim_start_matches("http://").trim_end_matches('/');
    let mut stream = tokio::net::TcpStream::connect(host).await.expect("connect to the page");
    let mut request = format!("{method} {path} HTTP/1.1\r\nHost: {host}\r\nConnection: close\r\n");
    for (name, value) in headers {
        request.push_str(&format!("{name}: {value}\r\n"));
    }
    let body = form.unwrap_or("");
    if form.is_some() {
        request.push_str(&format!("Content-Type: application/x-www-form-urlencoded\r\nContent-Length: {}\r\n", body.len()));
    }
    request.push_str("\r\n");
    request.push_str(body);
    stream.write_all(request.as_bytes()).await.expect("send");
    let mut raw = Vec::new();
    stream.read_to_end(&mut raw).await.expect("read");
    let text = String::from_utf8_lossy(&raw).into_owned();
    let (head, body) = text.split_once("\r\n\r\n").expect("an HTTP response");
    let mut lines = head.lines();
    let status = lines.next().and_then(|l| l.split_whitespace().nth(1)).and_then(|s| s.parse().ok()).expect("status line");
    let headers = lines.filter_map(|l| l.split_once(':')).map(|(n, v)| (n.trim().to_ascii_lowercase(), v.trim().to_owned())).collect();
    Reply { status, headers, body: body.to_owned() }
}

#[tokio::test]
async fn the_page_answers_each_token_as_the_grpc_api_does() {
    let dir = tempfile::tempdir().expect("temp dir");
    let web = WebServer::start(dir.path());
    let server = TestServer::attach(web.process.addr).await;
    two_fleets(&server).await;
    let token = |fleet: &'static str, role: pb::Role| {
        let channel = server.channel.clone();
        async move { create_token(&channel, OPERATOR, fleet, role).await.expect("token") }
    };
    let planner = token("north", pb::Role::Planner).await;
    let ingest = token("north", pb::Role::Ingest).await.secret;
    let workshop = token("north", pb::Role::Workshop).await.secret;
    let south_planner = token("south", pb::Role::Planner).await.secret;
    let base = web.base.as_str();

    // No token: the sign-in form, with the page's safety headers.
    let anonymous = http(base, "GET", "/fleets/north", &[], None).await;
    assert_eq!(anonymous.status, 401);
    assert!(anonymous.body.contains("id=\"sign-in\"") && anonymous.body.contains("qualified technician"), "{}", anonymous.body);
    assert!(anonymous.header("content-security-policy").is_some_and(|csp| csp.contains("script-src 'self'")));
    assert_eq!(anonymous.header("x-frame-options"), Some("DENY"));

    // Signing in checks the token at once and keeps it in a cookie scripts cannot read.
    let wrong = http(base, "POST", "/sign-in", &[], Some("token=blt1_not-a-token")).await;
    assert_eq!(wrong.status, 401);
    assert!(wrong.body.contains("not one this server knows"), "{}", wrong.body);
    let signed_in = http(base, "POST", "/sign-in", &[], Some(&format!("token={}", planner.secret))).await;
    assert_eq!(signed_in.status, 303);
    let cookie = signed_in.header("set-cookie").expect("a cookie");
    assert!(cookie.starts_with(&format!("brakeledger_token={};", planner.secret)) && cookie.contains("HttpOnly") && cookie.contains("SameSite=Strict"), "{cookie}");

    let as_cookie = |secret: &str| format!("brakeledger_token={secret}");
    let pages = ["/fleets/north", "/fleets/north/due", "/fleets/north/due.csv", "/fleets/north/plan", "/fleets/north/plan.csv", "/fleets/north/plan.ics", "/fleets/north/vehicles/van-1"];
    for path in pages {
        let allowed = http(base, "GET", path, &[("Cookie", &as_cookie(&planner.secret))], None).await;
        assert_eq!(allowed.status, 200, "{path}: {}", allowed.body);
        for (who, secret) in [("an ingest token", &ingest), ("another fleet's planner", &south_planner)] {
            let refused = http(base, "GET", path, &[("Cookie", &as_cookie(secret))], None).await;
            assert_eq!(refused.status, 403, "{who} on {path}");
            assert!(refused.body.contains("needs a token of fleet"), "{who} on {path}: {}", refused.body);
        }
    }
    let bearer = format!("Bearer {workshop}");
    assert_eq!(http(base, "GET", "/fleets/north/due", &[("Authorization", &bearer)], None).await.status, 200, "a header token works as the cookie does");
    let unknown = http(base, "GET", "/fleets/nowhere", &[("Cookie", &as_cookie(OPERATOR))], None).await;
    assert_eq!(unknown.status, 404, "an unknown fleet is NOT_FOUND here as over gRPC");
    let bad_filter = http(base, "GET", "/fleets/north/due?part=caliper", &[("Cookie", &as_cookie(&planner.secret))], None).await;
    assert_eq!(bad_filter.status, 400);
    assert!(bad_filter.body.contains("part must be"), "{}", bad_filter.body);
    let south_fleets = http(base, "GET", "/", &[("Cookie", &as_cookie(&south_planner))], None).await;
    assert!(south_fleets.body.contains("/fleets/south") && !south_fleets.body.contains("/fleets/north\""), "a fleet token lists its own fleet only");

    // The due list as a file: an attachment that the csv crate reads.
    let csv = http(base, "GET", "/fleets/north/due.csv?within_days=30", &[("Cookie", &as_cookie(&planner.secret))], None).await;
    assert!(csv.header("content-disposition").is_some_and(|d| d.starts_with("attachment; filename=\"north-due.csv\"")));
    let rows = parse_csv(&csv.body, &DUE_HEADER);
    assert_eq!(rows.len(), 4, "van-1 has no data yet: its four parts cannot be forecast");
    assert!(rows.iter().all(|r| &r[4] == "van-1" && (&r[0] == "cannot forecast" || &r[0] == "not computed yet")));

    // Revocation takes effect at the next page.
    pb::access_service_client::AccessServiceClient::new(server.channel.clone())
        .revoke_token(with_token(pb::RevokeTokenRequest { token_id: planner.token.expect("token").token_id }, Some(OPERATOR)))
        .await
        .expect("revoke");
    let revoked = http(base, "GET", "/fleets/north", &[("Cookie", &as_cookie(&planner.secret))], None).await;
    assert_eq!(revoked.status, 401);
    assert!(revoked.body.contains("revoked"), "{}", revoked.body);
    web.process.terminate();
}

#[tokio::test]
async fn a_grpc_web_client_calls_forecast_service_as_a_browser_dashboard_would() {
    let server = TestServer::start_with_operator(OPERATOR).await;
    two_fleets(&server).await;
    let planner = create_token(&server.channel, OPERATOR, "north", pb::Role::Planner).await.expect("token").secret;
    let http1 = hyper_util::client::legacy::Client::builder(hyper_util::rt::TokioExecutor::new()).build_http();
    let origin: http::Uri = format!("http://{}", server.addr).parse().expect("uri");
    let mut over_web = pb::forecast_service_client::ForecastServiceClient::with_origin(tonic_web::GrpcWebClientService::new(http1), origin);
    let request = pb::ListDueRequest { fleet_id: "north".into(), due_before: Some(ts(now_s() + 60 * 86_400)), include_undated: true, ..Default::default() };

    let answer = over_web.list_due(with_token(request.clone(), Some(&planner))).await.expect("a gRPC-Web call over HTTP/1.1").into_inner();
    let native = server.forecast().list_due(with_token(request.clone(), Some(&planner))).await.expect("the same call over gRPC").into_inner();
    assert_eq!(answer, native, "gRPC-Web answers exactly as gRPC does");
    assert_eq!(answer.undated.len(), 4, "van-1's four parts, not forecast yet: {answer:?}");

    // The same access rules, as statuses in the gRPC-Web trailers.
    let anonymous = over_web.list_due(with_token(request.clone(), None)).await.expect_err("no token");
    assert_eq!(anonymous.code(), tonic::Code::Unauthenticated, "{anonymous:?}");
    let south = pb::ListDueRequest { fleet_id: "south".into(), ..request };
    let other_fleet = over_web.list_due(with_token(south, Some(&planner))).await.expect_err("another fleet");
    assert_eq!(other_fleet.code(), tonic::Code::PermissionDenied, "{other_fleet:?}");
    server.stop().await;
}

/// Whether the browser test can run; without Chromium it fails when CI requires it, and
/// otherwise says how to install it.
fn browser_installed() -> bool {
    if Path::new(CHROMIUM).exists() && Path::new(CHROMEDRIVER).exists() {
        return true;
    }
    let message = format!("the web page's browser test needs {CHROMIUM} and {CHROMEDRIVER}: install them with `sudo apt-get install -y chromium chromium-driver` (Debian)");
    assert!(std::env::var("BRAKELEDGER_REQUIRE_BROWSER").as_deref() != Ok("1"), "{message} (BRAKELEDGER_REQUIRE_BROWSER=1)");
    eprintln!("SKIPPED: {message}");
    false
}

/// chromedriver on a free loopback port, stopped when dropped.
struct Chromedriver {
    child: std::process::Child,
    port: u16,
}

impl Chromedriver {
    fn start() -> Self {
        let port = std::net::TcpListener::bind("127.0.0.1:0").and_then(|l| l.local_addr()).expect("a free port").port();
        let child = std::process::Command::new(CHROMEDRIVER)
            .args([format!("--port={port}"), "--allowed-ips=127.0.0.1".to_owned()])
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .spawn()
            .expect("start chromedriver");
        Self { child, port }
    }

    /// A headless Chromium session with a fresh profile in `profile`.
    async fn session(&self, profile: &Path) -> Client {
        let mut capabilities = serde_json::Map::new();
        let args = [
            "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
            "--disable-component-update", "--disable-sync", "--window-size=1280,1000",
        ];
        let mut args: Vec<String> = args.iter().map(|a| a.to_string()).collect();
        args.push(format!("--user-data-dir={}", profile.display()));
        capabilities.insert("goog:chromeOptions".into(), serde_json::json!({ "binary": CHROMIUM, "args": args }));
        let url = format!("http://127.0.0.1:{}", self.port);
        let mut last = String::new();
        for _ in 0..100 {
            let connector = hyper_util::client::legacy::connect::HttpConnector::new();
            match ClientBuilder::new(connector).capabilities(capabilities.clone()).connect(&url).await {
                Ok(client) => return client,
                Err(error) => last = error.to_string(),
            }
            tokio::time::sleep(Duration::from_millis(100)).await;
        }
        panic!("no browser session from chromedriver at {url}: {last}");
    }
}

impl Drop for Chromedriver {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// Takes a screenshot (a PNG), saved as `name`.png when BRAKELEDGER_SCREENSHOTS_DIR is set.
async fn screenshot(client: &Client, name: &str) {
    let png = client.screenshot().await.expect("screenshot");
    assert!(png.starts_with(b"\x89PNG\r\n\x1a\n") && png.len() > 10_000, "a PNG of the page");
    if let Ok(dir) = std::env::var("BRAKELEDGER_SCREENSHOTS_DIR") {
        std::fs::create_dir_all(&dir).expect("screenshot directory");
        std::fs::write(Path::new(&dir).join(format!("{name}.png")), png).expect("save screenshot");
    }
}

/// The text of every row of a table.
async fn row_texts(client: &Client, table: &str) -> Vec<String> {
    let mut texts = Vec::new();
    for row in client.find_all(Locator::Css(&format!("#{table} tbody tr"))).await.expect("rows") {
        texts.push(row.text().await.expect("row text"));
    }
    texts
}

/// Fetches `href` from the page (the browser sends its cookie): status, content type, text.
async fn fetch_in_page(client: &Client, href: &str) -> (u64, String, String) {
    let script = "const done = arguments[arguments.length - 1];
        fetch(arguments[0]).then(r => r.text().then(t => done([r.status, r.headers.get('content-type'), t]))).catch(e => done([0, '', String(e)]));";
    let answer = client.execute_async(script, vec![serde_json::json!(href)]).await.expect("fetch in the page");
    (answer[0].as_u64().unwrap_or(0), answer[1].as_str().unwrap_or("").to_owned(), answer[2].as_str().unwrap_or("").to_owned())
}

/// Loads a small invented fleet through the gRPC API of the binary run without tokens: three
/// ordinary vans, one worn past its minimum (due now), one registered without any data and with
/// an identifier that is markup.
async fn load_fleet(data_dir: &Path) {
    let process = ServerProcess::spawn(&binary(), data_dir);
    let server = TestServer::attach(process.addr).await;
    let fleet = pb::Fleet { fleet_id: "north".into(), time_zone: "America/Sao_Paulo".into(), display_name: "North depot".into() };
    server.fleet().upsert_fleet(pb::UpsertFleetRequest { fleet: Some(fleet) }).await.expect("fleet");
    for (i, speed) in [0.9, 1.1, 1.0].into_iter().enumerate() {
        seed_vehicle(&server, &format!("van-{i}"), 200, speed, &[160, 120, 80, 40, 5]).await;
    }
    seed_vehicle(&server, "van-worn", 540, 1.0, &[300, 250, 200, 160]).await;
    register(&server, two_axle_vehicle("north", "<i>new</i>")).await;
    wait_for_forecasts(&server).await;
    assert!(process.terminate().success());
}

#[tokio::test]
async fn planners_use_the_page_in_headless_chromium() {
    if !browser_installed() {
        return;
    }
    let dir = tempfile::tempdir().expect("temp dir");
    load_fleet(dir.path()).await;
    let web = WebServer::start(dir.path());
    let server = TestServer::attach(web.process.addr).await;
    let planner = create_token(&server.channel, OPERATOR, "north", pb::Role::Planner).await.expect("token").secret;
    let zone: chrono_tz::Tz = "America/Sao_Paulo".parse().expect("zone");
    let today = chrono::Utc::now().with_timezone(&zone).date_naive();
    let driver = Chromedriver::start();
    let profile = tempfile::tempdir().expect("profile");
    let client = driver.session(profile.path()).await;
    let base = web.base.trim_end_matches('/').to_owned();

    // Signing in.
    client.goto(&format!("{base}/fleets/north")).await.expect("open the fleet");
    client.find(Locator::Css("#token")).await.expect("the sign-in form").send_keys(&planner).await.expect("type the token");
    client.find(Locator::Css("#sign-in button")).await.expect("button").click().await.expect("sign in");
    client.wait().for_element(Locator::Css("#fleets")).await.expect("the fleets list");
    client.find(Locator::LinkText("north")).await.expect("fleet link").click().await.expect("open the fleet");

    // The fleet at a glance: the due-now van first, then the one that cannot be forecast.
    client.wait().for_element(Locator::Css("#overview")).await.expect("the overview");
    let rows = row_texts(&client, "overview").await;
    assert_eq!(rows.len(), 5, "{rows:#?}");
    assert!(rows[0].starts_with("van-worn") && rows[0].contains("due now") && rows[0].contains("axle 1 pad"), "{rows:#?}");
    assert!(rows[1].starts_with("<i>new</i>") && rows[1].contains("cannot forecast"), "markup in an id is shown as text: {rows:#?}");
    assert!(client.find_all(Locator::Css("#overview i")).await.expect("query").is_empty(), "no element made from stored text");
    let caution = client.find(Locator::Css("#caution")).await.expect("caution").text().await.expect("text");
    assert!(caution.contains("qualified technician") && caution.contains("roadworthiness"), "{caution}");
    screenshot(&client, "fleet-at-a-glance").await;
    // The search box (page.js) hides the other rows.
    client.find(Locator::Css("#vehicle-filter")).await.expect("search box").send_keys("van-worn").await.expect("type");
    let shown: serde_json::Value = client.execute("return [...document.querySelectorAll('#overview tbody tr')].filter(r => !r.hidden).length;", vec![]).await.expect("count");
    assert_eq!(shown, serde_json::json!(1));

    // One vehicle, with its wear charts drawn.
    client.find(Locator::LinkText("van-worn")).await.expect("vehicle link").click().await.expect("open the vehicle");
    client.wait().for_element(Locator::Css("#parts")).await.expect("the parts table");
    assert_eq!(client.find(Locator::Css("h1")).await.expect("h1").text().await.expect("text"), "Vehicle van-worn");
    let charts_drawn = "return Promise.all([...document.querySelectorAll('.charts img')].map(i => i.decode().then(() => i.naturalWidth, () => 0)));";
    let widths: serde_json::Value = client.execute(charts_drawn, vec![]).await.expect("charts");
    assert_eq!(widths, serde_json::json!([1000, 1000, 1000, 1000]), "four charts, each an image 1000 px wide");
    screenshot(&client, "vehicle").await;

    // The due list, first unfiltered, then filtered to due-now parts by choosing a status.
    client.find(Locator::LinkText("Due list")).await.expect("nav").click().await.expect("due list");
    client.wait().for_element(Locator::Css("#due")).await.expect("the due table");
    let due = row_texts(&client, "due").await;
    assert!(due[0].starts_with("due now") && due[0].contains("van-worn"), "{due:#?}");
    assert!(due[0].contains(&today.to_string()), "dated today in the fleet's zone: {due:#?}");
    client.find(Locator::Css("#status option[value='due-now']")).await.expect("option").click().await.expect("choose");
    wait_for_address(&client, "status=due-now").await;
    let classes: serde_json::Value = client.execute("return [...document.querySelectorAll('#due tbody tr')].map(r => r.className);", vec![]).await.expect("classes");
    let classes = classes.as_array().expect("list");
    assert!(!classes.is_empty() && classes.iter().all(|c| c == "due-now"), "{classes:?}");
    screenshot(&client, "due-list").await;

    // The visit plan, and its iCalendar and CSV files as the browser downloads them.
    client.find(Locator::LinkText("Visit plan")).await.expect("nav").click().await.expect("plan");
    client.wait().for_element(Locator::Css("#visits")).await.expect("the visits table");
    let visits = client.find_all(Locator::Css("#visits tbody tr td:nth-child(2) a")).await.expect("visits").len();
    assert!(visits >= 1);
    let plan_rows = row_texts(&client, "visits").await;
    let worn_row = plan_rows.iter().find(|r| r.contains("van-worn")).expect("the worn van is booked");
    assert!(worn_row.starts_with(&today.to_string()) && worn_row.contains("already due"), "due-now work on the first day: {plan_rows:#?}");
    screenshot(&client, "visit-plan").await;
    let ics_href = client.find(Locator::Css("#plan-ics")).await.expect("ics link").attr("href").await.expect("href").expect("an address");
    let (status, content_type, ics) = fetch_in_page(&client, &ics_href).await;
    assert_eq!((status, content_type.as_str()), (200, "text/calendar; charset=utf-8"));
    let events = parse_ics(&ics);
    assert_eq!(events.len(), visits, "one event per visit on the page");
    let worn = events.iter().find(|e| e.summary.contains("van-worn")).expect("the worn van's visit");
    assert_eq!(worn.start, today);
    assert!(worn.description.contains("axle 1 pad: due earliest") && worn.description.contains("already due") && worn.description.contains("America/Sao_Paulo"), "{worn:?}");
    let csv_href = client.find(Locator::Css("#plan-csv")).await.expect("csv link").attr("href").await.expect("href").expect("an address");
    let (_, _, csv) = fetch_in_page(&client, &csv_href).await;
    let unplanned = row_texts(&client, "unplanned").await;
    assert_eq!(parse_csv(&csv, &PLAN_HEADER).len(), plan_rows.len() + unplanned.len(), "one CSV row per job and per part not booked");

    // Signing out forgets the token.
    client.find(Locator::Css("form.sign-out button")).await.expect("sign out").click().await.expect("sign out");
    client.wait().for_element(Locator::Css("#sign-in")).await.expect("the sign-in form");
    client.goto(&format!("{base}/fleets/north")).await.expect("open the fleet");
    assert!(client.find(Locator::Css("#sign-in")).await.is_ok(), "signed out");
    client.close().await.expect("close the browser");
    web.process.terminate();
}

/// Waits (up to 10 s) until the browser's address contains `part`.
async fn wait_for_address(client: &Client, part: &str) {
    for _ in 0..200 {
        if client.current_url().await.expect("url").as_str().contains(part) {
            return;
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    panic!("the address never contained {part}: a filter that applies on change (page.js) did not");
}
