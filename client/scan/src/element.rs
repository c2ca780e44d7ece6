//! GS1 element strings: the raw form with FNC1 sent as GS (0x1D) and the bracketed
//! human-readable form `(01)…(10)…`; both become a list of checked elements.

use serde::Serialize;

use crate::ai::{self, AiSpec, Format};
use crate::check::gtin_check_digit;
use crate::date::parse_yymmdd;
use crate::error::{Field, Problem, ScanError};

/// Group separator, how scanners transmit FNC1 between elements.
pub const GS: char = '\u{1d}';

/// Most elements one scan may carry; a longer string is refused rather than looped over.
pub const MAX_ELEMENTS: usize = 64;

/// One AI and its value, as scanned.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Element {
    pub ai: String,
    pub value: String,
}

impl Element {
    /// Pairs an AI with its value (no checks: see [`check_value`]).
    pub fn new(ai: impl Into<String>, value: impl Into<String>) -> Self {
        Self {
            ai: ai.into(),
            value: value.into(),
        }
    }
}

/// Parses a raw element string (FNC1 as GS, no leading symbology identifier).
///
/// `base` is the byte offset of `data` in the raw scan, so errors point into the input.
pub fn parse_raw(data: &str, base: usize, current_year: u16) -> Result<Vec<Element>, ScanError> {
    let bytes = data.as_bytes();
    let mut pos = 0;
    // A leading FNC1 sometimes survives in what a scanner sends; it carries no data.
    if bytes.first() == Some(&0x1d) {
        pos = 1;
    }
    let mut out = Vec::new();
    while pos < bytes.len() {
        if out.len() == MAX_ELEMENTS {
            return Err(too_many(base + pos));
        }
        let ai_at = base + pos;
        let (ai, spec) = read_ai(&bytes[pos..], ai_at)?;
        pos += ai.len();
        let field = Field::Ai(ai.clone());
        let value_at = base + pos;
        let rest = &bytes[pos..];
        let end = if ai::has_predefined_length(&ai) {
            // Predefined length: exactly max_len characters, no separator needed.
            let avail = rest
                .iter()
                .take(spec.max_len)
                .take_while(|&&b| b != 0x1d)
                .count();
            if avail < spec.max_len {
                return Err(ScanError::new(
                    field,
                    value_at,
                    Problem::Length {
                        expected: spec.max_len.to_string(),
                        found: avail,
                    },
                ));
            }
            spec.max_len
        } else {
            rest.iter().position(|&b| b == 0x1d).unwrap_or(rest.len())
        };
        // `end` stops at a GS or at a length of ASCII digits, so it is a char boundary
        // unless non-ASCII bytes follow; check_value refuses those characters.
        let value = match data.get(pos..pos + end) {
            Some(v) => v,
            None => {
                let bad = first_non_ascii(&data[pos..]);
                return Err(ScanError::new(
                    field,
                    value_at + bad.0,
                    bad_char(bad.1, spec),
                ));
            }
        };
        check_value(&ai, spec, value, current_year).map_err(|e| e.shifted(value_at))?;
        out.push(Element::new(ai, value));
        pos += end;
        if bytes.get(pos) == Some(&0x1d) {
            pos += 1;
            if pos == bytes.len() {
                break; // a trailing separator is harmless
            }
        }
    }
    if out.is_empty() {
        return Err(ScanError::new(
            Field::Input,
            base,
            Problem::Malformed("no GS1 elements"),
        ));
    }
    Ok(out)
}

/// Parses the bracketed form `(01)09520123456788(10)ABC`.
pub fn parse_bracketed(
    data: &str,
    base: usize,
    current_year: u16,
) -> Result<Vec<Element>, ScanError> {
    let mut out = Vec::new();
    let mut pos = 0;
    while pos < data.len() {
        if out.len() == MAX_ELEMENTS {
            return Err(too_many(base + pos));
        }
        if !data[pos..].starts_with('(') {
            return Err(ScanError::new(
                Field::Input,
                base + pos,
                Problem::Malformed("expected '(' before an AI"),
            ));
        }
        let close = data[pos..].find(')').map(|i| pos + i).ok_or_else(|| {
            ScanError::new(
                Field::Input,
                base + pos,
                Problem::Malformed("'(' without ')'"),
            )
        })?;
        let ai = &data[pos + 1..close];
        let ai_at = base + pos + 1;
        if ai.len() < 2 || ai.len() > ai::MAX_AI_LEN || !ai.bytes().all(|b| b.is_ascii_digit()) {
            return Err(ScanError::new(
                Field::Input,
                ai_at,
                Problem::Malformed("an AI is two to four digits"),
            ));
        }
        let spec = spec_for(ai, ai_at)?;
        let value_start = close + 1;
        // A value may itself contain '(' (it is in CSET 82); only "(" followed by digits
        // and ")" starts the next AI.
        let value_end = next_bracket_ai(data, value_start).unwrap_or(data.len());
        let value = &data[value_start..value_end];
        check_value(ai, spec, value, current_year).map_err(|e| e.shifted(base + value_start))?;
        out.push(Element::new(ai, value));
        pos = value_end;
    }
    if out.is_empty() {
        return Err(ScanError::new(
            Field::Input,
            base,
            Problem::Malformed("no GS1 elements"),
        ));
    }
    Ok(out)
}

