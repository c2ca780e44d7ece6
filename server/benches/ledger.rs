//! Ledger benchmarks, printed as a table for README:
//! - movements ingested through the HTTP API in batches of 500, against the raw
//!   rusqlite ceiling (plain batched INSERTs into the same schema), FULL and NORMAL;
//! - point-in-time balance look-ups over a 2,000,000-movement ledger for a typical
//!   key and for a busy key with 10,000 movements (with and without snapshots);
//! - peak memory of `cairn serve` on that ledger;
//! - time to back up and to restore that ledger's database (`cairn backup` / `restore`).
//!
//! Run: `cargo bench -p cairn-server --bench ledger`. Sizes can be lowered with
//! CAIRN_BENCH_INGEST (movements, default 200000) and CAIRN_BENCH_LEDGER
//! (default 2000000); CAIRN_BENCH_ONLY=ingest or =lookup runs one part. With
//! CAIRN_BENCH_PG=postgres://… (a server and a database to connect to) the ingest also runs
//! on PostgreSQL, against its own raw INSERT ceiling.

use cairn::AppState;
use cairn::config::Config;
use cairn::ledger::{MovementKind, NewMovement};
use cairn::master::codes::{BinCode, MovementUid, Sku};
use cairn::master::{BinRecord, ItemRecord, NewSite, SiteCode, SiteId};
use cairn::store::Progress;
use cairn::store::sqlite::ledger::{Key, balance_as_of};
use cairn::store::sqlite::{SqliteStore, Tx, master, migrate};
use cairn::store::{DbLocation, StoreOptions as OpenOptions, Synchronous};
use cairn::time::Timestamp;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde_json::{Value, json};
use std::path::Path;
use std::time::Instant;

const BATCH: usize = 500;
const BINS: usize = 2_000;
const ITEMS: usize = 1_000;
/// Base of the synthetic event times: 2026-01-05T00:00:00Z.
const T0: i64 = 1_767_571_200_000;

fn env_usize(name: &str, default: usize) -> usize {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

fn bin_code(i: usize) -> String {
    format!("A-{:02}-{:02}-{}", 1 + i / 200, 1 + (i / 5) % 40, 1 + i % 5)
}

fn uid(rng: &mut ChaCha8Rng, at: i64) -> String {
    let mut bytes = [0u8; 10];
    rng.fill(&mut bytes);
    uuid::Builder::from_unix_timestamp_millis(at as u64, &bytes)
        .into_uuid()
        .to_string()
}

/// Creates site T with `bins` bins and `items` items in a fresh database.
fn master_data(conn: &mut rusqlite::Connection, bins: usize, items: usize) -> SiteId {
    migrate::migrate(conn).unwrap();
    let tx = conn.transaction().unwrap();
    let site = master::create_site(
        &tx,
        &NewSite {
            code: SiteCode::parse("T").unwrap(),
            name: "Bench".into(),
            time_zone: cairn::time::day::SiteZone::UTC,
        },
    )
    .unwrap();
    let b: Vec<_> = (0..bins)
        .map(|i| {
            let code = if i < BINS {
                bin_code(i)
            } else {
                format!("B-{:03}-{:03}-{}", i / 1000, (i / 10) % 100, i % 10)
            };
            BinRecord {
                code: Some(code),
                zone: "A".into(),
                aisle: 1,
                bay: 1,
                level: 1,
                side: None,
                walk_seq: None,
            }
            .validate()
            .unwrap()
        })
        .collect();
    master::put_bins(&tx, site.id, &b, &Progress::default()).unwrap();
    let it: Vec<_> = (0..items)
        .map(|i| {
            ItemRecord {
                sku: format!("S{i}"),
                description: "Bench item".into(),
                base_unit: "each".into(),
                unit_cost_minor: 100,
                lot_tracked: false,
                group: None,
                packs: None,
                class: None,
            }
            .validate()
            .unwrap()
        })
        .collect();
    master::put_items(&tx, site.id, &it, &Progress::default()).unwrap();
    tx.commit().unwrap();
    site.id
}

struct Row {
    uid: String,
    bin: usize,
    item: usize,
    qty: i64,
    at: i64,
}

fn rows(n: usize, seed: u64) -> Vec<Row> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..n)
        .map(|i| {
            let at = T0 + i as i64 * 1_000;
            Row {
                uid: uid(&mut rng, at),
                bin: rng.random_range(0..BINS),
                item: rng.random_range(0..ITEMS),
                qty: rng.random_range(1..20),
                at,
            }
        })
        .collect()
}

