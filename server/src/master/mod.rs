//! Master data: sites, zones, bins, items, packs and lots. Rows arrive from CSV
//! files or the JSON API as `*Record`s and are validated into `New*` values
//! before any SQL runs.

pub mod codes;
pub mod read;
pub mod routes;

use crate::batch::{FieldError, RowError};
use crate::input::bounds;
use crate::input::text::{self, Kind};
use codes::{BinCode, Sku, ZoneCode};
use serde::{Deserialize, Deserializer, Serialize};

pub use codes::{LotCode, MovementUid, SiteCode};

/// The store's id of a site.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
pub struct SiteId(pub i64);

/// One warehouse.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct Site {
    #[serde(skip)]
    pub id: SiteId,
    pub code: SiteCode,
    pub name: String,
    /// The zone whose local days are the site's days (`time::day`).
    pub time_zone: crate::time::day::SiteZone,
}

/// A site to create.
#[derive(Debug, Clone)]
pub struct NewSite {
    pub code: SiteCode,
    pub name: String,
    /// Its IANA zone, read with `SiteZone::parse`: a site cannot be made with a zone the
    /// tz database does not know.
    pub time_zone: crate::time::day::SiteZone,
}

/// How many rows of each kind of master data a site holds.
#[derive(Debug, Clone, Default, Serialize, utoipa::ToSchema)]
pub struct SiteCounts {
    pub zones: u64,
    pub bins: u64,
    pub items: u64,
    pub packs: u64,
    pub movements: u64,
    pub watermark: i64,
}

/// Which side of the aisle a bin faces.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Side {
    Left,
    Right,
    Unknown,
}

impl Side {
    /// Returns the stored form: `L`, `R` or empty.
    pub fn as_str(self) -> &'static str {
        match self {
            Side::Left => "L",
            Side::Right => "R",
            Side::Unknown => "",
        }
    }

    /// Reads the stored form back.
    pub fn from_stored(text: &str) -> Self {
        match text {
            "L" => Side::Left,
            "R" => Side::Right,
            _ => Side::Unknown,
        }
    }
}

/// A pack level: how goods are handled and labelled.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum PackLevel {
    Each,
    Inner,
    Case,
    Pallet,
}

impl PackLevel {
    /// Returns the stored form.
    pub fn as_str(self) -> &'static str {
        match self {
            PackLevel::Each => "each",
            PackLevel::Inner => "inner",
            PackLevel::Case => "case",
            PackLevel::Pallet => "pallet",
        }
    }

    fn parse(text: &str) -> Option<Self> {
        match text.trim().to_ascii_lowercase().as_str() {
            "each" => Some(PackLevel::Each),
            "inner" => Some(PackLevel::Inner),
            "case" => Some(PackLevel::Case),
            "pallet" => Some(PackLevel::Pallet),
            _ => None,
        }
    }
}

/// A stored bin, with the code of its zone.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Bin {
    pub code: BinCode,
    pub zone: ZoneCode,
    pub aisle: u16,
    pub bay: u16,
    pub level: u8,
    pub side: Side,
    pub walk_seq: i64,
}

impl Bin {
    /// Builds the scannable label of this bin in `site`.
    pub fn label(&self, site: &SiteCode) -> Result<cairn_scan::BinLabel, cairn_scan::ScanError> {
        place_label(
            site.as_str(),
            self.zone.as_str(),
            self.aisle,
            self.bay,
            self.level,
        )
    }
}

/// Builds the scannable label of a place: aisle and bay as two digits at least.
pub fn place_label(
    site: &str,
    zone: &str,
    aisle: u16,
    bay: u16,
    level: u8,
) -> Result<cairn_scan::BinLabel, cairn_scan::ScanError> {
    cairn_scan::BinLabel::encode(
        site,
        zone,
        &format!("{aisle:02}"),
        &format!("{bay:02}"),
        &level.to_string(),
    )
}

/// A bin row as sent (CSV columns or JSON fields).
#[derive(Debug, Clone, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct BinRecord {
    #[serde(default)]
    pub code: Option<String>,
    pub zone: String,
    pub aisle: u16,
    pub bay: u16,
    pub level: u8,
    #[serde(default)]
    pub side: Option<String>,
    #[serde(default)]
    pub walk_seq: Option<i64>,
}

/// A validated bin to create or update: the same fields as a stored [`Bin`].
pub type NewBin = Bin;

/// Most aisles, bays and levels a bin code can name.
const MAX_AISLE: u16 = 999;
const MAX_BAY: u16 = 999;
const MAX_LEVEL: u8 = 99;

