//! `cairn loadtest`: drives the sync endpoint of a real server on loopback with N
//! simulated phones for a bounded time, then reports events per second and request
//! latency (p50, p99), beside the raw SQLite insert ceiling of the same rows measured in
//! the same run (plain batched INSERTs into the same schema, same durability).
//!
//! Everything runs in one process on a fresh temporary database: the server, the phones
//! (one task each, one request in flight each) and the ceiling. `servers` runs the same
//! phones against one and then two `cairn serve` processes on PostgreSQL.

pub mod servers;

use crate::accounts::audit::{Action, Actor, AuditEvent};
use crate::accounts::secret::{self, API_TOKEN_PREFIX, DEVICE_TOKEN_PREFIX, Secret, Token};
use crate::accounts::store::{NewApiToken, NewDevice, NewUser};
use crate::accounts::{Role, UserName, throttle};
use crate::config::Config;
use crate::master::{NewSite, SiteCode};
use crate::store::Synchronous;
use crate::time::Timestamp;
use crate::{AppState, backup};
use anyhow::{Context, ensure};
use cairn_scan::wire::MAX_SYNC_EVENTS;
use serde_json::{Value, json};
use std::time::{Duration, Instant};

/// The load's shape.
#[derive(Debug, Clone)]
pub struct Spec {
    pub phones: usize,
    pub seconds: u64,
    pub batch: usize,
    pub synchronous: Synchronous,
    /// Each phone sends once per interval (staggered); zero sends back to back, which
    /// measures the ceiling of throughput but queues every phone behind the writer.
    pub interval: Duration,
}

/// What the load measured.
#[derive(Debug, Clone)]
pub struct Outcome {
    pub requests: u64,
    pub events: u64,
    pub elapsed: Duration,
    pub p50_ms: f64,
    pub p99_ms: f64,
    pub max_ms: f64,
    pub ceiling_events_per_s: f64,
}

impl std::fmt::Display for Outcome {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let rate = self.events as f64 / self.elapsed.as_secs_f64();
        write!(
            f,
            "{} requests, {} events in {:.1} s: {:.0} events/s; latency p50 {:.1} ms, p99 {:.1} ms, max {:.1} ms\n\
             raw SQLite insert ceiling of the same rows: {:.0} events/s; ratio {:.2}",
            self.requests,
            self.events,
            self.elapsed.as_secs_f64(),
            rate,
            self.p50_ms,
            self.p99_ms,
            self.max_ms,
            self.ceiling_events_per_s,
            rate / self.ceiling_events_per_s
        )
    }
}

/// Runs the load and returns its figures.
pub async fn run(spec: Spec) -> anyhow::Result<Outcome> {
    ensure!(
        (2..=MAX_SYNC_EVENTS).contains(&spec.batch),
        "--batch is 2 to {MAX_SYNC_EVENTS}"
    );
    ensure!(spec.phones >= 1, "--phones is at least 1");
    let dir = tempfile_dir()?;
    let db = dir.join("load.db");
    let state = AppState::open(Config {
        db: db.clone().into(),
        synchronous: spec.synchronous,
        ..Config::default()
    })?;
    let password = LoadSecrets::new().await?;
    let (tokens, admin) = set_up(&state, "LT", 0, spec.phones, &password).await?;
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await?;
    let base = format!("http://{}", listener.local_addr()?);
    let (stop_tx, stop_rx) = tokio::sync::oneshot::channel::<()>();
    let served = state.clone();
    let server = tokio::spawn(async move {
        crate::run(served, listener, async {
            let _ = stop_rx.await;
        })
        .await
    });
    master_data(&base, "LT", &admin, spec.phones).await?;
    // The schema and master data without any load, for the ceiling.
    let empty = dir.join("ceiling.db");
    tokio::task::spawn_blocking({
        let (db, empty) = (db.clone(), empty.clone());
        move || backup::backup(&db, &empty, None, &indicatif::ProgressBar::hidden())
    })
    .await??;

    let started = Instant::now();
    let deadline = started + Duration::from_secs(spec.seconds);
    let mut phones = Vec::new();
    for (i, token) in tokens.into_iter().enumerate() {
        let base = base.clone();
        let batch = spec.batch;
        let interval = spec.interval;
        let first = started + interval.mul_f64(i as f64 / spec.phones as f64);
        phones.push(tokio::spawn(async move {
            let who = Phone {
                site: "LT".into(),
                user: i,
                bin: i,
            };
            who.run(&base, &token, batch, deadline, first, interval)
                .await
        }));
    }
    let mut latencies = Vec::new();
    let mut events = 0;
    for p in phones {
        let (l, e) = p.await??;
        latencies.extend(l);
        events += e;
    }
    let elapsed = started.elapsed();
    let _ = stop_tx.send(());
    server.await??;
    drop(state);
    latencies.sort_by(f64::total_cmp);
    let pick = |q: f64| {
        latencies
            .get(((latencies.len() as f64 - 1.0) * q).round() as usize)
            .copied()
            .unwrap_or(0.0)
    };
    let (p50_ms, p99_ms, max_ms) = (pick(0.5), pick(0.99), pick(1.0));
    let requests = latencies.len() as u64;
    let ceiling = tokio::task::spawn_blocking(move || {
        crate::store::write_ceiling(&db, &empty, spec.batch, spec.synchronous)
    })
    .await??;
    let _ = std::fs::remove_dir_all(&dir);
    Ok(Outcome {
        requests,
        events,
        elapsed,
        p50_ms,
        p99_ms,
        max_ms,
        ceiling_events_per_s: ceiling,
    })
}

