//! The `cairn code parse` and `cairn labels` commands, through the real binary.

mod common;

use std::process::Command;

fn cairn(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(args)
        .output()
        .expect("the cairn binary runs")
}

#[test]
fn code_parse_prints_elements_in_scan_order_and_typed_fields() {
    // GS1 example GTIN 09501101020917 (from memory; check digit 7 by the GS1 General
    // Specifications mod-10 rule),
    // expiry 2019-05-08 (AI 17), lot ABCD1234 (AI 10, variable length, ended by GS).
    let out = cairn(&[
        "code",
        "parse",
        "]C101095011010209171719050810ABCD1234\\x1d2110",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let ais: Vec<&str> = v["elements"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| e["ai"].as_str().unwrap())
        .collect();
    assert_eq!(ais, ["01", "17", "10", "21"]);
    assert_eq!(v["scan"]["gtin"], "09501101020917");
    assert_eq!(v["scan"]["expiry"], "2019-05-08");
    assert_eq!(v["scan"]["lot"], "ABCD1234");
}

#[test]
fn code_parse_of_a_bad_check_digit_says_what_and_exits_non_zero() {
    let out = cairn(&["code", "parse", "(01)09501101020918"]);
    assert!(!out.status.success());
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains("AI (01): check digit should be 7, found 8"),
        "{stderr}"
    );
}

#[test]
fn labels_write_one_scannable_label_per_bin_of_the_zone() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("l.db").display().to_string();
    assert!(
        cairn(&[
            "site",
            "add",
            "--db",
            &db,
            "--code",
            "KLN",
            "--name",
            "Northgate"
        ])
        .status
        .success()
    );
    let bins = dir.path().join("bins.csv");
    std::fs::write(
        &bins,
        "zone,aisle,bay,level,side\nB,3,12,2,R\nB,3,13,4,L\nC,1,1,1,L\n",
    )
    .unwrap();
    let out = cairn(&[
        "import",
        "bins",
        "--db",
        &db,
        "--site",
        "KLN",
        &bins.display().to_string(),
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let svg_path = dir.path().join("b.svg");
    let out = cairn(&[
        "labels",
        "--db",
        &db,
        "--zone",
        "B",
        "--out",
        &svg_path.display().to_string(),
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let svg = std::fs::read_to_string(&svg_path).unwrap();
    assert!(
        svg.starts_with("<?xml") || svg.starts_with("<svg"),
        "an SVG document"
    );
    for (aisle, bay, level) in [("03", "12", "2"), ("03", "13", "4")] {
        let label = cairn_scan::BinLabel::encode("KLN", "B", aisle, bay, level).unwrap();
        assert!(
            svg.contains(label.text()),
            "label {} is on the sheet",
            label.text()
        );
        assert!(cairn_scan::BinLabel::parse(label.text()).is_ok());
    }
    assert!(
        !svg.contains("-C-01-01-1-"),
        "zone C is not on zone B's sheet"
    );
}

#[test]
fn a_site_is_made_only_with_a_zone_the_tz_database_knows() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("zones.db");
    let db = db.to_str().unwrap();
    for bad in ["Mars/Olympus_Mons", "+05:30", "EST5EDT", ""] {
        let out = cairn(&[
            "site",
            "add",
            "--db",
            db,
            "--code",
            "MARS",
            "--name",
            "Far",
            "--time-zone",
            bad,
        ]);
        assert!(!out.status.success(), "{bad} was taken");
        let said = String::from_utf8_lossy(&out.stderr);
        assert!(
            said.contains("IANA zone name such as Europe/Berlin"),
            "{bad}: {said}"
        );
    }
    let out = cairn(&[
        "site",
        "add",
        "--db",
        db,
        "--code",
        "KTM",
        "--name",
        "Valley depot",
        "--time-zone",
        "Asia/Kathmandu",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(String::from_utf8_lossy(&out.stdout).contains("(Asia/Kathmandu)"));
    let conn = common::sqlite_file(db);
    let zones: Vec<String> = conn
        .prepare("select time_zone from site order by code")
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .collect::<Result<_, _>>()
        .unwrap();
    assert_eq!(zones, ["Asia/Kathmandu"], "no refused site was written");

    // An admin moves the site to another zone: audited with what it was and is.
    let zone = |z: &str| {
        cairn(&[
            "site",
            "zone",
            "--db",
            db,
            "--code",
            "KTM",
            "--time-zone",
            z,
        ])
    };
    let out = zone("Mars/Olympus_Mons");
    assert!(!out.status.success());
    let out = zone("America/Chicago");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(
        String::from_utf8_lossy(&out.stdout).contains("Asia/Kathmandu -> America/Chicago"),
        "{}",
        String::from_utf8_lossy(&out.stdout)
    );
    let (now, detail): (String, String) = conn
        .query_row(
            "select s.time_zone, a.detail from site s, audit_event a
             where a.action = 'site_zone_changed' and a.site_id = s.id",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!(now, "America/Chicago");
    let detail: serde_json::Value = serde_json::from_str(&detail).unwrap();
    assert_eq!(
        detail,
        serde_json::json!({"was": "Asia/Kathmandu", "now": "America/Chicago"})
    );
}

/// A site big enough that `cairn plan --format json` writes more than a pipe holds
/// (64 KiB on Linux, pipe(7)), so the command is still writing when its reader leaves.
fn site_with_a_long_plan(dir: &std::path::Path) -> String {
    let db = dir.join("plan.db").display().to_string();
    let out = cairn(&[
        "demo-data",
        "--db",
        &db,
        "--items",
        "300",
        "--bins",
        "1000",
        "--days",
        "30",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    db
}

const LONG_PLAN: [&str; 10] = [
    "--site",
    "KLN",
    "--format",
    "json",
    "--fill-capacity",
    "--counters",
    "20",
    "--minutes",
    "480",
    "--date",
];

#[test]
fn plan_piped_into_a_reader_that_stops_after_one_line_ends_quietly() {
    use std::io::{BufRead, BufReader, Read};
    use std::process::Stdio;
    let dir = tempfile::tempdir().unwrap();
    let db = site_with_a_long_plan(dir.path());
    let mut args = vec!["plan", "--db", &db];
    args.extend(LONG_PLAN);
    args.push("2026-12-07");

    // The whole plan, read to the end, is longer than the pipe holds.
    let whole = cairn(&args);
    assert!(whole.status.success());
    assert!(
        whole.stdout.len() > 64 * 1024,
        "the plan is {} bytes, too short to fill a pipe",
        whole.stdout.len()
    );

    // `cairn plan … | head -1`: one line read, then the pipe closed.
    let mut child = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(&args)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the cairn binary runs");
    let mut first = String::new();
    BufReader::new(child.stdout.take().unwrap())
        .read_line(&mut first)
        .unwrap();
    assert_eq!(first, "{\n");
    let mut stderr = String::new();
    child
        .stderr
        .take()
        .unwrap()
        .read_to_string(&mut stderr)
        .unwrap();
    let status = child.wait().unwrap();
    assert!(!stderr.contains("panicked"), "{stderr}");
    assert_eq!(stderr, "", "nothing is said about the closed pipe");
    assert!(status.success(), "{status}");
}

#[test]
fn a_command_whose_output_nobody_reads_ends_quietly() {
    use std::io::Read;
    use std::process::Stdio;
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("quiet.db").display().to_string();
    // Standard output closed before the command writes anything.
    let mut child = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args([
            "site",
            "add",
            "--db",
            &db,
            "--code",
            "KLN",
            "--name",
            "Northgate",
        ])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the cairn binary runs");
    drop(child.stdout.take());
    let mut stderr = String::new();
    child
        .stderr
        .take()
        .unwrap()
        .read_to_string(&mut stderr)
        .unwrap();
    let status = child.wait().unwrap();
    assert!(!stderr.contains("panicked"), "{stderr}");
    assert!(status.success(), "{status}: {stderr}");
}

#[test]
fn loadtest_prints_its_result_and_not_a_line_per_request() {
    let out = Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args([
            "loadtest",
            "--phones",
            "2",
            "--seconds",
            "1",
            "--batch",
            "10",
            "--synchronous",
            "normal",
        ])
        .env_remove("RUST_LOG")
        .output()
        .expect("the cairn binary runs");
    let stdout = String::from_utf8_lossy(&out.stdout);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{stderr}");
    let requests: u64 = stdout
        .lines()
        .find_map(|l| l.split_once(" requests, ").map(|(n, _)| n.parse().ok()))
        .flatten()
        .unwrap_or_else(|| panic!("no request count in {stdout}"));
    assert!(requests > 2, "the phones sent {requests} requests");
    assert_eq!(
        stdout.lines().count(),
        3,
        "the load, the figures and the ceiling: {stdout}"
    );
    assert_eq!(stderr, "", "no log line at the default level");
}
