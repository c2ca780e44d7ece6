//! GS1 Digital Link URIs: `https://host/[prefix/]01/{gtin}[/22/{cpv}][/10/{lot}][/21/{serial}][?17=…&…]`.
//!
//! Path keys and qualifiers must come in the order the GS1 Digital Link standard gives
//! (from memory: for GTIN, 22 then 10 then 21); query parameters whose names are numeric
//! AIs become elements too, others (such as `linkType`) are ignored. Values are
//! percent-decoded; `+` is kept as a plus sign, since it is a valid GS1 character.

use crate::ai;
use crate::element::{Element, MAX_ELEMENTS, check_value};
use crate::error::{Field, Problem, ScanError};

/// Longest URI Cairn reads, in bytes.
pub const MAX_URI_LEN: usize = 2048;

/// Primary keys Cairn reads from a URI path, with their qualifiers in standard order.
const PRIMARY_KEYS: &[(&str, &[&str])] = &[("01", &["22", "10", "21"]), ("00", &[]), ("414", &[])];

/// Says whether `text` starts with an http(s) scheme.
pub fn looks_like_uri(text: &str) -> bool {
    let lower = |n: usize| text.get(..n).map(str::to_ascii_lowercase);
    lower(7).as_deref() == Some("http://") || lower(8).as_deref() == Some("https://")
}

/// Parses a Digital Link URI into elements, or `Ok(None)` when the URI carries no GS1 key
/// in its path (an ordinary web address).
pub fn parse(uri: &str, base: usize, current_year: u16) -> Result<Option<Vec<Element>>, ScanError> {
    let err = |at: usize, p: Problem| ScanError::new(Field::DigitalLink, base + at, p);
    if uri.len() > MAX_URI_LEN {
        return Err(err(0, Problem::TooLong { max: MAX_URI_LEN }));
    }
    let after_scheme = uri.find("://").map(|i| i + 3).unwrap_or(0);
    let path_start = uri[after_scheme..]
        .find(['/', '?', '#'])
        .map(|i| after_scheme + i)
        .unwrap_or(uri.len());
    let without_fragment = uri.find('#').unwrap_or(uri.len());
    let query_start = uri[..without_fragment].find('?');
    let path_end = query_start.unwrap_or(without_fragment).max(path_start);
    let path = &uri[path_start..path_end];

    // Segments with their byte offsets in `uri`.
    let mut segments = Vec::new();
    let mut at = path_start;
    for seg in path.split('/') {
        if !seg.is_empty() {
            segments.push((at, seg));
        }
        at += seg.len() + 1;
    }
    let Some((key_index, qualifiers)) = segments.iter().enumerate().find_map(|(i, (_, s))| {
        PRIMARY_KEYS
            .iter()
            .find(|(k, _)| k == s)
            .filter(|_| i + 1 < segments.len())
            .map(|(_, q)| (i, *q))
    }) else {
        return Ok(None);
    };

    let mut elements = Vec::new();
    let mut next_qualifier = 0;
    let mut first = true;
    for pair in segments[key_index..].chunks(2) {
        let [(ai_at, ai), (value_at, raw_value)] = pair else {
            return Err(err(
                pair[0].0,
                Problem::Malformed("an AI in the path has no value"),
            ));
        };
        if !first {
            match qualifiers[next_qualifier..].iter().position(|q| q == ai) {
                Some(i) => next_qualifier += i + 1,
                None => {
                    return Err(ScanError::new(
                        Field::Ai((*ai).to_owned()),
                        base + ai_at,
                        Problem::Order {
                            ai: (*ai).to_owned(),
                            expected: "a qualifier of the key, in the standard order",
                        },
                    ));
                }
            }
        }
        let mut value =
            percent_decode(raw_value).map_err(|i| err(value_at + i, Problem::PercentEncoding))?;
        if first && *ai == "01" && matches!(value.len(), 8 | 12 | 13) {
            value = format!("{value:0>14}");
        }
        first = false;
        push(
            &mut elements,
            ai,
            value,
            base + ai_at,
            base + value_at,
            current_year,
        )?;
    }

    if let Some(q) = query_start {
        let mut at = q + 1;
        for param in uri[q + 1..without_fragment].split('&') {
            let (name, raw_value) = param.split_once('=').unwrap_or((param, ""));
            let numeric = (2..=ai::MAX_AI_LEN).contains(&name.len())
                && name.bytes().all(|b| b.is_ascii_digit());
            if numeric {
                if elements.iter().any(|e: &Element| e.ai == name) {
                    return Err(ScanError::new(
                        Field::Ai(name.to_owned()),
                        base + at,
                        Problem::Repeated {
                            ai: name.to_owned(),
                        },
                    ));
                }
                let value_at = at + name.len() + 1;
                let value = percent_decode(raw_value)
                    .map_err(|i| err(value_at + i, Problem::PercentEncoding))?;
                push(
                    &mut elements,
                    name,
                    value,
                    base + at,
                    base + value_at,
                    current_year,
                )?;
            }
            at += param.len() + 1;
        }
    }
    Ok(Some(elements))
}

