//! Phones' counts arriving: the sync endpoint's domain. A request carries the device's
//! clock and a batch of events (docs/phone-sync.md); each event is parsed on its own
//! ([`event`]), its time corrected to the server's clock ([`clock`]), and the store applies
//! the accepted ones in one transaction, idempotent by event id.
//!
//! Events become count passes and count lines, the input of netting. Counts are facts: a
//! pass for a task whose run moved to another counter while the phone was offline is kept
//! and flagged, never dropped.

pub mod apply;
pub mod clock;
pub mod event;
pub mod gather;
pub mod plausible;
pub mod results;
pub mod routes;

#[cfg(test)]
mod memory;

use crate::accounts::{DeviceId, UserId};
use crate::master::SiteId;
use crate::time::Timestamp;
use cairn_scan::wire::EventResult;
use clock::ClockSample;
use event::Event;

/// Who is sending: the signed-in counter and, from a phone, its device.
#[derive(Debug, Clone)]
pub struct Sender {
    pub user: UserId,
    /// The name a run's holder is recorded under.
    pub user_name: String,
    pub device: Option<DeviceId>,
}

/// One sync request, parsed: every event either read or already refused.
#[derive(Debug, Clone)]
pub struct SyncBatch {
    pub site: SiteId,
    pub site_code: String,
    /// The site's zone: a list's day starts at the site's local midnight.
    pub zone: crate::time::day::SiteZone,
    pub sender: Sender,
    pub clock: ClockSample,
    pub received_at: Timestamp,
    pub events: Vec<Result<Event, EventResult>>,
}

impl SyncBatch {
    /// The events of this batch that `results` accepted as new, for the netting that
    /// follows in the same transaction (a repeat changes nothing).
    pub fn applied(&self, results: &[EventResult]) -> Vec<crate::netting::pass::AppliedEvent> {
        self.events
            .iter()
            .zip(results)
            .filter_map(|(event, result)| match event {
                Ok(e)
                    if result.status == cairn_scan::wire::EventStatus::Accepted
                        && !result.repeat =>
                {
                    Some(crate::netting::pass::AppliedEvent {
                        pass_uid: e.pass.to_string(),
                        event_uid: e.id.to_string(),
                    })
                }
                _ => None,
            })
            .collect()
    }
}
