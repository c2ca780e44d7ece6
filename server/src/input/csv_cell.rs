//! The escape every CSV export applies to its text cells, so a spreadsheet
//! never runs a cell as a formula. A text cell that starts with `=`, `+`, `-`,
//! `@`, a tab or a carriage return gets a leading single quote (the OWASP
//! "CSV Injection" advice). Numeric columns are written as numbers and left
//! alone: a negative variance is data, and a quote would make it text.

use std::borrow::Cow;

/// Returns `cell` with a leading `'` when a spreadsheet would read it as a formula.
pub fn text(cell: &str) -> Cow<'_, str> {
    match cell.chars().next() {
        Some('=' | '+' | '-' | '@' | '\t' | '\r') => Cow::Owned(format!("'{cell}")),
        _ => Cow::Borrowed(cell),
    }
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
    fn ordinary_text_is_unchanged() {
        for s in ["", "Hex bolt", "A-01-01-1", "1 = 1", "'quoted"] {
            assert_eq!(text(s), s);
        }
    }
}
