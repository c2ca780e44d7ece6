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
    Migration {
        version: 9,
        name: "0009_recount_per_bin.sql",
        sql: include_str!("../../../../migrations/0009_recount_per_bin.sql"),
    },
    Migration {
        version: 10,
        name: "0010_job_claim.sql",
        sql: include_str!("../../../../migrations/0010_job_claim.sql"),
    },
    Migration {
        version: 11,
        name: "0011_frequency_policy.sql",
        sql: include_str!("../../../../migrations/0011_frequency_policy.sql"),
    },
    Migration {
        version: 12,
        name: "0012_result_pass_key.sql",
        sql: include_str!("../../../../migrations/0012_result_pass_key.sql"),
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

    /// Applies the migrations up to `version` the way `migrate` does.
    fn migrate_up_to(conn: &mut Connection, version: i64) {
        conn.execute_batch(
            "create table schema_migration (version integer primary key, name text not null,
                 checksum integer not null, applied_at integer not null) strict;",
        )
        .unwrap();
        for m in MIGRATIONS.iter().filter(|m| m.version <= version) {
            conn.execute_batch(m.sql).unwrap();
            conn.execute(
                "insert into schema_migration values (?1, ?2, ?3, 0)",
                params![m.version, m.name, checksum(m.sql)],
            )
            .unwrap();
        }
    }

    #[test]
    fn open_recounts_of_one_pass_become_one_task_and_done_or_begun_ones_stay() {
        let mut conn = Connection::open_in_memory().unwrap();
        migrate_up_to(&mut conn, 7);
        // One bin; pass 10 (cora) found S1 to S4 out, pass 11 found S1 out again later.
        // The old schema sent one task per key: 200 (S1) and 201 (S2) open, 202 (S3) done
        // and 205 its supervisor count, 206 (S4) begun by a phone (pass 12 points at it),
        // 210 the recount of pass 11.
        // Passes and tasks point at each other: the rows go in with the checks deferred.
        conn.execute_batch(
            "begin;
             pragma defer_foreign_keys = on;
             insert into site (id, code, name, created_at) values (1, 'T', 'T', 0);
             insert into zone (id, site_id, code) values (1, 1, 'A');
             insert into bin (id, site_id, zone_id, code, aisle, bay, level, side)
                 values (1, 1, 1, 'A-01-01-1', 1, 1, 1, '');
             insert into item (id, site_id, sku, description, base_unit, unit_cost_minor,
                               lot_tracked)
                 values (1, 1, 'S1', '', 'each', 1, 0), (2, 1, 'S2', '', 'each', 1, 0),
                        (3, 1, 'S3', '', 'each', 1, 0), (4, 1, 'S4', '', 'each', 1, 0);
             insert into user_account (id, name, display_name, password_hash, created_at)
                 values (1, 'cora', 'Cora', '', 0), (2, 'dan', 'Dan', '', 0);
             insert into count_list (id, site_id, day, counters, minutes, level_s, warnings,
                                     built_at, watermark)
                 values (1, 1, '2026-01-05', 2, 60, 0, '[]', 0, 0);
             insert into count_pass (id, uid, site_id, bin_id, task_id, user_id, first_at,
                                     done_at, uncertainty_ms, received_at)
                 values (10, 'p10', 1, 1, null, 1, 0, 10, 0, 10),
                        (11, 'p11', 1, 1, null, 1, 20, 30, 0, 30),
                        (12, 'p12', 1, 1, 206, 2, 40, null, 0, 40),
                        (13, 'p13', 1, 1, 202, 2, 40, 50, 0, 50);
             insert into count_result (id, pass_id, site_id, bin_id, item_id, lot, counted,
                     f_star, variance, status, verdict, unit_cost_minor, counted_at,
                     window_start, window_end, evidence, watermark, settles_at, computed_at)
                 values (100, 10, 1, 1, 1, '', 1, 2, -1, 'x', 'out_of_tolerance', 1, 0, 0, 0,
                         '{}', 0, 0, 0),
                        (101, 10, 1, 1, 2, '', 1, 2, -1, 'x', 'out_of_tolerance', 1, 0, 0, 0,
                         '{}', 0, 0, 0),
                        (102, 10, 1, 1, 3, '', 1, 2, -1, 'x', 'out_of_tolerance', 1, 0, 0, 0,
                         '{}', 0, 0, 0),
                        (103, 10, 1, 1, 4, '', 1, 2, -1, 'x', 'out_of_tolerance', 1, 0, 0, 0,
                         '{}', 0, 0, 0),
                        (110, 11, 1, 1, 1, '', 1, 2, -1, 'x', 'out_of_tolerance', 1, 0, 0, 0,
                         '{}', 0, 0, 0);
             insert into count_task (id, list_id, bin_id, seq, run, reason, detail, lines,
                                     est_s, status, recount_of)
                 values (200, 1, 1, 1, 2, 'recount', 'recount of S1 (result 100)', 1, 60,
                         'open', 100),
                        (201, 1, 1, 2, 2, 'recount', 'recount of S2 (result 101)', 1, 60,
                         'open', 101),
                        (202, 1, 1, 3, 2, 'recount', 'recount of S3 (result 102)', 1, 60,
                         'done', 102),
                        (205, 1, 1, 4, 3, 'recount', 'supervisor count of S3 (result 102)', 1,
                         60, 'open', 102),
                        (206, 1, 1, 5, 2, 'recount', 'recount of S4 (result 103)', 1, 60,
                         'started', 103),
                        (210, 1, 1, 6, 2, 'recount', 'recount of S1 (result 110)', 1, 60,
                         'open', 110);
             commit;",
        )
        .unwrap();
        migrate(&mut conn).unwrap();

        let links = |task: i64| -> Vec<i64> {
            conn.prepare("select result_id from count_task_recheck where task_id = ?1 order by 1")
                .unwrap()
                .query_map([task], |r| r.get(0))
                .unwrap()
                .collect::<rusqlite::Result<_>>()
                .unwrap()
        };
        let task = |id: i64| -> (String, String, bool, String, bool) {
            conn.query_row(
                "select detail, status, withdrawn_at is not null, withdrawn_reason, supervisor
                 from count_task where id = ?1",
                [id],
                |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?, r.get(4)?)),
            )
            .unwrap()
        };
        // The two open recounts of pass 10 are one task for the bin, listing both keys.
        assert_eq!(links(200), vec![100, 101]);
        let (detail, status, withdrawn, _, supervisor) = task(200);
        assert_eq!(detail, "recount of S1, S2 (results 100, 101)");
        assert_eq!(
            (status.as_str(), withdrawn, supervisor),
            ("open", false, false)
        );
        let (_, _, withdrawn, reason, _) = task(201);
        assert!(
            withdrawn && reason.contains("merged into task 200"),
            "{reason}"
        );
        // Done, supervisor, begun and other-pass tasks stay as they were.
        assert_eq!(task(202).1, "done");
        assert!(!task(202).2);
        assert_eq!(links(202), vec![102]);
        let (_, _, withdrawn, _, supervisor) = task(205);
        assert!(!withdrawn && supervisor, "a supervisor count stays one");
        assert_eq!(links(205), vec![102]);
        assert!(!task(206).2, "a recount a phone began is not merged");
        assert_eq!(links(206), vec![103]);
        assert!(!task(210).2, "another pass's recount stays its own");
        assert_eq!(links(210), vec![110]);
        let version: i64 = conn
            .query_row("select version from count_list where id = 1", [], |r| {
                r.get(0)
            })
            .unwrap();
        assert_eq!(version, 2, "phones holding the list fetch it again");
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
