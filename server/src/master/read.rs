//! Reading master data back, page by page: the rows as the API writes them (the fields
//! a POST takes, plus read-only ones the server keeps), the queries a read asks the
//! store, and the one paging rule every read-back shares. No I/O.
//!
//! Paging is by key, not by position: rows come in the order of their key (codes
//! compared byte by byte), a page holds at most `limit` rows, and `next` is a cursor
//! naming the last row's key, absent on the last page. A walk through the pages is
//! stable while rows are added: a row added behind the cursor is not met on this walk,
//! one added ahead of it is, and no row is met twice or skipped.

use super::codes::{Sku, ZoneCode};
use crate::planning::abc::Class;
use base64::Engine as _;
use base64::engine::general_purpose::URL_SAFE_NO_PAD;
use serde::ser::SerializeMap;
use serde::{Deserialize, Serialize};

/// Rows a page holds when the caller names no `limit`.
pub const DEFAULT_PAGE_ROWS: usize = 200;
/// Most rows a page holds.
pub const MAX_PAGE_ROWS: usize = 1_000;

/// A bad query parameter: which one, and what is wrong with it.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{param}: {message}")]
pub struct ParamError {
    pub param: &'static str,
    pub message: String,
}

fn bad(param: &'static str, message: impl Into<String>) -> ParamError {
    ParamError {
        param,
        message: message.into(),
    }
}

/// One page of rows and the cursor of the next.
#[derive(Debug, Clone, PartialEq)]
pub struct Page<T> {
    pub rows: Vec<T>,
    /// Pass as `after` to read the next page; `None` on the last page.
    pub next: Option<String>,
}

impl<T> Page<T> {
    /// Cuts rows read with one to spare (a store reads `limit + 1`) into a page: when
    /// the spare row came, it is dropped and `next` names the last row kept.
    pub fn cut(mut rows: Vec<T>, limit: usize, key: impl Fn(&T) -> Vec<&str>) -> Self {
        let more = rows.len() > limit;
        rows.truncate(limit);
        let next = rows
            .last()
            .filter(|_| more)
            .map(|last| encode_cursor(&key(last)));
        Page { rows, next }
    }

    /// Returns the page as the API sends it, its rows under `name`.
    pub fn named(&self, name: &'static str) -> NamedPage<'_, T> {
        NamedPage { name, page: self }
    }
}

/// A page as the API sends it: `{"<name>": [rows], "next": cursor or null}`.
pub struct NamedPage<'a, T> {
    name: &'static str,
    page: &'a Page<T>,
}

impl<T: Serialize> Serialize for NamedPage<'_, T> {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let mut m = s.serialize_map(Some(2))?;
        m.serialize_entry(self.name, &self.page.rows)?;
        m.serialize_entry("next", &self.page.next)?;
        m.end()
    }
}

/// Writes a key as a cursor: opaque to callers (URL-safe base64 of its parts as JSON),
/// so a key of several parts, or with any character in it, travels as one word.
pub fn encode_cursor(parts: &[&str]) -> String {
    let json = serde_json::to_vec(parts).expect("a list of strings always serializes");
    URL_SAFE_NO_PAD.encode(json)
}

/// Reads the `after` parameter back into a key of `N` parts; empty or absent is the
/// first page.
pub fn decode_cursor<const N: usize>(raw: Option<&str>) -> Result<Option<[String; N]>, ParamError> {
    let Some(text) = raw.map(str::trim).filter(|t| !t.is_empty()) else {
        return Ok(None);
    };
    let refuse = || {
        bad(
            "after",
            format!("'{text}' is not a cursor of this list (pass the 'next' of the previous page)"),
        )
    };
    let bytes = URL_SAFE_NO_PAD.decode(text).map_err(|_| refuse())?;
    let parts: Vec<String> = serde_json::from_slice(&bytes).map_err(|_| refuse())?;
    parts.try_into().map(Some).map_err(|_| refuse())
}

/// Reads the `limit` parameter: 1 to [`MAX_PAGE_ROWS`], [`DEFAULT_PAGE_ROWS`] when
/// absent or empty.
pub fn limit(raw: Option<&str>) -> Result<usize, ParamError> {
    let Some(text) = raw.map(str::trim).filter(|t| !t.is_empty()) else {
        return Ok(DEFAULT_PAGE_ROWS);
    };
    text.parse::<usize>()
        .ok()
        .filter(|n| (1..=MAX_PAGE_ROWS).contains(n))
        .ok_or_else(|| {
            bad(
                "limit",
                format!("'{text}' is not a whole number from 1 to {MAX_PAGE_ROWS}"),
            )
        })
}

/// A parameter's value, with empty taken as absent (as a form's "any" choice sends it).
fn given(raw: &Option<String>) -> Option<&str> {
    raw.as_deref().map(str::trim).filter(|t| !t.is_empty())
}

