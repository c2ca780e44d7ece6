//! `cargo xtask test`'s API contract run: Schemathesis (PyPI, the version `.ci/run`
//! pins) against the OpenAPI document a running `cairn serve` serves, with a seeded
//! site (`tests/contract/*.csv`: Kestrel Lane North) and an integration token of an
//! admin who is also inventory manager and planner there.
//!
//! Every operation is generated for, with data that fits its schemas and data that does
//! not (the examples, coverage, fuzzing and stateful phases), deterministically. The path's
//! `site`, `bin` and `sku` are the seeded ones (`tests/contract/schemathesis.toml`), so
//! requests reach each route's own checks rather than "unknown site"; unknown and malformed
//! sites are the access tests' part (`tests/access.rs`). The site also has a counter (the
//! document's enrolment example, so that example enrols a phone) whose phone counts one
//! bin before the run, so a count result exists and its id is the path's `id`. Three runs:
//! every operation with the admin's token (the phone's routes answer it with refusals);
//! the phone's routes with a phone's token; and forgetting the device with a second phone's
//! token (it ends that token, so it runs apart). Every check runs but the one named in
//! [`EXCLUDED`], whose reason is [`LEFT_OUT`]. Skipped with a plain message when
//! `schemathesis` is not installed.

use anyhow::{Context, Result, bail};
use serde_json::{Value, json};
use std::io::{BufRead, Write};
use std::path::Path;
use std::process::{Command, Stdio};

/// The Schemathesis release `.ci/run` installs.
pub const SCHEMATHESIS_VERSION: &str = "4.32.5";

/// Every check Schemathesis has, but those in [`LEFT_OUT`].
const EXCLUDED: &str = "positive_data_acceptance";

/// The checks left out, and why.
const LEFT_OUT: &str = "positive_data_acceptance: a request that fits the schemas may still \
be refused by a rule JSON Schema cannot state (a run holder must be a counter at the site, a \
report covers at most 3,660 days, a cursor must be one this list gave, a movement's bin and \
SKU must exist); those answers are documented 4xx with the error shape, which the other \
checks hold them to";

/// Examples per operation and phase (Schemathesis' `--max-examples`).
const MAX_EXAMPLES: &str = "30";

