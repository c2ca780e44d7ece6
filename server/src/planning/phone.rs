//! The counter's view of the day's list, as the phone downloads it: their own
//! run in walking order, each bin with its scannable label and the items the
//! bin should hold — never a book quantity, and no trigger reason that hints at
//! one. The list's version lets the phone tell when its copy is stale.

use super::ListView;
use crate::master::SiteCode;
use crate::master::codes::BinCode;
use serde::Serialize;
use std::collections::HashMap;

/// An item the counter may meet in a bin: what it is and how it is packed.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct ItemBrief {
    pub sku: String,
    pub description: String,
    pub base_unit: String,
    pub lot_tracked: bool,
    /// GTIN-14 and units of each pack level, so a case scan adds its units.
    pub packs: Vec<PackBrief>,
}

/// One pack of an item.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct PackBrief {
    pub gtin: String,
    pub level: String,
    pub units: u32,
}

/// One bin to count.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct PhoneTask {
    pub id: Option<i64>,
    pub seq: u32,
    pub bin: String,
    /// The text of the bin's label, so the phone can check the scanned label.
    pub label: String,
    pub zone: String,
    pub aisle: u16,
    pub bay: u16,
    pub level: u8,
    /// `count` or `recount` (a recount must not learn why).
    pub kind: &'static str,
    pub done: bool,
    pub items: Vec<ItemBrief>,
}

/// The counter's part of the day's list.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct PhoneList {
    pub day: chrono::NaiveDate,
    /// The site's IANA zone: the phone works out the site's "today" with it while offline,
    /// never from its own zone or UTC.
    pub time_zone: crate::time::day::SiteZone,
    /// The site's local date when the server answered.
    pub today: chrono::NaiveDate,
    pub version: i64,
    /// The run this counter holds, if any.
    pub run: Option<u32>,
    pub tasks: Vec<PhoneTask>,
}

/// Returns the text of a bin's label (what its barcode says), if its place can be printed.
pub fn label_text(site: &str, zone: &str, aisle: u16, bay: u16, level: u8) -> Option<String> {
    crate::master::place_label(site, zone, aisle, bay, level)
        .ok()
        .map(|l| l.text().to_string())
}

/// Picks the counter's run out of the day's list and strips it to what a blind count may see.
pub fn for_counter(
    list: &ListView,
    holder: &str,
    site: &SiteCode,
    zone: crate::time::day::SiteZone,
    today: chrono::NaiveDate,
    contents: &HashMap<String, Vec<ItemBrief>>,
) -> PhoneList {
    let run = list.runs.iter().find(|r| r.holder == holder).map(|r| r.run);
    let tasks = list
        .tasks
        .iter()
        .filter(|t| Some(t.run) == run)
        .map(|t| {
            let label = BinCode::parse(&t.bin)
                .ok()
                .and_then(|_| t.label(site).ok())
                .map(|l| l.text().to_string())
                .unwrap_or_default();
            PhoneTask {
                id: t.id,
                seq: t.seq,
                bin: t.bin.clone(),
                label,
                zone: t.zone.clone(),
                aisle: t.aisle,
                bay: t.bay,
                level: t.level,
                kind: if t.reason == "recount" {
                    "recount"
                } else {
                    "count"
                },
                done: t.status == "done",
                items: contents.get(&t.bin).cloned().unwrap_or_default(),
            }
        })
        .collect();
    PhoneList {
        day: list.day,
        time_zone: zone,
        today,
        version: list.version,
        run,
        tasks,
    }
}
