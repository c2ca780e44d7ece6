//! CSV import of items, bins, packs, movements and planner inputs: every row is checked before
//! anything is written, the whole file is written in one transaction, and each
//! error names its line and column.

use crate::accounts::audit::AuditEvent;
use crate::accuracy::inputs::PlannerInputRecord;
use crate::batch::{Collector, FieldError, RowError};
use crate::ledger::MovementRecord;
use crate::master::{BinRecord, ItemRecord, PackRecord, Site};
use crate::store::Store;
use crate::store::error::{Progress, StoreError};
use crate::time::Timestamp;
use indicatif::{ProgressBar, ProgressStyle};
use serde::de::DeserializeOwned;
use std::path::Path;
use std::sync::Arc;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Duration;

/// Largest CSV file accepted in one import, in rows.
pub const MAX_IMPORT_ROWS: usize = 5_000_000;
/// Errors printed before the rest are summarised.
pub const MAX_ERRORS_SHOWN: usize = 50;
/// Source recorded for imported movements that name none.
const IMPORT_SOURCE: &str = "import";

/// What a CSV file holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum ImportKind {
    Items,
    Bins,
    Packs,
    Movements,
    /// The planner's lead times and review periods, per item (`sku`) or item group (`group`).
    PlannerInputs,
}

impl ImportKind {
    /// Returns the kind's name as the command line spells it.
    pub fn as_str(self) -> &'static str {
        match self {
            ImportKind::Items => "items",
            ImportKind::Bins => "bins",
            ImportKind::Packs => "packs",
            ImportKind::Movements => "movements",
            ImportKind::PlannerInputs => "planner-inputs",
        }
    }
}

/// One refused line of a CSV file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LineError {
    /// 1-based line number in the file (the header is line 1).
    pub line: u64,
    pub field: String,
    pub message: String,
}

impl std::fmt::Display for LineError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "line {}, {}: {}", self.line, self.field, self.message)
    }
}

/// Why an import wrote nothing.
#[derive(Debug, thiserror::Error)]
pub enum ImportError {
    #[error("cannot read {path}: {message}")]
    Unreadable { path: String, message: String },
    #[error("{} line(s) refused; nothing was written", .0.len())]
    Lines(Vec<LineError>),
    #[error(transparent)]
    Store(StoreError),
}

/// What an import wrote.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ImportSummary {
    pub rows: usize,
    pub written: usize,
    pub already_recorded: usize,
}

struct Parsed<T> {
    rows: Vec<T>,
    lines: Vec<u64>,
}

fn bar(show: bool, len: Option<u64>, what: &str) -> ProgressBar {
    if !show {
        return ProgressBar::hidden();
    }
    let pb = match len {
        Some(n) => ProgressBar::new(n),
        None => ProgressBar::new_spinner(),
    };
    let style = ProgressStyle::with_template("{prefix:>9} [{bar:30}] {pos}/{len} {per_sec} {msg}")
        .expect("the template is a fixed, valid string")
        .progress_chars("=> ");
    pb.set_style(style);
    pb.set_prefix(what.to_string());
    pb.enable_steady_tick(Duration::from_millis(120));
    pb
}

/// Reads and validates every row of a CSV file.
fn parse<R: DeserializeOwned, T>(
    path: &Path,
    show: bool,
    validate: impl Fn(R) -> Result<T, Vec<FieldError>>,
) -> Result<Parsed<T>, ImportError> {
    let unreadable = |e: &dyn std::fmt::Display| ImportError::Unreadable {
        path: path.display().to_string(),
        message: e.to_string(),
    };
    let size = std::fs::metadata(path).map_err(|e| unreadable(&e))?.len();
    let mut rdr = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .from_path(path)
        .map_err(|e| unreadable(&e))?;
    let headers = rdr.headers().map_err(|e| unreadable(&e))?.clone();
    if headers.iter().all(str::is_empty) {
        return Err(ImportError::Lines(vec![LineError {
            line: 1,
            field: "header".into(),
            message: "the file is empty: it needs a header line and at least one row".into(),
        }]));
    }
    if let Some(col) = headers.iter().position(|h| h.contains('\0')) {
        return Err(ImportError::Lines(vec![LineError {
            line: 1,
            field: "header".into(),
            message: format!("column {} holds a NUL byte (U+0000)", col + 1),
        }]));
    }
    let pb = bar(show, Some(size), "checking");
    let mut c = Collector::default();
    let mut lines = Vec::new();
    let mut errors = Vec::new();
    let mut record = csv::StringRecord::new();
    loop {
        match rdr.read_record(&mut record) {
            Ok(false) => break,
            Ok(true) => {}
            Err(e) => {
                let line = e.position().map_or(0, |p| p.line());
                errors.push(LineError {
                    line,
                    field: "row".into(),
                    message: e.to_string(),
                });
                break;
            }
        }
        let line = record.position().map_or(0, |p| p.line());
        if lines.len() >= MAX_IMPORT_ROWS {
            errors.push(LineError {
                line,
                field: "row".into(),
                message: format!("a file may hold at most {MAX_IMPORT_ROWS} rows"),
            });
            break;
        }
        let i = lines.len();
        lines.push(line);
        // A NUL ends strings in C tools and terminals; no field of any kind holds one.
        if let Some(col) = record.iter().position(|f| f.contains('\0')) {
            errors.push(nul_byte(line, &headers, col));
            continue;
        }
        match record.deserialize::<R>(Some(&headers)) {
            Ok(r) => c.push(i, validate(r)),
            Err(e) => {
                let field = match e.kind() {
                    csv::ErrorKind::Deserialize { err, .. } => err
                        .field()
                        .and_then(|f| headers.get(f as usize))
                        .unwrap_or("row")
                        .to_string(),
                    _ => "row".to_string(),
                };
                let message = match e.kind() {
                    csv::ErrorKind::Deserialize { err, .. } => err.kind().to_string(),
                    _ => e.to_string(),
                };
                errors.push(LineError {
                    line,
                    field,
                    message,
                });
            }
        }
        if i % 4096 == 0 {
            pb.set_position(record.position().map_or(0, |p| p.byte()));
        }
    }
    pb.finish_and_clear();
    if lines.is_empty() && errors.is_empty() {
        errors.push(LineError {
            line: 2,
            field: "row".into(),
            message: "the file has a header line but no rows: nothing to import".into(),
        });
    }
    let rows = match c.finish() {
        Ok(rows) => rows,
        Err(row_errors) => {
            errors.extend(row_errors.into_iter().map(|e| to_line(&lines, e)));
            Vec::new()
        }
    };
    if !errors.is_empty() {
        errors.sort_by_key(|e| e.line);
        return Err(ImportError::Lines(errors));
    }
    Ok(Parsed { rows, lines })
}

