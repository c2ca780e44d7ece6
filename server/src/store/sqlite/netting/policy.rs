//! SQL of a site's netting policy: tolerances per class and review limits, each movement
//! source's timing, and the reason codes a review chooses from.

use super::*;

/// Reads a site's netting settings (the defaults until some are stored).
pub fn netting_settings(conn: &Connection, site: SiteId) -> Result<NettingSettings, StoreError> {
    let row = conn
        .prepare_cached(
            "select tol_a_units, tol_a_bp, tol_a_value_minor, tol_b_units, tol_b_bp,
                    tol_b_value_minor, tol_c_units, tol_c_bp, tol_c_value_minor,
                    auto_adjust, manager_value_minor, bulk_value_minor
             from netting_settings where site_id = ?1",
        )?
        .query_row([site.0], |r| {
            let t = |i: usize| -> rusqlite::Result<Tolerance> {
                Ok(Tolerance {
                    units: r.get(i)?,
                    percent_bp: r.get(i + 1)?,
                    value_minor: r.get(i + 2)?,
                })
            };
            let mut s = NettingSettings::default();
            s.tolerances.a = t(0)?;
            s.tolerances.b = t(3)?;
            s.tolerances.c = t(6)?;
            s.auto_adjust = r.get(9)?;
            s.manager_value_minor = r.get(10)?;
            s.bulk_value_minor = r.get(11)?;
            Ok(s)
        })
        .optional()?;
    Ok(row.unwrap_or_default())
}

/// Stores a site's netting settings. Switching automatic adjustment on records `now` as
/// the instant from which received counts are adjusted; keeping it on keeps that instant.
pub fn put_netting_settings(
    tx: &Transaction,
    site: SiteId,
    s: &NettingSettings,
    now: Timestamp,
) -> Result<(), StoreError> {
    let (a, b, c) = (s.tolerances.a, s.tolerances.b, s.tolerances.c);
    let was_from: Option<i64> = tx
        .prepare_cached(
            "select auto_adjust_from from netting_settings where site_id = ?1 and auto_adjust = 1",
        )?
        .query_row([site.0], |r| r.get(0))
        .optional()?
        .flatten();
    let auto_from = s.auto_adjust.then(|| was_from.unwrap_or(now.0));
    tx.prepare_cached(
        "insert or replace into netting_settings (site_id, tol_a_units, tol_a_bp,
             tol_a_value_minor, tol_b_units, tol_b_bp, tol_b_value_minor, tol_c_units,
             tol_c_bp, tol_c_value_minor, auto_adjust, manager_value_minor, bulk_value_minor,
             auto_adjust_from)
         values (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14)",
    )?
    .execute(params![
        site.0,
        a.units,
        a.percent_bp,
        a.value_minor,
        b.units,
        b.percent_bp,
        b.value_minor,
        c.units,
        c.percent_bp,
        c.value_minor,
        s.auto_adjust,
        s.manager_value_minor,
        s.bulk_value_minor,
        auto_from
    ])?;
    Ok(())
}

