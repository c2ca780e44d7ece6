//! The phone's sync messages (docs/phone-sync.md), shared by the server and the
//! browser crate so the two cannot disagree about a field.
//!
//! An event arrives as one flat JSON object; [`WireEvent`] reads it with every
//! field optional except the common ones, refusing unknown fields, and
//! [`WireEvent::body`] turns it into an [`EventBody`] that holds exactly what its
//! type needs, with a message naming the field that is missing or wrong.

use serde::{Deserialize, Serialize};

/// Most events one sync request may carry.
pub const MAX_SYNC_EVENTS: usize = 500;
/// Largest quantity one line may hold, in base units.
pub const MAX_LINE_QTY: i64 = 1_000_000_000;
/// Most packs one line may count.
pub const MAX_LINE_PACKS: i64 = 1_000_000;
/// Longest round trip a phone may report, in ms; longer ones are refused as nonsense.
pub const MAX_RTT_MS: i64 = 120_000;

/// A sync request as sent: the device clock, the last round trip, and the events,
/// each kept as raw JSON so one malformed event is refused on its own.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[cfg_attr(feature = "schema", derive(utoipa::ToSchema))]
#[serde(deny_unknown_fields)]
pub struct SyncRequest {
    pub device_clock: i64,
    #[serde(default)]
    pub rtt_ms: Option<i64>,
    /// Each event as a [`WireEvent`]; one that does not read as one is refused on its own,
    /// in its result, and the others are still taken.
    #[cfg_attr(feature = "schema", schema(value_type = Vec<WireEvent>))]
    pub events: Vec<serde_json::Value>,
}

/// Where an entered quantity came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "schema", derive(utoipa::ToSchema))]
#[serde(rename_all = "snake_case")]
pub enum Entry {
    Scan,
    Camera,
    Keypad,
}

impl Entry {
    /// Returns the name stored and sent.
    pub fn as_str(self) -> &'static str {
        match self {
            Entry::Scan => "scan",
            Entry::Camera => "camera",
            Entry::Keypad => "keypad",
        }
    }
}

/// The kinds of event a phone sends.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "schema", derive(utoipa::ToSchema))]
#[serde(rename_all = "snake_case")]
pub enum EventType {
    BinOpened,
    Line,
    Undo,
    BinEmpty,
    BinDone,
}

impl EventType {
    /// Returns the name stored and sent.
    pub fn as_str(self) -> &'static str {
        match self {
            EventType::BinOpened => "bin_opened",
            EventType::Line => "line",
            EventType::Undo => "undo",
            EventType::BinEmpty => "bin_empty",
            EventType::BinDone => "bin_done",
        }
    }
}

/// One event as sent (a flat object); serialising it again gives its canonical text.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "schema", derive(utoipa::ToSchema))]
#[serde(deny_unknown_fields)]
pub struct WireEvent {
    pub id: String,
    pub at: i64,
    /// The name of the person who made the event (the one signed in on the phone then):
    /// the server refuses an event whose person is not the one the token belongs to, so
    /// counts waiting on a shared phone are never credited to the next person. Absent only
    /// on events an app made before events named their maker; those are the token's
    /// person's, as they always were (and their canonical text is unchanged, so a resend
    /// of one already taken is still a repeat).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub user: Option<String>,
    pub count: String,
    #[serde(default)]
    pub task: Option<i64>,
    pub bin: String,
    #[serde(rename = "type")]
    pub kind: EventType,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub label: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sku: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gtin: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub packs: Option<i64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub qty: Option<i64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub lot: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub expiry: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub entry: Option<Entry>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub line: Option<String>,
}

/// A counted line, as the phone saw it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LineBody {
    pub sku: String,
    pub gtin: Option<String>,
    pub packs: i64,
    pub qty: i64,
    pub lot: String,
    pub expiry: Option<String>,
    pub entry: Entry,
}

/// What an event says beyond its common fields.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum EventBody {
    BinOpened { label: String },
    Line(LineBody),
    Undo { line: String },
    BinEmpty,
    BinDone,
}

fn need<T: Clone>(v: &Option<T>, field: &str, kind: EventType) -> Result<T, String> {
    v.clone()
        .ok_or_else(|| format!("a {} event needs '{field}'", kind.as_str()))
}

impl WireEvent {
    /// Returns the event's own part, or which field is missing or out of range.
    pub fn body(&self) -> Result<EventBody, String> {
        let k = self.kind;
        Ok(match k {
            EventType::BinOpened => EventBody::BinOpened {
                label: self.label.clone().unwrap_or_default(),
            },
            EventType::Line => {
                let qty = need(&self.qty, "qty", k)?;
                let packs = self.packs.unwrap_or(qty);
                if !(1..=MAX_LINE_QTY).contains(&qty) {
                    return Err(format!(
                        "qty {qty} is out of range: a line holds 1 to {MAX_LINE_QTY} base units"
                    ));
                }
                if !(1..=MAX_LINE_PACKS).contains(&packs) {
                    return Err(format!(
                        "packs {packs} is out of range: a line counts 1 to {MAX_LINE_PACKS} packs"
                    ));
                }
                EventBody::Line(LineBody {
                    sku: need(&self.sku, "sku", k)?,
                    gtin: self.gtin.clone().filter(|g| !g.is_empty()),
                    packs,
                    qty,
                    lot: self.lot.clone().unwrap_or_default(),
                    expiry: self.expiry.clone().filter(|e| !e.is_empty()),
                    entry: need(&self.entry, "entry", k)?,
                })
            }
            EventType::Undo => EventBody::Undo {
                line: need(&self.line, "line", k)?,
            },
            EventType::BinEmpty => EventBody::BinEmpty,
            EventType::BinDone => EventBody::BinDone,
        })
    }

