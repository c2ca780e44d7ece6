//! The write paths. Each runs one workflow in one transaction of the store and is the
//! only place its path meets the store: a movement batch ([`record_movements`]), a
//! phone's sync ([`apply_sync`]), a manager's decisions ([`approve`], [`reject`]) and
//! the scheduled settling ([`settle`]). The workflows are domain functions over the
//! transaction traits (`ledger::append`, `sync::apply::apply_batch`,
//! `review::decide`, `netting::settle::settle_due`); the store runs them and knows none.

use crate::accounts::audit::AuditEvent;
use crate::ledger::{NewMovement, RecordOutcome};
use crate::master::SiteId;
use crate::netting::results::SettleOutcome;
use crate::review::Refusal;
use crate::review::store::{Decided, NewDecision};
use crate::store::error::{Progress, StoreError};
use crate::store::{Store, WriteScope, write, write_shared};
use crate::sync::SyncBatch;
use crate::time::Timestamp;
use cairn_scan::wire::EventResult;

/// Records a movement batch in one transaction through `ledger::append` (which re-nets
/// the counts its movements reach), with its audit event (if any) carrying the counts
/// it wrote, so the two commit or vanish together.
pub async fn record_movements(
    store: &dyn Store,
    site: SiteId,
    rows: Vec<NewMovement>,
    progress: Progress,
    audit: Option<AuditEvent>,
) -> Result<RecordOutcome, StoreError> {
    write(store, WriteScope::Site(site), move |tx| {
        let (outcome, _) = crate::ledger::append(tx, site, &rows, Timestamp::now(), &progress)?;
        if let Some(event) = audit {
            tx.insert_audit(&event.with_counts(serde_json::json!({
                "recorded": outcome.recorded,
                "already_recorded": outcome.already_recorded,
            })))?;
        }
        Ok(outcome)
    })
    .await
}

/// Applies a sync request and nets the passes it finished, in one transaction of `store`
/// (a savepoint of a group commit when several phones sync at once): the acknowledgement
/// the phone deletes its copy on and the results of its passes commit together.
pub async fn apply_sync(
    store: &dyn Store,
    batch: SyncBatch,
) -> Result<Vec<EventResult>, StoreError> {
    let (results, netted) = write_shared(store, WriteScope::Site(batch.site), move |tx| {
        let results = crate::sync::apply::apply_batch(tx, &batch)?;
        let applied = batch.applied(&results);
        let netted = crate::netting::pass::after_sync(tx, &applied, Timestamp::now())?;
        Ok((results, netted.written.len() as u64))
    })
    .await?;
    // Counted only once committed: a rolled-back netting never happened.
    crate::telemetry::metrics()
        .netting_runs
        .fetch_add(netted, std::sync::atomic::Ordering::Relaxed);
    Ok(results)
}

/// Takes approvals in one transaction (see `review::decide::approve`).
pub async fn approve(
    store: &dyn Store,
    site: SiteId,
    decisions: Vec<NewDecision>,
    bulk: bool,
) -> Result<Vec<Result<Decided, Refusal>>, StoreError> {
    write(store, WriteScope::Site(site), move |tx| {
        crate::review::decide::approve(tx, site, &decisions, bulk)
    })
    .await
}

/// Takes one rejection in one transaction (see `review::decide::reject`).
pub async fn reject(
    store: &dyn Store,
    site: SiteId,
    decision: NewDecision,
) -> Result<Result<Decided, Refusal>, StoreError> {
    write(store, WriteScope::Site(site), move |tx| {
        crate::review::decide::reject(tx, site, &decision)
    })
    .await
}

/// Settles what is due at `now` in one transaction (see `netting::settle::settle_due`).
pub async fn settle(store: &dyn Store, now: Timestamp) -> Result<SettleOutcome, StoreError> {
    write(store, WriteScope::AllSites, move |tx| {
        crate::netting::settle::settle_due(tx, now)
    })
    .await
}
