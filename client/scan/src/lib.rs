//! Barcode and GS1 rules: what a scan means and whether it is valid.
//!
//! Pure Rust with no I/O, so the same rules run in the server and, compiled to
//! WebAssembly, in the phone app.
//!
//! # API
//!
//! - [`parse`]`(raw, current_year) -> Result<Scanned, ScanError>` reads whatever a scanner
//!   sent: an optional AIM symbology identifier (`]C1`…), then a GS1 element string (FNC1
//!   as GS), the bracketed form `(01)…`, a GS1 Digital Link URI, a plain GTIN-8/12/13/14,
//!   UPC-E or SSCC, a Cairn bin label, or anything else as [`Scan::Unknown`].
//!   `current_year` drives the GS1 century rule for YYMMDD dates; the crate reads no clock.
//! - [`Gtin::parse`], [`Gtin::from_upc_e`], [`Sscc::parse`], [`gtin_check_digit`].
//! - [`BinLabel::encode`] builds a label (text with its ISO/IEC 7064 MOD 37-2 check
//!   character) from site, zone, aisle, bay and level; [`BinLabel::parse`] reads one back.
//! - [`code128::encode`] gives Code 128 modules for a text; [`label_sheet_svg`] renders an
//!   A4 sheet of bin labels.
//! - [`element::to_raw`] / [`element::to_bracketed`] build element strings.
//! - With feature `camera`: `camera::decode_frame(rgba, width, height)`.
//!
//! Everything serialises with serde; [`ScanError`] displays as one precise line such as
//! `AI (01): check digit should be 8, found 4`, and carries the byte position.

pub mod ai;
pub mod bin_label;
#[cfg(feature = "camera")]
pub mod camera;
pub mod check;
pub mod code128;
pub mod date;
pub mod digital_link;
pub mod element;
pub mod error;
pub mod keys;
pub mod label_sheet;
pub mod scan;
pub mod symbology;
pub mod wire;

pub use bin_label::BinLabel;
pub use check::{gtin_check_digit, mod37_2_check};
pub use date::Date;
pub use element::Element;
pub use error::{Field, Problem, ScanError};
pub use keys::{Gtin, Sscc};
pub use label_sheet::label_sheet_svg;
pub use scan::{Decimal, Details, Scan, Scanned, Syntax};
pub use symbology::{Content, Symbology};

/// Longest scan read, in bytes; scanners send far less, so more is refused, not parsed.
pub const MAX_SCAN_BYTES: usize = 4096;

/// Reads what a scanner sent and says what it is.
///
/// Trailing CR/LF (the Enter a keyboard-wedge scanner types) is ignored. Error positions are
/// byte offsets into `raw`.
pub fn parse(raw: &str, current_year: u16) -> Result<Scanned, ScanError> {
    let text = raw.trim_end_matches(['\r', '\n']);
    if text.len() > MAX_SCAN_BYTES {
        return Err(ScanError::new(
            Field::Input,
            MAX_SCAN_BYTES,
            Problem::TooLong {
                max: MAX_SCAN_BYTES,
            },
        ));
    }
    if text.trim().is_empty() {
        return Err(ScanError::new(Field::Input, 0, Problem::Empty));
    }
    let (symbology, data, base) = match symbology::split(text) {
        Some(split) => {
            let (sym, rest) = split?;
            (Some(sym), rest, 3)
        }
        None => (None, text, 0),
    };
    if data.is_empty() {
        return Err(ScanError::new(Field::Input, base, Problem::Empty));
    }
    let content = symbology.as_ref().map(|s| s.content);
    let (syntax, elements, scan) = read(data, base, content, current_year)?;
    Ok(Scanned {
        symbology,
        syntax,
        elements,
        scan,
    })
}

fn read(
    data: &str,
    base: usize,
    content: Option<Content>,
    year: u16,
) -> Result<(Syntax, Vec<Element>, Scan), ScanError> {
    let all_digits = data.bytes().all(|b| b.is_ascii_digit());
    let gs1 = |syntax, elements: Vec<Element>| {
        let scan = scan::interpret(&elements, year);
        Ok((syntax, elements, scan))
    };
    match content {
        Some(Content::Gs1) => {
            return gs1(Syntax::ElementString, element::parse_raw(data, base, year)?);
        }
        Some(Content::EanUpc | Content::Ean8 | Content::Itf) => {
            return plain_key(data, base, content, year);
        }
        Some(Content::Text) | None => {}
    }
    if data.starts_with('(') {
        return gs1(
            Syntax::Bracketed,
            element::parse_bracketed(data, base, year)?,
        );
    }
    if digital_link::looks_like_uri(data) {
        return match digital_link::parse(data, base, year)? {
            Some(elements) => gs1(Syntax::DigitalLink, elements),
            None => Ok((Syntax::Text, Vec::new(), unknown(data))),
        };
    }
    if data
        .get(..bin_label::PREFIX.len())
        .is_some_and(|p| p.eq_ignore_ascii_case(bin_label::PREFIX))
    {
        let bin = BinLabel::parse(data).map_err(|e| e.shifted(base))?;
        return Ok((Syntax::BinLabel, Vec::new(), Scan::Bin { bin }));
    }
    if all_digits && matches!(data.len(), 8 | 12 | 13 | 14 | 18) {
        return plain_key(data, base, content, year);
    }
    // Without a symbology identifier a wedge scanner still sends GS1-128 data as digits and
    // GS characters; only text that is clearly GS1 (a GS, or a leading key AI) is read so.
    let starts_with_key = data.len() >= 16 && (data.starts_with("00") || data.starts_with("01"));
    if data.contains(element::GS)
        || (starts_with_key && data.as_bytes()[..16].iter().all(u8::is_ascii_digit))
    {
        return gs1(Syntax::ElementString, element::parse_raw(data, base, year)?);
    }
    Ok((Syntax::Text, Vec::new(), unknown(data)))
}

fn unknown(data: &str) -> Scan {
    Scan::Unknown {
        text: data.to_owned(),
    }
}

/// Reads digits that are a GTIN, UPC-E or SSCC on their own.
fn plain_key(
    data: &str,
    base: usize,
    content: Option<Content>,
    year: u16,
) -> Result<(Syntax, Vec<Element>, Scan), ScanError> {
    let item = |syntax, gtin: Gtin| {
        let elements = vec![Element::new("01", gtin.as_str())];
        let scan = scan::interpret(&elements, year);
        Ok((syntax, elements, scan))
    };
    let upc_e = |d: &str| Gtin::from_upc_e(d).map_err(|e| e.shifted(base));
    let gtin = |d: &str| Gtin::parse(d).map_err(|e| e.shifted(base));
    match data.len() {
        // `]E0` with 8 digits is UPC-E, `]E4` is EAN-8; without an identifier a valid
        // EAN-8 wins and UPC-E is tried second.
        8 if content == Some(Content::EanUpc) => item(Syntax::UpcE, upc_e(data)?),
        8 if content != Some(Content::Ean8) => match (gtin(data), upc_e(data)) {
            (Ok(g), _) => item(Syntax::Gtin, g),
            (Err(_), Ok(g)) => item(Syntax::UpcE, g),
            (Err(e), Err(_)) => Err(e),
        },
        18 => {
            let sscc = Sscc::parse(data).map_err(|e| e.shifted(base))?;
            let elements = vec![Element::new("00", sscc.as_str())];
            let scan = scan::interpret(&elements, year);
            Ok((Syntax::Sscc, elements, scan))
        }
        _ => item(
            Syntax::Gtin,
            Gtin::parse(data).map_err(|e| e.shifted(base))?,
        ),
    }
}
