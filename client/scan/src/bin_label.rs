//! Cairn bin labels: `CB1-<site>-<zone>-<aisle>-<bay>-<level>-<check>`.
//!
//! - `CB1-` marks a Cairn bin label, version 1. It starts with letters, so it can never be
//!   read as GS1 data (element strings start with digits or `(`, Digital Link with `http`).
//! - Fields are upper-case `0-9A-Z`; separators are `-`. With the `*` a check character
//!   can be, the whole label stays inside the QR alphanumeric set and Code 128 set B.
//! - The check character is ISO/IEC 7064 MOD 37-2 over the five fields run together. A
//!   pure MOD 37-2 system detects every single substitution and every transposition of
//!   two adjacent characters (modulus 37 is prime and weight 2 generates it), which is
//!   what a misread or mistyped neighbouring label looks like: bay 12 vs 13, 21 vs 12.
//!   The hybrid MOD 37,36 would keep the check inside `0-9A-Z` but misses a few adjacent
//!   transpositions involving the check character.

use serde::Serialize;

use crate::check::mod37_2_check;
use crate::error::{Field, Problem, ScanError};

/// The prefix every Cairn bin label starts with.
pub const PREFIX: &str = "CB1-";

/// Longest site, zone, aisle, bay and level codes, in characters.
pub const FIELD_MAX_LEN: [usize; 5] = [6, 3, 3, 3, 2];
const FIELD_NAMES: [&str; 5] = ["site", "zone", "aisle", "bay", "level"];

/// A bin location with its check character; build with [`BinLabel::encode`] or
/// [`BinLabel::parse`].
#[derive(Debug, Clone, PartialEq, Eq, Hash, Serialize)]
pub struct BinLabel {
    site: String,
    zone: String,
    aisle: String,
    bay: String,
    level: String,
    check: char,
    text: String,
}

impl BinLabel {
    /// Builds the label for a location and computes its check character.
    ///
    /// Parts are upper-cased; each must be 1..=`FIELD_MAX_LEN` characters of `0-9A-Z`.
    pub fn encode(
        site: &str,
        zone: &str,
        aisle: &str,
        bay: &str,
        level: &str,
    ) -> Result<Self, ScanError> {
        let parts = [site, zone, aisle, bay, level].map(str::to_ascii_uppercase);
        let mut at = PREFIX.len();
        for (i, part) in parts.iter().enumerate() {
            check_part(i, part, at)?;
            at += part.len() + 1;
        }
        let check = mod37_2_check(&parts.concat()).expect("parts are non-empty 0-9A-Z");
        let [site, zone, aisle, bay, level] = parts;
        let text = format!("{PREFIX}{site}-{zone}-{aisle}-{bay}-{level}-{check}");
        Ok(Self {
            site,
            zone,
            aisle,
            bay,
            level,
            check,
            text,
        })
    }

    /// Reads a scanned bin label and verifies its check character.
    pub fn parse(text: &str) -> Result<Self, ScanError> {
        let upper = text.to_ascii_uppercase();
        let Some(body) = upper.strip_prefix(PREFIX) else {
            return Err(ScanError::new(
                Field::BinLabel,
                0,
                Problem::Malformed("a bin label starts with CB1-"),
            ));
        };
        let parts: Vec<&str> = body.split('-').collect();
        if parts.len() != 6 {
            return Err(ScanError::new(
                Field::BinLabel,
                PREFIX.len(),
                Problem::Malformed("a bin label has site, zone, aisle, bay, level and check"),
            ));
        }
        let label = Self::encode(parts[0], parts[1], parts[2], parts[3], parts[4])?;
        let check_at = text.len() - parts[5].len();
        let mut found = parts[5].chars();
        match (found.next(), found.next()) {
            (Some(c), None) if c == label.check => Ok(label),
            (Some(c), None) => Err(ScanError::new(
                Field::BinLabel,
                check_at,
                Problem::CheckDigit {
                    expected: label.check,
                    found: c,
                },
            )),
            _ => Err(ScanError::new(
                Field::BinLabel,
                check_at,
                Problem::Length {
                    expected: "1".to_owned(),
                    found: parts[5].chars().count(),
                },
            )),
        }
    }

