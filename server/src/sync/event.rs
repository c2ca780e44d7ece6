//! Reading one raw sync event into the domain: ids, codes, quantities and dates are
//! parsed here, before any SQL runs, so a bad event is refused on its own with a reason
//! the counter is shown.

use crate::master::codes::{BinCode, LotCode, Sku};
use cairn_scan::wire::{Entry, EventBody, EventResult, EventType, WireEvent};
use chrono::NaiveDate;
use uuid::Uuid;

/// A counted line, parsed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Line {
    pub sku: Sku,
    pub gtin: Option<String>,
    pub packs: i64,
    pub qty: i64,
    pub lot: String,
    pub expiry: Option<NaiveDate>,
    pub entry: Entry,
}

/// What an event does.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Body {
    BinOpened { label: String },
    Line(Line),
    Undo { line: Uuid },
    BinEmpty,
    BinDone,
}

/// One event from a phone, parsed; `canonical` is its text for the resend check.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Event {
    pub id: Uuid,
    pub device_at: i64,
    /// The name of the person the phone says made the event; `None` on an event from an
    /// app that did not name makers yet (the token's person's).
    pub user: Option<String>,
    pub pass: Uuid,
    pub task: Option<i64>,
    pub bin: BinCode,
    pub kind: EventType,
    pub body: Body,
    pub canonical: String,
}

/// Longest person's name an event may carry, in bytes (sign-in names are far shorter).
const MAX_USER_NAME_BYTES: usize = 200;

fn uuid_v7(text: &str, field: &str) -> Result<Uuid, String> {
    let id = Uuid::parse_str(text).map_err(|_| format!("{field} '{text}' is not a UUID"))?;
    if id.get_version_num() != 7 {
        return Err(format!(
            "{field} '{text}' is a version {} UUID; the phone makes version 7 ids",
            id.get_version_num()
        ));
    }
    Ok(id)
}

/// Reads one event, or answers why it was refused (with its id, when it has one).
pub fn read(raw: &serde_json::Value, index: usize) -> Result<Event, EventResult> {
    let shown_id = raw
        .get("id")
        .and_then(|v| v.as_str())
        .map(str::to_string)
        .unwrap_or_else(|| format!("#{index}"));
    let refuse = |why: String| EventResult::rejected(&shown_id, why);
    let wire: WireEvent = serde_path_to_error::deserialize(crate::input::objects::Objects(
        raw.clone(),
    ))
    .map_err(|e| {
        let at = match e.path().to_string() {
            p if p == "." => String::new(),
            p => format!(" at {p}"),
        };
        refuse(format!(
            "event {index} cannot be read{at}: {}",
            e.into_inner()
        ))
    })?;
    let id = uuid_v7(&wire.id, "id").map_err(refuse)?;
    let pass = uuid_v7(&wire.count, "count").map_err(refuse)?;
    let bin = BinCode::parse(&wire.bin).map_err(|e| refuse(format!("bin: {e}")))?;
    if wire.at <= 0 {
        return Err(refuse(format!("at {} is not a time", wire.at)));
    }
    let user = match wire.user.as_deref().map(str::trim) {
        None => None,
        Some(u) if !u.is_empty() && u.len() <= MAX_USER_NAME_BYTES => Some(u.to_string()),
        Some(_) => {
            return Err(refuse(format!(
                "user: name the person who made the event (1 to {MAX_USER_NAME_BYTES} bytes)"
            )));
        }
    };
    let body = match wire.body().map_err(refuse)? {
        EventBody::BinOpened { label } => Body::BinOpened { label },
        EventBody::Line(l) => {
            let sku = Sku::parse(&l.sku).map_err(|e| refuse(format!("sku: {e}")))?;
            let lot = if l.lot.trim().is_empty() {
                String::new()
            } else {
                LotCode::parse(&l.lot)
                    .map_err(|e| refuse(format!("lot: {e}")))?
                    .as_str()
                    .to_string()
            };
            let gtin = match &l.gtin {
                Some(g) => Some(
                    cairn_scan::Gtin::parse(g)
                        .map_err(|e| refuse(format!("gtin: {e}")))?
                        .as_str()
                        .to_string(),
                ),
                None => None,
            };
            let expiry = match &l.expiry {
                Some(d) => {
                    Some(crate::input::bounds::day(d).map_err(|e| refuse(format!("expiry: {e}")))?)
                }
                None => None,
            };
            Body::Line(Line {
                sku,
                gtin,
                packs: l.packs,
                qty: l.qty,
                lot,
                expiry,
                entry: l.entry,
            })
        }
        EventBody::Undo { line } => Body::Undo {
            line: uuid_v7(&line, "line").map_err(refuse)?,
        },
        EventBody::BinEmpty => Body::BinEmpty,
        EventBody::BinDone => Body::BinDone,
    };
    Ok(Event {
        id,
        device_at: wire.at,
        user,
        pass,
        task: wire.task,
        bin,
        kind: wire.kind,
        body,
        canonical: wire.canonical(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    fn v7() -> String {
        Uuid::now_v7().to_string()
    }

    #[test]
    fn a_v4_id_is_refused_and_named() {
        let raw = json!({"id": Uuid::new_v4().to_string(), "at": 5, "user": "cora", "count": v7(),
                         "bin": "A-01-01-1", "type": "bin_done"});
        let err = read(&raw, 0).unwrap_err();
        assert!(err.reason.unwrap().contains("version 4"));
    }

    #[test]
    fn a_line_with_a_bad_check_digit_is_refused_with_the_parsers_message() {
        let raw = json!({"id": v7(), "at": 5, "user": "cora", "count": v7(), "bin": "A-01-01-1", "type": "line",
                         "sku": "KL-1", "gtin": "05012345678901", "qty": 1, "entry": "scan"});
        let reason = read(&raw, 3).unwrap_err().reason.unwrap();
        assert!(reason.starts_with("gtin:"), "{reason}");
        assert!(reason.contains("check digit"), "{reason}");
    }

    #[test]
    fn an_event_without_an_id_is_named_by_its_place() {
        let err = read(&json!({"at": 1}), 7).unwrap_err();
        assert_eq!(err.id, "#7");
    }
}