fn connect(path: &Path, sync: Synchronous) -> rusqlite::Connection {
    let c = rusqlite::Connection::open(path).unwrap();
    c.pragma_update(None, "journal_mode", "wal").unwrap();
    c.pragma_update(None, "foreign_keys", true).unwrap();
    c.pragma_update(
        None,
        "synchronous",
        if sync == Synchronous::Full {
            "FULL"
        } else {
            "NORMAL"
        },
    )
    .unwrap();
    c
}

/// Plain batched INSERTs into the movement table of the same schema.
fn raw_ceiling(dir: &Path, rows: &[Row], sync: Synchronous) -> f64 {
    let path = dir.join(format!("raw-{sync:?}.db"));
    let mut conn = connect(&path, sync);
    let site = master_data(&mut conn, BINS, ITEMS);
    let bin_ids: Vec<i64> = (0..BINS)
        .map(|i| {
            conn.query_row("select id from bin where code = ?1", [bin_code(i)], |r| {
                r.get(0)
            })
            .unwrap()
        })
        .collect();
    let item_ids: Vec<i64> = (0..ITEMS)
        .map(|i| {
            conn.query_row(
                "select id from item where sku = ?1",
                [format!("S{i}")],
                |r| r.get(0),
            )
            .unwrap()
        })
        .collect();
    let start = Instant::now();
    for chunk in rows.chunks(BATCH) {
        let tx = conn.transaction().unwrap();
        {
            let mut ins = tx
                .prepare_cached(
                    "insert into movement (uid, site_id, bin_id, item_id, lot, qty, kind, event_at, recorded_at, source)
                     values (?1, ?2, ?3, ?4, '', ?5, 'receipt', ?6, ?6, 'bench')",
                )
                .unwrap();
            for r in chunk {
                ins.execute(rusqlite::params![
                    r.uid,
                    site.0,
                    bin_ids[r.bin],
                    item_ids[r.item],
                    r.qty,
                    r.at
                ])
                .unwrap();
            }
        }
        tx.commit().unwrap();
    }
    rows.len() as f64 / start.elapsed().as_secs_f64()
}

/// Movements posted through the real HTTP API by `clients` concurrent senders.
async fn through_api(dir: &Path, rows: &[Row], sync: Synchronous, clients: usize) -> f64 {
    let path = dir.join(format!("api-{sync:?}-{clients}.db"));
    {
        let mut conn = connect(&path, sync);
        master_data(&mut conn, BINS, ITEMS);
    }
    let token = host_token(&path.display().to_string());
    let state = AppState::open(Config {
        db: path.into(),
        synchronous: sync,
        ..Config::default()
    })
    .unwrap();
    post_all(state, &token, rows, clients).await
}

/// Posts `rows` in batches through a server on `state` by `clients` concurrent senders;
/// returns movements per second.
async fn post_all(state: AppState, token: &str, rows: &[Row], clients: usize) -> f64 {
    let token = token.to_string();
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let url = format!(
        "http://{}/api/v1/sites/T/movements",
        listener.local_addr().unwrap()
    );
    let (stop, stopped) = tokio::sync::oneshot::channel::<()>();
    let server = tokio::spawn(cairn::run(state, listener, async {
        let _ = stopped.await;
    }));
    let bodies: Vec<Value> = rows
        .chunks(BATCH)
        .map(|c| {
            json!(c.iter().map(|r| json!({"id": r.uid, "bin": bin_code(r.bin), "sku": format!("S{}", r.item), "qty": r.qty,
                                         "kind": "receipt", "event_at": Timestamp(r.at).to_string()})).collect::<Vec<_>>())
        })
        .collect();
    let bodies: Vec<Vec<u8>> = bodies
        .iter()
        .map(|b| serde_json::to_vec(b).unwrap())
        .collect();
    let bodies = std::sync::Arc::new(bodies);
    let client = reqwest::Client::new();
    let start = Instant::now();
    let mut tasks = Vec::new();
    for c in 0..clients {
        let (client, url, bodies, token) =
            (client.clone(), url.clone(), bodies.clone(), token.clone());
        tasks.push(tokio::spawn(async move {
            for body in bodies.iter().skip(c).step_by(clients) {
                let r = client
                    .post(&url)
                    .bearer_auth(&token)
                    .header("content-type", "application/json")
                    .body(body.clone())
                    .send()
                    .await
                    .unwrap();
                assert!(r.status().is_success(), "{}", r.text().await.unwrap());
            }
        }));
    }
    for t in tasks {
        t.await.unwrap();
    }
    let rate = rows.len() as f64 / start.elapsed().as_secs_f64();
    let _ = stop.send(());
    let _ = server.await;
    rate
}

