//! The columns the two long tables sort by: the buffer of every item and the
//! record error per item. The first column (the SKU) is the default order.

use super::service::{BufferReport, ItemReport};
use super::store::ItemRow;
use super::table::{Column, Listed, SortKey};

impl Listed for BufferReport {
    fn item(&self) -> &ItemRow {
        &self.item
    }
}

impl Listed for ItemReport {
    fn item(&self) -> &ItemRow {
        &self.item
    }
}

fn class_key(item: &ItemRow) -> SortKey {
    item.class
        .map_or(SortKey::Missing, |c| SortKey::text(&c.to_string()))
}

/// Columns of the buffer table, in the page's order.
pub const BUFFER_COLUMNS: [Column<BufferReport>; 10] = [
    Column {
        name: "sku",
        label: "Item",
        numeric: false,
        key: |r| SortKey::text(&r.item.sku),
    },
    Column {
        name: "description",
        label: "Description",
        numeric: false,
        key: |r| SortKey::text(&r.item.description),
    },
    Column {
        name: "group",
        label: "Group",
        numeric: false,
        key: |r| SortKey::text(&r.item.group),
    },
    Column {
        name: "class",
        label: "Class",
        numeric: false,
        key: |r| class_key(&r.item),
    },
    Column {
        name: "demand",
        label: "d",
        numeric: true,
        key: |r| SortKey::num(r.demand.mean),
    },
    Column {
        name: "lead_time",
        label: "L",
        numeric: true,
        key: |r| SortKey::num(r.lead_time.as_ref().map(|l| l.times.lead_time_days)),
    },
    Column {
        name: "sigma_rec",
        label: "σrec",
        numeric: true,
        key: |r| SortKey::Num(r.record_error.sigma_rec),
    },
    Column {
        name: "safety_stock",
        label: "SS",
        numeric: true,
        key: |r| SortKey::num(r.buffer.map(|b| b.safety_stock)),
    },
    Column {
        name: "order_point",
        label: "Order point",
        numeric: true,
        key: |r| SortKey::num(r.buffer.map(|b| b.order_point_units as f64)),
    },
    Column {
        name: "monthly_ss_change",
        label: "SS change if counted every 30 d",
        numeric: true,
        key: |r| SortKey::num(r.monthly_ss_change()),
    },
];

/// Columns of the record-error-per-item table, in the page's order.
pub const ITEM_COLUMNS: [Column<ItemReport>; 10] = [
    Column {
        name: "sku",
        label: "Item",
        numeric: false,
        key: |r| SortKey::text(&r.item.sku),
    },
    Column {
        name: "description",
        label: "Description",
        numeric: false,
        key: |r| SortKey::text(&r.item.description),
    },
    Column {
        name: "group",
        label: "Group",
        numeric: false,
        key: |r| SortKey::text(&r.item.group),
    },
    Column {
        name: "class",
        label: "Class",
        numeric: false,
        key: |r| class_key(&r.item),
    },
    Column {
        name: "counts",
        label: "Counts",
        numeric: true,
        key: |r| SortKey::Num(r.figures.counts as f64),
    },
    Column {
        name: "hits",
        label: "Hits",
        numeric: true,
        key: |r| SortKey::Num(r.figures.hits as f64),
    },
    Column {
        name: "hit_rate",
        label: "Hit rate",
        numeric: true,
        key: |r| SortKey::num(r.figures.hit_rate),
    },
    Column {
        name: "bias",
        label: "Bias",
        numeric: true,
        key: |r| SortKey::num(r.figures.bias),
    },
    Column {
        name: "error_sd",
        label: "SD of error",
        numeric: true,
        key: |r| SortKey::num(r.figures.error_sd),
    },
    Column {
        name: "repeat_counts",
        label: "Repeat counts",
        numeric: true,
        key: |r| SortKey::Num(r.figures.growth.points as f64),
    },
];