/// Runs the contract check; `bin` is the debug `cairn` binary.
pub fn run(root: &Path, bin: &Path) -> Result<()> {
    let found = Command::new("schemathesis").arg("--version").output();
    match found {
        Ok(out) if out.status.success() => {}
        _ => {
            println!(
                "SKIPPED the API contract run: schemathesis is not installed \
                 (python3 -m pip install schemathesis=={SCHEMATHESIS_VERSION})"
            );
            return Ok(());
        }
    }
    let dir = root.join("target/contract");
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir)?;
    let db = dir.join("kestrel.db");
    let db_arg = db.to_str().context("the target folder's path is UTF-8")?;
    let seeds = root.join("tests/contract");

    quiet(Command::new(bin).args([
        "site",
        "add",
        "--db",
        db_arg,
        "--code",
        "KLN",
        "--name",
        "Kestrel Lane North",
    ]))?;
    add_user(
        bin,
        db_arg,
        &[
            "--name",
            "ines",
            "--roles",
            "admin,inventory_manager,planner",
        ],
        "kestrel-lane-contract-run\n",
    )?;
    // The counter of the document's enrolment example (`POST /devices`), PIN and all.
    add_user(
        bin,
        db_arg,
        &[
            "--name",
            COUNTER,
            "--display-name",
            "Esme Tulloch",
            "--roles",
            "counter",
            "--with-pin",
        ],
        &format!("kestrel-lane-counter-run\n{COUNTER_PIN}\n"),
    )?;
    for kind in ["bins", "items", "packs", "movements"] {
        let file = seeds.join(format!("{kind}.csv"));
        quiet(
            Command::new(bin)
                .args(["import", "--db", db_arg, "--site", "KLN", kind])
                .arg(&file),
        )?;
    }
    let issued = Command::new(bin)
        .args([
            "user", "token", "--db", db_arg, "--site", "KLN", "--name", "ines", "--role", "admin",
        ])
        .output()?;
    let text = String::from_utf8_lossy(&issued.stdout);
    let token = text
        .split_whitespace()
        .find(|w| w.starts_with("cairn_api_"))
        .context("cairn user token printed no token")?
        .to_string();

    let mut server = Command::new(bin)
        .args(["serve", "--db", db_arg, "--listen", "127.0.0.1:0"])
        .env("RUST_LOG", "error")
        .stdout(Stdio::piped())
        .spawn()
        .context("starting cairn serve")?;
    let mut banner = String::new();
    std::io::BufReader::new(server.stdout.take().context("stdout was piped")?)
        .read_line(&mut banner)?;
    let outcome = (|| {
        let url = banner
            .split(" at ")
            .nth(1)
            .context("cairn serve names its address on its first line")?
            .trim()
            .trim_end_matches('/')
            .to_string();
        println!("== the API contract (schemathesis {SCHEMATHESIS_VERSION}) against {url}");
        println!("   left out: {LEFT_OUT}");
        let phone = enrol(&url, "contract phone")?;
        let result = count_one_bin(&url, &phone, &token)?;
        let config = dir.join("schemathesis.toml");
        std::fs::write(
            &config,
            format!(
                "{}\n# The count result the phone's count made (written by xtask).\n\
                 \"path.id\" = {result}\n",
                std::fs::read_to_string(seeds.join("schemathesis.toml"))?
            ),
        )?;
        let runs = [
            ("every operation, an admin's token", token.clone(), vec![]),
            (
                "the phone's routes but forgetting the device, a phone's token",
                phone,
                vec![
                    "--include-path-regex",
                    PHONE_ROUTES,
                    "--exclude-method",
                    "DELETE",
                ],
            ),
            (
                "forgetting the device, a second phone's token",
                enrol(&url, "contract phone 2")?,
                vec![
                    "--include-path",
                    "/api/v1/device",
                    "--include-method",
                    "DELETE",
                ],
            ),
        ];
        for (n, (what, bearer, only)) in runs.into_iter().enumerate() {
            println!("   run {}: {what}", n + 1);
            let mut cmd = Command::new("schemathesis");
            cmd.arg("--config-file")
                .arg(&config)
                .args(["run", &format!("{url}/api/v1/openapi.json")])
                .args(["--checks", "all", "--exclude-checks", EXCLUDED])
                .args(["--max-examples", MAX_EXAMPLES])
                .args(["--header", &format!("Authorization: Bearer {bearer}")])
                .args(["--generation-deterministic", "--workers", "2"])
                .arg("--report-junit-path")
                .arg(dir.join(format!("junit-{}.xml", n + 1)))
                .env("NO_COLOR", "1")
                // Schemathesis keeps its example database in the folder it runs in.
                .current_dir(&dir);
            cmd.args(only);
            let status = cmd.status().context("starting schemathesis")?;
            if !status.success() {
                bail!(
                    "schemathesis found failures in run {} (report: target/contract/junit-{}.xml)",
                    n + 1,
                    n + 1
                );
            }
        }
        Ok(())
    })();
    let _ = server.kill();
    let _ = server.wait();
    outcome
}

/// The counter of the document's enrolment example, and the PIN it shows.
const COUNTER: &str = "esme";
const COUNTER_PIN: &str = "2468";

/// The routes a phone's token opens (the counter's), as a path pattern.
const PHONE_ROUTES: &str = "/(device|catalog|my-tasks|sync)$";

