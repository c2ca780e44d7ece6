//! Backing up and restoring the database file. A backup uses SQLite's online backup
//! API, so the server keeps serving (and writing) while it runs: the copy is the
//! database as of one instant, never a torn mix of pages. Every copy is checked before
//! it is kept: `integrity_check`, the schema version, and the ledger's balances. A
//! restore checks the backup fully before it touches anything, then gives the copy it
//! made the lighter `quick_check` (the pages are the ones just checked). Each stage
//! names itself on the progress line it is given.

use super::migrate;
use anyhow::{Context, bail, ensure};
use indicatif::{ProgressBar, ProgressStyle};
use rusqlite::backup::{Backup, StepResult};
use rusqlite::{Connection, OpenFlags};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

/// Prefix and suffix of the files a backup writes into a folder.
const FILE_PREFIX: &str = "cairn-";
const FILE_SUFFIX: &str = ".db";
/// How long a backup step waits when the writer holds a lock it needs.
const BUSY_PAUSE: Duration = Duration::from_millis(50);
/// Busy steps before a backup gives up.
const MAX_BUSY_STEPS: u32 = 1_200;

/// How hard `check_file` looks.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Depth {
    /// `integrity_check` (every index against its table) and every balance against
    /// its movements.
    Full,
    /// `quick_check` (every page and record, not index contents); balances not summed.
    Quick,
}

/// Runs `work` with a spinner on standard error that names the stage a long backup or
/// restore is in, with the time it has taken so far; hidden unless standard error is a
/// terminal, and cleared when `work` returns.
pub fn with_spinner<T>(work: impl FnOnce(&ProgressBar) -> T) -> T {
    let pb = if std::io::stderr().is_terminal() {
        let pb = ProgressBar::new_spinner();
        pb.set_style(
            ProgressStyle::with_template("{spinner} {elapsed:>4} {msg}")
                .expect("the template is a fixed, valid string"),
        );
        pb.enable_steady_tick(Duration::from_millis(200));
        pb
    } else {
        ProgressBar::hidden()
    };
    let out = work(&pb);
    pb.finish_and_clear();
    out
}

/// What a checked database file holds.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Summary {
    pub schema_version: i64,
    pub movements: i64,
    pub sync_events: i64,
    /// Keys whose stored balance differs from the sum of their movements (0 when sound).
    pub unbalanced_keys: i64,
}

/// What a backup or restore did.
#[derive(Debug, Clone)]
pub struct Report {
    pub path: PathBuf,
    pub bytes: u64,
    pub copy: Duration,
    pub check: Duration,
    /// How the copy was checked (a restore checked its source in full first).
    pub depth: Depth,
    pub summary: Summary,
    /// Older backups removed by `--keep`.
    pub removed: Vec<PathBuf>,
}

impl std::fmt::Display for Report {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "{}: {:.1} MiB, schema {}, {} movements, {} sync events; copied in {:.2} s, checked in {:.2} s ({})",
            self.path.display(),
            self.bytes as f64 / (1024.0 * 1024.0),
            self.summary.schema_version,
            self.summary.movements,
            self.summary.sync_events,
            self.copy.as_secs_f64(),
            self.check.as_secs_f64(),
            match self.depth {
                Depth::Full => "integrity ok, balances ok",
                Depth::Quick => "backup: integrity ok, balances ok; copy: quick check ok",
            }
        )?;
        for r in &self.removed {
            write!(f, "\nremoved old backup {}", r.display())?;
        }
        Ok(())
    }
}

