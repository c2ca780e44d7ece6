//! `cairn store copy`: moves every site of a SQLite file onto an empty PostgreSQL
//! database, for a company that outgrows one box. Each table is copied in one pass
//! (PostgreSQL's binary COPY, the ids kept), in an order where every row finds what it
//! refers to; the few columns that point forward (a pass's task, a superseded result) are
//! filled in after. Then every table is read back and compared with what was read, and
//! the target's balances must equal the sums of its movements. Refuses a target that holds
//! anything already. The source is only read.

use super::postgres::describe;
use anyhow::{Context, bail};
use indicatif::ProgressBar;
use rusqlite::types::Value;
use sha2::{Digest, Sha256};
use std::path::Path;
use tokio_postgres::types::{ToSql, Type};

/// Tables in the order they are copied; every row's references are copied before it.
/// Sessions and sign-in throttling are left behind: people sign in again.
const TABLES: &[&str] = &[
    "site",
    "zone",
    "bin",
    "item",
    "pack",
    "lot",
    "movement",
    "balance",
    "balance_snapshot",
    "demo_shelf",
    "user_account",
    "user_role",
    "device",
    "api_token",
    "audit_event",
    "planning_settings",
    "site_calendar",
    "site_holiday",
    "abc_run",
    "item_class",
    "short_pick",
    "bin_count",
    "count_list",
    "count_run",
    "device_clock",
    "count_pass",
    "count_line",
    "count_line_undo",
    "sync_event",
    "netting_settings",
    "source_timing",
    "reason_code",
    "count_result",
    "count_review",
    "count_task",
    "count_task_recheck",
    "count_auto_adjustment",
    "accuracy_settings",
    "planner_input",
    "planner_group_default",
    "job_claim",
];

/// Columns that refer to rows copied later: written empty, then set once every table is in.
const LATER: &[(&str, &str)] = &[("count_pass", "task_id"), ("count_result", "superseded_by")];

/// Rows read from the file per COPY batch.
const CHUNK: usize = 20_000;

/// What a copy moved.
#[derive(Debug, Clone, Default)]
pub struct CopyReport {
    /// Each table and its rows.
    pub tables: Vec<(String, u64)>,
    pub sites: i64,
    pub movements: u64,
}

impl std::fmt::Display for CopyReport {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let rows: u64 = self.tables.iter().map(|t| t.1).sum();
        write!(
            f,
            "{} site(s), {} movements, {rows} rows in {} tables; every table read back equal, \
             every balance equal to its movements",
            self.sites,
            self.movements,
            self.tables.len()
        )
    }
}

struct Column {
    name: String,
    ty: Type,
}

