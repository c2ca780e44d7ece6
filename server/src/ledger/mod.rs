//! The movement ledger: every stock movement, append-only, with the time it
//! happened (`event_at`) and the time the server learnt of it (`recorded_at`).
//! On-hand for a key at an instant is the sum of its deltas up to that instant.

pub mod append;
pub mod routes;

use crate::batch::FieldError;
use crate::input::{bounds, text};
use crate::master::codes::{BinCode, LotCode, MovementUid, Sku};
use crate::time::Timestamp;
use chrono::NaiveDate;
use serde::{Deserialize, Serialize};

/// How far ahead of the server's clock an event time may be (sender clock skew).
pub const MAX_EVENT_AHEAD_MS: i64 = 5 * 60 * 1000;
/// Largest absolute quantity one movement may carry (base units).
pub const MAX_ABS_QTY: i64 = 1_000_000_000;
/// Longest free-text reference (document, actor, source) kept.
pub const MAX_REF_CHARS: usize = crate::input::text::MAX_REF_CHARS;

/// What kind of physical event a movement records.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum MovementKind {
    Receipt,
    Putaway,
    Pick,
    Transfer,
    Adjustment,
    CountAdjustment,
    Return,
}

impl MovementKind {
    /// Every kind, in the order the docs list them.
    pub const ALL: [MovementKind; 7] = [
        MovementKind::Receipt,
        MovementKind::Putaway,
        MovementKind::Pick,
        MovementKind::Transfer,
        MovementKind::Adjustment,
        MovementKind::CountAdjustment,
        MovementKind::Return,
    ];

    /// Returns the stored and wire form.
    pub fn as_str(self) -> &'static str {
        match self {
            MovementKind::Receipt => "receipt",
            MovementKind::Putaway => "putaway",
            MovementKind::Pick => "pick",
            MovementKind::Transfer => "transfer",
            MovementKind::Adjustment => "adjustment",
            MovementKind::CountAdjustment => "count_adjustment",
            MovementKind::Return => "return",
        }
    }

    /// Parses the stored and wire form.
    pub fn parse(text: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|k| k.as_str() == text.trim())
    }

    /// Says which sign a fresh (non-reversing) movement of this kind must have.
    fn required_sign(self) -> Option<i64> {
        match self {
            MovementKind::Receipt | MovementKind::Return => Some(1),
            MovementKind::Pick => Some(-1),
            _ => None,
        }
    }
}

/// A movement as a sender submits it (JSON object or CSV row).
#[derive(Debug, Clone, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct MovementRecord {
    pub id: String,
    pub bin: String,
    pub sku: String,
    #[serde(default)]
    pub lot: Option<String>,
    #[serde(default)]
    pub expiry: Option<String>,
    pub qty: i64,
    pub kind: String,
    pub event_at: String,
    #[serde(default)]
    pub source: Option<String>,
    #[serde(default)]
    pub doc_ref: Option<String>,
    #[serde(default)]
    pub actor: Option<String>,
    #[serde(default)]
    pub reverses: Option<String>,
}

/// A movement that passed every check that needs no database.
#[derive(Debug, Clone, PartialEq)]
pub struct NewMovement {
    pub uid: MovementUid,
    pub bin: BinCode,
    pub sku: Sku,
    /// Empty when the item is not lot-tracked.
    pub lot: String,
    pub expiry: Option<NaiveDate>,
    pub qty: i64,
    pub kind: MovementKind,
    pub event_at: Timestamp,
    pub source: String,
    pub doc_ref: String,
    pub actor: String,
    pub reverses: Option<MovementUid>,
    /// Set only by trusted internal loaders (demo history); senders never set it.
    pub recorded_at: Option<Timestamp>,
}

fn non_empty(v: Option<String>) -> Option<String> {
    v.map(|s| s.trim().to_string()).filter(|s| !s.is_empty())
}

fn short_text(
    field: &'static str,
    kind: text::Kind,
    v: Option<String>,
    errs: &mut Vec<FieldError>,
) -> String {
    text::check(kind, v.as_deref().unwrap_or("")).unwrap_or_else(|e| {
        errs.push(FieldError::new(field, format!("{field}: {e}")));
        String::new()
    })
}