impl BinRecord {
    /// Validates the row; the code defaults to the canonical one built from the place.
    pub fn validate(self) -> Result<NewBin, Vec<FieldError>> {
        let mut errs = Vec::new();
        let zone = ZoneCode::parse(&self.zone)
            .map_err(|e| errs.push(FieldError::new("zone", e.to_string())));
        if self.aisle > MAX_AISLE {
            errs.push(FieldError::new(
                "aisle",
                format!("aisle must be 0..={MAX_AISLE}"),
            ));
        }
        if self.bay > MAX_BAY {
            errs.push(FieldError::new("bay", format!("bay must be 0..={MAX_BAY}")));
        }
        if self.level > MAX_LEVEL {
            errs.push(FieldError::new(
                "level",
                format!("level must be 0..={MAX_LEVEL}"),
            ));
        }
        let side = match self.side.as_deref().map(str::trim).unwrap_or("") {
            "L" | "l" => Side::Left,
            "R" | "r" => Side::Right,
            "" => Side::Unknown,
            other => {
                errs.push(FieldError::new(
                    "side",
                    format!("side must be L, R or empty, found '{other}'"),
                ));
                Side::Unknown
            }
        };
        let code = match (self.code.as_deref().map(str::trim), &zone) {
            (Some(c), _) if !c.is_empty() => BinCode::parse(c)
                .map_err(|e| errs.push(FieldError::new("code", e.to_string())))
                .ok(),
            (_, Ok(z)) => Some(BinCode::from_place(z, self.aisle, self.bay, self.level)),
            (_, Err(())) => None,
        };
        match (code, zone) {
            (Some(code), Ok(zone)) if errs.is_empty() => Ok(NewBin {
                code,
                zone,
                aisle: self.aisle,
                bay: self.bay,
                level: self.level,
                side,
                walk_seq: self.walk_seq.unwrap_or(0),
            }),
            _ => Err(errs),
        }
    }
}

/// An item row as sent.
#[derive(Debug, Clone, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ItemRecord {
    pub sku: String,
    pub description: String,
    pub base_unit: String,
    pub unit_cost_minor: i64,
    #[serde(default, deserialize_with = "flag")]
    pub lot_tracked: bool,
    #[serde(default)]
    pub group: Option<String>,
    /// The item's packs, created or updated with it (JSON only; a pack not named is kept).
    #[serde(default)]
    pub packs: Option<Vec<ItemPackRecord>>,
    /// Read-only: the item's ABC class, which the server keeps. Taken and ignored, so a
    /// row read back (`read::ItemRow`) can be sent again as it is.
    #[serde(default)]
    #[schema(value_type = Option<String>)]
    pub class: Option<serde::de::IgnoredAny>,
}

/// One pack inside an item row: a pack row without the SKU, which is the item's.
#[derive(Debug, Clone, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ItemPackRecord {
    pub gtin: String,
    pub level: String,
    pub units: i64,
}

/// A validated item, with the packs its row named.
#[derive(Debug, Clone, PartialEq)]
pub struct NewItem {
    pub sku: Sku,
    pub description: String,
    pub base_unit: String,
    pub unit_cost_minor: i64,
    pub lot_tracked: bool,
    pub group: String,
    /// Packs of this item to create or update (each with this item's SKU).
    pub packs: Vec<NewPack>,
}

impl ItemRecord {
    /// Validates the row.
    pub fn validate(self) -> Result<NewItem, Vec<FieldError>> {
        let mut errs = Vec::new();
        let sku =
            Sku::parse(&self.sku).map_err(|e| errs.push(FieldError::new("sku", e.to_string())));
        let mut text =
            |field: &'static str, kind: Kind, raw: &str, required: bool| match text::check(
                kind, raw,
            ) {
                Ok(t) if t.is_empty() && required => {
                    errs.push(FieldError::new(field, format!("{field} must not be empty")));
                    t
                }
                Ok(t) => t,
                Err(e) => {
                    errs.push(FieldError::new(field, format!("{field}: {e}")));
                    String::new()
                }
            };
        let description = text("description", Kind::Description, &self.description, true);
        let base_unit = text("base_unit", Kind::Unit, &self.base_unit, true);
        let group = text(
            "group",
            Kind::Name,
            self.group.as_deref().unwrap_or(""),
            false,
        );
        if let Err(e) = bounds::check_at_most(
            "unit cost",
            self.unit_cost_minor,
            bounds::MAX_UNIT_COST_MINOR,
            "minor units",
        ) {
            errs.push(FieldError::new("unit_cost_minor", e));
        }
        let packs = match &sku {
            Ok(sku) => item_packs(sku, self.packs.unwrap_or_default(), &mut errs),
            Err(()) => Vec::new(),
        };
        match sku {
            Ok(sku) if errs.is_empty() => Ok(NewItem {
                sku,
                description,
                base_unit,
                unit_cost_minor: self.unit_cost_minor,
                lot_tracked: self.lot_tracked,
                group,
                packs,
            }),
            _ => Err(errs),
        }
    }
}