fn sku_param(param: &'static str, raw: &Option<String>) -> Result<Option<Sku>, ParamError> {
    given(raw)
        .map(|t| Sku::parse(t).map_err(|e| bad(param, e.to_string())))
        .transpose()
}

/// A zone as the API reads it back. Zones are made by the bins that name them, in the
/// order they first appeared (`walk_seq`); `bins` counts the zone's bins.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct ZoneRow {
    pub code: String,
    pub walk_seq: i64,
    pub bins: u64,
}

/// A bin as the API reads it back: the fields `POST bins` takes.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct BinRow {
    pub code: String,
    pub zone: String,
    pub aisle: u16,
    pub bay: u16,
    pub level: u8,
    /// `L`, `R` or empty.
    pub side: String,
    pub walk_seq: i64,
}

/// A pack of an item as the API reads it back: a `POST packs` row without the SKU.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct PackRow {
    pub gtin: String,
    pub level: String,
    pub units: u32,
}

/// An item as the API reads it back: the fields `POST items` takes, its packs (fewest
/// units first) and, read-only, its current ABC class (`null` before its first).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct ItemRow {
    pub sku: String,
    pub description: String,
    pub base_unit: String,
    pub unit_cost_minor: i64,
    pub lot_tracked: bool,
    pub group: String,
    pub packs: Vec<PackRow>,
    pub class: Option<String>,
}

/// A lot as the API reads it back: the item and the `lot` and `expiry` the movement
/// that first named it carried.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct LotRow {
    pub sku: String,
    pub lot: String,
    /// `YYYY-MM-DD`, or `null` when none was given.
    pub expiry: Option<String>,
}

/// A pack as the API reads it back on its own: the fields `POST packs` takes.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct SkuPackRow {
    pub sku: String,
    pub gtin: String,
    pub level: String,
    pub units: u32,
}

/// Which zones to read: a page after a zone code.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ZoneQuery {
    pub after: Option<String>,
    /// Rows to read: the page's limit and one to spare.
    pub take: usize,
}

/// Which bins to read, by code.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BinQuery {
    pub zone: Option<ZoneCode>,
    pub aisle: Option<u16>,
    pub after: Option<String>,
    pub take: usize,
}

/// An item's class as a filter: one class, or not yet classified.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ClassFilter {
    Is(Class),
    Unclassified,
}

impl ClassFilter {
    /// Returns the stored class this filter keeps (empty for none yet).
    pub fn stored(self) -> &'static str {
        match self {
            ClassFilter::Is(c) => c.as_str(),
            ClassFilter::Unclassified => "",
        }
    }
}

/// Which items to read, by SKU.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ItemQuery {
    pub sku: Option<Sku>,
    /// SKUs starting with this text.
    pub sku_prefix: Option<String>,
    pub group: Option<String>,
    pub class: Option<ClassFilter>,
    pub after: Option<String>,
    pub take: usize,
}

/// Which lots to read, by SKU then lot code.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LotQuery {
    pub sku: Option<Sku>,
    /// The key `(sku, lot)` of the last row of the previous page.
    pub after: Option<(String, String)>,
    pub take: usize,
}

/// Which packs to read, by SKU then GTIN.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PackQuery {
    pub sku: Option<Sku>,
    /// The key `(sku, gtin)` of the last row of the previous page.
    pub after: Option<(String, String)>,
    pub take: usize,
}

/// Query parameters of `GET zones`; see [`ZoneParams::query`].
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ZoneParams {
    pub limit: Option<String>,
    pub after: Option<String>,
}

impl ZoneParams {
    /// Checks the parameters; returns the query and the page's limit.
    pub fn query(&self) -> Result<(ZoneQuery, usize), ParamError> {
        let limit = limit(self.limit.as_deref())?;
        let after = decode_cursor::<1>(self.after.as_deref())?.map(|[a]| a);
        Ok((
            ZoneQuery {
                after,
                take: limit + 1,
            },
            limit,
        ))
    }
}

/// Query parameters of `GET bins`: `zone`, `aisle`, `limit`, `after`.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BinParams {
    pub zone: Option<String>,
    pub aisle: Option<String>,
    pub limit: Option<String>,
    pub after: Option<String>,
}

impl BinParams {
    /// Checks the parameters; returns the query and the page's limit.
    pub fn query(&self) -> Result<(BinQuery, usize), ParamError> {
        let limit = limit(self.limit.as_deref())?;
        let zone = given(&self.zone)
            .map(|t| ZoneCode::parse(t).map_err(|e| bad("zone", e.to_string())))
            .transpose()?;
        let aisle = given(&self.aisle)
            .map(|t| {
                t.parse::<u16>()
                    .ok()
                    .filter(|a| *a <= super::MAX_AISLE)
                    .ok_or_else(|| {
                        bad(
                            "aisle",
                            format!("'{t}' is not an aisle (0 to {})", super::MAX_AISLE),
                        )
                    })
            })
            .transpose()?;
        let after = decode_cursor::<1>(self.after.as_deref())?.map(|[a]| a);
        Ok((
            BinQuery {
                zone,
                aisle,
                after,
                take: limit + 1,
            },
            limit,
        ))
    }
}