impl MovementRecord {
    /// Checks everything that needs no database; `now` bounds the event time.
    pub fn validate(
        self,
        now: Timestamp,
        default_source: &str,
    ) -> Result<NewMovement, Vec<FieldError>> {
        let mut errs = Vec::new();
        let uid = MovementUid::parse(&self.id)
            .map_err(|e| errs.push(FieldError::new("id", e.to_string())));
        let bin =
            BinCode::parse(&self.bin).map_err(|e| errs.push(FieldError::new("bin", e.to_string())));
        let sku =
            Sku::parse(&self.sku).map_err(|e| errs.push(FieldError::new("sku", e.to_string())));
        let lot = match non_empty(self.lot) {
            None => String::new(),
            Some(l) => match LotCode::parse(&l) {
                Ok(l) => l.as_str().to_string(),
                Err(e) => {
                    errs.push(FieldError::new("lot", e.to_string()));
                    String::new()
                }
            },
        };
        let expiry = non_empty(self.expiry).and_then(|t| {
            bounds::day(&t)
                .map_err(|e| errs.push(FieldError::new("expiry", format!("expiry: {e}"))))
                .ok()
        });
        if expiry.is_some() && lot.is_empty() {
            errs.push(FieldError::new("expiry", "an expiry date needs a lot"));
        }
        let kind = MovementKind::parse(&self.kind);
        if kind.is_none() {
            let all: Vec<_> = MovementKind::ALL.iter().map(|k| k.as_str()).collect();
            errs.push(FieldError::new(
                "kind",
                format!("kind '{}' is not one of {}", self.kind, all.join(", ")),
            ));
        }
        if self.qty == 0 {
            errs.push(FieldError::new("qty", "quantity must not be 0"));
        } else if self.qty.unsigned_abs() > MAX_ABS_QTY.unsigned_abs() {
            errs.push(FieldError::new(
                "qty",
                format!("quantity {} is beyond ±{MAX_ABS_QTY}", self.qty),
            ));
        }
        let reverses = non_empty(self.reverses).and_then(|r| {
            MovementUid::parse(&r)
                .map_err(|e| errs.push(FieldError::new("reverses", e.to_string())))
                .ok()
        });
        if let (Some(kind), None, Some(sign)) =
            (kind, &reverses, kind.and_then(MovementKind::required_sign))
            && self.qty.signum() != sign
            && self.qty != 0
        {
            let want = if sign > 0 { "positive" } else { "negative" };
            errs.push(FieldError::new(
                "qty",
                format!(
                    "a {} must have a {want} quantity, found {}",
                    kind.as_str(),
                    self.qty
                ),
            ));
        }
        let event_at = bounds::instant(&self.event_at)
            .map_err(|e| errs.push(FieldError::new("event_at", e)))
            .and_then(|t| {
                if t.0 > now.0 + MAX_EVENT_AHEAD_MS {
                    errs.push(FieldError::new(
                        "event_at",
                        format!("event time {t} is in the future (server time {now})"),
                    ));
                    Err(())
                } else {
                    Ok(t)
                }
            });
        let source = short_text("source", text::Kind::Name, self.source, &mut errs);
        let doc_ref = short_text("doc_ref", text::Kind::Ref, self.doc_ref, &mut errs);
        let actor = short_text("actor", text::Kind::Ref, self.actor, &mut errs);
        match (uid, bin, sku, kind, event_at) {
            (Ok(uid), Ok(bin), Ok(sku), Some(kind), Ok(event_at)) if errs.is_empty() => {
                Ok(NewMovement {
                    uid,
                    bin,
                    sku,
                    lot,
                    expiry,
                    qty: self.qty,
                    kind,
                    event_at,
                    source: if source.is_empty() {
                        default_source.to_string()
                    } else {
                        source
                    },
                    doc_ref,
                    actor,
                    reverses,
                    recorded_at: None,
                })
            }
            _ => Err(errs),
        }
    }
}