/// Most packs one item row may name (each, inner, case, pallet, and room for variants).
pub const MAX_ITEM_PACKS: usize = 32;

/// Validates the packs of an item row by the pack rule, each error at `packs[j].field`;
/// a GTIN named twice in the row is refused.
fn item_packs(sku: &Sku, packs: Vec<ItemPackRecord>, errs: &mut Vec<FieldError>) -> Vec<NewPack> {
    if packs.len() > MAX_ITEM_PACKS {
        errs.push(FieldError::new(
            "packs",
            format!(
                "an item names at most {MAX_ITEM_PACKS} packs, found {}",
                packs.len()
            ),
        ));
        return Vec::new();
    }
    let mut out: Vec<NewPack> = Vec::with_capacity(packs.len());
    for (j, p) in packs.into_iter().enumerate() {
        let row = PackRecord {
            sku: sku.as_str().to_string(),
            gtin: p.gtin,
            level: p.level,
            units: p.units,
        };
        match row.validate() {
            Ok(pack) => {
                if let Some(k) = out.iter().position(|q| q.gtin == pack.gtin) {
                    errs.push(FieldError::new(
                        format!("packs[{j}].gtin"),
                        format!(
                            "GTIN {} is named twice in this item (first at packs[{k}])",
                            pack.gtin
                        ),
                    ));
                }
                out.push(pack);
            }
            Err(es) => errs.extend(
                es.into_iter()
                    .map(|e| FieldError::new(format!("packs[{j}].{}", e.field), e.message)),
            ),
        }
    }
    out
}

/// Finds the packs of a batch of items whose GTIN an earlier item of the batch already
/// names: a GTIN belongs to one item. Each error is at the later row, `packs[j].gtin`.
pub fn repeated_pack_gtins(rows: &[NewItem]) -> Vec<RowError> {
    let mut first: std::collections::HashMap<&str, usize> = Default::default();
    let mut errors = Vec::new();
    for (i, item) in rows.iter().enumerate() {
        for (j, p) in item.packs.iter().enumerate() {
            match first.get(p.gtin.as_str()) {
                Some(&k) if k != i => errors.push(RowError::new(
                    i,
                    format!("packs[{j}].gtin"),
                    format!("GTIN {} is also named by row {k} of this batch", p.gtin),
                )),
                Some(_) => {}
                None => {
                    first.insert(p.gtin.as_str(), i);
                }
            }
        }
    }
    errors
}

/// A pack row as sent.
#[derive(Debug, Clone, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct PackRecord {
    pub sku: String,
    pub gtin: String,
    pub level: String,
    pub units: i64,
}

/// A validated pack; `gtin` is normalised to 14 digits.
#[derive(Debug, Clone, PartialEq)]
pub struct NewPack {
    pub sku: Sku,
    pub gtin: String,
    pub level: PackLevel,
    pub units: u32,
}

impl PackRecord {
    /// Validates the row.
    pub fn validate(self) -> Result<NewPack, Vec<FieldError>> {
        let mut errs = Vec::new();
        let sku =
            Sku::parse(&self.sku).map_err(|e| errs.push(FieldError::new("sku", e.to_string())));
        let gtin = gtin14(&self.gtin).map_err(|e| errs.push(FieldError::new("gtin", e)));
        let level = PackLevel::parse(&self.level);
        if level.is_none() {
            errs.push(FieldError::new(
                "level",
                format!(
                    "level must be each, inner, case or pallet, found '{}'",
                    self.level
                ),
            ));
        }
        let units = u32::try_from(self.units).ok().filter(|u| *u >= 1);
        if units.is_none() {
            errs.push(FieldError::new(
                "units",
                format!(
                    "units per pack must be a whole number of at least 1, found {}",
                    self.units
                ),
            ));
        }
        if level == Some(PackLevel::Each) && units.is_some_and(|u| u != 1) {
            errs.push(FieldError::new(
                "units",
                "an 'each' pack holds exactly 1 base unit",
            ));
        }
        match (sku, gtin, level, units) {
            (Ok(sku), Ok(gtin), Some(level), Some(units)) if errs.is_empty() => Ok(NewPack {
                sku,
                gtin,
                level,
                units,
            }),
            _ => Err(errs),
        }
    }
}

/// Validates a GTIN-8/12/13/14 and normalises it to 14 digits.
fn gtin14(text: &str) -> Result<String, String> {
    cairn_scan::Gtin::parse(text.trim())
        .map(|g| g.as_str().to_string())
        .map_err(|e| e.to_string())
}