    /// Returns the full label text, as printed under the barcode and as scanned.
    pub fn text(&self) -> &str {
        &self.text
    }
    /// Returns the site code.
    pub fn site(&self) -> &str {
        &self.site
    }
    /// Returns the zone code.
    pub fn zone(&self) -> &str {
        &self.zone
    }
    /// Returns the aisle code.
    pub fn aisle(&self) -> &str {
        &self.aisle
    }
    /// Returns the bay code.
    pub fn bay(&self) -> &str {
        &self.bay
    }
    /// Returns the level code.
    pub fn level(&self) -> &str {
        &self.level
    }
    /// Returns the ISO/IEC 7064 MOD 37-2 check character.
    pub fn check(&self) -> char {
        self.check
    }
}

fn check_part(i: usize, part: &str, at: usize) -> Result<(), ScanError> {
    let max = FIELD_MAX_LEN[i];
    if part.is_empty() {
        return Err(ScanError::new(
            Field::BinLabel,
            at,
            Problem::Malformed(match i {
                0 => "site is empty",
                1 => "zone is empty",
                2 => "aisle is empty",
                3 => "bay is empty",
                _ => "level is empty",
            }),
        ));
    }
    if part.chars().count() > max {
        return Err(ScanError::new(
            Field::BinLabel,
            at,
            Problem::Length {
                expected: format!("{} of at most {max}", FIELD_NAMES[i]),
                found: part.chars().count(),
            },
        ));
    }
    if let Some((j, c)) = part
        .char_indices()
        .find(|(_, c)| !c.is_ascii_uppercase() && !c.is_ascii_digit())
    {
        return Err(ScanError::new(
            Field::BinLabel,
            at + j,
            Problem::Character {
                found: c,
                expected: "0-9 or A-Z",
            },
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn encode_and_parse_round_trip() {
        let label = BinLabel::encode("wh1", "A", "03", "12", "2").unwrap();
        assert!(label.text().starts_with("CB1-WH1-A-03-12-2-"));
        assert_eq!(BinLabel::parse(label.text()).unwrap(), label);
        assert_eq!(
            BinLabel::parse(&label.text().to_lowercase()).unwrap(),
            label
        );
    }

    #[test]
    fn a_neighbouring_bay_with_the_wrong_check_is_refused() {
        let here = BinLabel::encode("WH1", "A", "03", "12", "2").unwrap();
        let next = BinLabel::encode("WH1", "A", "03", "13", "2").unwrap();
        assert_ne!(here.check(), next.check());
        let forged = format!("CB1-WH1-A-03-13-2-{}", here.check());
        let err = BinLabel::parse(&forged).unwrap_err();
        assert!(matches!(err.problem, Problem::CheckDigit { .. }), "{err}");
        assert_eq!(err.position, forged.len() - 1);
    }

    #[test]
    fn every_single_substitution_and_adjacent_swap_is_caught() {
        let label = BinLabel::encode("S9", "ZB", "A17", "104", "3").unwrap();
        let text = label.text().as_bytes().to_vec();
        let alphabet = crate::check::MOD37_2_ALPHABET;
        for i in PREFIX.len()..text.len() {
            if text[i] == b'-' {
                continue;
            }
            for &c in alphabet.iter().filter(|&&c| c != text[i]) {
                let mut t = text.clone();
                t[i] = c;
                let t = String::from_utf8(t).expect("ASCII");
                assert!(BinLabel::parse(&t).is_err(), "{t} passed");
            }
            if i + 1 < text.len() && text[i + 1] != b'-' && text[i + 1] != text[i] {
                let mut t = text.clone();
                t.swap(i, i + 1);
                let t = String::from_utf8(t).expect("ASCII");
                assert!(BinLabel::parse(&t).is_err(), "{t} passed");
            }
        }
    }

    #[test]
    fn bad_parts_are_refused() {
        assert!(BinLabel::encode("", "A", "1", "1", "1").is_err());
        assert!(BinLabel::encode("WH1", "A", "1", "1", "123").is_err());
        assert!(BinLabel::encode("WH 1", "A", "1", "1", "1").is_err());
        assert!(BinLabel::parse("CB1-WH1-A-03-12").is_err());
        assert!(BinLabel::parse("XX1-WH1-A-03-12-2-K").is_err());
    }
}