/// Builds a ledger of `n` movements over many keys plus one key with 10,000.
fn build_ledger(path: &Path, n: usize) -> (Vec<Key>, Key, i64) {
    const BUSY: usize = 10_000;
    let mut conn = connect(path, Synchronous::Normal);
    let (bins, items) = (100_000usize, 50_000usize);
    let site = master_data(&mut conn, bins, items);
    let code = |i: usize| {
        if i < BINS {
            bin_code(i)
        } else {
            format!("B-{:03}-{:03}-{}", i / 1000, (i / 10) % 100, i % 10)
        }
    };
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    let keys = (n - BUSY) / 10;
    let pairs: Vec<(usize, usize)> = (0..keys)
        .map(|_| (rng.random_range(0..bins), rng.random_range(0..items)))
        .collect();
    let span = 365 * 86_400_000i64;
    let mut made = 0usize;
    let mut chunk = Vec::with_capacity(50_000);
    let flush = |conn: &mut rusqlite::Connection, chunk: &mut Vec<NewMovement>| {
        let tx = conn.transaction().unwrap();
        cairn::ledger::write_batch(
            &Tx::new(&tx, 256),
            site,
            chunk,
            Timestamp(T0 + 2 * span),
            &Progress::default(),
        )
        .unwrap();
        tx.commit().unwrap();
        chunk.clear();
    };
    let mv = |rng: &mut ChaCha8Rng, b: usize, i: usize, at: i64| NewMovement {
        uid: MovementUid::parse(&uid(rng, at)).unwrap(),
        bin: BinCode::parse(&code(b)).unwrap(),
        sku: Sku::parse(&format!("S{i}")).unwrap(),
        lot: String::new(),
        expiry: None,
        qty: rng.random_range(-5..=9i64).max(1),
        kind: MovementKind::Adjustment,
        event_at: Timestamp(at),
        source: "bench".into(),
        doc_ref: String::new(),
        actor: String::new(),
        reverses: None,
        recorded_at: None,
    };
    let started = Instant::now();
    // Time-ordered arrival, as a live ledger fills: each step writes one movement of ten keys' worth.
    for step in 0..10 {
        for &(b, i) in &pairs {
            let at = T0 + step * span / 10 + rng.random_range(0..span / 10);
            chunk.push(mv(&mut rng, b, i, at));
            made += 1;
            if chunk.len() == 50_000 {
                flush(&mut conn, &mut chunk);
            }
        }
        for k in 0..BUSY / 10 {
            let at = T0 + step * span / 10 + (k as i64) * (span / 10 / (BUSY as i64 / 10));
            chunk.push(mv(&mut rng, 0, 0, at));
            made += 1;
        }
        eprint!("\r  building the ledger: {made}/{n} movements");
    }
    flush(&mut conn, &mut chunk);
    eprintln!(" ({:.0} s)", started.elapsed().as_secs_f64());
    let key_of = |b: usize, i: usize| Key {
        bin_id: conn
            .query_row("select id from bin where code = ?1", [code(b)], |r| {
                r.get(0)
            })
            .unwrap(),
        item_id: conn
            .query_row(
                "select id from item where sku = ?1",
                [format!("S{i}")],
                |r| r.get(0),
            )
            .unwrap(),
        lot: String::new(),
    };
    let sample: Vec<Key> = pairs
        .iter()
        .step_by((keys / 2_000).max(1))
        .map(|&(b, i)| key_of(b, i))
        .collect();
    (sample, key_of(0, 0), span)
}

/// Makes a host user with an integration token through the CLI and returns the token.
fn host_token(db: &str) -> String {
    use std::io::Write;
    let cairn = env!("CARGO_BIN_EXE_cairn");
    let mut child = std::process::Command::new(cairn)
        .args([
            "user",
            "add",
            "--db",
            db,
            "--site",
            "T",
            "--name",
            "host",
            "--roles",
            "inventory_manager",
            "--password-stdin",
        ])
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::null())
        .spawn()
        .unwrap();
    child
        .stdin
        .take()
        .unwrap()
        .write_all(b"bench-only-host-password\n")
        .unwrap();
    assert!(child.wait().unwrap().success());
    let out = std::process::Command::new(cairn)
        .args([
            "user",
            "token",
            "--db",
            db,
            "--site",
            "T",
            "--name",
            "host",
            "--role",
            "inventory_manager",
        ])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).unwrap().trim().to_string()
}