/// Query parameters of `GET items`: `sku`, `sku_prefix`, `group`, `class`, `limit`, `after`.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ItemParams {
    pub sku: Option<String>,
    pub sku_prefix: Option<String>,
    pub group: Option<String>,
    pub class: Option<String>,
    pub limit: Option<String>,
    pub after: Option<String>,
}

impl ItemParams {
    /// Checks the parameters; returns the query and the page's limit.
    pub fn query(&self) -> Result<(ItemQuery, usize), ParamError> {
        let limit = limit(self.limit.as_deref())?;
        let sku = sku_param("sku", &self.sku)?;
        // A prefix is itself the start of a code: the same characters, not empty.
        let sku_prefix = sku_param("sku_prefix", &self.sku_prefix)?.map(|s| s.as_str().to_owned());
        let group = given(&self.group)
            .map(|t| {
                crate::input::text::check(crate::input::text::Kind::Name, t)
                    .map_err(|e| bad("group", e.to_string()))
            })
            .transpose()?;
        let class = given(&self.class)
            .map(|t| match (t, Class::parse(t)) {
                (_, Some(c)) => Ok(ClassFilter::Is(c)),
                ("none", None) => Ok(ClassFilter::Unclassified),
                _ => Err(bad(
                    "class",
                    format!("'{t}' is not a class (A, B, C, or none for items not yet classified)"),
                )),
            })
            .transpose()?;
        let after = decode_cursor::<1>(self.after.as_deref())?.map(|[a]| a);
        Ok((
            ItemQuery {
                sku,
                sku_prefix,
                group,
                class,
                after,
                take: limit + 1,
            },
            limit,
        ))
    }
}

/// Query parameters of `GET lots`: `sku`, `limit`, `after`.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LotParams {
    pub sku: Option<String>,
    pub limit: Option<String>,
    pub after: Option<String>,
}

impl LotParams {
    /// Checks the parameters; returns the query and the page's limit.
    pub fn query(&self) -> Result<(LotQuery, usize), ParamError> {
        let limit = limit(self.limit.as_deref())?;
        Ok((
            LotQuery {
                sku: sku_param("sku", &self.sku)?,
                after: decode_cursor::<2>(self.after.as_deref())?.map(|[s, l]| (s, l)),
                take: limit + 1,
            },
            limit,
        ))
    }
}

/// Query parameters of `GET packs`: `sku`, `limit`, `after`.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PackParams {
    pub sku: Option<String>,
    pub limit: Option<String>,
    pub after: Option<String>,
}

impl PackParams {
    /// Checks the parameters; returns the query and the page's limit.
    pub fn query(&self) -> Result<(PackQuery, usize), ParamError> {
        let limit = limit(self.limit.as_deref())?;
        Ok((
            PackQuery {
                sku: sku_param("sku", &self.sku)?,
                after: decode_cursor::<2>(self.after.as_deref())?.map(|[s, g]| (s, g)),
                take: limit + 1,
            },
            limit,
        ))
    }
}

/// Cuts a page of zones.
pub fn zone_page(rows: Vec<ZoneRow>, limit: usize) -> Page<ZoneRow> {
    Page::cut(rows, limit, |z| vec![z.code.as_str()])
}

/// Cuts a page of bins.
pub fn bin_page(rows: Vec<BinRow>, limit: usize) -> Page<BinRow> {
    Page::cut(rows, limit, |b| vec![b.code.as_str()])
}

/// Cuts a page of items.
pub fn item_page(rows: Vec<ItemRow>, limit: usize) -> Page<ItemRow> {
    Page::cut(rows, limit, |i| vec![i.sku.as_str()])
}

/// Cuts a page of lots.
pub fn lot_page(rows: Vec<LotRow>, limit: usize) -> Page<LotRow> {
    Page::cut(rows, limit, |l| vec![l.sku.as_str(), l.lot.as_str()])
}