/// Copies the SQLite file `from` (migrated to this build's schema first, as any command
/// would) onto the empty PostgreSQL database at `to`.
pub async fn copy(from: &Path, to: &str, progress: &ProgressBar) -> anyhow::Result<CopyReport> {
    if !from.exists() {
        bail!("database {} does not exist", from.display());
    }
    let source = from.to_path_buf();
    tokio::task::spawn_blocking(move || {
        super::sqlite::SqliteStore::open(&source, Default::default()).map(drop)
    })
    .await??;
    let target = super::postgres::PgStore::open(to, Default::default())?;
    let pg = target.client().await?;
    let held: i64 = pg
        .query_one(
            "select (select count(*) from site) + (select count(*) from user_account)",
            &[],
        )
        .await?
        .get(0);
    if held > 0 {
        bail!(
            "the target database already holds sites or users: copy onto an empty database \
             (nothing was written)"
        );
    }
    let src = open_source(from)?;
    let total: u64 = {
        let c = &src;
        let mut n = 0u64;
        for t in TABLES {
            n += c.query_row(&format!("select count(*) from {t}"), [], |r| {
                r.get::<_, i64>(0)
            })? as u64;
        }
        n
    };
    progress.set_length(total);
    let mut report = CopyReport::default();
    let mut digests = Vec::new();
    let mut pg = pg;
    let tx = pg.transaction().await?;
    for &table in TABLES {
        progress.set_message(table.to_string());
        let cols = columns(&tx, table).await?;
        let (rows, digest) = copy_table(from, &tx, table, &cols, progress).await?;
        report.tables.push((table.to_string(), rows));
        digests.push((table, cols, digest));
    }
    for (table, col) in LATER {
        progress.set_message(format!("{table}.{col}"));
        let pairs = {
            let mut q = src.prepare(&format!(
                "select id, {col} from {table} where {col} is not null"
            ))?;
            q.query_map([], |r| Ok((r.get::<_, i64>(0)?, r.get::<_, i64>(1)?)))?
                .collect::<rusqlite::Result<Vec<_>>>()?
        };
        let st = tx
            .prepare(&format!("update {table} set {col} = $2 where id = $1"))
            .await?;
        for (id, v) in pairs {
            tx.execute(&st, &[&id, &v]).await?;
        }
    }
    for &table in TABLES {
        if has_identity(&tx, table).await? {
            tx.execute(
                &format!(
                    "select setval(pg_get_serial_sequence('{table}', 'id'),
                                   coalesce((select max(id) from {table}), 0) + 1, false)"
                ),
                &[],
            )
            .await?;
        }
    }
    progress.set_message("reading every table back");
    for (table, cols, digest) in &digests {
        let back = read_back(&tx, table, cols).await?;
        if &back != digest {
            bail!("table {table} read back differs from the file: nothing was written");
        }
    }
    let unbalanced: i64 = tx
        .query_one(
            "select
               (select count(*) from (select bin_id, item_id, lot, sum(qty) as s from movement
                                      group by bin_id, item_id, lot) m
                  left join balance b using (bin_id, item_id, lot)
                where coalesce(b.qty, 0) <> m.s)
             + (select count(*) from balance b where b.qty <> 0 and not exists
                  (select 1 from movement m where m.bin_id = b.bin_id and m.item_id = b.item_id
                     and m.lot = b.lot))",
            &[],
        )
        .await?
        .get(0);
    if unbalanced > 0 {
        bail!(
            "{unbalanced} balance(s) differ from their movements on the target: nothing was written"
        );
    }
    tx.commit()
        .await
        .map_err(|e| anyhow::anyhow!(describe(&e)))?;
    report.sites = report.rows_of("site") as i64;
    report.movements = report.rows_of("movement");
    Ok(report)
}

impl CopyReport {
    fn rows_of(&self, table: &str) -> u64 {
        self.tables.iter().find(|t| t.0 == table).map_or(0, |t| t.1)
    }
}

async fn columns(tx: &tokio_postgres::Transaction<'_>, table: &str) -> anyhow::Result<Vec<Column>> {
    let rows = tx
        .query(
            "select column_name::text, data_type::text from information_schema.columns
             where table_schema = current_schema() and table_name = $1
             order by ordinal_position",
            &[&table],
        )
        .await?;
    rows.iter()
        .map(|r| {
            let (name, ty): (String, String) = (r.get(0), r.get(1));
            let ty = match ty.as_str() {
                "bigint" => Type::INT8,
                "boolean" => Type::BOOL,
                "text" => Type::TEXT,
                "double precision" => Type::FLOAT8,
                other => bail!("column {table}.{name} has a type the copy does not know: {other}"),
            };
            Ok(Column { name, ty })
        })
        .collect()
}

async fn has_identity(tx: &tokio_postgres::Transaction<'_>, table: &str) -> anyhow::Result<bool> {
    Ok(tx
        .query_one(
            "select exists (select 1 from information_schema.columns
                            where table_schema = current_schema() and table_name = $1
                              and column_name = 'id' and is_identity = 'YES')",
            &[&table],
        )
        .await?
        .get(0))
}

/// One value as PostgreSQL takes it for a column of type `ty`.
#[derive(Debug)]
enum Cell {
    Null(NullOf),
    Int(i64),
    Bool(bool),
    Text(String),
    Float(f64),
}