/// Lists a site's movement sources with their timing, by name.
pub fn source_timings(conn: &Connection, site: SiteId) -> Result<Vec<SourceTimingRow>, StoreError> {
    let rows = conn
        .prepare_cached(
            "select source, uncertainty_ms, posting_lag_ms from source_timing
             where site_id = ?1 order by source",
        )?
        .query_map([site.0], |r| {
            Ok(SourceTimingRow {
                source: r.get(0)?,
                uncertainty_ms: r.get(1)?,
                posting_lag_ms: r.get(2)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(rows)
}

/// Replaces a site's source timings with `rows`.
pub fn put_source_timings(
    tx: &Transaction,
    site: SiteId,
    rows: &[SourceTimingRow],
) -> Result<(), StoreError> {
    tx.execute("delete from source_timing where site_id = ?1", [site.0])?;
    let mut ins = tx.prepare_cached(
        "insert into source_timing (site_id, source, uncertainty_ms, posting_lag_ms)
         values (?1, ?2, ?3, ?4)",
    )?;
    for r in rows {
        ins.execute(params![
            site.0,
            r.source,
            r.uncertainty_ms,
            r.posting_lag_ms
        ])?;
    }
    Ok(())
}

/// Lists a site's reason codes, by code.
pub fn reason_codes(conn: &Connection, site: SiteId) -> Result<Vec<ReasonCode>, StoreError> {
    let rows = conn
        .prepare_cached("select code, label from reason_code where site_id = ?1 order by code")?
        .query_map([site.0], |r| {
            Ok(ReasonCode {
                code: r.get(0)?,
                label: r.get(1)?,
            })
        })?
        .collect::<rusqlite::Result<Vec<_>>>()?;
    Ok(rows)
}

/// Counts, per reason code, the decisions of a site that name it.
pub fn reason_code_uses(
    conn: &Connection,
    site: SiteId,
) -> Result<BTreeMap<String, i64>, StoreError> {
    let rows = conn
        .prepare_cached(
            "select v.reason_code, count(*) from count_review v
             join count_result r on r.id = v.result_id
             where r.site_id = ?1 and v.reason_code <> ''
             group by v.reason_code",
        )?
        .query_map([site.0], |r| Ok((r.get(0)?, r.get(1)?)))?
        .collect::<rusqlite::Result<BTreeMap<String, i64>>>()?;
    Ok(rows)
}

/// Replaces a site's reason codes with `rows`, refusing to drop a code that a
/// decision names: the code would lose its meaning in that decision's record
/// (the schema has no retired codes, so a used one is relabelled, not removed).
pub fn put_reason_codes(
    tx: &Transaction,
    site: SiteId,
    rows: &[ReasonCode],
) -> Result<(), StoreError> {
    let dropped: Vec<String> = reason_code_uses(tx, site)?
        .into_iter()
        .filter(|(code, _)| !rows.iter().any(|r| &r.code == code))
        .map(|(code, n)| {
            let taken = if n == 1 {
                "decision names"
            } else {
                "decisions name"
            };
            format!(
                "reason code '{code}' cannot be removed: {n} {taken} it; give it a new label \
                 instead"
            )
        })
        .collect();
    if !dropped.is_empty() {
        return Err(StoreError::Conflict(dropped.join("; ")));
    }
    tx.execute("delete from reason_code where site_id = ?1", [site.0])?;
    let mut ins =
        tx.prepare_cached("insert into reason_code (site_id, code, label) values (?1, ?2, ?3)")?;
    for r in rows {
        ins.execute(params![site.0, r.code, r.label])?;
    }
    Ok(())
}

/// Refuses a page's save over a list that changed after the page showed it,
/// so a row someone else added meanwhile is not dropped unseen.
fn still_as_shown(current: &[&str], shown: &[String], what: &str) -> Result<(), StoreError> {
    let now: BTreeSet<&str> = current.iter().copied().collect();
    let then: BTreeSet<&str> = shown.iter().map(String::as_str).collect();
    if now == then {
        return Ok(());
    }
    Err(StoreError::Conflict(format!(
        "the {what} changed since this page was opened (someone else saved them): \
         reload the page and make your change again"
    )))
}

/// Replaces a site's source timings with `rows`, if the sources are still the
/// ones `shown` lists.
pub fn edit_source_timings(
    tx: &Transaction,
    site: SiteId,
    shown: &[String],
    rows: &[SourceTimingRow],
) -> Result<(), StoreError> {
    let current = source_timings(tx, site)?;
    let names: Vec<&str> = current.iter().map(|r| r.source.as_str()).collect();
    still_as_shown(&names, shown, "movement sources")?;
    put_source_timings(tx, site, rows)
}

/// Replaces a site's reason codes with `rows`, if the codes reviewers see (the
/// defaults while none are stored) are still the ones `shown` lists.
pub fn edit_reason_codes(
    tx: &Transaction,
    site: SiteId,
    shown: &[String],
    rows: &[ReasonCode],
) -> Result<(), StoreError> {
    let current = crate::store::sqlite::review::reason_codes(tx, site)?;
    let codes: Vec<&str> = current.iter().map(|r| r.code.as_str()).collect();
    still_as_shown(&codes, shown, "reason codes")?;
    put_reason_codes(tx, site, rows)
}
