//! What every batch write shares: the rule that a batch is validated whole and
//! written whole or not at all, and the per-row errors that say why not.

use serde::Serialize;

/// Most rows one API request may carry; larger loads go through CSV import.
pub const MAX_BATCH_ROWS: usize = 5_000;

/// One rule broken by one row of a batch.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct RowError {
    /// Position of the element in the batch array, counted from 0; `index` on the wire
    /// (a CSV import turns it into the file's 1-based `line`).
    #[serde(rename = "index")]
    pub row: usize,
    /// The field (column) at fault, or `"row"` when the row as a whole is.
    pub field: String,
    /// What rule was broken, in words a clerk can act on.
    pub message: String,
}

impl RowError {
    /// Builds an error for `field` of row `row`.
    pub fn new(row: usize, field: impl Into<String>, message: impl Into<String>) -> Self {
        Self {
            row,
            field: field.into(),
            message: message.into(),
        }
    }
}

/// A field-level error before the row number is known.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FieldError {
    /// The field, or its path inside the row (`packs[1].gtin`).
    pub field: String,
    pub message: String,
}

impl FieldError {
    /// Builds an error for `field`.
    pub fn new(field: impl Into<String>, message: impl Into<String>) -> Self {
        Self {
            field: field.into(),
            message: message.into(),
        }
    }

    /// Places the error at row `row` of a batch.
    pub fn at(self, row: usize) -> RowError {
        RowError::new(row, self.field, self.message)
    }
}

/// Collects field errors of many rows; `finish` yields the rows or all errors.
#[derive(Debug)]
pub struct Collector<T> {
    pub ok: Vec<T>,
    pub errors: Vec<RowError>,
}

impl<T> Default for Collector<T> {
    fn default() -> Self {
        Self {
            ok: Vec::new(),
            errors: Vec::new(),
        }
    }
}

impl<T> Collector<T> {
    /// Adds the outcome of validating row `row`.
    pub fn push(&mut self, row: usize, outcome: Result<T, Vec<FieldError>>) {
        match outcome {
            Ok(v) => self.ok.push(v),
            Err(es) => self.errors.extend(es.into_iter().map(|e| e.at(row))),
        }
    }

    /// Returns every row, or every error if any row failed.
    pub fn finish(self) -> Result<Vec<T>, Vec<RowError>> {
        if self.errors.is_empty() {
            Ok(self.ok)
        } else {
            Err(self.errors)
        }
    }
}
