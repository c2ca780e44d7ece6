//! The ledger's batch rules: what a batch of movements must satisfy against what is
//! stored (known bins and SKUs, the lot rule, reversals, resent ids), checked and
//! written in one transaction over [`LedgerTx`]; all rows or none.

use super::{MovementKind, NewMovement, RecordOutcome};
use crate::batch::RowError;
use crate::master::SiteId;
use crate::master::codes::{BinCode, MovementUid, Sku};
use crate::netting::pass::{NettingTx, WrittenMove};
use crate::store::error::{Progress, StoreError};
use crate::time::Timestamp;
use std::collections::{HashMap, HashSet};

/// Rows between progress ticks during a long batch.
const PROGRESS_EVERY: usize = 1_000;

/// One balance key as stored: a bin, an item and a lot (empty when not lot-tracked).
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub struct LedgerKey {
    pub bin_id: i64,
    pub item_id: i64,
    pub lot: String,
}

/// An item as the batch rules need it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ItemRef {
    pub id: i64,
    pub lot_tracked: bool,
}

/// A stored movement as the batch rules compare it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StoredMovement {
    pub id: i64,
    pub site: SiteId,
    pub key: LedgerKey,
    pub qty: i64,
    pub kind: MovementKind,
    pub event_at: Timestamp,
}

impl StoredMovement {
    /// Tells whether `m` at `key` is a resend of this movement (the same content).
    fn same_content(&self, site: SiteId, key: &LedgerKey, m: &NewMovement) -> bool {
        self.site == site
            && self.key == *key
            && self.qty == m.qty
            && self.kind == m.kind
            && self.event_at == m.event_at
    }
}

/// What writing one movement did.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Inserted {
    /// Written, with the ledger's sequence number.
    New(i64),
    /// Its id is already in the ledger; nothing was written.
    Existing,
}

/// The ledger's high-water mark inside one transaction (netting reads it too).
pub trait WatermarkTx {
    /// Returns the newest movement's sequence number (0 for an empty ledger).
    fn watermark(&self) -> Result<i64, StoreError>;
}

/// The ledger's queries and writes inside one transaction.
pub trait LedgerTx: WatermarkTx {
    /// Finds a bin of `site` by code.
    fn bin_id(&self, site: SiteId, bin: &BinCode) -> Result<Option<i64>, StoreError>;
    /// Finds an item of `site` by SKU.
    fn item_ref(&self, site: SiteId, sku: &Sku) -> Result<Option<ItemRef>, StoreError>;
    /// Finds the bins of `site` among `codes`, by code (codes not found are absent). By
    /// default one [`LedgerTx::bin_id`] a code; a store whose round trips cost more than
    /// its look-ups answers them all at once.
    fn bin_ids(
        &self,
        site: SiteId,
        codes: &[&BinCode],
    ) -> Result<HashMap<String, i64>, StoreError> {
        each_found(codes, BinCode::as_str, |c| self.bin_id(site, c))
    }
    /// Finds the items of `site` among `skus`, by SKU, as [`LedgerTx::bin_ids`] does bins.
    fn item_refs(
        &self,
        site: SiteId,
        skus: &[&Sku],
    ) -> Result<HashMap<String, ItemRef>, StoreError> {
        each_found(skus, Sku::as_str, |s| self.item_ref(site, s))
    }
    /// Reads a stored movement by its sender's id (ids are unique across sites).
    fn movement_by_uid(&self, uid: &MovementUid) -> Result<Option<StoredMovement>, StoreError>;
    /// Tells whether a stored movement has a reversal.
    fn is_reversed(&self, movement: i64) -> Result<bool, StoreError>;
    /// Writes one checked movement at `key` with its lot (if any) and its balance and
    /// snapshots, unless its id is already stored.
    fn insert_movement(
        &self,
        site: SiteId,
        m: &NewMovement,
        key: &LedgerKey,
        recorded_at: Timestamp,
        reverses: Option<i64>,
    ) -> Result<Inserted, StoreError>;
    /// Writes a batch's checked movements in order, as [`LedgerTx::insert_movement`]
    /// each; returns what each did. By default one call a movement; a store whose round
    /// trips cost more than its writes sends them together.
    fn insert_movements(
        &self,
        site: SiteId,
        rows: &[MovementWrite<'_>],
    ) -> Result<Vec<Inserted>, StoreError> {
        rows.iter()
            .map(|w| {
                let reverses = match w.reverses {
                    Reverses::Nothing => None,
                    Reverses::Stored(id) => Some(id),
                    Reverses::Earlier(uid) => {
                        Some(self.movement_by_uid(uid)?.map(|o| o.id).ok_or_else(|| {
                            anyhow::anyhow!("movement '{uid}' to reverse was not written")
                        })?)
                    }
                };
                self.insert_movement(site, w.m, &w.key, w.recorded_at, reverses)
            })
            .collect()
    }
}

/// Looks each code up with `look`; returns those found, by code.
fn each_found<C: ?Sized, V>(
    codes: &[&C],
    text: impl Fn(&C) -> &str,
    mut look: impl FnMut(&C) -> Result<Option<V>, StoreError>,
) -> Result<HashMap<String, V>, StoreError> {
    let mut out = HashMap::with_capacity(codes.len());
    for code in codes {
        if let Some(v) = look(code)? {
            out.insert(text(code).to_string(), v);
        }
    }
    Ok(out)
}

/// What a checked movement reverses.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Reverses<'a> {
    Nothing,
    /// A movement stored before the batch, by its ledger id.
    Stored(i64),
    /// A movement earlier in the same batch, by its sender's id: written (or found
    /// already stored) just before this one.
    Earlier(&'a MovementUid),
}

/// A checked movement of a batch, ready to write.
#[derive(Debug, Clone)]
pub struct MovementWrite<'a> {
    pub m: &'a NewMovement,
    pub key: LedgerKey,
    pub recorded_at: Timestamp,
    pub reverses: Reverses<'a>,
}

