//! The GS1 Application Identifier dictionary Cairn understands, as a table.
//!
//! Lengths and formats follow the GS1 General Specifications (§3.2 AI table, §7.8.5 the
//! predefined-length table). AIs with a decimal-position digit (310n, 392n…) are listed
//! once as a three-digit family.

/// Says what characters a value may hold and how it is checked.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    /// Digits only.
    Numeric,
    /// Digits ending in a GS1 modulo-10 check digit (GTIN, SSCC, GLN).
    CheckedKey,
    /// A YYMMDD date.
    Date,
    /// Digits with an implied decimal point given by the AI's last digit.
    Decimal,
    /// GS1 AI encodable character set 82.
    Cset82,
}

/// Describes one AI (or one decimal family such as 310n).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct AiSpec {
    /// The AI digits; for a decimal family, the first three digits.
    pub ai: &'static str,
    /// GS1 data title.
    pub title: &'static str,
    pub format: Format,
    pub min_len: usize,
    pub max_len: usize,
    /// True for a decimal family (`ai` + one digit 0..=`max_decimals`).
    pub decimal_family: bool,
    pub max_decimals: u8,
}

const fn fixed(ai: &'static str, title: &'static str, format: Format, len: usize) -> AiSpec {
    AiSpec {
        ai,
        title,
        format,
        min_len: len,
        max_len: len,
        decimal_family: false,
        max_decimals: 0,
    }
}

const fn var(ai: &'static str, title: &'static str, format: Format, max: usize) -> AiSpec {
    AiSpec {
        ai,
        title,
        format,
        min_len: 1,
        max_len: max,
        decimal_family: false,
        max_decimals: 0,
    }
}

const fn dec(ai: &'static str, title: &'static str, min: usize, max: usize, n: u8) -> AiSpec {
    AiSpec {
        ai,
        title,
        format: Format::Decimal,
        min_len: min,
        max_len: max,
        decimal_family: true,
        max_decimals: n,
    }
}

use Format::{CheckedKey, Cset82, Date, Numeric};

/// The AIs Cairn reads. Source: GS1 General Specifications §3.2 (from memory).
pub const AIS: &[AiSpec] = &[
    fixed("00", "SSCC", CheckedKey, 18),
    fixed("01", "GTIN", CheckedKey, 14),
    fixed("02", "CONTENT", CheckedKey, 14),
    var("10", "BATCH/LOT", Cset82, 20),
    fixed("11", "PROD DATE", Date, 6),
    fixed("12", "DUE DATE", Date, 6),
    fixed("13", "PACK DATE", Date, 6),
    fixed("15", "BEST BEFORE or BEST BY", Date, 6),
    fixed("16", "SELL BY", Date, 6),
    fixed("17", "USE BY or EXPIRY", Date, 6),
    fixed("20", "VARIANT", Numeric, 2),
    var("21", "SERIAL", Cset82, 20),
    var("22", "CPV", Cset82, 20),
    var("240", "ADDITIONAL ID", Cset82, 30),
    var("241", "CUST. PART No.", Cset82, 30),
    var("30", "VAR. COUNT", Numeric, 8),
    dec("310", "NET WEIGHT (kg)", 6, 6, 5),
    dec("320", "NET WEIGHT (lb)", 6, 6, 5),
    dec("330", "GROSS WEIGHT (kg)", 6, 6, 5),
    var("37", "COUNT", Numeric, 8),
    dec("390", "AMOUNT", 1, 15, 9),
    dec("392", "PRICE", 1, 15, 9),
    var("400", "ORDER NUMBER", Cset82, 30),
    fixed("410", "SHIP TO LOC", CheckedKey, 13),
    fixed("412", "PURCHASE FROM", CheckedKey, 13),
    fixed("414", "LOC No.", CheckedKey, 13),
    var("420", "SHIP TO POST", Cset82, 20),
    fixed("7003", "EXPIRY TIME", Numeric, 10),
    var("90", "INTERNAL", Cset82, 30),
    var("91", "INTERNAL", Cset82, 90),
    var("92", "INTERNAL", Cset82, 90),
    var("93", "INTERNAL", Cset82, 90),
    var("94", "INTERNAL", Cset82, 90),
    var("95", "INTERNAL", Cset82, 90),
    var("96", "INTERNAL", Cset82, 90),
    var("97", "INTERNAL", Cset82, 90),
    var("98", "INTERNAL", Cset82, 90),
    var("99", "INTERNAL", Cset82, 90),
];

