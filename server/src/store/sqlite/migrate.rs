//! Schema migrations: numbered SQL files from `migrations/`, embedded in the
//! binary, applied in order inside one transaction and recorded with their
//! version and a checksum, so an edited shipped migration is noticed.

use crate::store::StoreError;
use rusqlite::{Connection, OptionalExtension, params};

/// One embedded migration.
pub struct Migration {
    pub version: i64,
    pub name: &'static str,
    pub sql: &'static str,
}

/// Every migration this binary knows, in order.
pub const MIGRATIONS: &[Migration] = &[
    Migration {
        version: 1,
        name: "0001_foundation.sql",
        sql: include_str!("../../../../migrations/0001_foundation.sql"),
    },
    Migration {
        version: 2,
        name: "0002_accounts.sql",
        sql: include_str!("../../../../migrations/0002_accounts.sql"),
    },
    Migration {
        version: 3,
        name: "0003_planning.sql",
        sql: include_str!("../../../../migrations/0003_planning.sql"),
    },
    Migration {
        version: 4,
        name: "0004_counts.sql",
        sql: include_str!("../../../../migrations/0004_counts.sql"),
    },
    Migration {
        version: 5,
        name: "0005_netting.sql",
        sql: include_str!("../../../../migrations/0005_netting.sql"),
    },
    Migration {
        version: 6,
        name: "0006_buffer.sql",
        sql: include_str!("../../../../migrations/0006_buffer.sql"),
    },
    Migration {
        version: 7,
        name: "0007_netting_reach.sql",
        sql: include_str!("../../../../migrations/0007_netting_reach.sql"),
    },
    Migration {
        version: 8,
        name: "0008_pass_clock.sql",
        sql: include_str!("../../../../migrations/0008_pass_clock.sql"),
    },
];

/// Returns the newest schema version this binary knows.
pub fn latest_version() -> i64 {
    MIGRATIONS.last().map_or(0, |m| m.version)
}

/// A stable 64-bit FNV-1a hash of a migration's text.
fn checksum(sql: &str) -> i64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for b in sql.bytes() {
        h ^= u64::from(b);
        h = h.wrapping_mul(0x0100_0000_01b3);
    }
    h as i64
}

/// Brings the database up to the newest schema; refuses one newer than this binary.
pub fn migrate(conn: &mut Connection) -> Result<i64, StoreError> {
    let tx = conn.transaction()?;
    tx.execute_batch(
        "create table if not exists schema_migration (
            version integer primary key,
            name text not null,
            checksum integer not null,
            applied_at integer not null
        ) strict;",
    )?;
    let current: i64 = tx.query_row(
        "select coalesce(max(version), 0) from schema_migration",
        [],
        |r| r.get(0),
    )?;
    if current > latest_version() {
        return Err(StoreError::Incompatible(format!(
            "this database has schema version {current}, but this cairn knows only up to {}: \
             run a newer cairn, or restore a backup made by this version",
            latest_version()
        )));
    }
    for m in MIGRATIONS {
        let stored: Option<i64> = tx
            .query_row(
                "select checksum from schema_migration where version = ?1",
                [m.version],
                |r| r.get(0),
            )
            .optional()?;
        match stored {
            Some(sum) if sum == checksum(m.sql) => {}
            Some(_) => {
                return Err(StoreError::Incompatible(format!(
                    "migration {} differs from the one applied to this database: shipped migrations must never be edited",
                    m.name
                )));
            }
            None => {
                tx.execute_batch(m.sql)
                    .map_err(|e| anyhow::anyhow!("migration {} failed: {e}", m.name))?;
                tx.execute(
                    "insert into schema_migration (version, name, checksum, applied_at) values (?1, ?2, ?3, ?4)",
                    params![m.version, m.name, checksum(m.sql), crate::time::Timestamp::now().0],
                )?;
            }
        }
    }
    tx.commit()?;
    Ok(latest_version())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_file_in_migrations_is_embedded_in_rising_order() {
        let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/../migrations");
        let mut files: Vec<String> = std::fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().into_string().unwrap())
            .filter(|n| n.ends_with(".sql"))
            .collect();
        files.sort();
        let embedded: Vec<&str> = MIGRATIONS.iter().map(|m| m.name).collect();
        assert_eq!(files, embedded);
        // Versions rise but need not be contiguous: branches reserve numbers.
        for w in MIGRATIONS.windows(2) {
            assert!(
                w[0].version < w[1].version,
                "{} is not after {}",
                w[1].name,
                w[0].name
            );
        }
        for m in MIGRATIONS {
            assert!(m.name.starts_with(&format!("{:04}_", m.version)));
        }
    }

    #[test]
    fn migrating_twice_is_harmless() {
        let mut conn = Connection::open_in_memory().unwrap();
        assert_eq!(migrate(&mut conn).unwrap(), latest_version());
        assert_eq!(migrate(&mut conn).unwrap(), latest_version());
    }

    #[test]
    fn a_newer_database_is_refused_with_a_clear_message() {
        let mut conn = Connection::open_in_memory().unwrap();
        migrate(&mut conn).unwrap();
        conn.execute(
            "insert into schema_migration values (999, 'future.sql', 0, 0)",
            [],
        )
        .unwrap();
        let err = migrate(&mut conn).unwrap_err().to_string();
        assert!(err.contains("schema version 999"), "{err}");
    }
}
