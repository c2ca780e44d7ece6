//! Why a scan was refused: which part, at which byte, and what was expected.

use std::fmt;

use serde::Serialize;

/// Refuses a scan, naming the part that failed, its byte offset in the raw input and the problem.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, thiserror::Error)]
#[error("{}", self.message())]
pub struct ScanError {
    /// The part of the scan that failed (an AI, a GTIN, a bin label…).
    pub field: Field,
    /// Byte offset in the raw scanned text where the problem starts.
    pub position: usize,
    /// What was wrong.
    pub problem: Problem,
}

impl ScanError {
    /// Builds an error for `field` at byte `position`.
    pub fn new(field: Field, position: usize, problem: Problem) -> Self {
        Self {
            field,
            position,
            problem,
        }
    }

    /// Renders the one-line message shown to people checking labels.
    pub fn message(&self) -> String {
        match &self.problem {
            Problem::UnknownAi => format!("unknown {}", self.field),
            Problem::TooLong { max } => format!("{} longer than {max} characters", self.field),
            Problem::Empty => "nothing was scanned".to_owned(),
            problem => format!("{}: {problem}", self.field),
        }
    }

    pub(crate) fn shifted(mut self, by: usize) -> Self {
        self.position += by;
        self
    }
}

/// Names the part of a scan an error is about.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(tag = "kind", content = "name", rename_all = "snake_case")]
pub enum Field {
    /// The whole input.
    Input,
    /// The AIM symbology identifier prefix (`]C1`…).
    Symbology,
    /// A GS1 Application Identifier, by its digits.
    Ai(String),
    /// A plain GTIN of the given length (8, 12, 13 or 14).
    Gtin(u8),
    /// A UPC-E number.
    UpcE,
    /// A plain SSCC.
    Sscc,
    /// A GS1 Digital Link URI.
    DigitalLink,
    /// A Cairn bin label.
    BinLabel,
}

impl fmt::Display for Field {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Field::Input => f.write_str("scan"),
            Field::Symbology => f.write_str("symbology identifier"),
            Field::Ai(ai) => write!(f, "AI ({ai})"),
            Field::Gtin(n) => write!(f, "GTIN-{n}"),
            Field::UpcE => f.write_str("UPC-E"),
            Field::Sscc => f.write_str("SSCC"),
            Field::DigitalLink => f.write_str("Digital Link URI"),
            Field::BinLabel => f.write_str("bin label"),
        }
    }
}

/// Says what was wrong with a part of a scan.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, thiserror::Error)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Problem {
    #[error("nothing was scanned")]
    Empty,
    #[error("unknown")]
    UnknownAi,
    #[error("check digit should be {expected}, found {found}")]
    CheckDigit { expected: char, found: char },
    #[error("month {month}")]
    Month { month: u8 },
    #[error("day {day} does not exist in {year:04}-{month:02}")]
    Day { year: u16, month: u8, day: u8 },
    #[error("longer than {max} characters")]
    TooLong { max: usize },
    #[error("needs {expected} characters, found {found}")]
    Length { expected: String, found: usize },
    #[error("character {found:?} is not allowed here (expected {expected})")]
    Character { found: char, expected: &'static str },
    #[error("separator (GS) where a value was expected")]
    EmptyValue,
    #[error("decimal position {digit} is out of range for this AI")]
    DecimalPosition { digit: u8 },
    #[error("{0}")]
    Malformed(&'static str),
    #[error("AI ({ai}) appears twice")]
    Repeated { ai: String },
    #[error("AI ({ai}) is out of order (expected {expected})")]
    Order { ai: String, expected: &'static str },
    #[error("bad percent-encoding")]
    PercentEncoding,
}
