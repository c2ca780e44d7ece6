//! The one rule for free text people and host systems write: descriptions,
//! groups, labels, names, references, notes. Text is trimmed and refused (never
//! cut or cleaned) when it is too long for its kind or holds a character that
//! would change how it reads elsewhere: control characters (a NUL ends strings
//! in C tools, a line break splits log lines and CSV rows) and bidirectional
//! controls (they make a label display in another order than it is stored).

use std::fmt;

/// Longest item description, in characters.
pub const MAX_DESCRIPTION_CHARS: usize = 200;
/// Longest label shown to reviewers (reason codes), in characters.
pub const MAX_LABEL_CHARS: usize = 200;
/// Longest name (person, phone, run holder, movement source, item group), in characters.
pub const MAX_NAME_CHARS: usize = 64;
/// Longest reference to another system (document, actor), in characters.
pub const MAX_REF_CHARS: usize = 64;
/// Longest unit-of-measure name (`each`, `kg`), in characters.
pub const MAX_UNIT_CHARS: usize = 12;
/// Longest note (a reviewer's reason for rejecting), in characters; notes may span lines.
pub const MAX_NOTE_CHARS: usize = 2_000;

/// What a field holds, which sets its length limit and whether it may span lines.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    Description,
    Label,
    Name,
    Ref,
    Unit,
    Note,
}

impl Kind {
    /// Returns the most characters a field of this kind may hold.
    pub fn max_chars(self) -> usize {
        match self {
            Kind::Description => MAX_DESCRIPTION_CHARS,
            Kind::Label => MAX_LABEL_CHARS,
            Kind::Name => MAX_NAME_CHARS,
            Kind::Ref => MAX_REF_CHARS,
            Kind::Unit => MAX_UNIT_CHARS,
            Kind::Note => MAX_NOTE_CHARS,
        }
    }

    fn multi_line(self) -> bool {
        self == Kind::Note
    }
}

/// Why a text was refused; the caller puts the field's name in front.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum TextError {
    TooLong {
        max: usize,
        found: usize,
    },
    Forbidden {
        position: usize,
        ch: char,
        what: &'static str,
    },
}

impl fmt::Display for TextError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            TextError::TooLong { max, found } => {
                write!(f, "at most {max} characters, found {found}")
            }
            TextError::Forbidden { position, ch, what } => write!(
                f,
                "character {position} is {what} (U+{:04X}); remove it",
                u32::from(*ch)
            ),
        }
    }
}

/// Says what is wrong with one character in a field of `kind`, if anything.
fn forbidden(ch: char, kind: Kind) -> Option<&'static str> {
    match ch {
        '\n' | '\r' | '\t' if kind.multi_line() => None,
        '\n' | '\r' | '\u{2028}' | '\u{2029}' => Some("a line break, and this field is one line"),
        '\u{0}'..='\u{1f}' | '\u{7f}'..='\u{9f}' => Some("a control character"),
        // Embeddings, overrides and isolates, and the implicit marks: each can make
        // text display in another order than it is stored.
        '\u{202a}'..='\u{202e}' | '\u{2066}'..='\u{2069}' | '\u{200e}' | '\u{200f}' | '\u{61c}' => {
            Some("a bidirectional text control")
        }
        _ => None,
    }
}

/// Trims `raw` and checks it against the rule of `kind`; empty text passes
/// (whether a field is required is the caller's rule).
pub fn check(kind: Kind, raw: &str) -> Result<String, TextError> {
    let t = raw.trim();
    let found = t.chars().count();
    if found > kind.max_chars() {
        return Err(TextError::TooLong {
            max: kind.max_chars(),
            found,
        });
    }
    if let Some((i, ch, what)) = t
        .chars()
        .enumerate()
        .find_map(|(i, ch)| forbidden(ch, kind).map(|w| (i, ch, w)))
    {
        return Err(TextError::Forbidden {
            position: i + 1,
            ch,
            what,
        });
    }
    Ok(t.to_string())
}

/// Checks like [`check`] and names `field` in the message.
pub fn field(field: &str, kind: Kind, raw: &str) -> Result<String, String> {
    check(kind, raw).map_err(|e| format!("{field}: {e}"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ordinary_text_is_kept_trimmed() {
        assert_eq!(
            check(Kind::Description, "  Hex bolt M8 × 40  ").unwrap(),
            "Hex bolt M8 × 40"
        );
        assert_eq!(check(Kind::Name, "Zoë Ångström").unwrap(), "Zoë Ångström");
        // Right-to-left scripts themselves are text, not controls.
        assert_eq!(check(Kind::Label, "ספירה").unwrap(), "ספירה");
    }

    #[test]
    fn every_control_character_is_refused_with_its_place() {
        for ch in ['\0', '\u{7}', '\u{1b}', '\u{7f}', '\u{85}', '\u{9f}'] {
            let e = check(Kind::Description, &format!("ab{ch}c")).unwrap_err();
            assert!(
                matches!(e, TextError::Forbidden { position: 3, .. }),
                "{ch:?}: {e}"
            );
        }
    }

    #[test]
    fn a_line_break_is_refused_in_one_line_fields_and_kept_in_notes() {
        assert!(check(Kind::Label, "one\ntwo").is_err());
        assert!(check(Kind::Name, "one\r\ntwo").is_err());
        assert!(check(Kind::Ref, "one\u{2028}two").is_err());
        assert_eq!(
            check(Kind::Note, "one\r\ntwo\tthree").unwrap(),
            "one\r\ntwo\tthree"
        );
        assert!(check(Kind::Note, "one\u{0}two").is_err());
    }

    #[test]
    fn bidirectional_controls_are_refused() {
        // The ranges of Unicode's bidirectional formatting characters (UAX #9, table 4).
        for ch in [
            '\u{202a}', '\u{202e}', '\u{2066}', '\u{2069}', '\u{200e}', '\u{200f}', '\u{61c}',
        ] {
            let e = check(Kind::Name, &format!("x{ch}")).unwrap_err();
            assert!(e.to_string().contains("bidirectional"), "{ch:?}: {e}");
        }
    }

    #[test]
    fn length_is_counted_in_characters_after_trimming() {
        assert!(check(Kind::Unit, &"é".repeat(MAX_UNIT_CHARS)).is_ok());
        let e = check(Kind::Unit, &"é".repeat(MAX_UNIT_CHARS + 1)).unwrap_err();
        assert_eq!(e, TextError::TooLong { max: 12, found: 13 });
        assert!(check(Kind::Name, &format!("  {}  ", "a".repeat(MAX_NAME_CHARS))).is_ok());
    }

    #[test]
    fn a_long_group_is_refused_not_cut() {
        let e = field("group", Kind::Name, &"g".repeat(100_000)).unwrap_err();
        assert_eq!(e, "group: at most 64 characters, found 100000");
    }
}