fn nul_byte(line: u64, headers: &csv::StringRecord, col: usize) -> LineError {
    LineError {
        line,
        field: headers.get(col).unwrap_or("row").to_string(),
        message: "holds a NUL byte (U+0000), which no field may hold".into(),
    }
}

fn to_line(lines: &[u64], e: RowError) -> LineError {
    LineError {
        line: lines.get(e.row).copied().unwrap_or(0),
        field: e.field,
        message: e.message,
    }
}

/// Runs a store write while a progress bar follows its row counter.
async fn write<T, F>(
    show: bool,
    total: usize,
    lines: &[u64],
    fut: impl FnOnce(Progress) -> F,
) -> Result<T, ImportError>
where
    F: std::future::Future<Output = Result<T, StoreError>>,
{
    let (progress, count): (Progress, Arc<AtomicU64>) = Progress::new();
    let pb = bar(show, Some(total as u64), "writing");
    let watcher = {
        let pb = pb.clone();
        tokio::spawn(async move {
            loop {
                pb.set_position(count.load(Ordering::Relaxed));
                tokio::time::sleep(Duration::from_millis(100)).await;
            }
        })
    };
    let out = fut(progress).await;
    watcher.abort();
    pb.finish_and_clear();
    out.map_err(|e| match e {
        StoreError::Rejected(rows) => {
            ImportError::Lines(rows.into_iter().map(|e| to_line(lines, e)).collect())
        }
        other => ImportError::Store(other),
    })
}

/// Imports one CSV file into a site: all rows or none, with its `audit` event (if any)
/// written in the same transaction.
pub async fn import_csv(
    store: &dyn Store,
    site: &Site,
    kind: ImportKind,
    path: &Path,
    show: bool,
    audit: Option<AuditEvent>,
) -> Result<ImportSummary, ImportError> {
    let id = site.id;
    let audit = |rows: usize| {
        audit
            .clone()
            .map(|a| a.detail(serde_json::json!({"kind": kind.as_str(), "rows": rows})))
    };
    let done = |rows: usize, written: usize, already_recorded: usize| ImportSummary {
        rows,
        written,
        already_recorded,
    };
    match kind {
        ImportKind::Items => {
            let p = parse(path, show, ItemRecord::validate)?;
            let n = p.rows.len();
            let w = write(show, n, &p.lines, |pr| {
                store.put_items(id, p.rows, pr, audit(n))
            })
            .await?;
            Ok(done(n, w, 0))
        }
        ImportKind::Bins => {
            let p = parse(path, show, BinRecord::validate)?;
            let n = p.rows.len();
            let w = write(show, n, &p.lines, |pr| {
                store.put_bins(id, p.rows, pr, audit(n))
            })
            .await?;
            Ok(done(n, w, 0))
        }
        ImportKind::Packs => {
            let p = parse(path, show, PackRecord::validate)?;
            let n = p.rows.len();
            let w = write(show, n, &p.lines, |pr| {
                store.put_packs(id, p.rows, pr, audit(n))
            })
            .await?;
            Ok(done(n, w, 0))
        }
        ImportKind::Movements => {
            let now = Timestamp::now();
            let p = parse(path, show, |r: MovementRecord| {
                r.validate(now, IMPORT_SOURCE)
            })?;
            let n = p.rows.len();
            let o = write(show, n, &p.lines, |pr| {
                crate::writes::record_movements(store, id, p.rows, pr, audit(n))
            })
            .await?;
            Ok(done(n, o.recorded, o.already_recorded))
        }
        ImportKind::PlannerInputs => {
            let p = parse(path, show, PlannerInputRecord::validate)?;
            let n = p.rows.len();
            let w = write(show, n, &p.lines, |_| {
                store.put_planner_inputs(id, p.rows, IMPORT_SOURCE.into(), audit(n))
            })
            .await?;
            Ok(done(n, w, 0))
        }
    }
}