fn lookups_per_s(
    conn: &rusqlite::Connection,
    keys: &[Key],
    span: i64,
    n: usize,
    plain: bool,
) -> f64 {
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let start = Instant::now();
    let mut sink = 0i64;
    for _ in 0..n {
        let k = &keys[rng.random_range(0..keys.len())];
        let t = T0 + rng.random_range(0..span);
        sink ^= if plain {
            conn.prepare_cached("select coalesce(sum(qty), 0) from movement where bin_id = ?1 and item_id = ?2 and lot = ?3 and event_at <= ?4")
                .unwrap()
                .query_row(rusqlite::params![k.bin_id, k.item_id, k.lot, t], |r| r.get::<_, i64>(0))
                .unwrap()
        } else {
            balance_as_of(conn, k, t).unwrap()
        };
    }
    std::hint::black_box(sink);
    n as f64 / start.elapsed().as_secs_f64()
}

fn peak_rss_of_serve(db: &Path) -> (u64, u64) {
    use std::io::BufRead;
    let token = host_token(&db.display().to_string());
    let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args([
            "serve",
            "--db",
            &db.display().to_string(),
            "--listen",
            "127.0.0.1:0",
        ])
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let mut line = String::new();
    std::io::BufReader::new(child.stdout.take().unwrap())
        .read_line(&mut line)
        .unwrap();
    let url = line
        .split(" at ")
        .nth(1)
        .unwrap()
        .trim()
        .trim_end_matches('/')
        .to_string();
    let rt = tokio::runtime::Runtime::new().unwrap();
    rt.block_on(async {
        let client = reqwest::Client::new();
        for i in 0..400 {
            let j = BINS + 37 * i;
            let b = if i % 2 == 0 { bin_code(i % BINS) } else { format!("B-{:03}-{:03}-{}", j / 1000, (j / 10) % 100, j % 10) };
            let r = client.get(format!("{url}/api/v1/sites/T/balances?bin={b}&at=2026-06-01T00:00:00Z")).bearer_auth(&token).send().await.unwrap();
            assert!(r.status().is_success());
        }
        let body: Vec<Value> = (0..BATCH)
            .map(|i| json!({"id": format!("rss-{i}"), "bin": bin_code(i), "sku": "S1", "qty": 1, "kind": "receipt", "event_at": "2026-06-01T00:00:00Z"}))
            .collect();
        let r = client.post(format!("{url}/api/v1/sites/T/movements")).bearer_auth(&token).json(&body).send().await.unwrap();
        assert!(r.status().is_success());
        let r = client.get(format!("{url}/api/v1/sites/T/items/S0/movements?limit=1000")).bearer_auth(&token).send().await.unwrap();
        assert!(r.status().is_success());
    });
    let status =
        std::fs::read_to_string(format!("/proc/{}/status", child.id())).unwrap_or_default();
    let field = |name: &str| {
        status
            .lines()
            .find(|l| l.starts_with(name))
            .and_then(|l| l.split_whitespace().nth(1))
            .and_then(|v| v.parse().ok())
            .unwrap_or(0)
    };
    let out = (field("VmHWM:"), field("VmRSS:"));
    child.kill().unwrap();
    child.wait().unwrap();
    out
}