/// Cuts a page of packs.
pub fn pack_page(rows: Vec<SkuPackRow>, limit: usize) -> Page<SkuPackRow> {
    Page::cut(rows, limit, |p| vec![p.sku.as_str(), p.gtin.as_str()])
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::master::{BinRecord, ItemRecord};

    fn zone(code: &str) -> ZoneRow {
        ZoneRow {
            code: code.into(),
            walk_seq: 1,
            bins: 0,
        }
    }

    #[test]
    fn a_page_with_a_spare_row_names_its_last_row_as_next() {
        let p = zone_page(vec![zone("A"), zone("B"), zone("C")], 2);
        assert_eq!(p.rows, vec![zone("A"), zone("B")]);
        let [after] = decode_cursor::<1>(p.next.as_deref()).unwrap().unwrap();
        assert_eq!(after, "B");
    }

    #[test]
    fn a_page_of_exactly_limit_rows_is_the_last() {
        let p = zone_page(vec![zone("A"), zone("B")], 2);
        assert_eq!(p.rows.len(), 2);
        assert_eq!(p.next, None);
        assert_eq!(zone_page(Vec::new(), 2).next, None);
    }

    #[test]
    fn a_cursor_of_two_parts_reads_back_whatever_they_hold() {
        let c = encode_cursor(&["S/1", "LOT 7,\"x\""]);
        assert!(
            c.chars()
                .all(|ch| ch.is_ascii_alphanumeric() || ch == '-' || ch == '_')
        );
        let [a, b] = decode_cursor::<2>(Some(&c)).unwrap().unwrap();
        assert_eq!((a.as_str(), b.as_str()), ("S/1", "LOT 7,\"x\""));
    }

    #[test]
    fn a_cursor_this_server_did_not_give_is_refused_naming_after() {
        for bad in ["not base64!", "AAAA", &encode_cursor(&["A", "B"])] {
            let e = decode_cursor::<1>(Some(bad)).unwrap_err();
            assert_eq!(e.param, "after", "{bad}");
        }
        assert_eq!(decode_cursor::<1>(Some("  ")).unwrap(), None);
    }

    #[test]
    fn a_limit_outside_1_to_the_maximum_is_refused() {
        assert_eq!(limit(None).unwrap(), DEFAULT_PAGE_ROWS);
        assert_eq!(limit(Some("1000")).unwrap(), 1000);
        for t in ["0", "1001", "-1", "ten", "1.5"] {
            assert_eq!(limit(Some(t)).unwrap_err().param, "limit", "{t}");
        }
    }

    #[test]
    fn bad_filters_name_their_parameter() {
        let items = |f: fn(&mut ItemParams)| {
            let mut p = ItemParams::default();
            f(&mut p);
            p.query().map(|_| ()).map_err(|e| e.param)
        };
        assert_eq!(items(|p| p.class = Some("D".into())), Err("class"));
        assert_eq!(
            items(|p| p.sku_prefix = Some("a b".into())),
            Err("sku_prefix")
        );
        assert_eq!(items(|p| p.sku = Some("x\u{7}".into())), Err("sku"));
        assert_eq!(items(|p| p.class = Some("none".into())), Ok(()));
        let bins = BinParams {
            aisle: Some("1000".into()),
            ..BinParams::default()
        };
        assert_eq!(bins.query().unwrap_err().param, "aisle");
        let bins = BinParams {
            zone: Some("a".into()),
            ..BinParams::default()
        };
        assert_eq!(bins.query().unwrap_err().param, "zone");
    }

    #[test]
    fn a_bin_read_back_is_a_bin_row_the_post_takes() {
        let row = BinRow {
            code: "A-01-02-3".into(),
            zone: "A".into(),
            aisle: 1,
            bay: 2,
            level: 3,
            side: "R".into(),
            walk_seq: 7,
        };
        let sent: BinRecord = serde_json::from_value(serde_json::to_value(&row).unwrap()).unwrap();
        let b = sent.validate().unwrap();
        assert_eq!(
            (b.code.as_str(), b.side.as_str(), b.walk_seq),
            ("A-01-02-3", "R", 7)
        );
    }

    #[test]
    fn an_item_read_back_with_packs_and_class_is_an_item_row_the_post_takes() {
        // 4006381333931: a valid EAN-13 (GS1 General Specifications, mod-10 check digit 1).
        let row = ItemRow {
            sku: "HB-1".into(),
            description: "Hex bolt".into(),
            base_unit: "each".into(),
            unit_cost_minor: 12,
            lot_tracked: true,
            group: "fasteners".into(),
            packs: vec![PackRow {
                gtin: "04006381333931".into(),
                level: "case".into(),
                units: 6,
            }],
            class: Some("A".into()),
        };
        let sent: ItemRecord = serde_json::from_value(serde_json::to_value(&row).unwrap()).unwrap();
        let item = sent.validate().unwrap();
        assert_eq!(item.sku.as_str(), "HB-1");
        assert!(item.lot_tracked);
        assert_eq!(item.group, "fasteners");
        assert_eq!(item.packs.len(), 1);
        assert_eq!(
            (item.packs[0].gtin.as_str(), item.packs[0].units),
            ("04006381333931", 6)
        );
    }
}
