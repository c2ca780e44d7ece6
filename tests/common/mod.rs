//! Shared helpers for the end-to-end suites: a real server on a loopback port
//! over a fresh SQLite file, with typed request helpers.
#![allow(dead_code)]

use cairn::AppState;
use cairn::accounts::audit::{Action, Actor, AuditEvent};
use cairn::accounts::secret::{self, API_TOKEN_PREFIX, Secret, Token};
use cairn::accounts::store::{NewApiToken, NewUser};
use cairn::accounts::{Role, UserName};
use cairn::config::Config;
use cairn::master::SiteCode;
use reqwest::Method;
use serde_json::{Value, json};
use std::path::PathBuf;
use std::sync::OnceLock;

/// The test site's admin, who also posts the test data. Test-only password.
pub const ROOT_USER: &str = "root";
pub const ROOT_PASSWORD: &str = "test-only-root-password";
/// The test-only password of everyone `add_people` adds.
pub const PASSWORD: &str = "test-only-password";

/// One person of site T: user name, roles there, and a phone PIN (for counters).
pub type Person<'a> = (&'a str, &'a [Role], Option<&'a str>);

/// How a test request proves who sends it.
#[derive(Debug, Clone)]
pub enum Auth {
    Anonymous,
    Bearer(String),
    Session(Session),
}

/// A signed-in browser: its session cookie and the form token of its pages.
#[derive(Debug, Clone)]
pub struct Session {
    pub cookie: String,
    pub csrf: String,
}

/// A request body.
pub enum Body {
    Empty,
    Json(Value),
    Form(Vec<(String, String)>),
}

/// A response: status, body text, and headers.
pub struct Answer {
    pub status: u16,
    pub text: String,
    pub headers: reqwest::header::HeaderMap,
}

impl Answer {
    /// Parses the body as JSON (Null if it is not).
    pub fn json(&self) -> Value {
        serde_json::from_str(&self.text).unwrap_or(Value::Null)
    }

    /// Returns the value a Set-Cookie header gives `name`, if any.
    pub fn cookie(&self, name: &str) -> Option<String> {
        self.headers
            .get_all(reqwest::header::SET_COOKIE)
            .iter()
            .filter_map(|v| v.to_str().ok())
            .find_map(|v| {
                let first = v.split(';').next()?;
                let (k, val) = first.split_once('=')?;
                (k.trim() == name && !val.is_empty()).then(|| val.to_string())
            })
    }
}

/// Finds the value of the first hidden `csrf` field in a page.
pub fn form_token(html: &str) -> Option<String> {
    let at = html.find(r#"name="csrf" value=""#)? + r#"name="csrf" value=""#.len();
    let end = html[at..].find('"')?;
    Some(html[at..at + end].to_string())
}

/// Undoes the HTML escaping of text and attribute values.
pub fn unescape(s: &str) -> String {
    s.replace("&quot;", "\"")
        .replace("&#x27;", "'")
        .replace("&#39;", "'")
        .replace("&#34;", "\"")
        .replace("&lt;", "<")
        .replace("&gt;", ">")
        .replace("&#38;", "&")
        .replace("&amp;", "&")
}

/// Returns the value of attribute `name` of an HTML tag's text, unescaped.
pub fn attr(tag: &str, name: &str) -> Option<String> {
    let key = format!(" {name}=\"");
    let from = tag.find(&key)? + key.len();
    Some(unescape(&tag[from..from + tag[from..].find('"')?]))
}

/// The text of the form that posts to `action`.
pub fn form_html<'a>(html: &'a str, action: &str) -> &'a str {
    let at = html
        .find(&format!("action=\"{action}\""))
        .unwrap_or_else(|| panic!("no form posts to {action}: {html}"));
    &html[at..at + html[at..].find("</form>").expect("the form ends")]
}

/// What a browser would send from the form that posts to `action`: every
/// named input with its value, checkboxes only when checked.
pub fn form_fields(html: &str, action: &str) -> Vec<(String, String)> {
    let mut out = Vec::new();
    for piece in form_html(html, action).split("<input").skip(1) {
        let tag = &piece[..piece.find('>').expect("the input tag ends")];
        let Some(name) = attr(tag, "name") else {
            continue;
        };
        let checkbox = attr(tag, "type").as_deref() == Some("checkbox");
        if checkbox && !tag.contains(" checked") {
            continue;
        }
        out.push((name, attr(tag, "value").unwrap_or_default()));
    }
    out
}

