//! A deterministic simulation of phones syncing against the real server over loopback.
//! Each seed scripts what four counters count and what a host system posts, then plays
//! it twice: once with faults (phones offline for random spells, skewed and drifting
//! clocks, batches reordered, duplicated, resent after a lost answer and cut off mid-body,
//! the server restarted at random points) and once without. After every seed:
//!
//! - every acknowledged event is stored exactly once, and nothing else is stored;
//! - every count line is applied once (one row per line event, undone lines excluded once);
//! - every acknowledged movement is stored once and balances equal the sum of movements;
//! - the counts (passes, line sums per key, netting results when there are any) equal
//!   those of the fault-free run;
//! - on PostgreSQL, the fault-free run also plays on a SQLite file and both stores come
//!   to the same counts and balances (the two stores' differential test over HTTP).
//!
//! One decision stream drives everything, so a seed replays the same requests in the same
//! order. `CAIRN_SIM_SEEDS` (default 100) sets how many seeds run, `CAIRN_SIM_FIRST_SEED`
//! the first: `CAIRN_SIM_SEEDS=5000 cargo test --release --test sim`.

mod common;

use cairn::AppState;
use cairn::accounts::Role;
use cairn::config::Config;
use cairn::store::Synchronous;
use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde_json::{Value, json};
use std::collections::{BTreeMap, HashMap, HashSet};
use std::path::PathBuf;
use std::time::Duration;

const PHONES: usize = 4;
const DEFAULT_SEEDS: u64 = 100;
/// Passes each phone counts per seed, and lines per pass at most.
const PASSES: usize = 3;
const MAX_LINES: usize = 4;
/// Most events a phone sends in one request.
const MAX_BATCH: usize = 12;
const BINS: [&str; 2] = ["A-01-01-1", "A-01-02-1"];
/// 2026-03-03T09:00:00Z in ms: the base of the scripted ids.
const BASE_MS: u64 = 1_772_528_400_000;

/// The site every run starts from: enrolled phones and the host's token.
struct Template {
    db: PathBuf,
    /// The template's database when the suites run on PostgreSQL.
    pg: Option<common::PgTestDb>,
    phones: Vec<String>,
    host: String,
    each_gtin: String,
    _dir: tempfile::TempDir,
}

/// The template on the store the switch names, or on SQLite whatever it says.
async fn template_on(sqlite: bool) -> Template {
    let mut app = if sqlite {
        common::spawn_sqlite_app().await
    } else {
        common::spawn_app().await
    };
    app.small_site().await;
    let body = "501234567890";
    let each_gtin = format!("{body}{}", cairn_scan::gtin_check_digit(body).unwrap());
    let (s, b) = app
        .post(
            "/api/v1/sites/T/packs",
            &json!([{"sku": "S1", "gtin": each_gtin, "level": "each", "units": 1}]),
        )
        .await;
    assert_eq!(s, 200, "{b}");
    let mut phones = Vec::new();
    for i in 0..PHONES {
        let name = format!("counter{i}");
        app.add_user(
            &name,
            "T",
            &[Role::Counter],
            "test-only-password",
            Some("4821"),
        )
        .await;
        let a = app.enrol(&name, "4821", "T").await;
        assert_eq!(a.status, 201, "{}", a.text);
        phones.push(a.json()["token"].as_str().unwrap().to_string());
    }
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("template.db");
    let host = app.token.get().unwrap().clone();
    // On PostgreSQL the app's database is the template: each run copies it.
    let pg = app.pg.take();
    if pg.is_none() {
        cairn::backup::backup(&app.db, &db, None, &indicatif::ProgressBar::hidden())
            .expect("the template copies");
    }
    drop(app);
    Template {
        db,
        pg,
        phones,
        host,
        each_gtin,
        _dir: dir,
    }
}

/// One run's database: a copy of the template's, a file or a PostgreSQL database.
struct RunDb {
    file: PathBuf,
    pg: Option<common::PgTestDb>,
}

impl RunDb {
    fn copy_of(t: &Template, file: PathBuf) -> Self {
        let pg = t.pg.as_ref().and_then(common::PgTestDb::copy_of);
        if pg.is_none() {
            std::fs::copy(&t.db, &file).unwrap();
        }
        RunDb { file, pg }
    }

