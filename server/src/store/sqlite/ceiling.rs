//! The embedded store's write ceiling for `cairn loadtest`: the rows a load stored,
//! inserted again with plain SQL into a copy of the schema without them, so the figure
//! is what SQLite itself can take on this machine, with no HTTP or rules in the way.

use crate::store::Synchronous;
use anyhow::ensure;
use rusqlite::types::Value as SqlValue;
use std::path::Path;
use std::time::Instant;

/// Inserts the rows the load stored (passes, lines, events) into a copy of the schema
/// without them, `batch` events per transaction, and returns events per second.
pub fn ceiling(
    loaded: &Path,
    empty: &Path,
    batch: usize,
    sync: Synchronous,
) -> anyhow::Result<f64> {
    let src = rusqlite::Connection::open(loaded)?;
    let read = |table: &str| -> anyhow::Result<(Vec<String>, Vec<Vec<SqlValue>>)> {
        let mut stmt = src.prepare(&format!("select * from {table} order by id"))?;
        let cols: Vec<String> = stmt.column_names().iter().map(|c| c.to_string()).collect();
        let n = cols.len();
        let rows = stmt
            .query_map([], |r| (0..n).map(|i| r.get::<_, SqlValue>(i)).collect())?
            .collect::<Result<Vec<Vec<SqlValue>>, _>>()?;
        Ok((cols, rows))
    };
    let passes = read("count_pass")?;
    let lines = read("count_line")?;
    let events = read("sync_event")?;
    let n_events = events.1.len();
    ensure!(n_events > 0, "the load stored no events");
    let mut dst = rusqlite::Connection::open(empty)?;
    let mode: String = dst.query_row("pragma journal_mode = wal", [], |r| r.get(0))?;
    ensure!(mode == "wal", "the ceiling copy cannot use WAL");
    dst.pragma_update(
        None,
        "synchronous",
        match sync {
            Synchronous::Full => "FULL",
            Synchronous::Normal => "NORMAL",
        },
    )?;
    dst.pragma_update(None, "foreign_keys", true)?;
    // Events per request: one pass and batch - 1 lines, so a transaction holds the rows
    // of one request, as the server's does.
    let requests = passes.1.len().max(1);
    let started = Instant::now();
    let (mut li, mut ei) = (0, 0);
    for (pi, pass) in passes.1.iter().enumerate() {
        let tx = dst.transaction()?;
        insert(&tx, "count_pass", &passes.0, std::slice::from_ref(pass))?;
        let lines_here = (lines.1.len() - li).min(batch - 1);
        insert(&tx, "count_line", &lines.0, &lines.1[li..li + lines_here])?;
        li += lines_here;
        let events_here = if pi + 1 == requests {
            n_events - ei
        } else {
            (n_events - ei).min(batch)
        };
        insert(
            &tx,
            "sync_event",
            &events.0,
            &events.1[ei..ei + events_here],
        )?;
        ei += events_here;
        tx.commit()?;
    }
    Ok(n_events as f64 / started.elapsed().as_secs_f64())
}

fn insert(
    tx: &rusqlite::Transaction,
    table: &str,
    cols: &[String],
    rows: &[Vec<SqlValue>],
) -> anyhow::Result<()> {
    let marks = (1..=cols.len())
        .map(|i| format!("?{i}"))
        .collect::<Vec<_>>()
        .join(", ");
    let mut stmt = tx.prepare_cached(&format!(
        "insert into {table} ({}) values ({marks})",
        cols.join(", ")
    ))?;
    for r in rows {
        stmt.execute(rusqlite::params_from_iter(r.iter()))?;
    }
    Ok(())
}