/// Accepts a yes/no flag as a JSON boolean or as the CSV words true/false, yes/no, 1/0, y/n or empty.
fn flag<'de, D: Deserializer<'de>>(d: D) -> Result<bool, D::Error> {
    #[derive(Deserialize)]
    #[serde(untagged)]
    enum Raw {
        Bool(bool),
        Text(String),
    }
    match Raw::deserialize(d)? {
        Raw::Bool(b) => Ok(b),
        Raw::Text(t) => match t.trim().to_ascii_lowercase().as_str() {
            "true" | "yes" | "y" | "1" => Ok(true),
            "false" | "no" | "n" | "0" | "" => Ok(false),
            other => Err(serde::de::Error::custom(format!(
                "expected yes or no, found '{other}'"
            ))),
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pack(gtin: &str, level: &str, units: i64) -> PackRecord {
        PackRecord {
            sku: "X1".into(),
            gtin: gtin.into(),
            level: level.into(),
            units,
        }
    }

    #[test]
    fn a_pack_with_negative_units_is_refused() {
        // 4006381333931 is a valid EAN-13 (check digit 1; GS1 General Specifications mod-10 rule).
        let errs = pack("4006381333931", "case", -6).validate().unwrap_err();
        assert_eq!(errs[0].field, "units");
        assert!(errs[0].message.contains("found -6"));
    }

    #[test]
    fn a_pack_gtin_with_a_wrong_check_digit_is_refused() {
        let errs = pack("4006381333932", "case", 6).validate().unwrap_err();
        assert_eq!(errs[0].field, "gtin");
    }

    #[test]
    fn a_pack_gtin_is_normalised_to_14_digits() {
        let p = pack("4006381333931", "case", 6).validate().unwrap();
        assert_eq!(p.gtin, "04006381333931");
    }

    #[test]
    fn a_bin_without_a_code_gets_the_canonical_one() {
        let b = BinRecord {
            code: None,
            zone: "C".into(),
            aisle: 4,
            bay: 7,
            level: 3,
            side: Some("r".into()),
            walk_seq: None,
        };
        let b = b.validate().unwrap();
        assert_eq!(b.code.as_str(), "C-04-07-3");
        assert_eq!(b.side, Side::Right);
    }

    fn item(sku: &str, packs: Vec<(&str, &str, i64)>) -> ItemRecord {
        ItemRecord {
            sku: sku.into(),
            description: "Hex bolt".into(),
            base_unit: "each".into(),
            unit_cost_minor: 5,
            lot_tracked: false,
            group: None,
            packs: Some(
                packs
                    .into_iter()
                    .map(|(gtin, level, units)| ItemPackRecord {
                        gtin: gtin.into(),
                        level: level.into(),
                        units,
                    })
                    .collect(),
            ),
            class: None,
        }
    }

    #[test]
    fn an_items_packs_are_checked_by_the_pack_rule_each_error_at_its_path() {
        // 4006381333931: a valid EAN-13 (GS1 General Specifications mod-10 rule, check 1).
        let ok = item("A1", vec![("4006381333931", "CASE", 6)])
            .validate()
            .unwrap();
        assert_eq!(ok.packs.len(), 1);
        assert_eq!(
            (ok.packs[0].sku.as_str(), ok.packs[0].gtin.as_str()),
            ("A1", "04006381333931")
        );
        assert_eq!(ok.packs[0].level, PackLevel::Case);
        let errs = item(
            "A1",
            vec![
                ("4006381333931", "each", 1),
                ("4006381333932", "case", 6),
                ("04006381333931", "case", 0),
            ],
        )
        .validate()
        .unwrap_err();
        let fields: Vec<&str> = errs.iter().map(|e| e.field.as_str()).collect();
        assert_eq!(fields, ["packs[1].gtin", "packs[2].units"]);
        let twice = item(
            "A1",
            vec![("4006381333931", "each", 1), ("04006381333931", "case", 6)],
        )
        .validate()
        .unwrap_err();
        assert_eq!(twice[0].field, "packs[1].gtin");
    }

    #[test]
    fn a_gtin_named_by_two_items_of_a_batch_is_refused_at_the_later_one() {
        let rows: Vec<NewItem> = [
            item("A1", vec![("4006381333931", "each", 1)]),
            item("A2", vec![]),
            item("A3", vec![("4006381333931", "each", 1)]),
        ]
        .into_iter()
        .map(|r| r.validate().unwrap())
        .collect();
        let errs = repeated_pack_gtins(&rows);
        assert_eq!(errs.len(), 1);
        assert_eq!((errs[0].row, errs[0].field.as_str()), (2, "packs[0].gtin"));
    }

    #[test]
    fn an_item_with_a_negative_cost_names_the_field() {
        let r = ItemRecord {
            sku: "A1".into(),
            description: "Hex bolt".into(),
            base_unit: "each".into(),
            unit_cost_minor: -5,
            lot_tracked: false,
            group: None,
            packs: None,
            class: None,
        };
        let errs = r.validate().unwrap_err();
        assert_eq!(errs[0].field, "unit_cost_minor");
    }
}