/// Copies the live database `db` to `to` (a file, or a folder to hold a time-stamped
/// file), checks the copy, and with `keep` removes all but the newest `keep` backups
/// in that folder.
pub fn backup(
    db: &Path,
    to: &Path,
    keep: Option<usize>,
    progress: &ProgressBar,
) -> anyhow::Result<Report> {
    ensure!(db.exists(), "database {} does not exist", db.display());
    if keep == Some(0) {
        bail!("--keep 0 would remove the backup just made; keep at least 1");
    }
    let into_folder = to.is_dir();
    if keep.is_some() && !into_folder {
        bail!("--keep needs --to to be a folder (it removes older backups there)");
    }
    let target = if into_folder {
        let stamp = chrono::Utc::now().format("%Y%m%dT%H%M%S%.3fZ");
        to.join(format!("{FILE_PREFIX}{stamp}{FILE_SUFFIX}"))
    } else {
        to.to_path_buf()
    };
    ensure!(
        !target.exists(),
        "{} exists already; a backup never overwrites a file",
        target.display()
    );
    let partial = target.with_extension("db.partial");
    let _ = std::fs::remove_file(&partial);

    let started = Instant::now();
    let src = Connection::open_with_flags(
        db,
        OpenFlags::SQLITE_OPEN_READ_WRITE | OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )
    .with_context(|| format!("cannot open {}", db.display()))?;
    src.busy_timeout(Duration::from_secs(5))?;
    src.pragma_update(None, "query_only", true)?;
    progress.set_message(format!("copying {}", db.display()));
    {
        let mut dst = Connection::open(&partial)
            .with_context(|| format!("cannot create {}", partial.display()))?;
        copy_all(&src, &mut dst)?;
        // A backup is one self-contained file: no WAL beside it.
        let mode: String = dst.query_row("pragma journal_mode = delete", [], |r| r.get(0))?;
        ensure!(mode == "delete", "the copy kept journal mode {mode}");
    }
    drop(src);
    let copy = started.elapsed();

    let checked = Instant::now();
    let summary = check_file(&partial, Depth::Full, progress).inspect_err(|_| {
        let _ = std::fs::remove_file(&partial);
    })?;
    let check = checked.elapsed();
    sync_file(&partial)?;
    std::fs::rename(&partial, &target)
        .with_context(|| format!("cannot rename {} into place", partial.display()))?;
    if let Some(parent) = target.parent() {
        sync_dir(parent);
    }
    let removed = match keep {
        Some(n) => prune(to, n)?,
        None => Vec::new(),
    };
    Ok(Report {
        bytes: std::fs::metadata(&target)?.len(),
        path: target,
        copy,
        check,
        depth: Depth::Full,
        summary,
        removed,
    })
}

/// Restores the backup `from` into `db`. An existing `db` is replaced only with `force`
/// (stop the server first: it must not keep writing the file being replaced).
pub fn restore(
    from: &Path,
    db: &Path,
    force: bool,
    progress: &ProgressBar,
) -> anyhow::Result<Report> {
    ensure!(from.exists(), "backup {} does not exist", from.display());
    let started = Instant::now();
    // Check the backup before touching anything.
    let sound = check_file(from, Depth::Full, progress)
        .with_context(|| format!("backup {} is not sound", from.display()))?;
    if db.exists() && !force {
        bail!(
            "{} exists; stop the server, then run restore again with --force to replace it",
            db.display()
        );
    }
    let src = Connection::open_with_flags(from, OpenFlags::SQLITE_OPEN_READ_ONLY)
        .with_context(|| format!("cannot open {}", from.display()))?;
    progress.set_message(format!("copying into {}", db.display()));
    {
        let mut dst =
            Connection::open(db).with_context(|| format!("cannot open {}", db.display()))?;
        dst.busy_timeout(Duration::from_secs(5))?;
        copy_all(&src, &mut dst)?;
        let mode: String = dst.query_row("pragma journal_mode = wal", [], |r| r.get(0))?;
        ensure!(
            mode == "wal",
            "the restored file cannot use WAL (got {mode})"
        );
        dst.execute_batch("pragma wal_checkpoint(truncate)")?;
    }
    let copy = started.elapsed();
    let checked = Instant::now();
    let summary = check_file(db, Depth::Quick, progress)?;
    ensure!(
        summary.movements == sound.movements && summary.sync_events == sound.sync_events,
        "{} holds {} movements and {} sync events after the copy; the backup held {} and {}",
        db.display(),
        summary.movements,
        summary.sync_events,
        sound.movements,
        sound.sync_events
    );
    let check = checked.elapsed();
    Ok(Report {
        path: db.to_path_buf(),
        bytes: std::fs::metadata(db)?.len(),
        copy,
        check,
        depth: Depth::Quick,
        summary,
        removed: Vec::new(),
    })
}

/// Copies every page of `src` into `dst` in one step: the reader's snapshot holds for
/// the whole copy, so a busy writer cannot make it start over (WAL lets it keep writing).
fn copy_all(src: &Connection, dst: &mut Connection) -> anyhow::Result<()> {
    let b = Backup::new(src, dst)?;
    let mut busy = 0;
    loop {
        match b.step(-1)? {
            StepResult::Done => return Ok(()),
            StepResult::More => {}
            StepResult::Busy | StepResult::Locked => {
                busy += 1;
                ensure!(
                    busy < MAX_BUSY_STEPS,
                    "the database stayed locked for {} s; nothing was kept",
                    (BUSY_PAUSE * MAX_BUSY_STEPS).as_secs()
                );
                std::thread::sleep(BUSY_PAUSE);
            }
            other => bail!("backup step: {other:?}"),
        }
    }
}

