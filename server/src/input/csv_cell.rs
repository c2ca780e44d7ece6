//! The escape every CSV export applies to its text cells, so a spreadsheet
//! never runs a cell as a formula. A text cell that starts with `=`, `+`, `-`,
//! `@`, a tab or a carriage return gets a leading single quote (the OWASP
//! "CSV Injection" advice). Numeric columns are written as numbers and left
//! alone: a negative variance is data, and a quote would make it text. Where
//! a writer does not know its column types (the report tables), [`cell`]
//! leaves a cell alone only when the whole of it is a plain decimal number.

use std::borrow::Cow;

/// Returns `cell` with a leading `'` when a spreadsheet would read it as a formula.
pub fn text(cell: &str) -> Cow<'_, str> {
    match cell.chars().next() {
        Some('=' | '+' | '-' | '@' | '\t' | '\r') => Cow::Owned(format!("'{cell}")),
        _ => Cow::Borrowed(cell),
    }
}

/// Returns `cell` unchanged when it is a plain decimal number (`-3`, `-0.25`),
/// else escaped like [`text`]: `-2+3` is not a number and gets the quote.
pub fn cell(cell: &str) -> Cow<'_, str> {
    if is_plain_number(cell) {
        Cow::Borrowed(cell)
    } else {
        text(cell)
    }
}

fn is_plain_number(s: &str) -> bool {
    let digits = s.strip_prefix('-').unwrap_or(s);
    let (whole, fraction) = digits.split_once('.').unwrap_or((digits, ""));
    !whole.is_empty()
        && whole.bytes().all(|b| b.is_ascii_digit())
        && fraction.bytes().all(|b| b.is_ascii_digit())
        && !(digits.contains('.') && fraction.is_empty())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn formula_starts_get_a_quote() {
        // The leading characters listed by OWASP's CSV Injection page.
        for s in ["=HYPERLINK(\"x\")", "+1", "-2+3", "@SUM(A1)", "\tx", "\rx"] {
            assert_eq!(text(s), format!("'{s}"));
        }
    }

    #[test]
    fn a_cell_of_unknown_type_keeps_numbers_and_escapes_the_rest() {
        for n in ["-3", "0", "-0.25", "12.5"] {
            assert_eq!(cell(n), n);
        }
        for s in ["-2+3", "-", "-.5", "-1.", "=1", "-1e3", "@x"] {
            assert_eq!(cell(s), format!("'{s}"), "{s}");
        }
        assert_eq!(cell("class A"), "class A");
    }

    #[test]
    fn ordinary_text_is_unchanged() {
        for s in ["", "Hex bolt", "A-01-01-1", "1 = 1", "'quoted"] {
            assert_eq!(text(s), s);
        }
    }
}