fn next_bracket_ai(data: &str, from: usize) -> Option<usize> {
    let b = data.as_bytes();
    let mut i = from;
    while i < b.len() {
        if b[i] == b'(' {
            let digits = b[i + 1..].iter().take_while(|c| c.is_ascii_digit()).count();
            if (2..=ai::MAX_AI_LEN).contains(&digits) && b.get(i + 1 + digits) == Some(&b')') {
                return Some(i);
            }
        }
        i += 1;
    }
    None
}

/// Builds the raw element string for `elements`, with a GS only after values whose
/// length is not predefined (and not after the last one).
pub fn to_raw(elements: &[Element]) -> String {
    let mut s = String::new();
    for (i, e) in elements.iter().enumerate() {
        s.push_str(&e.ai);
        s.push_str(&e.value);
        if i + 1 < elements.len() && !ai::has_predefined_length(&e.ai) {
            s.push(GS);
        }
    }
    s
}

/// Builds the bracketed human-readable form of `elements`.
pub fn to_bracketed(elements: &[Element]) -> String {
    elements
        .iter()
        .map(|e| format!("({}){}", e.ai, e.value))
        .collect()
}

fn read_ai(rest: &[u8], at: usize) -> Result<(String, &'static AiSpec), ScanError> {
    if rest.first() == Some(&0x1d) {
        return Err(ScanError::new(Field::Input, at, Problem::EmptyValue));
    }
    let digits = rest.iter().take_while(|b| b.is_ascii_digit()).count();
    if digits < 2 {
        return Err(ScanError::new(
            Field::Input,
            at,
            Problem::Malformed("expected an AI (digits)"),
        ));
    }
    let len = ai::ai_length(rest).unwrap_or(2).min(digits);
    // `rest[..len]` is ASCII digits.
    let ai = String::from_utf8_lossy(&rest[..len]).into_owned();
    if ai::ai_length(rest).is_some_and(|want| want > digits) {
        return Err(ScanError::new(Field::Ai(ai), at, Problem::UnknownAi));
    }
    let spec = spec_for(&ai, at)?;
    Ok((ai, spec))
}

fn spec_for(ai: &str, at: usize) -> Result<&'static AiSpec, ScanError> {
    if let Some(digit) = ai::decimal_digit_out_of_range(ai) {
        return Err(ScanError::new(
            Field::Ai(ai.to_owned()),
            at + 3,
            Problem::DecimalPosition { digit },
        ));
    }
    ai::lookup(ai).ok_or_else(|| ScanError::new(Field::Ai(ai.to_owned()), at, Problem::UnknownAi))
}

/// Checks one value against its AI: length, characters, check digit, date.
///
/// Error positions are relative to the start of `value`.
pub fn check_value(
    ai: &str,
    spec: &AiSpec,
    value: &str,
    current_year: u16,
) -> Result<(), ScanError> {
    let field = || Field::Ai(ai.to_owned());
    let n = value.chars().count();
    if n == 0 {
        return Err(ScanError::new(field(), 0, Problem::EmptyValue));
    }
    if n > spec.max_len {
        return Err(ScanError::new(
            field(),
            0,
            Problem::TooLong { max: spec.max_len },
        ));
    }
    if n < spec.min_len {
        let expected = if spec.min_len == spec.max_len {
            spec.max_len.to_string()
        } else {
            format!("{} to {}", spec.min_len, spec.max_len)
        };
        return Err(ScanError::new(
            field(),
            0,
            Problem::Length { expected, found: n },
        ));
    }
    for (i, c) in value.char_indices() {
        let ok = match spec.format {
            Format::Cset82 => c.is_ascii() && ai::is_cset82(c as u8),
            _ => c.is_ascii_digit(),
        };
        if !ok {
            return Err(ScanError::new(field(), i, bad_char(c, spec)));
        }
    }
    match spec.format {
        Format::CheckedKey => {
            let (body, last) = value.split_at(value.len() - 1);
            let expected = gtin_check_digit(body).expect("value is all digits, length >= 1");
            let found = last.as_bytes()[0];
            if found - b'0' != expected {
                return Err(ScanError::new(
                    field(),
                    value.len() - 1,
                    Problem::CheckDigit {
                        expected: char::from(b'0' + expected),
                        found: char::from(found),
                    },
                ));
            }
        }
        Format::Date => {
            parse_yymmdd(value.as_bytes(), current_year)
                .map_err(|p| ScanError::new(field(), 0, p))?;
        }
        Format::Numeric | Format::Decimal | Format::Cset82 => {}
    }
    Ok(())
}