/// Says on each event that `user` made it, where the event does not say (the wire's
/// `user`).
pub fn made_by(user: &str, events: Vec<Value>) -> Vec<Value> {
    events
        .into_iter()
        .map(|mut e| {
            if let Some(o) = e.as_object_mut() {
                o.entry("user").or_insert_with(|| json!(user));
            }
            e
        })
        .collect()
}

/// A running test server and a client for it.
pub struct TestApp {
    pub base: String,
    pub client: reqwest::Client,
    pub state: AppState,
    pub db: PathBuf,
    /// The bearer token `get`, `post` and `post_raw` send (set by `small_site`).
    pub token: OnceLock<String>,
    /// Who each phone enrolled through `enrol` belongs to (token → sign-in name), so
    /// events sent with a token say who made them.
    phones: std::sync::Mutex<std::collections::HashMap<String, String>>,
    _dir: tempfile::TempDir,
    shutdown: Option<tokio::sync::oneshot::Sender<()>>,
    /// The PostgreSQL database made for this test, dropped with it.
    pub pg: Option<PgTestDb>,
}

/// The switch that runs the suites on PostgreSQL: a URL of a server and a database to
/// connect to for creating others (e.g. `postgres://postgres@127.0.0.1:5432/postgres`).
pub const STORE_SWITCH: &str = "CAIRN_TEST_STORE";

/// A database of its own for one test on the PostgreSQL server the switch names.
pub struct PgTestDb {
    admin: String,
    pub name: String,
    pub url: String,
}

impl PgTestDb {
    /// Creates a new, empty database, or `None` when the suites run on SQLite.
    pub fn create() -> Option<Self> {
        Self::create_from(None)
    }

    /// Creates a new database as a copy of `template`'s (whose connections are ended
    /// first: PostgreSQL copies a database nobody is connected to), or `None` on SQLite.
    pub fn copy_of(template: &PgTestDb) -> Option<Self> {
        Self::create_from(Some(&template.name))
    }

    fn create_from(template: Option<&str>) -> Option<Self> {
        let admin = std::env::var(STORE_SWITCH)
            .ok()
            .filter(|v| !v.trim().is_empty())?;
        static N: std::sync::atomic::AtomicU32 = std::sync::atomic::AtomicU32::new(0);
        let name = format!(
            "cairn_test_{}_{}_{}",
            std::process::id(),
            N.fetch_add(1, std::sync::atomic::Ordering::Relaxed),
            &uuid::Uuid::now_v7().simple().to_string()[24..]
        );
        match template {
            None => admin_sql(&admin, &format!("create database {name}")),
            Some(t) => {
                admin_sql(
                    &admin,
                    &format!(
                        "select pg_terminate_backend(pid) from pg_stat_activity
                         where datname = '{t}' and pid <> pg_backend_pid()"
                    ),
                );
                admin_sql(&admin, &format!("create database {name} template {t}"));
            }
        }
        let url = cairn::store::postgres::with_database(&admin, &name);
        Some(Self { admin, name, url })
    }
}

impl Drop for PgTestDb {
    fn drop(&mut self) {
        admin_sql(
            &self.admin,
            &format!("drop database if exists {} with (force)", self.name),
        );
    }
}

/// Runs one statement on the switch's database, on a thread of its own (callers may be
/// inside a runtime or in a `Drop`).
fn admin_sql(admin: &str, sql: &str) {
    let (admin, sql) = (admin.to_string(), sql.to_string());
    std::thread::spawn(move || {
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .expect("a runtime for the test database");
        rt.block_on(async {
            let (config, tls) = cairn::store::postgres::connect::read_url(&admin)
                .unwrap_or_else(|e| panic!("{STORE_SWITCH}: {e}"));
            let (client, conn) = config
                .connect(tls)
                .await
                .unwrap_or_else(|e| panic!("{STORE_SWITCH} names a server that answers: {e}"));
            let driver = tokio::spawn(conn);
            client
                .batch_execute(&sql)
                .await
                .unwrap_or_else(|e| panic!("{sql}: {e}"));
            drop(client);
            let _ = driver.await;
        });
    })
    .join()
    .expect("the test database statement runs");
}

/// Tells whether the suites run on PostgreSQL (the switch is set).
pub fn on_postgres() -> bool {
    std::env::var(STORE_SWITCH).is_ok_and(|v| !v.trim().is_empty())
}

/// Starts the real application on 127.0.0.1 with port 0 and a new database.
pub async fn spawn_app() -> TestApp {
    spawn_app_with(|_| {}).await
}