    fn location(&self) -> cairn::store::DbLocation {
        match &self.pg {
            Some(pg) => cairn::store::DbLocation::Postgres(pg.url.clone()),
            None => self.file.clone().into(),
        }
    }

    fn rows(&self, sql: &str) -> Vec<Vec<String>> {
        common::sql_rows_on(self.pg.as_ref().map(|p| p.url.as_str()), &self.file, sql)
    }

    fn int(&self, sql: &str) -> i64 {
        common::sql_i64_on(self.pg.as_ref().map(|p| p.url.as_str()), &self.file, sql)
    }
}

/// A server over one database that can be stopped and started again.
struct Server {
    db: cairn::store::DbLocation,
    base: String,
    stop: Option<(
        tokio::sync::oneshot::Sender<()>,
        tokio::task::JoinHandle<()>,
    )>,
}

impl Server {
    async fn start(db: cairn::store::DbLocation) -> Self {
        let mut s = Server {
            db,
            base: String::new(),
            stop: None,
        };
        s.boot().await;
        s
    }

    async fn boot(&mut self) {
        let state = AppState::open(Config {
            db: self.db.clone(),
            // The simulation checks logic, not power cuts (tests/crash.rs does those).
            synchronous: Synchronous::Normal,
            readers: 2,
            ..Config::default()
        })
        .expect("the database opens");
        let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
        self.base = format!("http://{}", listener.local_addr().unwrap());
        let (tx, rx) = tokio::sync::oneshot::channel::<()>();
        let task = tokio::spawn(async move {
            cairn::run(state, listener, async {
                let _ = rx.await;
            })
            .await
            .unwrap();
        });
        self.stop = Some((tx, task));
    }

    async fn halt(&mut self) {
        if let Some((tx, task)) = self.stop.take() {
            let _ = tx.send(());
            task.await.unwrap();
        }
    }

    async fn restart(&mut self) {
        self.halt().await;
        self.boot().await;
    }
}

/// A scripted event, without its time (stamped by the phone's clock when it happens).
#[derive(Clone)]
struct Scripted {
    id: String,
    body: Value,
    line: bool,
}

/// What one seed does: each phone's events in order, and the host's movement batches.
struct Script {
    phones: Vec<Vec<Scripted>>,
    movements: Vec<Value>,
}

fn v7(rng: &mut ChaCha8Rng, n: &mut u64) -> String {
    *n += 1;
    let bytes: [u8; 10] = rng.random();
    uuid::Builder::from_unix_timestamp_millis(BASE_MS + *n, &bytes)
        .into_uuid()
        .to_string()
}

fn script(seed: u64, gtin: &str) -> Script {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut n = 0;
    let mut phones = Vec::new();
    for _ in 0..PHONES {
        let mut events = Vec::new();
        for _ in 0..PASSES {
            let bin = BINS[rng.random_range(0..BINS.len())];
            let count = v7(&mut rng, &mut n);
            let ev = |id: String, kind: &str, extra: Value| {
                let mut e =
                    json!({"id": id, "count": count, "task": null, "bin": bin, "type": kind});
                e.as_object_mut()
                    .unwrap()
                    .extend(extra.as_object().unwrap().clone());
                e
            };
            events.push(Scripted {
                id: count.clone(),
                body: ev(count.clone(), "bin_opened", json!({"label": ""})),
                line: false,
            });
            let lines = rng.random_range(0..=MAX_LINES);
            let mut line_ids = Vec::new();
            for _ in 0..lines {
                let id = v7(&mut rng, &mut n);
                let body = if rng.random_bool(0.7) {
                    let packs = rng.random_range(1..=20);
                    ev(
                        id.clone(),
                        "line",
                        json!({"sku": "S1", "gtin": gtin, "packs": packs, "qty": packs, "lot": "", "entry": "scan"}),
                    )
                } else {
                    let lot = ["LOT-A", "LOT-B"][rng.random_range(0..2)];
                    ev(
                        id.clone(),
                        "line",
                        json!({"sku": "L1", "qty": rng.random_range(1..=50), "lot": lot, "entry": "keypad"}),
                    )
                };
                events.push(Scripted {
                    id: id.clone(),
                    body,
                    line: true,
                });
                line_ids.push(id);
            }
            if let Some(undone) = line_ids.first().filter(|_| rng.random_bool(0.3)) {
                let id = v7(&mut rng, &mut n);
                events.push(Scripted {
                    id: id.clone(),
                    body: ev(id, "undo", json!({"line": undone})),
                    line: false,
                });
            }
            if lines == 0 {
                let id = v7(&mut rng, &mut n);
                events.push(Scripted {
                    id: id.clone(),
                    body: ev(id, "bin_empty", json!({})),
                    line: false,
                });
            }
            let id = v7(&mut rng, &mut n);
            events.push(Scripted {
                id: id.clone(),
                body: ev(id, "bin_done", json!({})),
                line: false,
            });
        }
        phones.push(events);
    }
    let movements = (0..rng.random_range(1..=4))
        .map(|b| {
            json!((0..rng.random_range(1..=20))
                .map(|i| {
                    let qty: i64 = rng.random_range(-5..=30);
                    json!({"id": format!("s{seed}-{b}-{i}"), "bin": BINS[rng.random_range(0..2)],
                           "sku": "S1", "qty": if qty == 0 { 1 } else { qty },
                           "kind": if qty < 0 { "adjustment" } else { "receipt" },
                           "event_at": format!("2026-03-02T08:{:02}:{:02}Z", b, i)})
                })
                .collect::<Vec<_>>())
        })
        .collect();
    Script { phones, movements }
}

