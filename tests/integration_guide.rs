//! docs/integration.md as a host system's engineer would follow it: every `sh` block runs,
//! in order, in bash with real curl against a real server on 127.0.0.1 (site KLN loaded
//! with the CLI from `tests/contract/*.csv`), and its output is compared with the block
//! after it: a `json N` block is the body (`"…"` matches any value) and N the HTTP status,
//! a `text` block the printed text.
//!
//! Where the guide says a counter counted a bin (before its first read of the adjustments
//! feed), the test does that count: a counter's phone enrols and syncs the bin over the
//! API, and the results are settled as `cairn serve` settles them each minute, at an
//! instant past every source's posting lag, so the feed holds the adjustment it posts.

mod common;

use cairn::accounts::Role;
use cairn::time::Timestamp;
use common::{Auth, Body, TestApp, spawn_app};
use reqwest::Method;
use serde_json::{Value, json};
use std::path::{Path, PathBuf};
use std::process::Command;

/// One command block of the guide and what it must print.
struct Step {
    /// 1-based line of the block's opening fence in the guide.
    line: usize,
    script: String,
    expect: Expect,
}

enum Expect {
    Json { status: u16, body: Value },
    Text(String),
}

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .expect("the server crate sits in the workspace")
        .to_path_buf()
}

/// Reads the guide's `sh` blocks, each with the `json`/`text` block that follows it.
fn steps(guide: &str) -> Vec<Step> {
    let mut blocks: Vec<(usize, String, String)> = Vec::new();
    let mut open: Option<(usize, String, String)> = None;
    for (i, line) in guide.lines().enumerate() {
        match (&mut open, line.strip_prefix("```")) {
            (None, Some(info)) => open = Some((i + 1, info.trim().to_string(), String::new())),
            (Some(_), Some("")) => blocks.push(open.take().expect("a block is open")),
            (Some((_, _, text)), _) => {
                text.push_str(line);
                text.push('\n');
            }
            (None, None) => {}
        }
    }
    assert!(open.is_none(), "the guide ends inside a code block");
    let mut out = Vec::new();
    let mut it = blocks.into_iter().peekable();
    while let Some((line, info, script)) = it.next() {
        if info != "sh" {
            continue;
        }
        let (_, next_info, next_text) = it
            .next()
            .unwrap_or_else(|| panic!("line {line}: a sh block with no expected block after it"));
        let expect = match next_info.split_whitespace().collect::<Vec<_>>()[..] {
            ["json", status] => Expect::Json {
                status: status.parse().expect("a status after json"),
                body: serde_json::from_str(&next_text)
                    .unwrap_or_else(|e| panic!("line {line}: the expected body is not JSON: {e}")),
            },
            ["text"] => Expect::Text(next_text),
            _ => panic!("line {line}: a sh block followed by ```{next_info}"),
        };
        out.push(Step {
            line,
            script,
            expect,
        });
    }
    out
}

/// Tells whether `got` matches `want`, where the string "…" in `want` matches anything.
fn matches(want: &Value, got: &Value) -> bool {
    match (want, got) {
        (Value::String(w), _) if w == "…" => true,
        (Value::Object(w), Value::Object(g)) => {
            w.len() == g.len()
                && w.iter()
                    .all(|(k, v)| g.get(k).is_some_and(|gv| matches(v, gv)))
        }
        (Value::Array(w), Value::Array(g)) => {
            w.len() == g.len() && w.iter().zip(g).all(|(a, b)| matches(a, b))
        }
        _ => want == got,
    }
}