/// A movement as stored.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct Movement {
    /// The ledger's own number for the movement: given when it is written, rising in
    /// the order movements were written (not their `event_at` order), never reused. A
    /// count result's `watermark` and a batch's answer refer to it.
    pub seq: i64,
    /// The sender's id for the movement (what `POST movements` took as `id`): the key
    /// that makes a resent batch change nothing.
    pub id: String,
    pub bin: String,
    pub sku: String,
    pub lot: String,
    pub qty: i64,
    pub kind: MovementKind,
    pub event_at: Timestamp,
    pub recorded_at: Timestamp,
    pub source: String,
    pub doc_ref: String,
    pub actor: String,
    pub reverses: Option<String>,
}

/// What a batch write did.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct RecordOutcome {
    /// Movements written by this batch.
    pub recorded: usize,
    /// Movements whose id was already in the ledger with the same content.
    pub already_recorded: usize,
    /// The ledger's high-water mark after the batch: the highest movement `seq` written
    /// at the site so far (not a sender's `id`).
    pub watermark: i64,
}

/// The balance of one key.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct BalanceRow {
    pub bin: String,
    pub sku: String,
    pub lot: String,
    pub qty: i64,
}

pub use append::{
    Inserted, ItemRef, LedgerKey, LedgerTx, MovementWrite, Reverses, StoredMovement, WatermarkTx,
    append, write_batch,
};

#[cfg(test)]
mod tests {
    use super::*;

    fn rec(qty: i64, kind: &str, event_at: &str) -> MovementRecord {
        MovementRecord {
            id: "m-1".into(),
            bin: "A-01-01-1".into(),
            sku: "SKU1".into(),
            lot: None,
            expiry: None,
            qty,
            kind: kind.into(),
            event_at: event_at.into(),
            source: None,
            doc_ref: None,
            actor: None,
            reverses: None,
        }
    }

    fn now() -> Timestamp {
        Timestamp::parse_rfc3339("2026-06-01T12:00:00Z").unwrap()
    }

    #[test]
    fn a_pick_with_a_positive_quantity_is_refused() {
        let errs = rec(3, "pick", "2026-06-01T10:00:00Z")
            .validate(now(), "api")
            .unwrap_err();
        assert_eq!(errs[0].field, "qty");
        assert!(errs[0].message.contains("negative"), "{}", errs[0].message);
    }

    #[test]
    fn the_most_negative_quantity_is_refused_not_overflowed() {
        // i64::MIN has no positive counterpart: its absolute value overflowed (a panic
        // in a debug build, a wrapped negative that passed the bound in a release one).
        for qty in [i64::MIN, i64::MIN + 1, -MAX_ABS_QTY - 1, MAX_ABS_QTY + 1] {
            let errs = rec(qty, "adjustment", "2026-06-01T10:00:00Z")
                .validate(now(), "api")
                .unwrap_err();
            assert_eq!(errs[0].field, "qty", "{qty}");
            assert!(
                errs[0].message.contains("beyond"),
                "{qty}: {}",
                errs[0].message
            );
        }
        assert!(
            rec(-MAX_ABS_QTY, "adjustment", "2026-06-01T10:00:00Z")
                .validate(now(), "api")
                .is_ok()
        );
    }

    #[test]
    fn an_event_in_the_far_future_is_refused() {
        let errs = rec(3, "receipt", "2026-06-02T10:00:00Z")
            .validate(now(), "api")
            .unwrap_err();
        assert_eq!(errs[0].field, "event_at");
    }

    #[test]
    fn an_unknown_kind_lists_the_known_ones() {
        let errs = rec(3, "gift", "2026-06-01T10:00:00Z")
            .validate(now(), "api")
            .unwrap_err();
        assert!(errs[0].message.contains("count_adjustment"));
    }

    #[test]
    fn a_valid_row_takes_the_default_source() {
        let m = rec(-2, "pick", "2026-06-01T10:00:00Z")
            .validate(now(), "api")
            .unwrap();
        assert_eq!(m.source, "api");
        assert_eq!(m.qty, -2);
    }
}