/// The column type of an empty value (binary COPY types every value, empty ones too).
#[derive(Debug, Clone, Copy)]
enum NullOf {
    Int,
    Bool,
    Text,
    Float,
}

impl NullOf {
    fn of(ty: &Type) -> NullOf {
        match ty {
            t if *t == Type::BOOL => NullOf::Bool,
            t if *t == Type::TEXT => NullOf::Text,
            t if *t == Type::FLOAT8 => NullOf::Float,
            _ => NullOf::Int,
        }
    }
}

impl Cell {
    fn of(v: Value, ty: &Type, at: &str) -> anyhow::Result<Cell> {
        Ok(match (v, ty) {
            (Value::Null, t) => Cell::Null(NullOf::of(t)),
            (Value::Integer(i), t) if *t == Type::INT8 => Cell::Int(i),
            (Value::Integer(i), t) if *t == Type::BOOL => Cell::Bool(i != 0),
            (Value::Integer(i), t) if *t == Type::FLOAT8 => Cell::Float(i as f64),
            (Value::Real(x), t) if *t == Type::FLOAT8 => Cell::Float(x),
            (Value::Text(s), t) if *t == Type::TEXT => Cell::Text(s),
            (v, t) => bail!("{at}: a {v:?} cannot go into a {t} column"),
        })
    }

    fn feed(&self, h: &mut Sha256) {
        match self {
            Cell::Null(_) => h.update(b"n"),
            Cell::Int(i) => h.update(format!("i{i}")),
            Cell::Bool(b) => h.update(format!("b{b}")),
            Cell::Text(s) => h.update(format!("t{}:{s}", s.len())),
            Cell::Float(x) => h.update(format!("f{}", x.to_bits())),
        }
        h.update(b"\x1f");
    }

    fn sql(&self) -> &(dyn ToSql + Sync) {
        match self {
            Cell::Null(NullOf::Int) => &None::<i64>,
            Cell::Null(NullOf::Bool) => &None::<bool>,
            Cell::Null(NullOf::Text) => &None::<String>,
            Cell::Null(NullOf::Float) => &None::<f64>,
            Cell::Int(i) => i,
            Cell::Bool(b) => b,
            Cell::Text(s) => s,
            Cell::Float(x) => x,
        }
    }
}

/// The order rows are read in on both sides: the primary key's columns.
fn order_of(table: &str) -> &'static str {
    match table {
        "balance" | "demo_shelf" => "bin_id, item_id, lot",
        "balance_snapshot" => "bin_id, item_id, lot, at",
        "user_role" => "user_id, site_id, role",
        "site_holiday" => "site_id, day",
        "item_class" => "item_id, run_id",
        "count_run" => "list_id, run",
        "count_line_undo" => "line_uid",
        "source_timing" => "site_id, source",
        "reason_code" => "site_id, code",
        "count_task_recheck" => "task_id, result_id",
        "planner_group_default" => "site_id, item_group",
        "job_claim" => "site_id, job, day",
        "planning_settings" | "site_calendar" | "netting_settings" | "accuracy_settings" => {
            "site_id"
        }
        "bin_count" => "bin_id",
        "device_clock" => "device_id",
        "planner_input" => "item_id",
        _ => "id",
    }
}