fn tempfile_dir() -> anyhow::Result<std::path::PathBuf> {
    let dir = std::env::temp_dir().join(format!("cairn-loadtest-{}", uuid::Uuid::now_v7()));
    std::fs::create_dir_all(&dir)?;
    Ok(dir)
}

/// The load's accounts' password and PIN, hashed once: hashing is slow by design and not
/// what is measured.
pub(crate) struct LoadSecrets {
    password: secret::SecretHash,
    pin: secret::SecretHash,
}

impl LoadSecrets {
    pub(crate) async fn new() -> anyhow::Result<Self> {
        Ok(Self {
            password: secret::hash(Secret::new("load-test-only-password")).await?,
            pin: secret::hash(Secret::new("4821")).await?,
        })
    }
}

/// Site `code`, its admin's token, and a counter with an enrolled phone for each of
/// `phones` phones, numbered from `first` (counter `phone{n}`).
pub(crate) async fn set_up(
    state: &AppState,
    code: &str,
    first: usize,
    phones: usize,
    secrets: &LoadSecrets,
) -> anyhow::Result<(Vec<String>, String)> {
    let store = state.store.as_ref();
    let site = store
        .create_site(NewSite {
            code: SiteCode::parse(code)?,
            name: format!("Load test {code}"),
            time_zone: crate::time::day::SiteZone::UTC,
        })
        .await?;
    let (password, pin) = (&secrets.password, &secrets.pin);
    let admin_name = format!("loadadmin{}", code.to_lowercase());
    let admin = UserName::parse(&admin_name).map_err(anyhow::Error::msg)?;
    store
        .create_user(
            NewUser {
                name: admin.clone(),
                display_name: "Load admin".into(),
                password: password.clone(),
                pin: None,
                roles: vec![(site.id, Role::Admin)],
            },
            AuditEvent::now(Actor::System, Action::UserCreated, &admin_name),
        )
        .await?;
    let admin_token = Token::generate(API_TOKEN_PREFIX);
    store
        .issue_api_token(
            NewApiToken {
                user: admin,
                site: site.id,
                role: Role::Admin,
                name: "load".into(),
                token_digest: admin_token.digest(),
                at: Timestamp::now(),
            },
            AuditEvent::now(Actor::System, Action::ApiTokenIssued, "load"),
        )
        .await?;
    let mut tokens = Vec::new();
    for i in first..first + phones {
        let name = UserName::parse(&format!("phone{i}")).map_err(anyhow::Error::msg)?;
        let user = store
            .create_user(
                NewUser {
                    name: name.clone(),
                    display_name: format!("Phone {i}"),
                    password: password.clone(),
                    pin: Some(pin.clone()),
                    roles: vec![(site.id, Role::Counter)],
                },
                AuditEvent::now(Actor::System, Action::UserCreated, name.as_str()),
            )
            .await?;
        let token = Token::generate(DEVICE_TOKEN_PREFIX);
        store
            .enrol_device(
                NewDevice {
                    user,
                    site: site.id,
                    name: "load".into(),
                    token_digest: token.digest(),
                    at: Timestamp::now(),
                },
                throttle::account_key(name.as_str()),
                AuditEvent::now(Actor::System, Action::DeviceEnrolled, "").at_site(site.id),
            )
            .await?;
        tokens.push(token.expose().to_string());
    }
    Ok((tokens, admin_token.expose().to_string()))
}