/// Runs a CLI command of the setup, which must succeed.
fn cairn(args: &[&str], input: Option<&str>) {
    let out = match input {
        Some(text) => common::cairn_with_input(args, text),
        None => Command::new(env!("CARGO_BIN_EXE_cairn"))
            .args(args)
            .output()
            .expect("the cairn binary runs"),
    };
    assert!(
        out.status.success(),
        "cairn {args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// The guide's count: KL-1001 in bin A-01-01-1, counted at 187 where the book holds 188.
const COUNTED: i64 = 187;

/// Counts A-01-01-1 as the guide tells (a counter's phone, one sync: bin opened, one
/// keyed line, bin done), then settles a day later, past every posting lag; the site's
/// policy (set by the guide) posts the within-tolerance difference automatically.
async fn count_the_guide_s_bin(app: &TestApp) {
    app.add_user(
        "noor",
        "KLN",
        &[Role::Counter],
        "kestrel-lane-counter",
        Some("3185"),
    )
    .await;
    let enrolled = app.enrol("noor", "3185", "KLN").await;
    assert_eq!(enrolled.status, 201, "{}", enrolled.text);
    let token = enrolled.json()["token"].as_str().unwrap().to_string();
    let label = cairn::master::place_label("KLN", "A", 1, 1, 1)
        .expect("the bin's place prints as a label")
        .text()
        .to_string();
    let pass = uuid::Uuid::now_v7().to_string();
    let at = Timestamp::now().0;
    let event = |id: String, ms: i64, kind: &str, extra: Value| {
        let mut e =
            json!({"id": id, "at": at + ms, "count": pass, "bin": "A-01-01-1", "type": kind});
        e.as_object_mut()
            .unwrap()
            .extend(extra.as_object().unwrap().clone());
        e
    };
    let events = vec![
        event(pass.clone(), 0, "bin_opened", json!({"label": label})),
        event(
            uuid::Uuid::now_v7().to_string(),
            5,
            "line",
            json!({"sku": "KL-1001", "qty": COUNTED, "lot": "", "entry": "keypad"}),
        ),
        event(uuid::Uuid::now_v7().to_string(), 12, "bin_done", json!({})),
    ];
    let body = app.stamped(
        &token,
        &json!({"device_clock": at + 20, "rtt_ms": 80, "events": events}),
    );
    let a = app
        .send(
            Method::POST,
            "/api/v1/sites/KLN/sync",
            &Auth::Bearer(token),
            Body::Json(body),
        )
        .await;
    assert_eq!(a.status, 200, "{}", a.text);
    for r in a.json()["results"].as_array().unwrap() {
        assert_eq!(r["status"], "accepted", "{}", a.text);
    }
    let day_ms = 86_400_000;
    let settled = cairn::writes::settle(app.state.store.as_ref(), Timestamp(at + day_ms))
        .await
        .expect("settling runs");
    assert_eq!(settled.adjusted.len(), 1, "one automatic adjustment");
}

// Blocking commands run while the server answers on the runtime's other thread.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_command_of_the_integration_guide_answers_what_the_guide_shows() {
    let guide_path = root().join("docs/integration.md");
    let guide = std::fs::read_to_string(&guide_path).expect("docs/integration.md is there");
    let steps = steps(&guide);
    assert!(steps.len() >= 8, "only {} steps", steps.len());
    // Each refusal the guide explains is shown by a command that gets it.
    let shown: Vec<u16> = steps
        .iter()
        .filter_map(|s| match s.expect {
            Expect::Json { status, .. } => Some(status),
            Expect::Text(_) => None,
        })
        .collect();
    for status in [400, 401, 409, 422, 429] {
        assert!(
            shown.contains(&status),
            "no command of the guide answers {status}"
        );
    }

    let app = spawn_app().await;
    let db = app.db_arg();
    cairn(
        &[
            "site",
            "add",
            "--db",
            &db,
            "--code",
            "KLN",
            "--name",
            "Kestrel Lane North",
        ],
        None,
    );
    cairn(
        &[
            "user",
            "add",
            "--db",
            &db,
            "--site",
            "KLN",
            "--name",
            "ines",
            "--roles",
            "inventory_manager",
            "--password-stdin",
        ],
        Some("kestrel-lane-guide-run\n"),
    );
    let seeds = root().join("tests/contract");
    for kind in ["bins", "items", "packs"] {
        let file = seeds.join(format!("{kind}.csv"));
        cairn(
            &[
                "import",
                "--db",
                &db,
                "--site",
                "KLN",
                kind,
                file.to_str().unwrap(),
            ],
            None,
        );
    }

    // `cairn` on PATH is this build's binary; variables a block sets (TOKEN) carry over to
    // the next through a file, as they would in one terminal.
    let dir = tempfile::tempdir().unwrap();
    let bin_dir = Path::new(env!("CARGO_BIN_EXE_cairn")).parent().unwrap();
    let path = format!(
        "{}:{}",
        bin_dir.display(),
        std::env::var("PATH").unwrap_or_default()
    );
    let state = dir.path().join("vars");
    std::fs::write(&state, "").unwrap();
    let mut counted = false;
    for step in &steps {
        if !counted && step.script.contains("/adjustments?") {
            count_the_guide_s_bin(&app).await;
            counted = true;
        }
        let script = format!(
            "set -a\n. '{state}'\n\
             curl() {{ command curl -w '\\n%{{http_code}}' \"$@\"; }}\n\
             {body}\n\
             {{ declare -p TOKEN 2>/dev/null || true; }} > '{state}'\n",
            state = state.display(),
            body = step.script,
        );
        let out = Command::new("bash")
            .arg("-c")
            .arg(&script)
            .env("CAIRN", &app.base)
            .env("CAIRN_DB", &db)
            .env("PATH", &path)
            .current_dir(dir.path())
            .output()
            .expect("bash runs");
        let text = String::from_utf8_lossy(&out.stdout).into_owned();
        assert!(
            out.status.success(),
            "guide line {}: the block failed: {}{}",
            step.line,
            text,
            String::from_utf8_lossy(&out.stderr)
        );
        match &step.expect {
            Expect::Text(want) => assert_eq!(&text, want, "guide line {}", step.line),
            Expect::Json { status, body } => {
                let (answer, code) = text
                    .trim_end()
                    .rsplit_once('\n')
                    .unwrap_or_else(|| panic!("guide line {}: no status in {text:?}", step.line));
                assert_eq!(
                    code.parse::<u16>().ok(),
                    Some(*status),
                    "guide line {}: {answer}",
                    step.line
                );
                let got: Value = serde_json::from_str(answer).unwrap_or_else(|e| {
                    panic!("guide line {}: not JSON ({e}): {answer}", step.line)
                });
                assert!(
                    matches(body, &got),
                    "guide line {}:\n want {body}\n  got {got}",
                    step.line
                );
            }
        }
    }
}

#[test]
fn the_wildcard_matches_any_value_and_nothing_else_is_loose() {
    let want: Value = serde_json::json!({"a": "…", "b": [1, "…"]});
    assert!(matches(
        &want,
        &serde_json::json!({"a": 5, "b": [1, {"x": 1}]})
    ));
    assert!(!matches(&want, &serde_json::json!({"a": 5, "b": [2, 0]})));
    assert!(!matches(
        &want,
        &serde_json::json!({"a": 5, "b": [1, 0], "c": 0})
    ));
    assert!(!matches(&want, &serde_json::json!({"a": 5, "b": [1]})));
}