async fn copy_table(
    from: &Path,
    tx: &tokio_postgres::Transaction<'_>,
    table: &'static str,
    cols: &[Column],
    progress: &ProgressBar,
) -> anyhow::Result<(u64, Vec<u8>)> {
    let names: Vec<String> = cols.iter().map(|c| c.name.clone()).collect();
    let types: Vec<Type> = cols.iter().map(|c| c.ty.clone()).collect();
    let later: Vec<bool> = names
        .iter()
        .map(|n| LATER.iter().any(|(t, c)| *t == table && c == n))
        .collect();
    // One statement walks the table on a blocking thread and hands over chunks.
    let (send, mut chunks) = tokio::sync::mpsc::channel::<Vec<Vec<Cell>>>(2);
    let (path, sql_names, read_types) = (from.to_path_buf(), names.join(", "), types.clone());
    let reader = tokio::task::spawn_blocking(move || -> anyhow::Result<Vec<u8>> {
        let c = open_source(&path)?;
        let sql = format!(
            "select {sql_names} from {table} order by {}",
            order_of(table)
        );
        let mut q = c
            .prepare(&sql)
            .with_context(|| format!("reading {table}"))?;
        let mut it = q.query([])?;
        let mut digest = Sha256::new();
        let mut chunk = Vec::with_capacity(CHUNK);
        while let Some(r) = it.next()? {
            let mut row = Vec::with_capacity(read_types.len());
            for (i, ty) in read_types.iter().enumerate() {
                let cell = Cell::of(r.get(i)?, ty, &format!("{table} column {}", i + 1))?;
                cell.feed(&mut digest);
                row.push(if later[i] {
                    Cell::Null(NullOf::of(ty))
                } else {
                    cell
                });
            }
            chunk.push(row);
            if chunk.len() == CHUNK
                && send
                    .blocking_send(std::mem::replace(&mut chunk, Vec::with_capacity(CHUNK)))
                    .is_err()
            {
                bail!("the copy stopped reading {table}");
            }
        }
        if !chunk.is_empty() && send.blocking_send(chunk).is_err() {
            bail!("the copy stopped reading {table}");
        }
        Ok(digest.finalize().to_vec())
    });
    let mut rows = 0u64;
    while let Some(chunk) = chunks.recv().await {
        let sink = tx
            .copy_in(&format!(
                "copy {table} ({}) from stdin binary",
                names.join(", ")
            ))
            .await?;
        let writer = tokio_postgres::binary_copy::BinaryCopyInWriter::new(sink, &types);
        tokio::pin!(writer);
        for row in &chunk {
            let vals: Vec<&(dyn ToSql + Sync)> = row.iter().map(Cell::sql).collect();
            writer.as_mut().write(&vals).await?;
        }
        writer.finish().await?;
        rows += chunk.len() as u64;
        progress.inc(chunk.len() as u64);
    }
    let digest = reader.await??;
    Ok((rows, digest))
}

fn open_source(path: &Path) -> anyhow::Result<rusqlite::Connection> {
    rusqlite::Connection::open_with_flags(
        path,
        rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY | rusqlite::OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )
    .with_context(|| format!("cannot read {}", path.display()))
}

/// Reads a copied table back in the same order and digests it as the copy did (with the
/// forward references filled in by then).
async fn read_back(
    tx: &tokio_postgres::Transaction<'_>,
    table: &str,
    cols: &[Column],
) -> anyhow::Result<Vec<u8>> {
    let names: Vec<String> = cols.iter().map(|c| c.name.clone()).collect();
    let rows = tx
        .query(
            &format!(
                "select {} from {table} order by {}",
                names.join(", "),
                order_of(table)
            ),
            &[],
        )
        .await?;
    let mut digest = Sha256::new();
    for r in rows {
        for (i, col) in cols.iter().enumerate() {
            let cell = match &col.ty {
                t if *t == Type::INT8 => r
                    .get::<_, Option<i64>>(i)
                    .map_or(Cell::Null(NullOf::Int), Cell::Int),
                t if *t == Type::BOOL => r
                    .get::<_, Option<bool>>(i)
                    .map_or(Cell::Null(NullOf::Bool), Cell::Bool),
                t if *t == Type::FLOAT8 => r
                    .get::<_, Option<f64>>(i)
                    .map_or(Cell::Null(NullOf::Float), Cell::Float),
                _ => r
                    .get::<_, Option<String>>(i)
                    .map_or(Cell::Null(NullOf::Text), Cell::Text),
            };
            cell.feed(&mut digest);
        }
    }
    Ok(digest.finalize().to_vec())
}