/// Checks a batch against what is stored and writes it in one pass; if any row breaks a
/// rule the batch is refused with every row's errors (`StoreError::Rejected`) and the
/// caller's transaction must be dropped, so the batch writes all rows or none. A resend
/// (same id, same content) is acknowledged and skipped; the same id with other content
/// is refused. Returns the outcome and the movements written, in batch order.
pub fn write_batch<T: LedgerTx + ?Sized>(
    tx: &T,
    site: SiteId,
    rows: &[NewMovement],
    now: Timestamp,
    progress: &Progress,
) -> Result<(RecordOutcome, Vec<WrittenMove>), StoreError> {
    // Every bin and item the batch names, looked up once.
    let bins = {
        let mut codes: Vec<&BinCode> = rows.iter().map(|m| &m.bin).collect();
        codes.sort_unstable_by_key(|c| c.as_str());
        codes.dedup_by_key(|c| c.as_str());
        tx.bin_ids(site, &codes)?
    };
    let items = {
        let mut skus: Vec<&Sku> = rows.iter().map(|m| &m.sku).collect();
        skus.sort_unstable_by_key(|s| s.as_str());
        skus.dedup_by_key(|s| s.as_str());
        tx.item_refs(site, &skus)?
    };
    let mut seen: HashMap<&str, usize> = HashMap::with_capacity(rows.len());
    // Stored movements reversed by an earlier row of this batch.
    let mut reversed_here: HashSet<i64> = HashSet::new();
    // The checked rows (batch position, write), written once every row is checked.
    let mut writes: Vec<(usize, MovementWrite<'_>)> = Vec::with_capacity(rows.len());
    let mut errors = Vec::new();
    let mut outcome = RecordOutcome::default();
    let mut written = Vec::new();
    let resent_differently = |i: usize, m: &NewMovement| {
        RowError::new(
            i,
            "id",
            format!("id '{}' is already recorded with different content", m.uid),
        )
    };
    for (i, m) in rows.iter().enumerate() {
        let mut err = |field: &str, msg: String| errors.push(RowError::new(i, field, msg));
        if let Some(first) = seen.insert(m.uid.as_str(), i) {
            err(
                "id",
                format!(
                    "id '{}' appears twice in this batch (first at row {first})",
                    m.uid
                ),
            );
            continue;
        }
        let bin_id = bins.get(m.bin.as_str()).copied();
        let item = items.get(m.sku.as_str()).copied();
        if bin_id.is_none() {
            err("bin", format!("unknown bin '{}' in this site", m.bin));
        }
        match item {
            None => err("sku", format!("unknown SKU '{}' in this site", m.sku)),
            Some(ItemRef {
                lot_tracked: true, ..
            }) if m.lot.is_empty() => err(
                "lot",
                format!("SKU '{}' is lot-tracked: a lot is required", m.sku),
            ),
            Some(ItemRef {
                lot_tracked: false, ..
            }) if !m.lot.is_empty() => err(
                "lot",
                format!("SKU '{}' is not lot-tracked: leave lot empty", m.sku),
            ),
            _ => {}
        }
        let (Some(bin_id), Some(item)) = (bin_id, item) else {
            continue;
        };
        let key = LedgerKey {
            bin_id,
            item_id: item.id,
            lot: m.lot.clone(),
        };
        let reverses = match &m.reverses {
            None => Reverses::Nothing,
            Some(r) => {
                let mirror = |o_qty: i64| {
                    format!(
                        "a reversal of '{r}' must name the same bin, SKU and lot with quantity {}",
                        -o_qty
                    )
                };
                if let Some(&j) = seen.get(r.as_str()).filter(|&&j| j < i) {
                    let o = &rows[j];
                    if o.bin != m.bin || o.sku != m.sku || o.lot != m.lot || o.qty != -m.qty {
                        err("reverses", mirror(o.qty));
                    }
                    Reverses::Earlier(r)
                } else if let Some(o) = tx.movement_by_uid(r)? {
                    if o.site != site || o.key != key || o.qty != -m.qty {
                        err("reverses", mirror(o.qty));
                    }
                    if !reversed_here.insert(o.id) || tx.is_reversed(o.id)? {
                        err(
                            "reverses",
                            format!("movement '{r}' has already been reversed"),
                        );
                    }
                    Reverses::Stored(o.id)
                } else {
                    err(
                        "reverses",
                        format!("movement '{r}' to reverse is not in the ledger"),
                    );
                    Reverses::Nothing
                }
            }
        };
        if !errors.is_empty() {
            // The batch will be refused: keep checking, stop writing.
            if let Some(prev) = tx.movement_by_uid(&m.uid)?
                && !prev.same_content(site, &key, m)
            {
                errors.push(resent_differently(i, m));
            }
            continue;
        }
        writes.push((
            i,
            MovementWrite {
                m,
                key,
                recorded_at: m.recorded_at.unwrap_or(now),
                reverses,
            },
        ));
    }
    if !errors.is_empty() {
        // The rows checked before the first error are refused with the rest: say too
        // which of them resend an id with other content.
        for (i, w) in &writes {
            if let Some(prev) = tx.movement_by_uid(&w.m.uid)?
                && !prev.same_content(site, &w.key, w.m)
            {
                errors.push(resent_differently(*i, w.m));
            }
        }
        errors.sort_by_key(|e| e.row);
        return Err(StoreError::Rejected(errors));
    }
    let (places, writes): (Vec<usize>, Vec<MovementWrite<'_>>) = writes.into_iter().unzip();
    let done = tx.insert_movements(site, &writes)?;
    if done.len() != writes.len() {
        return Err(anyhow::anyhow!(
            "the store wrote {} of {} movements",
            done.len(),
            writes.len()
        )
        .into());
    }
    for ((i, w), inserted) in places.into_iter().zip(writes).zip(done) {
        let m = w.m;
        match inserted {
            Inserted::Existing => {
                let prev = tx.movement_by_uid(&m.uid)?.ok_or_else(|| {
                    anyhow::anyhow!("movement '{}' conflicted but cannot be read", m.uid)
                })?;
                if !prev.same_content(site, &w.key, m) {
                    errors.push(resent_differently(i, m));
                }
                outcome.already_recorded += 1;
            }
            Inserted::New(id) => {
                written.push(WrittenMove {
                    id,
                    uid: m.uid.as_str().to_string(),
                    bin_id: w.key.bin_id,
                    key: (w.key.item_id, w.key.lot),
                    event_at: m.event_at,
                    source: m.source.clone(),
                });
                outcome.recorded += 1;
                if (i + 1) % PROGRESS_EVERY == 0 {
                    progress.tick(PROGRESS_EVERY as u64);
                }
            }
        }
    }
    if !errors.is_empty() {
        return Err(StoreError::Rejected(errors));
    }
    progress.tick((rows.len() % PROGRESS_EVERY) as u64);
    outcome.watermark = tx.watermark()?;
    Ok((outcome, written))
}

/// Records a movement batch ([`write_batch`]) and re-nets, in the same transaction,
/// every count its movements reach (DESIGN §4), so a result and the ledger never
/// disagree. Every write path that adds movements (a host batch, an import, an approval,
/// an automatic adjustment) goes through here.
pub fn append<T: LedgerTx + NettingTx + ?Sized>(
    tx: &T,
    site: SiteId,
    rows: &[NewMovement],
    now: Timestamp,
    progress: &Progress,
) -> Result<(RecordOutcome, Vec<WrittenMove>), StoreError> {
    let (outcome, written) = write_batch(tx, site, rows, now, progress)?;
    crate::netting::pass::after_movements(tx, site, &written, now)?;
    Ok((outcome, written))
}