fn bad_char(c: char, spec: &AiSpec) -> Problem {
    Problem::Character {
        found: c,
        expected: match spec.format {
            Format::Cset82 => "GS1 character set 82",
            _ => "a digit",
        },
    }
}

fn first_non_ascii(s: &str) -> (usize, char) {
    s.char_indices()
        .find(|(_, c)| !c.is_ascii())
        .unwrap_or((0, '\u{fffd}'))
}

fn too_many(at: usize) -> ScanError {
    ScanError::new(
        Field::Input,
        at,
        Problem::Malformed("too many elements in one scan"),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    const YEAR: u16 = 2024;

    fn ais(elements: &[Element]) -> Vec<(&str, &str)> {
        elements
            .iter()
            .map(|e| (e.ai.as_str(), e.value.as_str()))
            .collect()
    }

    #[test]
    fn predefined_length_ais_need_no_separator() {
        // GS1 General Specifications §7.8 example shape (from memory): GTIN, expiry,
        // then a variable-length lot last, no FNC1 anywhere.
        let e = parse_raw("01095201234567881725123110ABC123", 0, YEAR).unwrap();
        assert_eq!(
            ais(&e),
            [("01", "09520123456788"), ("17", "251231"), ("10", "ABC123")]
        );
    }

    #[test]
    fn variable_length_ais_end_at_a_separator() {
        let e = parse_raw("010952012345678810ABC\u{1d}21XYZ\u{1d}3103001500", 0, YEAR).unwrap();
        assert_eq!(
            ais(&e),
            [
                ("01", "09520123456788"),
                ("10", "ABC"),
                ("21", "XYZ"),
                ("3103", "001500")
            ]
        );
    }

    #[test]
    fn a_variable_value_without_separator_swallows_the_rest() {
        // Without GS, "17…" after a lot is read as part of the lot; the lot is then too long.
        let err = parse_raw("10ABCDEFGHIJKLMNOPQR17251231", 0, YEAR).unwrap_err();
        assert_eq!(err.to_string(), "AI (10) longer than 20 characters");
    }

    #[test]
    fn wrong_check_digit_names_the_expected_one() {
        let err = parse_raw("0109520123456784", 3, YEAR).unwrap_err();
        assert_eq!(err.to_string(), "AI (01): check digit should be 8, found 4");
        assert_eq!(err.position, 3 + 2 + 13);
    }

    #[test]
    fn month_thirteen_is_refused() {
        let err = parse_raw("010952012345678817251301", 0, YEAR).unwrap_err();
        assert_eq!(err.to_string(), "AI (17): month 13");
        assert_eq!(err.position, 18);
    }

    #[test]
    fn unknown_ai_is_named() {
        let err = parse_bracketed("(995)12", 0, YEAR).unwrap_err();
        assert_eq!(err.to_string(), "unknown AI (995)");
        let err = parse_raw("0109520123456788\u{1d}8200https://x", 0, YEAR).unwrap_err();
        assert_eq!(err.to_string(), "unknown AI (8200)");
        assert_eq!(err.position, 17);
    }

    #[test]
    fn bracketed_form_allows_brackets_inside_values() {
        let e = parse_bracketed("(01)09520123456788(10)A(B)C(17)250100", 0, YEAR).unwrap();
        assert_eq!(
            ais(&e),
            [("01", "09520123456788"), ("10", "A(B)C"), ("17", "250100")]
        );
    }

    #[test]
    fn decimal_digit_out_of_range_is_refused() {
        let err = parse_raw("3106001500", 0, YEAR).unwrap_err();
        assert_eq!(
            err.problem,
            Problem::DecimalPosition { digit: 6 },
            "310n allows n = 0..5"
        );
    }

    #[test]
    fn short_fixed_values_are_refused() {
        let err = parse_raw("01123", 0, YEAR).unwrap_err();
        assert_eq!(err.to_string(), "AI (01): needs 14 characters, found 3");
    }

    #[test]
    fn raw_and_bracketed_forms_round_trip() {
        let elements = vec![
            Element::new("01", "09520123456788"),
            Element::new("10", "L1"),
            Element::new("17", "260600"),
            Element::new("21", "S/9"),
            Element::new("30", "12"),
        ];
        assert_eq!(parse_raw(&to_raw(&elements), 0, YEAR).unwrap(), elements);
        assert_eq!(
            parse_bracketed(&to_bracketed(&elements), 0, YEAR).unwrap(),
            elements
        );
    }
}
