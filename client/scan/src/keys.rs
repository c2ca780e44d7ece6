//! GS1 identification keys: GTIN (8/12/13/14 digits, kept as GTIN-14), UPC-E and SSCC.

use std::fmt;

use serde::{Serialize, Serializer};

use crate::check::gtin_check_digit;
use crate::error::{Field, Problem, ScanError};

/// A validated GTIN, normalised to 14 digits with leading zeros.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct Gtin(String);

impl Gtin {
    /// Parses a GTIN-8, -12, -13 or -14 and checks its check digit.
    pub fn parse(digits: &str) -> Result<Self, ScanError> {
        let n = digits.len();
        let field = Field::Gtin(u8::try_from(n).unwrap_or(u8::MAX));
        if !matches!(n, 8 | 12 | 13 | 14) {
            return Err(ScanError::new(
                field,
                0,
                Problem::Length {
                    expected: "8, 12, 13 or 14".to_owned(),
                    found: digits.chars().count(),
                },
            ));
        }
        check_key(digits, field)?;
        Ok(Gtin(format!("{digits:0>14}")))
    }

    /// Expands an 8-digit UPC-E (number system 0 or 1, six digits, check digit) to its GTIN.
    pub fn from_upc_e(digits: &str) -> Result<Self, ScanError> {
        let upc_a = expand_upc_e(digits)?;
        check_key(&upc_a, Field::UpcE).map_err(|mut e| {
            e.position = 7; // the UPC-E check digit is its eighth digit
            e
        })?;
        Ok(Gtin(format!("{upc_a:0>14}")))
    }

    /// Returns the 14 digits.
    pub fn as_str(&self) -> &str {
        &self.0
    }

    /// Returns the shortest standard form: GTIN-8, -12 or -13 when the leading digits are
    /// zeros, else the GTIN-14.
    pub fn shortest(&self) -> &str {
        let s = self.0.as_str();
        s.strip_prefix("000000")
            .or_else(|| s.strip_prefix("00"))
            .or_else(|| s.strip_prefix('0'))
            .unwrap_or(s)
    }
}

impl fmt::Display for Gtin {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl Serialize for Gtin {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(&self.0)
    }
}

/// A validated 18-digit Serial Shipping Container Code.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct Sscc(String);

impl Sscc {
    /// Parses 18 digits and checks the check digit.
    pub fn parse(digits: &str) -> Result<Self, ScanError> {
        if digits.len() != 18 {
            return Err(ScanError::new(
                Field::Sscc,
                0,
                Problem::Length {
                    expected: "18".to_owned(),
                    found: digits.chars().count(),
                },
            ));
        }
        check_key(digits, Field::Sscc)?;
        Ok(Sscc(digits.to_owned()))
    }

    /// Returns the 18 digits.
    pub fn as_str(&self) -> &str {
        &self.0
    }
}

impl fmt::Display for Sscc {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl Serialize for Sscc {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(&self.0)
    }
}

/// Checks that `digits` is all digits and ends in its GS1 modulo-10 check digit.
fn check_key(digits: &str, field: Field) -> Result<(), ScanError> {
    if let Some((i, c)) = digits.char_indices().find(|(_, c)| !c.is_ascii_digit()) {
        return Err(ScanError::new(
            field,
            i,
            Problem::Character {
                found: c,
                expected: "a digit",
            },
        ));
    }
    let (body, last) = digits.split_at(digits.len() - 1);
    let expected = gtin_check_digit(body).expect("all digits and at least 8 of them");
    let found = last.as_bytes()[0] - b'0';
    if expected != found {
        return Err(ScanError::new(
            field,
            digits.len() - 1,
            Problem::CheckDigit {
                expected: char::from(b'0' + expected),
                found: char::from(b'0' + found),
            },
        ));
    }
    Ok(())
}

/// Expands UPC-E `NS d1..d6 C` to the 12-digit UPC-A `NS … C` (zero suppression rules,
/// GS1 General Specifications §5.2.2.4.2, from memory). The check digit is kept as is.
pub fn expand_upc_e(digits: &str) -> Result<String, ScanError> {
    let b = digits.as_bytes();
    if b.len() != 8 {
        return Err(ScanError::new(
            Field::UpcE,
            0,
            Problem::Length {
                expected: "8".to_owned(),
                found: digits.chars().count(),
            },
        ));
    }
    if let Some(i) = b.iter().position(|c| !c.is_ascii_digit()) {
        return Err(ScanError::new(
            Field::UpcE,
            i,
            Problem::Character {
                found: digits[i..].chars().next().unwrap_or('?'),
                expected: "a digit",
            },
        ));
    }
    if !matches!(b[0], b'0' | b'1') {
        return Err(ScanError::new(
            Field::UpcE,
            0,
            Problem::Malformed("UPC-E number system must be 0 or 1"),
        ));
    }
    let d = &digits[1..7];
    let (ns, check) = (&digits[..1], &digits[7..]);
    let middle = match b[6] {
        b'0'..=b'2' => format!("{}{}0000{}", &d[..2], &d[5..], &d[2..5]),
        b'3' => format!("{}00000{}", &d[..3], &d[3..5]),
        b'4' => format!("{}00000{}", &d[..4], &d[4..5]),
        _ => format!("{}0000{}", &d[..5], &d[5..]),
    };
    Ok(format!("{ns}{middle}{check}"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn short_gtins_are_padded_to_fourteen_digits() {
        // GS1 General Specifications example GTIN-13 (from memory), check digit
        // confirmed with python-stdnum (tests/reference.rs covers more).
        assert_eq!(
            Gtin::parse("5012345678900").unwrap().as_str(),
            "05012345678900"
        );
        assert_eq!(
            Gtin::parse("5012345678900").unwrap().shortest(),
            "5012345678900"
        );
        assert_eq!(Gtin::parse("96385074").unwrap().as_str(), "00000096385074");
    }

    #[test]
    fn upc_e_expands_by_its_last_digit() {
        // Zero-suppression cases; expansions from memory, check digits from python-stdnum
        // (ean.calc_check_digit of the UPC-A body).
        assert_eq!(expand_upc_e("01234565").unwrap(), "012345000065");
        assert_eq!(expand_upc_e("01234505").unwrap(), "012000003455");
        assert_eq!(expand_upc_e("01234531").unwrap(), "012300000451");
        assert_eq!(expand_upc_e("01234543").unwrap(), "012340000053");
        assert_eq!(
            Gtin::from_upc_e("01234565").unwrap().as_str(),
            "00012345000065"
        );
        let err = Gtin::from_upc_e("01234566").unwrap_err();
        assert_eq!(err.to_string(), "UPC-E: check digit should be 5, found 6");
        assert!(Gtin::from_upc_e("21234565").is_err());
    }

    #[test]
    fn bad_keys_are_refused_with_the_expected_digit() {
        let err = Gtin::parse("5012345678904").unwrap_err();
        assert_eq!(err.to_string(), "GTIN-13: check digit should be 0, found 4");
        assert_eq!(err.position, 12);
        assert!(Gtin::parse("50123456789").is_err());
        assert!(Gtin::parse("50123456789x0").is_err());
        assert!(Sscc::parse("106141411234567897").is_ok());
        assert_eq!(
            Sscc::parse("106141411234567891").unwrap_err().to_string(),
            "SSCC: check digit should be 7, found 1"
        );
    }
}