/// One bin per phone and one item at site `code`, through the API.
pub(crate) async fn master_data(
    base: &str,
    code: &str,
    admin: &str,
    phones: usize,
) -> anyhow::Result<()> {
    let bins: Vec<Value> = (0..phones)
        .map(|i| json!({"zone": "A", "aisle": 1 + i / 90, "bay": 1 + i % 90, "level": 1, "side": "L"}))
        .collect();
    let client = reqwest::Client::new();
    for (path, body) in [
        (format!("/api/v1/sites/{code}/bins"), json!(bins)),
        (
            format!("/api/v1/sites/{code}/items"),
            json!([{"sku": "LOAD-1", "description": "Load item", "base_unit": "each", "unit_cost_minor": 100}]),
        ),
    ] {
        let r = client
            .post(format!("{base}{path}"))
            .bearer_auth(admin)
            .json(&body)
            .send()
            .await?;
        let status = r.status();
        ensure!(
            status.is_success(),
            "setting up {path}: {status} {}",
            r.text().await?
        );
    }
    Ok(())
}

/// One phone: counter `phone{user}` counting the `bin`th bin of `site`.
pub(crate) struct Phone {
    pub site: String,
    pub user: usize,
    pub bin: usize,
}

impl Phone {
    /// Sends passes of `batch` events until the deadline; returns each request's
    /// latency in ms and the events accepted.
    pub(crate) async fn run(
        &self,
        base: &str,
        token: &str,
        batch: usize,
        deadline: Instant,
        first: Instant,
        interval: Duration,
    ) -> anyhow::Result<(Vec<f64>, u64)> {
        let mut next = first;
        let client = reqwest::Client::new();
        let i = self.bin;
        let bin = format!("A-{:02}-{:02}-1", 1 + i / 90, 1 + i % 90);
        let mut latencies = Vec::new();
        let mut accepted = 0;
        let mut rtt: Option<i64> = None;
        loop {
            if !interval.is_zero() {
                tokio::time::sleep_until(next.into()).await;
                next += interval;
            }
            if Instant::now() >= deadline {
                break;
            }
            let now = chrono::Utc::now().timestamp_millis();
            // Events are made before the request is sent, never after its device_clock.
            let start = now - batch as i64;
            let pass = uuid::Uuid::now_v7().to_string();
            // The phone belongs to counter phone{user} (set_up).
            let user = format!("phone{}", self.user);
            let mut events = vec![json!({"id": pass, "at": start, "user": user, "count": pass,
                                     "task": null, "bin": bin, "type": "bin_opened", "label": ""})];
            for k in 1..batch {
                events.push(
                json!({"id": uuid::Uuid::now_v7().to_string(), "at": start + k as i64,
                "user": user, "count": pass, "task": null, "bin": bin, "type": "line", "sku": "LOAD-1",
                "qty": 1 + (k % 9) as i64, "lot": "", "entry": "keypad"}),
            );
            }
            let body = json!({"device_clock": now, "rtt_ms": rtt, "events": events});
            let sent = Instant::now();
            let r = client
                .post(format!("{base}/api/v1/sites/{}/sync", self.site))
                .bearer_auth(token)
                .json(&body)
                .send()
                .await
                .context("a sync request failed")?;
            ensure!(r.status().is_success(), "sync answered {}", r.status());
            let answer: Value = r.json().await?;
            let took = sent.elapsed();
            rtt = Some(took.as_millis() as i64);
            latencies.push(took.as_secs_f64() * 1e3);
            accepted += answer["results"].as_array().map_or(0, |r| {
                r.iter().filter(|r| r["status"] == "accepted").count()
            }) as u64;
        }
        Ok((latencies, accepted))
    }
}
