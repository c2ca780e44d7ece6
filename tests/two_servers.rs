//! Two `cairn serve` processes on one PostgreSQL database, phones and a host system's
//! movement batches spread over both for the same site, and one of the two killed with
//! SIGKILL at random moments (at least [`KILLS`] times) and started again while the other
//! carries on. Every sender resends what was not acknowledged, to whichever server
//! answers, until it is. Afterwards:
//!
//! - every acknowledged movement, sync event and count line is stored exactly once, and
//!   nothing that was never sent;
//! - balances equal the sum of movements;
//! - the counts' netting results, recount tasks and balances equal those of a run of the
//!   same requests, in the order they were acknowledged, through one server that nobody
//!   killed.
//!
//! Runs when `CAIRN_TEST_STORE` names a PostgreSQL server; says it skipped otherwise.

mod common;

use common::cairn_with_input;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde_json::{Value, json};
use std::process::{Child, Command};
use std::sync::atomic::{AtomicBool, AtomicU32, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;

/// How many times a server is killed, at least.
const KILLS: u32 = 30;
const PHONES: usize = 4;
const HOSTS: usize = 2;
const BINS: usize = 12;
const SKUS: [&str; 2] = ["S1", "S2"];
/// Movements per host batch.
const MOVES: usize = 20;
/// A sender's pause between two batches, so the run lasts through the kills.
const PACE: Duration = Duration::from_millis(120);

fn cairn(args: &[&str]) -> std::process::Output {
    let out = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(args)
        .output()
        .expect("the cairn binary runs");
    assert!(
        out.status.success(),
        "cairn {args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

fn bin(b: usize) -> String {
    format!("A-01-{:02}-1", b + 1)
}

fn now_ms() -> i64 {
    chrono::Utc::now().timestamp_millis()
}

fn rfc3339(ms: i64) -> String {
    chrono::DateTime::from_timestamp_millis(ms)
        .unwrap()
        .format("%Y-%m-%dT%H:%M:%S%.3fZ")
        .to_string()
}

/// A site with bins, two items, the host's integration token and four counters with PINs,
/// made through the CLI on `db`. Returns the host's token.
fn setup(db: &str, dir: &std::path::Path) -> String {
    cairn(&[
        "site",
        "add",
        "--db",
        db,
        "--code",
        "T",
        "--name",
        "Two servers",
    ]);
    let bins: String = (1..=BINS).map(|b| format!("A,1,{b},1,L\n")).collect();
    std::fs::write(
        dir.join("bins.csv"),
        format!("zone,aisle,bay,level,side\n{bins}"),
    )
    .unwrap();
    std::fs::write(
        dir.join("items.csv"),
        "sku,description,base_unit,unit_cost_minor\nS1,One,each,150\nS2,Two,each,4000\n",
    )
    .unwrap();
    for kind in ["bins", "items"] {
        let file = dir.join(format!("{kind}.csv")).display().to_string();
        cairn(&["import", kind, "--db", db, "--site", "T", &file]);
    }
    let add = |name: &str, roles: &str, input: &str, pin: bool| {
        let mut args = vec![
            "user", "add", "--db", db, "--site", "T", "--name", name, "--roles", roles,
        ];
        if pin {
            args.push("--with-pin");
        }
        args.push("--password-stdin");
        let out = cairn_with_input(&args, input);
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
    };
    add(
        "host",
        "inventory_manager",
        "test-only-host-password\n",
        false,
    );
    for p in 0..PHONES {
        add(
            &format!("phone{p}"),
            "counter",
            "test-only-counter-password\n4821\n",
            true,
        );
    }
    let out = cairn(&[
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
    ]);
    String::from_utf8(out.stdout).unwrap().trim().to_string()
}

/// One request a sender made: where it goes, with what, and the ids it carries.
#[derive(Clone)]
struct Request {
    /// The phone's token index, or `None` for the host.
    phone: Option<usize>,
    body: Value,
    movements: Vec<String>,
    events: Vec<String>,
    lines: Vec<String>,
}

/// A phone's clock is corrected by the server's when a request arrives, so a count's
/// window moves by a few milliseconds between two runs of the same request. Every phone
/// event is therefore stamped on a whole second and every movement half a second off
/// one: no movement lies within milliseconds of a window's edge, and both runs see the
/// same movements in each window.
fn whole_second(at: i64) -> i64 {
    at - at.rem_euclid(1_000)
}

/// The `k`th pass of phone `p`: one bin opened, a line per SKU, the bin done; the counts
/// sometimes off by a few so some differences go to a recount.
fn pass(p: usize, k: usize, at: i64) -> Request {
    let at = whole_second(at);
    let mut rng = ChaCha8Rng::seed_from_u64((p * 10_000 + k) as u64);
    let bin = bin((p * 5 + k * 7) % BINS);
    let count = uuid::Uuid::now_v7().to_string();
    let user = format!("phone{p}");
    let ev = |id: &str, at: i64, kind: &str, extra: Value| {
        let mut e = json!({"id": id, "at": at, "user": user, "count": count, "task": null,
                           "bin": bin, "type": kind});
        e.as_object_mut()
            .unwrap()
            .extend(extra.as_object().unwrap().clone());
        e
    };
    let mut events = vec![ev(&count, at - 4_000, "bin_opened", json!({"label": ""}))];
    let mut ids = vec![count.clone()];
    let mut lines = Vec::new();
    for (i, sku) in SKUS.iter().enumerate() {
        let id = uuid::Uuid::now_v7().to_string();
        let qty: i64 = 200 + rng.random_range(-6..=6);
        events.push(ev(
            &id,
            at - 3_000 + 1_000 * i as i64,
            "line",
            json!({"sku": sku, "qty": qty, "lot": "", "entry": "keypad"}),
        ));
        ids.push(id.clone());
        lines.push(id);
    }
    let done = uuid::Uuid::now_v7().to_string();
    events.push(ev(&done, at - 1_000, "bin_done", json!({})));
    ids.push(done);
    Request {
        phone: Some(p),
        body: json!({"rtt_ms": 5, "events": events}),
        movements: Vec::new(),
        events: ids,
        lines,
    }
}

/// The host's `k`th batch: picks and receipts over the last seconds, some of them while a
/// bin is being counted.
fn host_batch(h: usize, k: usize, at: i64) -> Request {
    let at = whole_second(at) + 500;
    let mut rng = ChaCha8Rng::seed_from_u64((h * 10_000 + k) as u64 ^ 0xB47C);
    let mut ids = Vec::new();
    let rows: Vec<Value> = (0..MOVES)
        .map(|i| {
            let id = format!("h{h}-{k}-{i}");
            ids.push(id.clone());
            let pick = rng.random_bool(0.7);
            json!({"id": id, "bin": bin(rng.random_range(0..BINS)),
                   "sku": SKUS[rng.random_range(0..SKUS.len())],
                   "qty": if pick { -rng.random_range(1..=3) } else { rng.random_range(1..=4) },
                   "kind": if pick { "pick" } else { "receipt" },
                   "event_at": rfc3339(at - 1_000 * rng.random_range(0..6))})
        })
        .collect();
    Request {
        phone: None,
        body: json!(rows),
        movements: ids,
        events: Vec::new(),
        lines: Vec::new(),
    }
}

/// The opening stock: 200 of each SKU in every bin, an hour ago.
fn opening(at: i64) -> Request {
    let mut ids = Vec::new();
    let rows: Vec<Value> = (0..BINS)
        .flat_map(|b| SKUS.iter().map(move |s| (b, *s)))
        .map(|(b, sku)| {
            let id = format!("open-{b}-{sku}");
            ids.push(id.clone());
            json!({"id": id, "bin": bin(b), "sku": sku, "qty": 200, "kind": "receipt",
                   "event_at": rfc3339(at)})
        })
        .collect();
    Request {
        phone: None,
        body: json!(rows),
        movements: ids,
        events: Vec::new(),
        lines: Vec::new(),
    }
}

/// Sends `req` once to `url`: `Some(())` when it was acknowledged whole, `None` when the
/// server could not be reached or went away before answering. Anything else is a failure.
async fn send_once(
    client: &reqwest::Client,
    url: &str,
    req: &Request,
    host: &str,
    phones: &[String],
) -> Option<()> {
    let r = match req.phone {
        Some(p) => {
            let mut body = req.body.clone();
            body["device_clock"] = json!(now_ms());
            client
                .post(format!("{url}/api/v1/sites/T/sync"))
                .bearer_auth(&phones[p])
                .json(&body)
        }
        None => client
            .post(format!("{url}/api/v1/sites/T/movements"))
            .bearer_auth(host)
            .json(&req.body),
    }
    .send()
    .await
    .ok()?;
    let status = r.status().as_u16();
    let text = r.text().await.ok()?;
    // A server shutting down under the request may answer 503; the sender tries again.
    if status == 503 {
        return None;
    }
    assert_eq!(status, 200, "{text}");
    if req.phone.is_some() {
        let answer: Value = serde_json::from_str(&text).unwrap();
        let results = answer["results"].as_array().expect("a sync answer");
        assert_eq!(results.len(), req.events.len(), "{answer}");
        assert!(
            results.iter().all(|r| r["status"] == "accepted"),
            "{answer}"
        );
    }
    Some(())
}

/// The servers' current addresses, changed when one is started again.
type Urls = Arc<Mutex<Vec<String>>>;

/// Sends `req` until one of the servers acknowledges it, starting with server `first`.
async fn send_until_acked(
    client: &reqwest::Client,
    urls: &Urls,
    first: usize,
    req: &Request,
    host: &str,
    phones: &[String],
) -> u32 {
    let mut tries = 0;
    loop {
        let url = {
            let urls = urls.lock().unwrap();
            urls[(first + tries as usize) % urls.len()].clone()
        };
        if send_once(client, &url, req, host, phones).await.is_some() {
            return tries;
        }
        tries += 1;
        assert!(tries < 2_000, "no server acknowledged a request for long");
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
}

/// Enrols each counter's phone through `url`; returns the tokens.
async fn enrol(client: &reqwest::Client, url: &str) -> Vec<String> {
    let mut tokens = Vec::new();
    for p in 0..PHONES {
        let r = client
            .post(format!("{url}/api/v1/devices"))
            .json(
                &json!({"user": format!("phone{p}"), "pin": "4821", "site": "T",
                          "device_name": format!("phone {p}")}),
            )
            .send()
            .await
            .unwrap();
        assert_eq!(r.status(), 201);
        let v: Value = r.json().await.unwrap();
        tokens.push(v["token"].as_str().unwrap().to_string());
    }
    tokens
}

fn client() -> reqwest::Client {
    reqwest::Client::builder()
        .timeout(Duration::from_secs(20))
        // No idle connections: a killed server never leaves one behind to fail on.
        .pool_max_idle_per_host(0)
        .build()
        .unwrap()
}

/// What the counts came to, free of row ids, arrival order and the servers' clocks: a
/// phone's instants are its clock corrected by the server's at the moment the request
/// arrived, so a count's window and instant move by the milliseconds a resend took.
fn outcome(url: &str) -> Vec<String> {
    let none = std::path::Path::new("");
    let mut rows = Vec::new();
    for (what, sql) in [
        (
            "result",
            "select p.uid, i.sku, r.lot, coalesce(r.class, ''), cast(r.counted as text),
                    cast(r.f_star as text), cast(r.variance as text), r.status, r.verdict
             from count_result r join count_pass p on p.id = r.pass_id
             join item i on i.id = r.item_id where r.superseded_by is null",
        ),
        (
            "recount",
            "select b.code, t.reason, t.status, t.withdrawn_reason,
                    coalesce((select p.uid || ' ' || i.sku from count_result r
                              join count_pass p on p.id = r.pass_id
                              join item i on i.id = r.item_id where r.id = t.recount_of), '')
             from count_task t join bin b on b.id = t.bin_id where t.reason = 'recount'",
        ),
        (
            "balance",
            "select b.code, i.sku, x.lot, cast(x.qty as text)
             from balance x join bin b on b.id = x.bin_id join item i on i.id = x.item_id",
        ),
    ] {
        for r in common::sql_rows_on(Some(url), none, sql) {
            rows.push(format!("{what} {}", r.join(" | ")));
        }
    }
    rows.sort();
    rows
}

/// Counts each value of `table`'s `uid` column.
fn uid_counts(url: &str, table: &str) -> std::collections::HashMap<String, i64> {
    common::sql_rows_on(
        Some(url),
        std::path::Path::new(""),
        &format!("select uid, cast(count(*) as text) from {table} group by uid"),
    )
    .into_iter()
    .map(|r| (r[0].clone(), r[1].parse().unwrap()))
    .collect()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn two_servers_one_killed_again_and_again_lose_nothing_and_count_the_same() {
    let Some(pg) = common::PgTestDb::create() else {
        eprintln!(
            "skipped: set {}=postgres://… to run two servers on one database",
            common::STORE_SWITCH
        );
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let host = setup(&pg.url, dir.path());
    let started = now_ms();
    let open = opening(started - 3_600_000);
    let servers: Vec<(Child, String)> =
        vec![common::serve_child(&pg.url), common::serve_child(&pg.url)];
    let urls: Urls = Arc::new(Mutex::new(servers.iter().map(|s| s.1.clone()).collect()));
    let mut children: Vec<Child> = servers.into_iter().map(|s| s.0).collect();
    let c = client();
    let first = urls.lock().unwrap()[0].clone();
    let phones = Arc::new(enrol(&c, &first).await);
    send_until_acked(&c, &urls, 0, &open, &host, &phones).await;

    // Every acknowledged request, in the order the acknowledgements came.
    let acked: Arc<Mutex<Vec<Request>>> = Arc::new(Mutex::new(vec![open]));
    let stop = Arc::new(AtomicBool::new(false));
    let resent = Arc::new(AtomicU32::new(0));
    let mut senders = Vec::new();
    for s in 0..PHONES + HOSTS {
        let (c, urls, acked, stop, resent) = (
            c.clone(),
            urls.clone(),
            acked.clone(),
            stop.clone(),
            resent.clone(),
        );
        let (host, phones) = (host.clone(), phones.clone());
        senders.push(tokio::spawn(async move {
            let mut k = 0;
            while !stop.load(Ordering::Relaxed) {
                let req = if s < PHONES {
                    pass(s, k, now_ms())
                } else {
                    host_batch(s - PHONES, k, now_ms())
                };
                let tries = send_until_acked(&c, &urls, s + k, &req, &host, &phones).await;
                resent.fetch_add(tries, Ordering::Relaxed);
                acked.lock().unwrap().push(req);
                k += 1;
                tokio::time::sleep(PACE).await;
            }
        }));
    }
    let mut rng = ChaCha8Rng::seed_from_u64(20);
    let mut kills = 0;
    while kills < KILLS {
        tokio::time::sleep(Duration::from_millis(rng.random_range(100..600))).await;
        let victim = rng.random_range(0..children.len());
        children[victim].kill().expect("SIGKILL is delivered");
        children[victim].wait().unwrap();
        kills += 1;
        // Down for a moment: the senders find the other server meanwhile.
        tokio::time::sleep(Duration::from_millis(rng.random_range(0..300))).await;
        let (child, url) = common::serve_child(&pg.url);
        children[victim] = child;
        urls.lock().unwrap()[victim] = url;
    }
    stop.store(true, Ordering::Relaxed);
    for s in senders {
        s.await.unwrap();
    }
    for mut child in children {
        child.kill().unwrap();
        child.wait().unwrap();
    }
    let acked = Arc::try_unwrap(acked).ok().unwrap().into_inner().unwrap();
    let resent = resent.load(Ordering::Relaxed);
    assert!(resent > 0, "the kills cut some requests off");

    // Exactly once, and nothing that was not sent.
    let sent_moves: Vec<&String> = acked.iter().flat_map(|r| &r.movements).collect();
    let sent_events: Vec<&String> = acked.iter().flat_map(|r| &r.events).collect();
    let sent_lines: Vec<&String> = acked.iter().flat_map(|r| &r.lines).collect();
    for (table, ids) in [
        ("movement", &sent_moves),
        ("sync_event", &sent_events),
        ("count_line", &sent_lines),
    ] {
        let stored = uid_counts(&pg.url, table);
        for id in ids.iter() {
            let n = stored.get(id.as_str()).copied().unwrap_or(0);
            assert_eq!(n, 1, "acknowledged {table} {id} is stored {n} times");
        }
        assert_eq!(
            stored.len(),
            ids.len(),
            "{table}: nothing is stored that was not acknowledged"
        );
    }
    let drift = common::sql_i64_on(
        Some(&pg.url),
        std::path::Path::new(""),
        "select count(*) from balance b where b.qty <> (select coalesce(sum(qty), 0)
           from movement m where m.bin_id = b.bin_id and m.item_id = b.item_id and m.lot = b.lot)",
    );
    assert_eq!(drift, 0, "balances equal the sum of movements");

    // The same requests, in the order they were acknowledged, through one server.
    let single = common::PgTestDb::create().unwrap();
    let dir2 = tempfile::tempdir().unwrap();
    let host2 = setup(&single.url, dir2.path());
    let (mut child, url) = common::serve_child(&single.url);
    let phones2 = enrol(&c, &url).await;
    let one: Urls = Arc::new(Mutex::new(vec![url]));
    for req in &acked {
        let tries = send_until_acked(&c, &one, 0, req, &host2, &phones2).await;
        assert_eq!(tries, 0, "the server nobody kills answers at once");
    }
    child.kill().unwrap();
    child.wait().unwrap();
    let (a, b) = (outcome(&pg.url), outcome(&single.url));
    assert!(
        a.iter().any(|r| r.starts_with("recount ")),
        "some counts went to a recount"
    );
    let differ: Vec<_> = a.iter().zip(&b).filter(|(x, y)| x != y).take(5).collect();
    assert!(
        a.len() == b.len() && differ.is_empty(),
        "two servers under kills and one server count the same ({} vs {} rows): {differ:#?}",
        a.len(),
        b.len()
    );
    eprintln!(
        "{kills} kills, {} requests acknowledged ({} movements, {} events), {resent} resent; \
         {} result, recount and balance rows equal",
        acked.len(),
        sent_moves.len(),
        sent_events.len(),
        a.len()
    );
}
