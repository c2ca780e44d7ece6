//! Schema migrations for PostgreSQL: numbered SQL files from `migrations/postgres/`,
//! embedded in the binary, each applied in its own transaction and recorded with its
//! version and checksum. The numbers follow the SQLite migrations', so both stores at
//! one version have one schema; a new database starts at the first file here.

use super::{LOCK_SPACE, MIGRATION_LOCK, describe};
use crate::store::StoreError;

struct Migration {
    version: i64,
    name: &'static str,
    sql: &'static str,
}

const MIGRATIONS: &[Migration] = &[
    Migration {
        version: 9,
        name: "schema",
        sql: include_str!("../../../../migrations/postgres/0009_schema.sql"),
    },
    Migration {
        version: 10,
        name: "job_claim",
        sql: include_str!("../../../../migrations/postgres/0010_job_claim.sql"),
    },
    Migration {
        version: 11,
        name: "frequency_policy",
        sql: include_str!("../../../../migrations/postgres/0011_frequency_policy.sql"),
    },
    Migration {
        version: 12,
        name: "result_pass_key",
        sql: include_str!("../../../../migrations/postgres/0012_result_pass_key.sql"),
    },
];

/// The newest version this build knows.
pub fn latest_version() -> i64 {
    MIGRATIONS.last().map_or(0, |m| m.version)
}

/// A stable checksum of a migration's text (FNV-1a, 64 bits), to refuse an edited file.
fn checksum(sql: &str) -> i64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for b in sql.bytes() {
        h ^= u64::from(b);
        h = h.wrapping_mul(0x0100_0000_01b3);
    }
    h as i64
}

/// Brings the database to the newest version; returns it. Holds an advisory lock while
/// it works, so servers starting together migrate once. Refuses a database that is newer
/// than this build or whose applied migrations were edited.
pub async fn migrate(client: &mut tokio_postgres::Client) -> Result<i64, StoreError> {
    let tx = client.transaction().await?;
    tx.execute(
        "select pg_advisory_xact_lock($1, $2)",
        &[&LOCK_SPACE, &MIGRATION_LOCK],
    )
    .await?;
    let known: bool = tx
        .query_one("select to_regclass('schema_migration') is not null", &[])
        .await?
        .get(0);
    if !known {
        tx.batch_execute(
            "create table schema_migration (
                 version     bigint primary key,
                 name        text not null,
                 checksum    bigint not null,
                 applied_at  bigint not null
             )",
        )
        .await?;
    }
    let applied: Vec<(i64, i64)> = tx
        .query(
            "select version, checksum from schema_migration order by version",
            &[],
        )
        .await?
        .iter()
        .map(|r| (r.get(0), r.get(1)))
        .collect();
    if let Some(&(v, _)) = applied.last()
        && v > latest_version()
    {
        return Err(StoreError::Incompatible(format!(
            "the database is at schema version {v}, newer than this Cairn ({}): use a newer build",
            latest_version()
        )));
    }
    for (v, sum) in &applied {
        if let Some(m) = MIGRATIONS.iter().find(|m| m.version == *v)
            && checksum(m.sql) != *sum
        {
            return Err(StoreError::Incompatible(format!(
                "migration {v} ({}) was changed after it was applied",
                m.name
            )));
        }
    }
    let now = crate::time::Timestamp::now().0;
    for m in MIGRATIONS {
        if applied.iter().any(|(v, _)| *v == m.version) {
            continue;
        }
        tx.batch_execute(m.sql).await.map_err(|e| {
            anyhow::anyhow!(
                "migration {} ({}) failed: {}",
                m.version,
                m.name,
                describe(&e)
            )
        })?;
        tx.execute(
            "insert into schema_migration (version, name, checksum, applied_at) values ($1, $2, $3, $4)",
            &[&m.version, &m.name, &checksum(m.sql), &now],
        )
        .await?;
    }
    tx.commit().await?;
    Ok(latest_version())
}