/// Starts the real application as `spawn_app` does, with settings changed by `tweak`.
pub async fn spawn_app_with(tweak: impl FnOnce(&mut Config)) -> TestApp {
    spawn_app_on(PgTestDb::create(), tweak).await
}

/// Starts the real application on a SQLite file whatever the switch says: the other side
/// of a comparison between the two stores.
pub async fn spawn_sqlite_app() -> TestApp {
    spawn_app_on(None, |_| {}).await
}

async fn spawn_app_on(pg: Option<PgTestDb>, tweak: impl FnOnce(&mut Config)) -> TestApp {
    let dir = tempfile::tempdir().expect("a temporary directory can be made");
    let db = dir.path().join("cairn.db");
    let mut config = Config {
        db: match &pg {
            Some(p) => cairn::store::DbLocation::Postgres(p.url.clone()),
            None => db.clone().into(),
        },
        max_body_bytes: 256 * 1024,
        ..Config::default()
    };
    tweak(&mut config);
    let state = AppState::open(config).expect("a fresh database opens");
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0")
        .await
        .expect("loopback port 0 binds");
    let base = format!("http://{}", listener.local_addr().unwrap());
    let (tx, rx) = tokio::sync::oneshot::channel::<()>();
    let served = state.clone();
    tokio::spawn(async move {
        cairn::run(served, listener, async {
            let _ = rx.await;
        })
        .await
        .expect("the server runs");
    });
    TestApp {
        base,
        client: reqwest::Client::builder()
            .redirect(reqwest::redirect::Policy::none())
            .build()
            .expect("a test client builds"),
        state,
        db,
        token: OnceLock::new(),
        phones: Default::default(),
        _dir: dir,
        shutdown: Some(tx),
        pg,
    }
}

impl Drop for TestApp {
    fn drop(&mut self) {
        if let Some(tx) = self.shutdown.take() {
            let _ = tx.send(());
        }
    }
}

impl TestApp {
    /// Sends a GET and returns the status and JSON body.
    pub async fn get(&self, path: &str) -> (u16, Value) {
        let r = self
            .with_token(self.client.get(format!("{}{path}", self.base)))
            .send()
            .await
            .expect("the server answers");
        let status = r.status().as_u16();
        (status, r.json().await.unwrap_or(Value::Null))
    }

    /// Sends a JSON POST and returns the status and JSON body.
    pub async fn post(&self, path: &str, body: &Value) -> (u16, Value) {
        let r = self
            .with_token(self.client.post(format!("{}{path}", self.base)))
            .json(body)
            .send()
            .await
            .expect("the server answers");
        let status = r.status().as_u16();
        (status, r.json().await.unwrap_or(Value::Null))
    }

    /// Sends a JSON POST that must succeed (200) and returns the JSON body.
    pub async fn post_ok(&self, path: &str, body: &Value) -> Value {
        let (s, b) = self.post(path, body).await;
        assert_eq!(s, 200, "POST {path}: {b}");
        b
    }

    /// Sends a JSON PUT and returns the status and JSON body.
    pub async fn put(&self, path: &str, body: &Value) -> (u16, Value) {
        let r = self
            .with_token(self.client.put(format!("{}{path}", self.base)))
            .json(body)
            .send()
            .await
            .expect("the server answers");
        let status = r.status().as_u16();
        (status, r.json().await.unwrap_or(Value::Null))
    }

    /// Sends raw bytes as a JSON POST.
    pub async fn post_raw(&self, path: &str, body: Vec<u8>) -> (u16, Value) {
        let r = self
            .with_token(self.client.post(format!("{}{path}", self.base)))
            .header("content-type", "application/json")
            .body(body)
            .send()
            .await
            .expect("the server answers");
        let status = r.status().as_u16();
        (status, r.json().await.unwrap_or(Value::Null))
    }

    pub fn with_token(&self, r: reqwest::RequestBuilder) -> reqwest::RequestBuilder {
        match self.token.get() {
            Some(t) => r.bearer_auth(t),
            None => r,
        }
    }

    /// Creates a site.
    pub async fn create_site(&self, code: &str) -> cairn::master::Site {
        self.create_site_in(code, "UTC").await
    }