/// One phone during a run.
struct Phone {
    token: String,
    next: usize,
    outbox: Vec<Value>,
    acked: HashSet<String>,
    /// Copies of acknowledged events, resent now and then as a confused phone would.
    sent: Vec<Value>,
    skew_ms: i64,
    drift_ppm: i64,
    offline_until: u64,
    rtt_ms: Option<i64>,
}

impl Phone {
    fn clock(&self, started: std::time::Instant) -> i64 {
        let now = chrono::Utc::now().timestamp_millis();
        let elapsed = started.elapsed().as_millis() as i64;
        now + self.skew_ms + elapsed * self.drift_ppm / 1_000_000
    }
}

/// Whether a run injects faults.
#[derive(Clone, Copy, PartialEq)]
enum Mode {
    Faulty,
    Clean,
}

/// Every acknowledgement a run received, for the checks.
#[derive(Default)]
struct Acks {
    events: HashSet<String>,
    movements: HashSet<String>,
}

async fn sync_once(
    client: &reqwest::Client,
    server: &Server,
    phone: &mut Phone,
    batch: Vec<Value>,
    started: std::time::Instant,
    cut: Option<f64>,
    lose_answer: bool,
) -> Option<Vec<Value>> {
    let body =
        json!({"device_clock": phone.clock(started), "rtt_ms": phone.rtt_ms, "events": batch});
    let mut bytes = serde_json::to_vec(&body).unwrap();
    if let Some(f) = cut {
        bytes.truncate(((bytes.len() as f64) * f) as usize);
    }
    let sent = std::time::Instant::now();
    let r = client
        .post(format!("{}/api/v1/sites/T/sync", server.base))
        .bearer_auth(&phone.token)
        .header("content-type", "application/json")
        .body(bytes)
        .send()
        .await
        .ok()?;
    let status = r.status().as_u16();
    let answer: Value = r.json().await.ok()?;
    if cut.is_some() {
        assert_eq!(status, 400, "a cut-off body is refused whole: {answer}");
        return None;
    }
    assert_eq!(status, 200, "{answer}");
    phone.rtt_ms = Some(sent.elapsed().as_millis() as i64);
    if lose_answer {
        return None;
    }
    Some(answer["results"].as_array().unwrap().clone())
}

async fn post_movements(
    client: &reqwest::Client,
    server: &Server,
    token: &str,
    batch: &Value,
) -> bool {
    match client
        .post(format!("{}/api/v1/sites/T/movements", server.base))
        .bearer_auth(token)
        .json(batch)
        .send()
        .await
    {
        Ok(r) => {
            let status = r.status().as_u16();
            let text = r.text().await.unwrap_or_default();
            assert_eq!(status, 200, "{text}");
            true
        }
        Err(_) => false,
    }
}

