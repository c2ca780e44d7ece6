//! AIM symbology identifiers (`]C1`, `]E0`, `]d2`…): the three-character prefix some
//! scanners send before the data, saying which barcode was read and how to read its data.

use serde::Serialize;

use crate::error::{Field, Problem, ScanError};

/// What the prefix tells about the data that follows.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Content {
    /// GS1 element string (FNC1 in first position): `]C1`, `]d2`, `]Q3`, `]e0`, `]J1`.
    Gs1,
    /// EAN/UPC digits (`]E0`): EAN-13 or UPC-A, or UPC-E sent as 8 digits.
    EanUpc,
    /// EAN-8 digits (`]E4`).
    Ean8,
    /// ITF with its check digit validated by the scanner (`]I1`), as used for ITF-14.
    Itf,
    /// Anything else: plain text, a URI or a Cairn bin label.
    Text,
}

/// A parsed AIM symbology identifier.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Symbology {
    /// The three characters as sent, e.g. `]C1`.
    pub code: String,
    /// A human name, e.g. "GS1-128".
    pub name: &'static str,
    pub content: Content,
}

/// Splits an AIM prefix off `raw`. Returns `None` when `raw` does not start with `]`.
pub fn split(raw: &str) -> Option<Result<(Symbology, &str), ScanError>> {
    let rest = raw.strip_prefix(']')?;
    let mut chars = rest.chars();
    let (Some(code), Some(modifier)) = (chars.next(), chars.next()) else {
        return Some(Err(ScanError::new(
            Field::Symbology,
            0,
            Problem::Malformed("a symbology identifier is ']' and two characters"),
        )));
    };
    if !code.is_ascii_alphabetic() || !modifier.is_ascii_alphanumeric() {
        return Some(Err(ScanError::new(
            Field::Symbology,
            1,
            Problem::Malformed("a symbology identifier is ']' and two characters"),
        )));
    }
    let (name, content) = describe(code, modifier);
    let sym = Symbology {
        code: format!("]{code}{modifier}"),
        name,
        content,
    };
    Some(Ok((sym, &raw[3..])))
}

fn describe(code: char, modifier: char) -> (&'static str, Content) {
    // ISO/IEC 15424 and the AIM symbology identifier list (from memory).
    match (code, modifier) {
        ('C', '1') => ("GS1-128", Content::Gs1),
        ('C', _) => ("Code 128", Content::Text),
        ('E', '4') => ("EAN-8", Content::Ean8),
        ('E', '0') => ("EAN-13/UPC", Content::EanUpc),
        ('E', _) => ("EAN/UPC with add-on", Content::Text),
        ('I', '1') => ("ITF (check digit)", Content::Itf),
        ('I', _) => ("ITF", Content::Text),
        ('e', _) => ("GS1 DataBar", Content::Gs1),
        ('d', '2') => ("GS1 DataMatrix", Content::Gs1),
        ('d', _) => ("Data Matrix", Content::Text),
        ('Q', '3') => ("GS1 QR Code", Content::Gs1),
        ('Q', _) => ("QR Code", Content::Text),
        ('J', '1') => ("GS1 DotCode", Content::Gs1),
        ('A', _) => ("Code 39", Content::Text),
        ('L', _) => ("PDF417", Content::Text),
        ('z', _) => ("Aztec", Content::Text),
        _ => ("other", Content::Text),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gs1_prefixes_are_recognised() {
        for code in ["]C1", "]d2", "]Q3", "]e0"] {
            let raw = format!("{code}01");
            let (sym, rest) = split(&raw).unwrap().unwrap();
            assert_eq!(sym.content, Content::Gs1, "{code}");
            assert_eq!(rest, "01");
        }
        let (sym, _) = split("]C0ABC").unwrap().unwrap();
        assert_eq!(sym.content, Content::Text);
        assert_eq!(split("]E4").unwrap().unwrap().0.content, Content::Ean8);
    }

    #[test]
    fn a_truncated_prefix_is_an_error_and_plain_text_has_none() {
        assert!(split("]C").unwrap().is_err());
        assert!(split("]é1").unwrap().is_err());
        assert!(split("ABC").is_none());
    }
}
