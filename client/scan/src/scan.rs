//! What a scan means: the typed result built from the checked elements.

use std::fmt;

use serde::{Serialize, Serializer};

use crate::bin_label::BinLabel;
use crate::date::{Date, parse_yymmdd};
use crate::element::Element;
use crate::keys::{Gtin, Sscc};
use crate::symbology::Symbology;

/// The result of [`crate::parse`]: how the text was read, its elements and their meaning.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Scanned {
    /// The AIM symbology identifier the scanner sent, if any.
    pub symbology: Option<Symbology>,
    /// Which syntax the data was read as.
    pub syntax: Syntax,
    /// GS1 elements in scan order (empty for bin labels and unknown text).
    pub elements: Vec<Element>,
    /// What was scanned.
    pub scan: Scan,
}

/// Which syntax the scanned data was read as.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Syntax {
    ElementString,
    Bracketed,
    DigitalLink,
    Gtin,
    UpcE,
    Sscc,
    BinLabel,
    Text,
}

/// What was scanned, for the app to act on.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Scan {
    /// A trade item (AI 01 or a plain GTIN), with whatever else the barcode carried.
    Item {
        gtin: Gtin,
        #[serde(flatten)]
        details: Details,
    },
    /// A logistic unit (AI 00 or a plain SSCC) and what its label says it holds.
    Pallet {
        sscc: Sscc,
        #[serde(flatten)]
        details: Details,
    },
    /// GS1 data without a key, e.g. a second barcode on a case with lot and expiry only.
    Details {
        #[serde(flatten)]
        details: Details,
    },
    /// A Cairn bin label.
    Bin { bin: BinLabel },
    /// Text that is none of the above (kept so the app can show it).
    Unknown { text: String },
}

/// Attributes that may accompany a key. Dates are ISO `YYYY-MM-DD`.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize)]
pub struct Details {
    /// AI 02: GTIN of the trade items contained in a logistic unit.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub content: Option<Gtin>,
    /// AI 10.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lot: Option<String>,
    /// AI 21.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub serial: Option<String>,
    /// AI 17.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub expiry: Option<Date>,
    /// AI 15.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub best_before: Option<Date>,
    /// AI 11.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub production_date: Option<Date>,
    /// AI 13.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub packaging_date: Option<Date>,
    /// AI 30 (variable count of items) or AI 37 (count of trade items in a logistic unit).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub count: Option<u32>,
    /// AI 310n, in kilograms.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub net_weight_kg: Option<Decimal>,
    /// AI 392n, in the local currency.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub price: Option<Decimal>,
}

/// An exact decimal read from digits and an implied decimal position; serialises as a
/// string such as `"1.500"` so no precision is lost in JSON.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct Decimal {
    /// All digits as an integer (`1500` for 1.500).
    pub units: u64,
    /// Digits after the decimal point (`3` for 1.500).
    pub scale: u8,
}

impl Decimal {
    /// Reads ASCII `digits` (at most 19) with `scale` implied decimals.
    pub fn from_digits(digits: &str, scale: u8) -> Option<Self> {
        if digits.is_empty() || digits.len() > 19 || !digits.bytes().all(|b| b.is_ascii_digit()) {
            return None;
        }
        Some(Self {
            units: digits.parse().ok()?,
            scale,
        })
    }
}

impl fmt::Display for Decimal {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let s = format!(
            "{:0>width$}",
            self.units,
            width = usize::from(self.scale) + 1
        );
        let (int, frac) = s.split_at(s.len() - usize::from(self.scale));
        if frac.is_empty() {
            f.write_str(int)
        } else {
            write!(f, "{int}.{frac}")
        }
    }
}

impl Serialize for Decimal {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(self)
    }
}

/// Builds the typed meaning from elements that have already been checked.
pub(crate) fn interpret(elements: &[Element], current_year: u16) -> Scan {
    let mut gtin = None;
    let mut sscc = None;
    let mut d = Details::default();
    let date = |v: &str| parse_yymmdd(v.as_bytes(), current_year).ok();
    for e in elements {
        let v = e.value.as_str();
        match e.ai.as_str() {
            "00" => sscc = Sscc::parse(v).ok(),
            "01" => gtin = Gtin::parse(v).ok(),
            "02" => d.content = Gtin::parse(v).ok(),
            "10" => d.lot = Some(v.to_owned()),
            "21" => d.serial = Some(v.to_owned()),
            "17" => d.expiry = date(v),
            "15" => d.best_before = date(v),
            "11" => d.production_date = date(v),
            "13" => d.packaging_date = date(v),
            "30" | "37" => d.count = v.parse().ok(),
            ai if ai.starts_with("310") => d.net_weight_kg = decimal(ai, v),
            ai if ai.starts_with("392") => d.price = decimal(ai, v),
            _ => {}
        }
    }
    match (sscc, gtin) {
        (Some(sscc), _) => Scan::Pallet { sscc, details: d },
        (None, Some(gtin)) => Scan::Item { gtin, details: d },
        (None, None) => Scan::Details { details: d },
    }
}

fn decimal(ai: &str, value: &str) -> Option<Decimal> {
    let scale = ai.as_bytes().get(3)?.checked_sub(b'0')?;
    Decimal::from_digits(value, scale)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decimals_keep_their_trailing_zeros() {
        assert_eq!(
            Decimal::from_digits("001500", 3).unwrap().to_string(),
            "1.500"
        );
        assert_eq!(
            Decimal::from_digits("000012", 5).unwrap().to_string(),
            "0.00012"
        );
        assert_eq!(
            Decimal::from_digits("000150", 0).unwrap().to_string(),
            "150"
        );
        assert_eq!(Decimal::from_digits("1", 2).unwrap().to_string(), "0.01");
        assert!(Decimal::from_digits("12a", 1).is_none());
    }
}