/// Plays a seed's script against a fresh copy of the template.
async fn play(s: &Script, t: &Template, seed: u64, mode: Mode, db: &RunDb) -> Acks {
    let mut server = Server::start(db.location()).await;
    let client = reqwest::Client::builder()
        .timeout(Duration::from_secs(30))
        // No idle connections: a restart never waits for one to close.
        .pool_max_idle_per_host(0)
        .build()
        .unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) ^ 0xFA17);
    let faulty = mode == Mode::Faulty;
    let mut phones: Vec<Phone> = t
        .phones
        .iter()
        .map(|token| Phone {
            token: token.clone(),
            next: 0,
            outbox: Vec::new(),
            acked: HashSet::new(),
            sent: Vec::new(),
            skew_ms: if faulty {
                rng.random_range(-900_000..900_000)
            } else {
                0
            },
            drift_ppm: if faulty {
                rng.random_range(-150..=150)
            } else {
                0
            },
            offline_until: 0,
            rtt_ms: None,
        })
        .collect();
    let started = std::time::Instant::now();
    let mut acks = Acks::default();
    let mut host_next = 0;
    let mut step: u64 = 0;
    loop {
        step += 1;
        let scripts_left = phones
            .iter()
            .enumerate()
            .any(|(i, p)| p.next < s.phones[i].len());
        let outbox_left = phones.iter().any(|p| !p.outbox.is_empty());
        if !scripts_left && !outbox_left && host_next == s.movements.len() {
            break;
        }
        // Past the script, every fault stops so the run drains.
        let draining = !scripts_left;
        if faulty && !draining && rng.random_bool(0.02) {
            server.restart().await;
            continue;
        }
        let who = rng.random_range(0..=PHONES);
        if who == PHONES {
            if host_next < s.movements.len() {
                let batch = &s.movements[host_next];
                if post_movements(&client, &server, &t.host, batch).await {
                    // Lose the answer now and then: the host resends the same batch.
                    if !(faulty && !draining && rng.random_bool(0.3)) {
                        for m in batch.as_array().unwrap() {
                            acks.movements.insert(m["id"].as_str().unwrap().to_string());
                        }
                        host_next += 1;
                    }
                }
            }
            continue;
        }
        let p = &mut phones[who];
        let script = &s.phones[who];
        if p.next < script.len() && (rng.random_bool(0.6) || p.outbox.is_empty()) {
            let mut e = script[p.next].body.clone();
            e["at"] = json!(p.clock(started));
            // The template enrolled phone i for counter{i}.
            e["user"] = json!(format!("counter{who}"));
            p.outbox.push(e);
            p.next += 1;
            continue;
        }
        if p.outbox.is_empty() {
            continue;
        }
        if faulty && !draining {
            if step < p.offline_until {
                continue;
            }
            if rng.random_bool(0.08) {
                p.offline_until = step + rng.random_range(5..60);
                continue;
            }
        }
        let take = if faulty {
            rng.random_range(1..=MAX_BATCH)
        } else {
            MAX_BATCH
        };
        let mut batch: Vec<Value> = p.outbox.iter().take(take).cloned().collect();
        let (mut cut, mut lose) = (None, false);
        if faulty && !draining {
            if rng.random_bool(0.3) {
                batch.shuffle(&mut rng);
            }
            if rng.random_bool(0.2) {
                let dup = batch[rng.random_range(0..batch.len())].clone();
                batch.insert(rng.random_range(0..=batch.len()), dup);
            }
            if !p.sent.is_empty() && rng.random_bool(0.2) {
                batch.push(p.sent[rng.random_range(0..p.sent.len())].clone());
            }
            if rng.random_bool(0.08) {
                cut = Some(rng.random_range(0.05..0.95));
            }
            lose = rng.random_bool(0.15);
        }
        let Some(results) = sync_once(&client, &server, p, batch.clone(), started, cut, lose).await
        else {
            continue;
        };
        assert_eq!(results.len(), batch.len(), "one result per event sent");
        for (e, r) in batch.iter().zip(&results) {
            assert_eq!(r["status"], "accepted", "seed {seed}: {r} for {e}");
            let id = r["id"].as_str().unwrap().to_string();
            if p.acked.insert(id.clone()) {
                p.sent.push(e.clone());
            }
            acks.events.insert(id);
        }
        p.outbox
            .retain(|e| !p.acked.contains(e["id"].as_str().unwrap()));
    }
    server.halt().await;
    acks
}