    /// Returns the canonical text of the event: the same event always gives the same text.
    pub fn canonical(&self) -> String {
        serde_json::to_string(self).expect("a WireEvent always serialises")
    }
}

/// What happened to one event.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "schema", derive(utoipa::ToSchema))]
#[serde(rename_all = "snake_case")]
pub enum EventStatus {
    Accepted,
    Rejected,
    Conflict,
}

/// Notes on an accepted event that a supervisor or the counter should see.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "schema", derive(utoipa::ToSchema))]
#[serde(rename_all = "snake_case")]
pub enum EventFlag {
    /// The task's run is held by another counter now; the count is kept.
    Reassigned,
    /// The bin was not expected to hold this item.
    FoundStock,
    /// The count's times cannot be trusted (the phone's clock moved while the bin was
    /// counted, or the pass spans far too long): its results wait for a person's review.
    Held,
}

/// The answer for one event, in the order sent.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "schema", derive(utoipa::ToSchema))]
pub struct EventResult {
    pub id: String,
    pub status: EventStatus,
    /// True when the event had been accepted before (applied once, acknowledged again).
    pub repeat: bool,
    pub reason: Option<String>,
    pub flags: Vec<EventFlag>,
}

impl EventResult {
    /// Returns an acceptance.
    pub fn accepted(id: &str, repeat: bool, flags: Vec<EventFlag>) -> Self {
        Self {
            id: id.to_string(),
            status: EventStatus::Accepted,
            repeat,
            reason: None,
            flags,
        }
    }

    /// Returns a refusal with the reason the counter is shown.
    pub fn rejected(id: &str, reason: impl Into<String>) -> Self {
        Self {
            id: id.to_string(),
            status: EventStatus::Rejected,
            repeat: false,
            reason: Some(reason.into()),
            flags: Vec::new(),
        }
    }

    /// Returns a conflict: the id was seen before with other content.
    pub fn conflict(id: &str) -> Self {
        Self {
            id: id.to_string(),
            status: EventStatus::Conflict,
            repeat: false,
            reason: Some(format!(
                "event {id} was sent before with other content; nothing was merged"
            )),
            flags: Vec::new(),
        }
    }
}

/// The answer to a sync request.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[cfg_attr(feature = "schema", derive(utoipa::ToSchema))]
pub struct SyncResponse {
    pub server_clock: i64,
    pub offset_ms: i64,
    pub uncertainty_ms: i64,
    pub results: Vec<EventResult>,
}

#[cfg(test)]
mod tests {
    use super::*;

    fn line(json: &str) -> Result<EventBody, String> {
        let ev: WireEvent = serde_json::from_str(json).map_err(|e| e.to_string())?;
        ev.body()
    }

    #[test]
    fn a_line_reads_its_fields_and_a_missing_one_is_named() {
        let ok = line(
            r#"{"id":"a","at":1,"user":"u","count":"c","task":4,"bin":"A-01-01-1","type":"line",
               "sku":"KL-1","gtin":"05012345678900","packs":2,"qty":24,"lot":"L1","entry":"scan"}"#,
        )
        .unwrap();
        let EventBody::Line(l) = ok else {
            panic!("not a line")
        };
        assert_eq!((l.packs, l.qty, l.lot.as_str()), (2, 24, "L1"));
        let missing =
            line(r#"{"id":"a","at":1,"user":"u","count":"c","bin":"B","type":"line","qty":3}"#);
        assert_eq!(missing.unwrap_err(), "a line event needs 'sku'");
    }

    #[test]
    fn unknown_fields_and_bad_quantities_are_refused() {
        assert!(
            line(
                r#"{"id":"a","at":1,"user":"u","count":"c","bin":"B","type":"bin_done","qtty":1}"#
            )
            .is_err()
        );
        let zero = line(
            r#"{"id":"a","at":1,"user":"u","count":"c","bin":"B","type":"line","sku":"S","qty":0,"entry":"keypad"}"#,
        );
        assert!(zero.unwrap_err().contains("out of range"));
    }

    #[test]
    fn the_canonical_text_ignores_field_order_and_spacing() {
        let a: WireEvent = serde_json::from_str(
            r#"{"id":"a","at":1,"user":"u","count":"c","bin":"B","type":"bin_done"}"#,
        )
        .unwrap();
        let b: WireEvent = serde_json::from_str(
            r#"{ "type": "bin_done", "bin": "B", "count": "c", "at": 1, "id": "a", "task": null, "user": "u" }"#,
        )
        .unwrap();
        assert_eq!(a.canonical(), b.canonical());
    }
}
