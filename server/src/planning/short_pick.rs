//! Short-pick reports: the host says a pick found less than the book, so the
//! bin is counted ahead of the plan.

use crate::batch::FieldError;
use crate::input::{bounds, text};
use crate::ledger::MAX_EVENT_AHEAD_MS;
use crate::master::codes::{BinCode, MovementUid, Sku};
use crate::time::Timestamp;
use serde::Deserialize;

/// Largest shortfall one report may carry (base units).
pub const MAX_SHORT_QTY: i64 = 1_000_000_000;

/// A report as the host sends it.
#[derive(Debug, Clone, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ShortPickRecord {
    /// The sender's id: a resend with the same id is harmless.
    pub id: String,
    pub bin: String,
    pub sku: String,
    #[serde(default)]
    pub lot: Option<String>,
    /// How many base units the pick was short (0 when unknown).
    #[serde(default)]
    pub short_qty: i64,
    pub reported_at: String,
    #[serde(default)]
    pub source: Option<String>,
    #[serde(default)]
    pub doc_ref: Option<String>,
}

/// A validated report.
#[derive(Debug, Clone, PartialEq)]
pub struct NewShortPick {
    pub uid: MovementUid,
    pub bin: BinCode,
    pub sku: Sku,
    pub lot: String,
    pub short_qty: i64,
    pub reported_at: Timestamp,
    pub source: String,
    pub doc_ref: String,
}

impl ShortPickRecord {
    /// Checks every field; `now` bounds the report's time, and `default_source` is
    /// used when the sender names none.
    pub fn validate(
        self,
        now: Timestamp,
        default_source: &str,
    ) -> Result<NewShortPick, Vec<FieldError>> {
        let mut errors = Vec::new();
        let uid = MovementUid::parse(&self.id)
            .map_err(|e| errors.push(FieldError::new("id", e.to_string())));
        let bin = BinCode::parse(&self.bin)
            .map_err(|e| errors.push(FieldError::new("bin", e.to_string())));
        let sku =
            Sku::parse(&self.sku).map_err(|e| errors.push(FieldError::new("sku", e.to_string())));
        let lot = match self.lot.as_deref().map(str::trim).filter(|l| !l.is_empty()) {
            None => String::new(),
            Some(l) => match crate::master::LotCode::parse(l) {
                Ok(l) => l.as_str().to_string(),
                Err(e) => {
                    errors.push(FieldError::new("lot", e.to_string()));
                    String::new()
                }
            },
        };
        if !(0..=MAX_SHORT_QTY).contains(&self.short_qty) {
            errors.push(FieldError::new(
                "short_qty",
                format!("must be 0 to {MAX_SHORT_QTY} base units"),
            ));
        }
        let reported_at = bounds::instant(&self.reported_at)
            .and_then(|t| {
                if t.0 > now.0.saturating_add(MAX_EVENT_AHEAD_MS) {
                    Err(format!(
                        "report time {t} is in the future (server time {now})"
                    ))
                } else {
                    Ok(t)
                }
            })
            .map_err(|e| errors.push(FieldError::new("reported_at", e)));
        let text = |field: &'static str,
                    kind: text::Kind,
                    v: Option<String>,
                    errors: &mut Vec<FieldError>| {
            text::check(kind, v.as_deref().unwrap_or("")).unwrap_or_else(|e| {
                errors.push(FieldError::new(field, format!("{field}: {e}")));
                String::new()
            })
        };
        let source = text("source", text::Kind::Name, self.source, &mut errors);
        let doc_ref = text("doc_ref", text::Kind::Ref, self.doc_ref, &mut errors);
        match (uid, bin, sku, reported_at) {
            (Ok(uid), Ok(bin), Ok(sku), Ok(reported_at)) if errors.is_empty() => Ok(NewShortPick {
                uid,
                bin,
                sku,
                lot,
                short_qty: self.short_qty,
                reported_at,
                source: if source.is_empty() {
                    default_source.to_string()
                } else {
                    source
                },
                doc_ref,
            }),
            _ => Err(errors),
        }
    }
}

/// What a batch of reports did.
#[derive(Debug, Clone, Default, PartialEq, Eq, serde::Serialize, utoipa::ToSchema)]
pub struct ShortPickOutcome {
    pub recorded: usize,
    pub already_recorded: usize,
}