/// What the counts come to, independent of clocks and arrival order.
fn counts_summary(db: &RunDb) -> BTreeMap<String, String> {
    let mut out = BTreeMap::new();
    for r in db.rows(
        "select p.uid, b.code, case when p.empty then '1' else '0' end,
                case when p.done_at is not null then 'true' else 'false' end
         from count_pass p join bin b on b.id = p.bin_id order by p.uid",
    ) {
        out.insert(
            format!("pass {}", r[0]),
            format!("{} empty={} done={}", r[1], r[2], r[3]),
        );
    }
    for r in db.rows(
        "select p.uid, i.sku, l.lot, cast(sum(l.qty) as text), cast(count(*) as text)
         from count_line l
         join count_pass p on p.id = l.pass_id join item i on i.id = l.item_id
         where not exists (select 1 from count_line_undo u where u.line_uid = l.uid)
         group by p.uid, i.sku, l.lot",
    ) {
        out.insert(
            format!("line {} {} {}", r[0], r[1], r[2]),
            format!("qty={} lines={}", r[3], r[4]),
        );
    }
    // Netting results: what each current result says about its key (the count, the book
    // value it was held to, the difference and the verdict). Windows, instants, settling
    // and superseded rows follow the server's clock and the order news arrived in, not the
    // counts, so they are left out.
    let mut rows: Vec<String> = db
        .rows(
            "select p.uid, i.sku, r.lot, coalesce(r.class, 'NULL'), cast(r.counted as text),
                    cast(r.f_star as text), cast(r.variance as text), r.status, r.verdict
             from count_result r join count_pass p on p.id = r.pass_id
             join item i on i.id = r.item_id
             where r.superseded_by is null",
        )
        .into_iter()
        .map(|r| r.join("|"))
        .collect();
    rows.sort();
    for (i, r) in rows.into_iter().enumerate() {
        out.insert(format!("result {i}"), r);
    }
    // The recounts the results asked for and still stand (one withdrawn because later news
    // settled its difference depends on when the news came), and the balances.
    for r in db.rows(
        "select b.code, t.status,
                coalesce((select p.uid || ' ' || i.sku || ' ' || r.lot from count_result r
                          join count_pass p on p.id = r.pass_id join item i on i.id = r.item_id
                          where r.id = t.recount_of), '')
         from count_task t join bin b on b.id = t.bin_id
         where t.reason = 'recount' and t.withdrawn_at is null",
    ) {
        out.insert(format!("recount {} {}", r[0], r[2]), r[1].clone());
    }
    for r in db.rows(
        "select b.code, i.sku, x.lot, cast(x.qty as text)
         from balance x join bin b on b.id = x.bin_id join item i on i.id = x.item_id
         where x.qty <> 0",
    ) {
        out.insert(format!("balance {} {} {}", r[0], r[1], r[2]), r[3].clone());
    }
    out
}

/// Counts each id of a table's `uid` column.
fn uid_counts(db: &RunDb, table: &str) -> HashMap<String, i64> {
    db.rows(&format!(
        "select uid, cast(count(*) as text) from {table} group by uid"
    ))
    .into_iter()
    .map(|r| (r[0].clone(), r[1].parse().unwrap()))
    .collect()
}