    /// Creates a site keeping the days of IANA zone `zone`.
    pub async fn create_site_in(&self, code: &str, zone: &str) -> cairn::master::Site {
        self.state
            .store
            .create_site(cairn::master::NewSite {
                code: SiteCode::parse(code).unwrap(),
                name: format!("Test {code}"),
                time_zone: cairn::time::day::SiteZone::parse(zone).unwrap(),
            })
            .await
            .unwrap()
    }

    /// Creates a user with roles at a site, straight in the store.
    pub async fn add_user(
        &self,
        name: &str,
        site: &str,
        roles: &[Role],
        password: &str,
        pin: Option<&str>,
    ) {
        let site = self
            .state
            .store
            .site(&SiteCode::parse(site).unwrap())
            .await
            .unwrap()
            .expect("the site exists");
        let pin = match pin {
            Some(p) => Some(secret::hash(Secret::new(p)).await.unwrap()),
            None => None,
        };
        self.state
            .store
            .create_user(
                NewUser {
                    name: UserName::parse(name).unwrap(),
                    display_name: name.to_string(),
                    password: secret::hash(Secret::new(password)).await.unwrap(),
                    pin,
                    roles: roles.iter().map(|r| (site.id, *r)).collect(),
                },
                AuditEvent::now(Actor::System, Action::UserCreated, name),
            )
            .await
            .unwrap();
    }