/// Sends `body` (JSON, or none for a GET) to `url` with curl; returns the answer's JSON
/// and fails on a status that is not 2xx.
fn curl(url: &str, bearer: Option<&str>, body: Option<&Value>) -> Result<Value> {
    let mut cmd = Command::new("curl");
    cmd.args(["-sS", "--fail-with-body", url]);
    if let Some(b) = bearer {
        cmd.args(["-H", &format!("Authorization: Bearer {b}")]);
    }
    if let Some(body) = body {
        cmd.args(["-H", "Content-Type: application/json", "--data-binary"])
            .arg(body.to_string());
    }
    let out = cmd
        .output()
        .with_context(|| format!("starting curl for {url}"))?;
    let text = String::from_utf8_lossy(&out.stdout);
    if !out.status.success() {
        bail!(
            "{url} answered: {text}{}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
    serde_json::from_str(&text).with_context(|| format!("{url} answered no JSON: {text}"))
}

/// Enrols a phone for the counter; returns its token.
fn enrol(url: &str, device_name: &str) -> Result<String> {
    let answer = curl(
        &format!("{url}/api/v1/devices"),
        None,
        Some(&json!({"user": COUNTER, "pin": COUNTER_PIN, "site": "KLN",
                     "device_name": device_name})),
    )?;
    answer["token"]
        .as_str()
        .map(str::to_string)
        .with_context(|| format!("the enrolment gave no token: {answer}"))
}

/// The phone counts bin A-01-01-1 (opened by its label, one keyed line, done) in one
/// sync; returns the id of a count result it made, read back with the admin's token.
fn count_one_bin(url: &str, phone: &str, admin: &str) -> Result<i64> {
    let label = cairn_scan::BinLabel::encode("KLN", "A", "01", "01", "1")
        .map_err(|e| anyhow::anyhow!("the seeded bin's label: {e:?}"))?;
    let now = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)?
        .as_millis() as i64;
    let pass = "0192f1a0-0000-7000-8000-00000000c0a1";
    let event = |id: &str, ms: i64, kind: &str, extra: Value| {
        let mut e = json!({"id": id, "at": now + ms, "count": pass, "bin": "A-01-01-1",
                           "type": kind, "user": COUNTER});
        if let (Some(e), Some(extra)) = (e.as_object_mut(), extra.as_object()) {
            e.extend(extra.clone());
        }
        e
    };
    let events = json!([
        event(pass, 0, "bin_opened", json!({"label": label.text()})),
        event(
            "0192f1a0-0000-7000-8000-00000000c0a2",
            5,
            "line",
            json!({"sku": "KL-1001", "qty": 187, "lot": "", "entry": "keypad"})
        ),
        event(
            "0192f1a0-0000-7000-8000-00000000c0a3",
            12,
            "bin_done",
            json!({})
        ),
    ]);
    let answer = curl(
        &format!("{url}/api/v1/sites/KLN/sync"),
        Some(phone),
        Some(&json!({"device_clock": now + 20, "rtt_ms": 50, "events": events})),
    )?;
    let accepted = answer["results"]
        .as_array()
        .is_some_and(|r| r.iter().all(|r| r["status"] == "accepted"));
    if !accepted {
        bail!("the phone's count was not accepted: {answer}");
    }
    let results = curl(
        &format!("{url}/api/v1/sites/KLN/count-results?state=all"),
        Some(admin),
        None,
    )?;
    results
        .as_object()
        .and_then(|o| o.values().find_map(Value::as_array))
        .and_then(|rows| rows.first())
        .and_then(|r| r["id"].as_i64())
        .with_context(|| format!("no count result after the phone's count: {results}"))
}

/// Adds a user at KLN with `args` (name, roles, …), the secrets given on standard input.
fn add_user(bin: &Path, db: &str, args: &[&str], secrets: &str) -> Result<()> {
    let mut add = Command::new(bin)
        .args(["user", "add", "--db", db, "--site", "KLN"])
        .args(args)
        .arg("--password-stdin")
        .stdin(Stdio::piped())
        .stdout(Stdio::null())
        .spawn()?;
    add.stdin
        .take()
        .context("stdin was piped")?
        .write_all(secrets.as_bytes())?;
    if !add.wait()?.success() {
        bail!("cairn user add {args:?} failed");
    }
    Ok(())
}

/// Runs a command, showing its output only when it fails.
fn quiet(cmd: &mut Command) -> Result<()> {
    let out = cmd.output().with_context(|| format!("starting {cmd:?}"))?;
    if !out.status.success() {
        bail!(
            "{cmd:?} failed: {}{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        );
    }
    Ok(())
}