fn check(db: &RunDb, s: &Script, acks: &Acks, seed: u64) {
    if db.pg.is_none() {
        let ok = db.rows("pragma integrity_check");
        assert_eq!(ok, [["ok".to_string()]], "seed {seed}");
    }
    let scripted: usize = s.phones.iter().map(Vec::len).sum();
    assert_eq!(
        acks.events.len(),
        scripted,
        "seed {seed}: every event was acknowledged"
    );
    let events = uid_counts(db, "sync_event");
    for id in &acks.events {
        let n = events.get(id).copied().unwrap_or(0);
        assert_eq!(
            n, 1,
            "seed {seed}: acknowledged event {id} is stored {n} times"
        );
    }
    assert_eq!(
        db.int("select count(*) from sync_event") as usize,
        scripted,
        "seed {seed}: nothing unacknowledged is stored"
    );
    let line_ids: Vec<&str> = s
        .phones
        .iter()
        .flatten()
        .filter(|e| e.line)
        .map(|e| e.id.as_str())
        .collect();
    assert_eq!(
        db.int("select count(*) from count_line") as usize,
        line_ids.len(),
        "seed {seed}: one count line per line event"
    );
    let lines = uid_counts(db, "count_line");
    for id in line_ids {
        let n = lines.get(id).copied().unwrap_or(0);
        assert_eq!(n, 1, "seed {seed}: line {id} applied {n} times");
    }
    let moves: usize = s
        .movements
        .iter()
        .map(|b| b.as_array().unwrap().len())
        .sum();
    assert_eq!(acks.movements.len(), moves, "seed {seed}");
    assert_eq!(
        db.int("select count(*) from movement"),
        moves as i64,
        "seed {seed}: each movement once"
    );
    assert_eq!(
        db.int(
            "select
               (select count(*) from (select bin_id, item_id, lot, sum(qty) as s from movement
                                      group by bin_id, item_id, lot) m
                  left join balance b using (bin_id, item_id, lot)
                where coalesce(b.qty, 0) <> m.s)
             + (select count(*) from balance b where b.qty <> 0 and not exists
                  (select 1 from movement m where m.bin_id = b.bin_id and m.item_id = b.item_id
                     and m.lot = b.lot))"
        ),
        0,
        "seed {seed}: balances equal movements"
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn phones_under_faults_and_restarts_store_every_acknowledged_event_once() {
    let seeds: u64 = std::env::var("CAIRN_SIM_SEEDS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(DEFAULT_SEEDS);
    let first: u64 = std::env::var("CAIRN_SIM_FIRST_SEED")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(1);
    let t = template_on(false).await;
    // On PostgreSQL each seed's fault-free run plays on SQLite too, to compare the stores.
    let lite = if t.pg.is_some() {
        Some(template_on(true).await)
    } else {
        None
    };
    let dir = tempfile::tempdir().unwrap();
    let started = std::time::Instant::now();
    let mut stats: HashMap<&str, usize> = HashMap::new();
    for seed in first..first + seeds {
        let s = script(seed, &t.each_gtin);
        let faulty_db = RunDb::copy_of(&t, dir.path().join(format!("faulty-{seed}.db")));
        let clean_db = RunDb::copy_of(&t, dir.path().join(format!("clean-{seed}.db")));
        let acks = play(&s, &t, seed, Mode::Faulty, &faulty_db).await;
        check(&faulty_db, &s, &acks, seed);
        let clean = play(&s, &t, seed, Mode::Clean, &clean_db).await;
        check(&clean_db, &s, &clean, seed);
        let (a, b) = (counts_summary(&faulty_db), counts_summary(&clean_db));
        assert!(!a.is_empty(), "seed {seed} counted something");
        assert_eq!(
            a, b,
            "seed {seed}: the counts with faults equal the counts without"
        );
        if let Some(lite) = &lite {
            let lite_db = RunDb::copy_of(lite, dir.path().join(format!("lite-{seed}.db")));
            let played = play(&s, lite, seed, Mode::Clean, &lite_db).await;
            check(&lite_db, &s, &played, seed);
            assert_eq!(
                counts_summary(&lite_db),
                b,
                "seed {seed}: the same traffic counts the same on SQLite and PostgreSQL"
            );
            *stats.entry("compared").or_default() += 1;
            remove_file_db(&lite_db);
        }
        *stats.entry("events").or_default() += acks.events.len();
        for f in [faulty_db, clean_db] {
            remove_file_db(&f);
        }
    }
    eprintln!(
        "{seeds} seeds from {first}: {} events each way in {:.1} s; {} seeds also compared \
         with SQLite",
        stats["events"],
        started.elapsed().as_secs_f64(),
        stats.get("compared").copied().unwrap_or(0)
    );
}

/// Removes a run's SQLite file and its companions (nothing for a PostgreSQL run, whose
/// database is dropped with it).
fn remove_file_db(db: &RunDb) {
    for ext in ["", "-wal", "-shm"] {
        let _ = std::fs::remove_file(format!("{}{ext}", db.file.display()));
    }
}