/// Longest AI, in digits.
pub const MAX_AI_LEN: usize = 4;

/// Returns how many digits an AI starting with these two digits has, per the GS1 General
/// Specifications' AI-length table (from memory); `None` for unassigned prefixes.
pub fn ai_length(prefix: &[u8]) -> Option<usize> {
    let p = std::str::from_utf8(prefix.get(..2)?).ok()?;
    let n: u8 = p.parse().ok()?;
    match n {
        0..=4 | 10..=22 | 30 | 37 | 90..=99 => Some(2),
        23..=25 | 40..=43 => Some(3),
        31..=36 | 39 | 70..=72 | 80..=82 => Some(4),
        _ => None,
    }
}

/// Says whether an AI's data has a predefined length, so that no FNC1 separator follows
/// it (GS1 General Specifications §7.8.5, the table keyed on the AI's first two digits).
pub fn has_predefined_length(ai: &str) -> bool {
    matches!(
        ai.get(..2),
        Some(
            "00" | "01"
                | "02"
                | "03"
                | "04"
                | "11"
                | "12"
                | "13"
                | "14"
                | "15"
                | "16"
                | "17"
                | "18"
                | "19"
                | "20"
                | "31"
                | "32"
                | "33"
                | "34"
                | "35"
                | "36"
                | "41"
        )
    )
}

/// Looks up the spec for a complete AI (e.g. "01", "3103"); `None` if Cairn does not know it
/// or the decimal digit is out of range (see [`decimal_digit_out_of_range`]).
pub fn lookup(ai: &str) -> Option<&'static AiSpec> {
    AIS.iter().find(|s| {
        if s.decimal_family {
            ai.len() == 4
                && ai.starts_with(s.ai)
                && ai.as_bytes()[3]
                    .checked_sub(b'0')
                    .is_some_and(|d| d <= s.max_decimals)
        } else {
            s.ai == ai
        }
    })
}

/// Returns the family spec and the digit when `ai` is a known decimal family with a
/// decimal digit beyond what the family allows (e.g. 3106).
pub fn decimal_digit_out_of_range(ai: &str) -> Option<u8> {
    let d = ai
        .as_bytes()
        .get(3)?
        .checked_sub(b'0')
        .filter(|d| *d <= 9)?;
    AIS.iter()
        .find(|s| s.decimal_family && ai.len() == 4 && ai.starts_with(s.ai))
        .filter(|s| d > s.max_decimals)
        .map(|_| d)
}

/// Says whether `c` belongs to GS1 AI encodable character set 82.
pub fn is_cset82(c: u8) -> bool {
    matches!(c,
        b'!' | b'"' | b'%'..=b'?' | b'A'..=b'Z' | b'_' | b'a'..=b'z')
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_table_entry_agrees_with_the_length_and_separator_tables() {
        for spec in AIS {
            let digits = if spec.decimal_family {
                4
            } else {
                spec.ai.len()
            };
            assert_eq!(
                ai_length(spec.ai.as_bytes()),
                Some(digits),
                "AI {}",
                spec.ai
            );
            if has_predefined_length(spec.ai) {
                assert_eq!(spec.min_len, spec.max_len, "AI {} is predefined", spec.ai);
            }
        }
    }

    #[test]
    fn decimal_families_resolve_by_last_digit() {
        assert_eq!(lookup("3103").map(|s| s.ai), Some("310"));
        assert_eq!(lookup("3106"), None);
        assert_eq!(decimal_digit_out_of_range("3106"), Some(6));
        assert_eq!(lookup("3929").map(|s| s.ai), Some("392"));
        assert_eq!(lookup("310"), None);
    }

    #[test]
    fn cset82_excludes_space_and_hash() {
        // GS1 General Specifications Figure 7.11-1 (from memory).
        assert!(is_cset82(b'A') && is_cset82(b'/') && is_cset82(b'_') && is_cset82(b'"'));
        assert!(!is_cset82(b' ') && !is_cset82(b'#') && !is_cset82(b'$') && !is_cset82(b'@'));
        assert!(!is_cset82(b'[') && !is_cset82(b'~') && !is_cset82(0x1d));
    }
}