fn main() {
    if std::env::args().any(|a| a == "--list") {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let ingest = env_usize("CAIRN_BENCH_INGEST", 200_000);
    let ledger = env_usize("CAIRN_BENCH_LEDGER", 2_000_000);
    let only = std::env::var("CAIRN_BENCH_ONLY").unwrap_or_default();
    if only != "lookup" {
        ingest_table(dir.path(), ingest);
    }
    if only != "ingest" {
        lookup_table(dir.path(), ledger);
    }
}

/// Makes an empty database `name` on the PostgreSQL server `admin` names; returns its URL.
fn pg_database(admin: &str, name: &str) -> String {
    let (admin_url, name2) = (admin.to_string(), name.to_string());
    std::thread::spawn(move || {
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .unwrap();
        rt.block_on(async {
            let (config, tls) =
                cairn::store::postgres::connect::read_url(&admin_url).expect("the URL reads");
            let (c, conn) = config.connect(tls).await.unwrap();
            tokio::spawn(conn);
            for sql in [
                format!("drop database if exists {name2} with (force)"),
                format!("create database {name2}"),
            ] {
                c.batch_execute(&sql).await.unwrap();
            }
        });
    })
    .join()
    .unwrap();
    // The admin URL's parameters (sslmode among them) hold for the bench's databases too.
    let (base, query) = match admin.split_once('?') {
        Some((b, q)) => (b, format!("?{q}")),
        None => (admin, String::new()),
    };
    let cut = base[base.find("://").unwrap() + 3..]
        .find('/')
        .map_or(base.len(), |i| base.find("://").unwrap() + 3 + i);
    format!("{}/{name}{query}", &base[..cut])
}

/// The same site, bins and items as `master_data`, through the store.
async fn pg_master(url: &str) -> SiteId {
    let store =
        cairn::store::open(&DbLocation::parse(url).unwrap(), OpenOptions::default()).unwrap();
    let site = store
        .create_site(NewSite {
            code: SiteCode::parse("T").unwrap(),
            name: "Bench".into(),
            time_zone: cairn::time::day::SiteZone::UTC,
        })
        .await
        .unwrap();
    let b: Vec<_> = (0..BINS)
        .map(|i| {
            BinRecord {
                code: Some(bin_code(i)),
                zone: "A".into(),
                aisle: 1,
                bay: 1,
                level: 1,
                side: None,
                walk_seq: None,
            }
            .validate()
            .unwrap()
        })
        .collect();
    store
        .put_bins(site.id, b, Progress::default(), None)
        .await
        .unwrap();
    let it: Vec<_> = (0..ITEMS)
        .map(|i| {
            ItemRecord {
                sku: format!("S{i}"),
                description: "Bench item".into(),
                base_unit: "each".into(),
                unit_cost_minor: 100,
                lot_tracked: false,
                group: None,
                packs: None,
                class: None,
            }
            .validate()
            .unwrap()
        })
        .collect();
    store
        .put_items(site.id, it, Progress::default(), None)
        .await
        .unwrap();
    site.id
}

/// Plain batched INSERTs into the movement table of the same PostgreSQL schema, one
/// transaction per batch.
async fn pg_raw_ceiling(admin: &str, rows: &[Row]) -> f64 {
    let url = pg_database(admin, "cairn_bench_raw");
    let site = pg_master(&url).await;
    // The same URL read the same way as the store's: TLS or not, both sides alike.
    let (config, tls) = cairn::store::postgres::connect::read_url(&url).expect("the URL reads");
    let (mut c, conn) = config.connect(tls).await.unwrap();
    tokio::spawn(conn);
    let mut bin_ids = std::collections::HashMap::new();
    for r in c.query("select code, id from bin", &[]).await.unwrap() {
        bin_ids.insert(r.get::<_, String>(0), r.get::<_, i64>(1));
    }
    let mut item_ids = std::collections::HashMap::new();
    for r in c.query("select sku, id from item", &[]).await.unwrap() {
        item_ids.insert(r.get::<_, String>(0), r.get::<_, i64>(1));
    }
    let bins: Vec<i64> = (0..BINS).map(|i| bin_ids[&bin_code(i)]).collect();
    let items: Vec<i64> = (0..ITEMS).map(|i| item_ids[&format!("S{i}")]).collect();
    let start = Instant::now();
    for chunk in rows.chunks(BATCH) {
        let tx = c.transaction().await.unwrap();
        let ins = tx
            .prepare(
                "insert into movement (uid, site_id, bin_id, item_id, lot, qty, kind, event_at, recorded_at, source)
                 values ($1, $2, $3, $4, '', $5, 'receipt', $6, $6, 'bench')",
            )
            .await
            .unwrap();
        for r in chunk {
            tx.execute(
                &ins,
                &[&r.uid, &site.0, &bins[r.bin], &items[r.item], &r.qty, &r.at],
            )
            .await
            .unwrap();
        }
        tx.commit().await.unwrap();
    }
    rows.len() as f64 / start.elapsed().as_secs_f64()
}

/// Movements through the HTTP API of a server on PostgreSQL, `clients` senders.
async fn pg_through_api(admin: &str, rows: &[Row], clients: usize) -> f64 {
    let url = pg_database(admin, &format!("cairn_bench_api{clients}"));
    pg_master(&url).await;
    let token = host_token(&url);
    let state = AppState::open(Config {
        db: DbLocation::parse(&url).unwrap(),
        ..Config::default()
    })
    .unwrap();
    post_all(state, &token, rows, clients).await
}

fn ingest_table(dir: &Path, ingest: usize) {
    let data = rows(ingest, 1);
    let rt = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .unwrap();
    println!("## Ingest: {ingest} movements, batches of {BATCH}");
    println!(
        "| durability | raw INSERT ceiling (rows/s) | HTTP API, 1 client (rows/s) | ratio | HTTP API, 4 clients (rows/s) | ratio |"
    );
    println!("|---|---|---|---|---|---|");
    for sync in [Synchronous::Full, Synchronous::Normal] {
        let raw = raw_ceiling(dir, &data, sync);
        let api1 = rt.block_on(through_api(dir, &data, sync, 1));
        let api4 = rt.block_on(through_api(dir, &data, sync, 4));
        println!(
            "| {sync:?} | {raw:.0} | {api1:.0} | {:.2} | {api4:.0} | {:.2} |",
            api1 / raw,
            api4 / raw
        );
    }
    if let Ok(admin) = std::env::var("CAIRN_BENCH_PG") {
        // The same rows on PostgreSQL (its own durability: synchronous_commit as the
        // server has it).
        let raw = rt.block_on(pg_raw_ceiling(&admin, &data));
        let api1 = rt.block_on(pg_through_api(&admin, &data, 1));
        let api4 = rt.block_on(pg_through_api(&admin, &data, 4));
        println!(
            "| PostgreSQL | {raw:.0} | {api1:.0} | {:.2} | {api4:.0} | {:.2} |",
            api1 / raw,
            api4 / raw
        );
    }
}

fn lookup_table(dir: &Path, ledger: usize) {
    println!();
    println!("## Point-in-time balance over a {ledger}-movement ledger (one thread)");
    let path = dir.join("ledger.db");
    let (typical, busy, span) = build_ledger(&path, ledger);
    let store = SqliteStore::open(&path, OpenOptions::default()).unwrap();
    let conn = store.reader_connection().unwrap();
    let busy = vec![busy];
    let t = lookups_per_s(&conn, &typical, span, 200_000, false);
    let b = lookups_per_s(&conn, &busy, span, 20_000, false);
    let bp = lookups_per_s(&conn, &busy, span, 500, true);
    println!("| key | look-ups/s | slower than typical |");
    println!("|---|---|---|");
    println!("| typical (~10 movements) | {t:.0} | 1.0x |");
    println!(
        "| busy (10,000 movements), snapshots | {b:.0} | {:.1}x |",
        t / b
    );
    println!(
        "| busy, plain index range (no snapshot) | {bp:.0} | {:.1}x |",
        t / bp
    );
    drop(conn);
    drop(store);
    let (hwm, rss) = peak_rss_of_serve(&path);
    println!();
    println!(
        "## `cairn serve` on that ledger: peak RSS {:.1} MiB (RSS at end {:.1} MiB)",
        hwm as f64 / 1024.0,
        rss as f64 / 1024.0
    );
    backup_table(dir, &path);
}

/// Times `cairn backup` and `cairn restore` of the ledger database: each copies every
/// page, then checks the copy (integrity check, schema, every balance against its
/// movements), as the commands do.
fn backup_table(dir: &Path, db: &Path) {
    let copy = dir.join("ledger-backup.db");
    let t = Instant::now();
    let b = cairn::backup::backup(db, &copy, None, &indicatif::ProgressBar::hidden()).unwrap();
    let backup_s = t.elapsed().as_secs_f64();
    let restored = dir.join("restored.db");
    let t = Instant::now();
    let r =
        cairn::backup::restore(&copy, &restored, false, &indicatif::ProgressBar::hidden()).unwrap();
    let restore_s = t.elapsed().as_secs_f64();
    assert_eq!(b.summary.movements, r.summary.movements);
    println!();
    println!(
        "## Backup and restore of that ledger ({} movements, {:.0} MiB)",
        b.summary.movements,
        b.bytes as f64 / (1024.0 * 1024.0)
    );
    println!("| command | total | copy | check of the copy |");
    println!("|---|---|---|---|");
    println!(
        "| backup | {backup_s:.1} s | {:.1} s | {:.1} s |",
        b.copy.as_secs_f64(),
        b.check.as_secs_f64()
    );
    println!(
        "| restore | {restore_s:.1} s | {:.1} s (incl. checking the backup first) | {:.1} s |",
        r.copy.as_secs_f64(),
        r.check.as_secs_f64()
    );
}
