//! CSV import end to end, through the real `cairn` binary and a real database (a SQLite
//! file, or PostgreSQL when the suites' switch is set).

mod common;

use std::fmt::Write as _;
use std::path::Path;
use std::process::Command;

fn cairn(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_cairn"))
        .args(args)
        .output()
        .expect("the cairn binary runs")
}

fn write(path: &Path, text: &str) {
    std::fs::write(path, text).expect("the temporary file is writable");
}

fn movement_count(db: &common::CliDb) -> i64 {
    db.sql_i64("select count(*) from movement")
}

/// Creates a site with 100 bins and 50 items through the CLI.
fn site(dir: &Path) -> common::CliDb {
    let db = common::CliDb::new(dir.join("t.db"));
    assert!(
        cairn(&["site", "add", "--db", &db, "--code", "T", "--name", "Test"])
            .status
            .success()
    );
    let mut bins = String::from("zone,aisle,bay,level,side\n");
    for i in 0..100 {
        writeln!(bins, "A,{},{},1,L", 1 + i / 20, 1 + i % 20).unwrap();
    }
    write(&dir.join("bins.csv"), &bins);
    let mut items = String::from("sku,description,base_unit,unit_cost_minor,lot_tracked,group\n");
    for i in 0..50 {
        writeln!(items, "S{i},Item {i},each,{},no,test", 100 + i).unwrap();
    }
    write(&dir.join("items.csv"), &items);
    for kind in ["bins", "items"] {
        let path = dir.join(format!("{kind}.csv")).display().to_string();
        let out = cairn(&["import", kind, "--db", &db, "--site", "T", &path]);
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
    db
}

fn movements_csv(rows: usize, bad_line: Option<(usize, &str)>) -> String {
    let mut csv = String::from("id,bin,sku,qty,kind,event_at\n");
    for i in 0..rows {
        let line = i + 2;
        match bad_line {
            Some((l, text)) if l == line => csv.push_str(text),
            _ => write!(
                csv,
                "m{i},A-{:02}-{:02}-1,S{},{},receipt,2026-03-02T08:{:02}:00Z",
                1 + (i % 100) / 20,
                1 + i % 20,
                i % 50,
                1 + i % 7,
                i % 60
            )
            .unwrap(),
        }
        csv.push('\n');
    }
    csv
}

/// Imports `csv` as movements into site T and returns whether it succeeded and stderr.
fn import_movements(dir: &Path, db: &str, csv: &str) -> (bool, String) {
    let path = dir.join("movements.csv");
    write(&path, csv);
    let out = cairn(&[
        "import",
        "movements",
        "--db",
        db,
        "--site",
        "T",
        &path.display().to_string(),
    ]);
    (
        out.status.success(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn a_bad_row_in_ten_thousand_writes_nothing_and_reports_its_line() {
    let dir = tempfile::tempdir().unwrap();
    let db = site(dir.path());
    let (ok, stderr) = import_movements(
        dir.path(),
        &db,
        &movements_csv(
            10_000,
            Some((7_342, "bad,A-01-01-1,S1,2.5,receipt,2026-03-02T08:00:00Z")),
        ),
    );
    assert!(!ok);
    assert!(stderr.contains("line 7342, qty"), "{stderr}");
    assert!(stderr.contains("nothing was written"), "{stderr}");
    assert_eq!(movement_count(&db), 0);
}

#[test]
fn a_row_naming_an_unknown_bin_is_reported_by_line_after_the_shape_checks() {
    let dir = tempfile::tempdir().unwrap();
    let db = site(dir.path());
    let (ok, stderr) = import_movements(
        dir.path(),
        &db,
        &movements_csv(
            2_000,
            Some((1_500, "x1,Z-09-09-9,S1,3,receipt,2026-03-02T08:00:00Z")),
        ),
    );
    assert!(!ok);
    assert!(
        stderr.contains("line 1500, bin: unknown bin 'Z-09-09-9'"),
        "{stderr}"
    );
    assert_eq!(movement_count(&db), 0);
}

#[test]
fn a_good_file_imports_and_a_second_import_is_acknowledged_not_applied() {
    let dir = tempfile::tempdir().unwrap();
    let db = site(dir.path());
    let path = dir.path().join("movements.csv");
    write(&path, &movements_csv(10_000, None));
    let p = path.display().to_string();
    let out = cairn(&["import", "movements", "--db", &db, "--site", "T", &p]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(movement_count(&db), 10_000);
    let out = cairn(&["import", "movements", "--db", &db, "--site", "T", &p]);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        stdout.contains("0 written, 10000 already recorded"),
        "{stdout}"
    );
    assert_eq!(movement_count(&db), 10_000);
    // Each import (two of bins and items, two of movements) is in the audit trail.
    let imports =
        db.sql_i64("select count(*) from audit_event where action = 'import' and actor = 'cli'");
    assert_eq!(imports, 4);
}

#[test]
fn an_unknown_column_is_refused_with_its_name() {
    let dir = tempfile::tempdir().unwrap();
    let db = site(dir.path());
    let path = dir.path().join("items2.csv");
    write(
        &path,
        "sku,description,base_unit,unit_cost_minor,colour\nZ1,Zed,each,5,red\n",
    );
    let out = cairn(&[
        "import",
        "items",
        "--db",
        &db,
        "--site",
        "T",
        &path.display().to_string(),
    ]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(!out.status.success());
    assert!(
        stderr.contains("line 2") && stderr.contains("colour"),
        "{stderr}"
    );
}

#[test]
fn an_empty_file_is_refused_not_imported_as_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let db = site(dir.path());
    let (ok, stderr) = import_movements(dir.path(), &db, "");
    assert!(!ok, "an empty file fails the command");
    assert!(
        stderr.contains("line 1, header: the file is empty"),
        "{stderr}"
    );
}

#[test]
fn a_header_without_rows_is_refused_naming_line_2() {
    let dir = tempfile::tempdir().unwrap();
    let db = site(dir.path());
    let (ok, stderr) = import_movements(dir.path(), &db, "id,bin,sku,qty,kind,event_at\n");
    assert!(!ok);
    assert!(
        stderr.contains("line 2, row: the file has a header line but no rows"),
        "{stderr}"
    );
}

#[test]
fn a_nul_byte_in_a_field_is_refused_with_its_line_and_column() {
    let dir = tempfile::tempdir().unwrap();
    let db = site(dir.path());
    let (ok, stderr) = import_movements(
        dir.path(),
        &db,
        &movements_csv(
            20,
            Some((9, "m7,A-01-01-1,S1,3,receipt,2026-03-02T08:00:00Z\0")),
        ),
    );
    assert!(!ok);
    assert!(
        stderr.contains("line 9, event_at: holds a NUL byte"),
        "{stderr}"
    );
    assert_eq!(movement_count(&db), 0);
    let items = dir.path().join("nul-items.csv");
    write(
        &items,
        "sku,description,base_unit,unit_cost_minor\nN1,Wash\0er,each,5\n",
    );
    let out = cairn(&[
        "import",
        "items",
        "--db",
        &db,
        "--site",
        "T",
        &items.display().to_string(),
    ]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(!out.status.success());
    assert!(
        stderr.contains("line 2, description: holds a NUL byte"),
        "{stderr}"
    );
}