/// Opens a database file read-only and proves it sound: `integrity_check` (or with
/// `Depth::Quick`, `quick_check`) says ok, its schema is one this build knows, and (in
/// full) every balance equals the sum of its movements.
pub fn check_file(path: &Path, depth: Depth, progress: &ProgressBar) -> anyhow::Result<Summary> {
    let conn = Connection::open_with_flags(path, OpenFlags::SQLITE_OPEN_READ_ONLY)
        .with_context(|| format!("cannot open {}", path.display()))?;
    let mut problems = Vec::new();
    let pragma = match depth {
        Depth::Full => "integrity_check",
        Depth::Quick => "quick_check",
    };
    progress.set_message(format!("checking {}: {pragma}", path.display()));
    let mut stmt = conn.prepare(&format!("pragma {pragma}"))?;
    let rows = stmt.query_map([], |r| r.get::<_, String>(0))?;
    for row in rows {
        let row = row?;
        if row != "ok" {
            problems.push(row);
        }
    }
    ensure!(
        problems.is_empty(),
        "{pragma} of {}: {}",
        path.display(),
        problems.join("; ")
    );
    let schema_version: i64 = conn
        .query_row(
            "select coalesce(max(version), 0) from schema_migration",
            [],
            |r| r.get(0),
        )
        .with_context(|| format!("{} is not a Cairn database", path.display()))?;
    ensure!(
        schema_version <= migrate::latest_version(),
        "{} has schema version {schema_version}, newer than this cairn ({}); use a newer cairn",
        path.display(),
        migrate::latest_version()
    );
    let movements = conn.query_row("select count(*) from movement", [], |r| r.get(0))?;
    let sync_events = if table_exists(&conn, "sync_event")? {
        conn.query_row("select count(*) from sync_event", [], |r| r.get(0))?
    } else {
        0
    };
    let unbalanced_keys = match depth {
        Depth::Full => {
            progress.set_message(format!(
                "checking {}: every balance against its movements",
                path.display()
            ));
            unbalanced_keys(&conn)?
        }
        Depth::Quick => 0,
    };
    ensure!(
        unbalanced_keys == 0,
        "{} has {unbalanced_keys} balance(s) that differ from the sum of their movements",
        path.display()
    );
    Ok(Summary {
        schema_version,
        movements,
        sync_events,
        unbalanced_keys,
    })
}

/// Counts keys whose balance row differs from the sum of their movements, either way.
pub fn unbalanced_keys(conn: &Connection) -> rusqlite::Result<i64> {
    conn.query_row(
        "select
           (select count(*) from (select bin_id, item_id, lot, sum(qty) as s from movement
                                  group by bin_id, item_id, lot) m
              left join balance b using (bin_id, item_id, lot)
            where coalesce(b.qty, 0) <> m.s)
         + (select count(*) from balance b where b.qty <> 0 and not exists
              (select 1 from movement m where m.bin_id = b.bin_id and m.item_id = b.item_id
                 and m.lot = b.lot))",
        [],
        |r| r.get(0),
    )
}

fn table_exists(conn: &Connection, name: &str) -> rusqlite::Result<bool> {
    conn.query_row(
        "select exists (select 1 from sqlite_master where type = 'table' and name = ?1)",
        [name],
        |r| r.get(0),
    )
}

/// Removes all but the newest `keep` backup files in `folder` (by their time-stamped names).
fn prune(folder: &Path, keep: usize) -> anyhow::Result<Vec<PathBuf>> {
    let mut files: Vec<PathBuf> = std::fs::read_dir(folder)?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| {
            p.file_name()
                .and_then(|n| n.to_str())
                .is_some_and(|n| n.starts_with(FILE_PREFIX) && n.ends_with(FILE_SUFFIX))
        })
        .collect();
    files.sort();
    let excess = files.len().saturating_sub(keep);
    let removed: Vec<PathBuf> = files.into_iter().take(excess).collect();
    for p in &removed {
        std::fs::remove_file(p).with_context(|| format!("cannot remove {}", p.display()))?;
    }
    Ok(removed)
}

fn sync_file(path: &Path) -> anyhow::Result<()> {
    std::fs::File::open(path)?
        .sync_all()
        .with_context(|| format!("cannot flush {}", path.display()))
}

/// Flushes a folder's entries so a rename survives a power cut (best effort).
fn sync_dir(dir: &Path) {
    if let Ok(d) = std::fs::File::open(dir) {
        let _ = d.sync_all();
    }
}