    /// Adds people to site T, each with the test-only [`PASSWORD`].
    pub async fn add_people(&self, people: &[Person<'_>]) {
        for (name, roles, pin) in people {
            self.add_user(name, "T", roles, PASSWORD, *pin).await;
        }
    }

    /// Issues an integration token for a user and role at a site, straight in the store.
    pub async fn issue_token(&self, site: &str, user: &str, role: Role) -> String {
        let site = self
            .state
            .store
            .site(&SiteCode::parse(site).unwrap())
            .await
            .unwrap()
            .expect("the site exists");
        let token = Token::generate(API_TOKEN_PREFIX);
        self.state
            .store
            .issue_api_token(
                NewApiToken {
                    user: UserName::parse(user).unwrap(),
                    site: site.id,
                    role,
                    name: "test".into(),
                    token_digest: token.digest(),
                    at: cairn::time::Timestamp::now(),
                },
                AuditEvent::now(Actor::System, Action::ApiTokenIssued, "test"),
            )
            .await
            .unwrap();
        token.expose().to_string()
    }

    /// Sends any request with the given credentials.
    pub async fn send(&self, method: Method, path: &str, auth: &Auth, body: Body) -> Answer {
        let mut r = self.client.request(method, format!("{}{path}", self.base));
        match auth {
            Auth::Anonymous => {}
            Auth::Bearer(t) => r = r.bearer_auth(t),
            Auth::Session(s) => r = r.header("cookie", format!("cairn_session={}", s.cookie)),
        }
        r = match body {
            Body::Empty => r,
            Body::Json(v) => r.json(&v),
            Body::Form(fields) => r.form(&fields),
        };
        let resp = r.send().await.expect("the server answers");
        Answer {
            status: resp.status().as_u16(),
            headers: resp.headers().clone(),
            text: resp.text().await.unwrap_or_default(),
        }
    }

    /// Posts the sign-in form as a browser would (fetching the form first).
    pub async fn try_sign_in(&self, user: &str, password: &str) -> Answer {
        let page = self
            .send(Method::GET, "/sign-in", &Auth::Anonymous, Body::Empty)
            .await;
        assert_eq!(page.status, 200, "{}", page.text);
        let form_cookie = page
            .cookie("cairn_form")
            .expect("the sign-in page sets its form cookie");
        let csrf = form_token(&page.text).expect("the sign-in form has a token");
        let resp = self
            .client
            .post(format!("{}/sign-in", self.base))
            .header("cookie", format!("cairn_form={form_cookie}"))
            .form(&[
                ("csrf", csrf.as_str()),
                ("user", user),
                ("password", password),
            ])
            .send()
            .await
            .expect("the server answers");
        Answer {
            status: resp.status().as_u16(),
            headers: resp.headers().clone(),
            text: resp.text().await.unwrap_or_default(),
        }
    }

    /// Signs in and returns the session with its form token.
    pub async fn sign_in(&self, user: &str, password: &str) -> Session {
        let a = self.try_sign_in(user, password).await;
        assert_eq!(a.status, 303, "sign-in of {user}: {}", a.text);
        let cookie = a.cookie("cairn_session").expect("a session cookie is set");
        let mut s = Session {
            cookie,
            csrf: String::new(),
        };
        let home = self
            .send(Method::GET, "/", &Auth::Session(s.clone()), Body::Empty)
            .await;
        assert_eq!(home.status, 200, "{}", home.text);
        s.csrf = form_token(&home.text).expect("a signed-in page carries the form token");
        s
    }

    /// Enrols a phone for a counter and returns the answer.
    pub async fn enrol(&self, user: &str, pin: &str, site: &str) -> Answer {
        let a = self
            .send(
                Method::POST,
                "/api/v1/devices",
                &Auth::Anonymous,
                Body::Json(
                    json!({"user": user, "pin": pin, "site": site, "device_name": "test phone"}),
                ),
            )
            .await;
        if let Some(token) = a.json().get("token").and_then(Value::as_str) {
            self.phones
                .lock()
                .expect("the phone map is never poisoned")
                .insert(token.to_string(), user.to_string());
        }
        a
    }

    /// Says on each event that `token`'s person made it, where the event does not say
    /// (events sent with a token `enrol` did not give are left as they are).
    pub fn made_by(&self, token: &str, events: Vec<Value>) -> Vec<Value> {
        let user = self
            .phones
            .lock()
            .expect("the phone map is never poisoned")
            .get(token)
            .cloned();
        match user {
            Some(user) => made_by(&user, events),
            None => events,
        }
    }

    /// Returns a sync request body whose events say that `token`'s person made them.
    pub fn stamped(&self, token: &str, body: &Value) -> Value {
        let mut body = body.clone();
        if let Some(events) = body.get_mut("events").and_then(Value::as_array_mut) {
            *events = self.made_by(token, std::mem::take(events));
        }
        body
    }

    /// Enrols a phone for a counter at site T and returns its device token.
    pub async fn phone(&self, user: &str, pin: &str) -> String {
        let a = self.enrol(user, pin, "T").await;
        assert_eq!(a.status, 201, "{}", a.text);
        a.json()["token"].as_str().unwrap().to_string()
    }

    /// Sends a phone's events to site T with the phone's clock at the real clock and a
    /// round trip of `rtt_ms`; every event must be accepted. Returns the answer.
    pub async fn sync(&self, token: &str, events: Vec<Value>, rtt_ms: i64) -> Value {
        let v = self.sync_answer(token, events, rtt_ms).await;
        for res in v["results"].as_array().unwrap() {
            assert_eq!(res["status"], "accepted", "{v}");
        }
        v
    }

    /// Sends a phone's events as `sync` does, whatever becomes of each; the request itself
    /// must be answered 200. Returns the answer.
    pub async fn sync_answer(&self, token: &str, events: Vec<Value>, rtt_ms: i64) -> Value {
        let events = self.made_by(token, events);
        let body = json!({"device_clock": cairn::time::Timestamp::now().0, "rtt_ms": rtt_ms,
                          "events": events});
        let auth = Auth::Bearer(token.to_string());
        let a = self
            .send(
                Method::POST,
                "/api/v1/sites/T/sync",
                &auth,
                Body::Json(body),
            )
            .await;
        assert_eq!(a.status, 200, "{}", a.text);
        a.json()
    }

    /// Creates site `T` with two bins, a plain item `S1` and a lot-tracked
    /// item `L1`, an admin `root`, and makes `get`/`post` send root's admin token.
    pub async fn small_site(&self) {
        self.create_site("T").await;
        self.add_user(
            ROOT_USER,
            "T",
            &[Role::Admin, Role::InventoryManager],
            ROOT_PASSWORD,
            None,
        )
        .await;
        let token = self.issue_token("T", ROOT_USER, Role::Admin).await;
        self.token.set(token).expect("small_site runs once per app");
        let (s, b) = self
            .post(
                "/api/v1/sites/T/bins",
                &json!([
                    {"zone": "A", "aisle": 1, "bay": 1, "level": 1, "side": "L"},
                    {"zone": "A", "aisle": 1, "bay": 2, "level": 1, "side": "R"}
                ]),
            )
            .await;
        assert_eq!(s, 200, "{b}");
        let (s, b) = self
            .post(
                "/api/v1/sites/T/items",
                &json!([
                    {"sku": "S1", "description": "Hex bolt M8", "base_unit": "box", "unit_cost_minor": 450},
                    {"sku": "L1", "description": "Sealant", "base_unit": "each", "unit_cost_minor": 640, "lot_tracked": true}
                ]),
            )
            .await;
        assert_eq!(s, 200, "{b}");
    }

    /// Adds counter cora (PIN 4821) to site T and stores the list of 2026-03-03 with
    /// `counters` runs, so run and phone routes reach their checks.
    pub async fn cora_and_a_list(&self, counters: u32) {
        self.add_user("cora", "T", &[Role::Counter], PASSWORD, Some("4821"))
            .await;
        let (s, b) = self
            .post(
                "/api/v1/sites/T/count-lists",
                &json!({"day": "2026-03-03", "counters": counters, "minutes": 60}),
            )
            .await;
        assert_eq!(s, 200, "{b}");
    }

    /// Creates site T (as `small_site`) with a negative balance on A-01-01-1 and a short pick reported on A-01-02-1.
    pub async fn site_with_triggers(&self) {
        self.small_site().await;
        let (s, b) = self
            .post(
                "/api/v1/sites/T/movements",
                &json!([
                    movement(
                        "m1",
                        "A-01-01-1",
                        "S1",
                        10,
                        "receipt",
                        "2026-03-02T08:00:00Z"
                    ),
                    movement("m2", "A-01-01-1", "S1", -12, "pick", "2026-03-02T09:00:00Z"),
                ]),
            )
            .await;
        assert_eq!(s, 200, "{b}");
        let (s, b) = self
            .post(
                "/api/v1/sites/T/short-picks",
                &json!([{"id": "sp1", "bin": "A-01-02-1", "sku": "L1", "short_qty": 3,
                         "reported_at": "2026-03-02T10:00:00Z"}]),
            )
            .await;
        assert_eq!((s, b["recorded"].as_u64()), (200, Some(1)), "{b}");
    }
}

/// Site T of the counting suites and the device tokens of its counters' phones.
pub struct PhoneSite {
    pub app: TestApp,
    pub cora: String,
    pub dan: String,
}

/// Starts an app with site T (`small_site`), counters cora (PIN 4821) and dan
/// (PIN 5932), each with an enrolled phone, and then `others`.
pub async fn phone_site(others: &[Person<'_>]) -> PhoneSite {
    let app = spawn_app().await;
    app.small_site().await;
    app.add_people(&[("cora", &[Role::Counter], Some("4821"))])
        .await;
    let cora = app.phone("cora", "4821").await;
    app.add_people(&[("dan", &[Role::Counter], Some("5932"))])
        .await;
    let dan = app.phone("dan", "5932").await;
    app.add_people(others).await;
    PhoneSite { app, cora, dan }
}

/// The two bins of `small_site`.
pub const BIN_1: &str = "A-01-01-1";
pub const BIN_2: &str = "A-01-02-1";
/// The day of the count list of `review_site`.
pub const REVIEW_DAY: &str = "2026-03-03";

/// Returns the GTIN-13 of one unit (each) of S1 at `review_site`: its first twelve
/// digits with the check digit of GS1 General Specifications §7.9 (mod-10 weights
/// 3-1) worked out by the scanning crate.
pub fn s1_each_gtin() -> String {
    let body = "501234567890";
    let check = cairn_scan::gtin_check_digit(body).expect("digits");
    format!("{body}{check}")
}

/// Makes site T of the review suites (on `small_site`): S1's each has the GTIN
/// `s1_each_gtin()`; the book holds 40 of S1 (unit cost 4.50) in BIN_1 and 10 in
/// BIN_2, received five weeks before REVIEW_DAY, so building its list (one run) gives S1
/// its first class, C (history enough, no issues); cora (PIN 4821) and dan (PIN 5932)
/// count, ines is the inventory manager; then `extra` people join.
pub async fn review_site(app: &TestApp, extra: &[Person<'_>]) {
    app.small_site().await;
    app.post_ok(
        "/api/v1/sites/T/packs",
        &json!([{"sku": "S1", "gtin": s1_each_gtin(), "level": "each", "units": 1}]),
    )
    .await;
    app.post_ok(
        "/api/v1/sites/T/movements",
        &json!([
            movement("r1", BIN_1, "S1", 40, "receipt", "2026-01-27T08:00:00Z"),
            movement("r2", BIN_2, "S1", 10, "receipt", "2026-01-27T08:00:00Z")
        ]),
    )
    .await;
    app.post_ok(
        "/api/v1/sites/T/count-lists",
        &json!({"day": REVIEW_DAY, "counters": 1, "minutes": 120}),
    )
    .await;
    app.add_people(&[
        ("cora", &[Role::Counter], Some("4821")),
        ("dan", &[Role::Counter], Some("5932")),
        ("ines", &[Role::InventoryManager], None),
    ])
    .await;
    app.add_people(extra).await;
}

/// Builds one movement as the API takes it.
pub fn movement(id: &str, bin: &str, sku: &str, qty: i64, kind: &str, at: &str) -> Value {
    json!({"id": id, "bin": bin, "sku": sku, "qty": qty, "kind": kind, "event_at": at})
}

/// Runs the real `cairn` binary with `input` on standard input.
pub fn cairn_with_input(args: &[&str], input: &str) -> std::process::Output {
    use std::io::Write as _;
    use std::process::{Command, Stdio};
    let mut child = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the cairn binary runs");
    child
        .stdin
        .take()
        .expect("stdin was piped")
        .write_all(input.as_bytes())
        .expect("the child reads its stdin");
    child.wait_with_output().expect("the child exits")
}

impl TestApp {
    /// Returns the test's `--db` value for a CLI run: the PostgreSQL URL when the suites
    /// run there, else the SQLite file's path.
    pub fn db_arg(&self) -> String {
        match &self.pg {
            Some(pg) => pg.url.clone(),
            None => self.db.display().to_string(),
        }
    }

    /// Reads one integer with a statement both stores understand (a count, a sum cast to
    /// an integer), from the test's database beside the API.
    pub fn sql_i64(&self, sql: &str) -> i64 {
        sql_i64_on(self.pg.as_ref().map(|p| p.url.as_str()), &self.db, sql)
    }

    /// Reads rows with a statement both stores understand, every column text (cast
    /// numbers with `cast(x as text)`; an empty value reads as ""), from the test's
    /// database beside the API.
    pub fn sql_rows(&self, sql: &str) -> Vec<Vec<String>> {
        sql_rows_on(self.pg.as_ref().map(|p| p.url.as_str()), &self.db, sql)
    }

    /// Runs one statement on the test's database beside the API; returns the rows it
    /// changed, or the database's error text.
    pub fn sql_exec(&self, sql: &str) -> Result<u64, String> {
        match &self.pg {
            Some(pg) => on_pg(&pg.url, sql, |c, sql| async move {
                c.execute(sql.as_str(), &[]).await
            }),
            None => sqlite_file(&self.db)
                .execute(sql, [])
                .map(|n| n as u64)
                .map_err(|e| e.to_string()),
        }
    }
}

/// Reads one integer from the PostgreSQL database `pg` if given, else the SQLite `file`.
/// Reads rows as text (see `TestApp::sql_rows`) from the PostgreSQL database `pg`, or else
/// from the SQLite `file`.
pub fn sql_rows_on(pg: Option<&str>, file: &std::path::Path, sql: &str) -> Vec<Vec<String>> {
    match pg {
        Some(url) => on_pg(url, sql, |c, sql| async move {
            c.query(sql.as_str(), &[]).await.map(|rows| {
                rows.iter()
                    .map(|r| {
                        (0..r.len())
                            .map(|i| r.get::<_, Option<String>>(i).unwrap_or_default())
                            .collect()
                    })
                    .collect()
            })
        })
        .unwrap_or_else(|e| panic!("{sql}: {e}")),
        None => {
            let c = sqlite_file(file);
            let mut q = c.prepare(sql).unwrap_or_else(|e| panic!("{sql}: {e}"));
            let n = q.column_count();
            q.query_map([], |r| {
                (0..n)
                    .map(|i| r.get::<_, Option<String>>(i).map(Option::unwrap_or_default))
                    .collect()
            })
            .unwrap()
            .map(Result::unwrap)
            .collect()
        }
    }
}

/// Reads one integer (see `TestApp::sql_i64`) from `pg`, or else from the SQLite `file`.
pub fn sql_i64_on(pg: Option<&str>, file: &std::path::Path, sql: &str) -> i64 {
    match pg {
        Some(url) => on_pg(url, sql, |c, sql| async move {
            c.query_one(sql.as_str(), &[])
                .await
                .map(|r| r.get::<_, i64>(0))
        })
        .unwrap_or_else(|e| panic!("{sql}: {e}")),
        None => sqlite_file(file)
            .query_row(sql, [], |r| r.get(0))
            .unwrap_or_else(|e| panic!("{sql}: {e}")),
    }
}

/// The database of a test that drives the `cairn` binary without a server: the SQLite
/// `file`, or a new PostgreSQL database of its own when the suites run there (dropped
/// with it). Reads as the `--db` value.
pub struct CliDb {
    file: PathBuf,
    pg: Option<PgTestDb>,
}

impl CliDb {
    /// Names the test's database (`file` is used on SQLite only).
    pub fn new(file: PathBuf) -> Self {
        Self {
            file,
            pg: PgTestDb::create(),
        }
    }

    /// Reads one integer with a statement both stores understand.
    pub fn sql_i64(&self, sql: &str) -> i64 {
        sql_i64_on(self.pg.as_ref().map(|p| p.url.as_str()), &self.file, sql)
    }
}

impl std::ops::Deref for CliDb {
    type Target = str;
    fn deref(&self) -> &str {
        match &self.pg {
            Some(pg) => &pg.url,
            None => self.file.to_str().expect("the temporary path is UTF-8"),
        }
    }
}

/// Runs `f` with a connection to `url`, on a thread of its own (callers are inside a
/// runtime); an error comes back as the server's own words.
fn on_pg<T: Send + 'static, F, Fut>(url: &str, sql: &str, f: F) -> Result<T, String>
where
    F: FnOnce(std::sync::Arc<tokio_postgres::Client>, String) -> Fut + Send + 'static,
    Fut: std::future::Future<Output = Result<T, tokio_postgres::Error>>,
{
    let (url, sql) = (url.to_string(), sql.to_string());
    std::thread::spawn(move || {
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .expect("a runtime for the test's statement");
        rt.block_on(async {
            let (config, tls) = cairn::store::postgres::connect::read_url(&url)
                .expect("the test's database URL reads");
            let (client, conn) = config
                .connect(tls)
                .await
                .expect("the test's database answers");
            let driver = tokio::spawn(conn);
            let client = std::sync::Arc::new(client);
            let out = f(client.clone(), sql)
                .await
                .map_err(|e| match e.as_db_error() {
                    Some(db) => db.message().to_string(),
                    None => e.to_string(),
                });
            drop(client);
            let _ = driver.await;
            out
        })
    })
    .join()
    .expect("the test's statement runs")
}

/// Opens the test's SQLite file itself. **SQLite-specific**: every test that reads or writes
/// the database beside the API (append-only triggers, integrity checks, rows a check needs
/// and no route shows, hand-built history) comes through here, so a run on another store
/// knows which checks to port or skip.
pub fn sqlite_file(db: impl AsRef<std::path::Path>) -> rusqlite::Connection {
    let db = db.as_ref();
    rusqlite::Connection::open(db)
        .unwrap_or_else(|e| panic!("the test's database {} opens: {e}", db.display()))
}

/// Returns each table's row count and a SHA-256 of its every row, in a stable order: what
/// a refused request must leave unchanged.
pub fn table_contents(db: &std::path::Path) -> std::collections::BTreeMap<String, (i64, String)> {
    use sha2::{Digest, Sha256};
    let c = sqlite_file(db);
    let names: Vec<String> = c
        .prepare("select name from sqlite_master where type = 'table' and name not like 'sqlite_%'")
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    names
        .into_iter()
        .map(|n| {
            let mut stmt = c
                .prepare(&format!("select * from \"{n}\" order by 1"))
                .unwrap();
            let cols = stmt.column_count();
            let mut h = Sha256::new();
            let mut rows = stmt.query([]).unwrap();
            let mut count = 0;
            while let Some(row) = rows.next().unwrap() {
                count += 1;
                for i in 0..cols {
                    let v: rusqlite::types::Value = row.get(i).unwrap();
                    h.update(format!("{v:?}\u{1f}").as_bytes());
                }
                h.update(b"\x1e");
            }
            (n, (count, format!("{:x}", h.finalize())))
        })
        .collect()
}

/// Starts `cairn serve` over `db` on 127.0.0.1 port 0 as a child process (one that can be
/// killed with SIGKILL); returns it and its base URL, read from its first line.
pub fn serve_child(db: &str) -> (std::process::Child, String) {
    use std::io::BufRead;
    let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(["serve", "--db", db, "--listen", "127.0.0.1:0"])
        .env("RUST_LOG", "error")
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::null())
        .spawn()
        .expect("cairn serve starts");
    let mut line = String::new();
    std::io::BufReader::new(child.stdout.take().unwrap())
        .read_line(&mut line)
        .unwrap();
    let url = line
        .split(" at ")
        .nth(1)
        .unwrap_or_else(|| panic!("the first line names the address: {line:?}"))
        .trim()
        .trim_end_matches('/')
        .to_string();
    (child, url)
}