fn push(
    elements: &mut Vec<Element>,
    ai: &str,
    value: String,
    ai_at: usize,
    value_at: usize,
    current_year: u16,
) -> Result<(), ScanError> {
    if elements.len() == MAX_ELEMENTS {
        return Err(ScanError::new(
            Field::DigitalLink,
            ai_at,
            Problem::Malformed("too many elements in one scan"),
        ));
    }
    if let Some(digit) = ai::decimal_digit_out_of_range(ai) {
        return Err(ScanError::new(
            Field::Ai(ai.to_owned()),
            ai_at + 3,
            Problem::DecimalPosition { digit },
        ));
    }
    let spec = ai::lookup(ai)
        .ok_or_else(|| ScanError::new(Field::Ai(ai.to_owned()), ai_at, Problem::UnknownAi))?;
    check_value(ai, spec, &value, current_year).map_err(|e| e.shifted(value_at))?;
    elements.push(Element::new(ai, value));
    Ok(())
}

/// Decodes `%XX` escapes; returns the byte offset of a bad escape or of invalid UTF-8.
pub fn percent_decode(s: &str) -> Result<String, usize> {
    let b = s.as_bytes();
    let mut out = Vec::with_capacity(b.len());
    let mut i = 0;
    while i < b.len() {
        if b[i] == b'%' {
            let hex = b.get(i + 1..i + 3).ok_or(i)?;
            let hex = std::str::from_utf8(hex).map_err(|_| i)?;
            out.push(u8::from_str_radix(hex, 16).map_err(|_| i)?);
            i += 3;
        } else {
            out.push(b[i]);
            i += 1;
        }
    }
    String::from_utf8(out).map_err(|e| e.utf8_error().valid_up_to())
}

#[cfg(test)]
mod tests {
    use super::*;

    const YEAR: u16 = 2024;

    fn pairs(uri: &str) -> Vec<(String, String)> {
        parse(uri, 0, YEAR)
            .unwrap()
            .unwrap()
            .into_iter()
            .map(|e| (e.ai, e.value))
            .collect()
    }

    #[test]
    fn path_and_query_elements_come_in_order() {
        // GS1 Digital Link standard, example URI (from memory).
        let got = pairs("https://id.gs1.org/01/09520123456788/10/ABC123/21/12345?17=180426");
        let want = [
            ("01", "09520123456788"),
            ("10", "ABC123"),
            ("21", "12345"),
            ("17", "180426"),
        ];
        assert_eq!(
            got,
            want.map(|(a, v)| (a.to_owned(), v.to_owned())).to_vec()
        );
    }

    #[test]
    fn short_gtins_are_padded_and_values_percent_decoded() {
        let got = pairs("https://example.com/shop/01/9520123456788/10/A%2FB%25?linkType=gs1:pip");
        assert_eq!(got[0].1, "09520123456788");
        assert_eq!(got[1].1, "A/B%");
        assert_eq!(got.len(), 2);
    }

    #[test]
    fn qualifiers_out_of_order_are_refused() {
        let err = parse("https://e.com/01/09520123456788/21/S1/10/L1", 0, YEAR).unwrap_err();
        assert!(matches!(err.problem, Problem::Order { .. }), "{err}");
    }

    #[test]
    fn an_ordinary_url_is_not_digital_link() {
        assert_eq!(
            parse("https://example.com/about/us", 0, YEAR).unwrap(),
            None
        );
        assert_eq!(parse("https://example.com/01", 0, YEAR).unwrap(), None);
    }

    #[test]
    fn a_bad_check_digit_in_the_path_points_at_it() {
        let uri = "https://e.com/01/09520123456781";
        let err = parse(uri, 0, YEAR).unwrap_err();
        assert_eq!(err.to_string(), "AI (01): check digit should be 8, found 1");
        assert_eq!(err.position, uri.len() - 1);
    }

    #[test]
    fn broken_escapes_are_refused() {
        assert!(parse("https://e.com/01/09520123456788/10/A%2", 0, YEAR).is_err());
        assert!(parse("https://e.com/01/09520123456788/10/A%FF", 0, YEAR).is_err());
    }
}
