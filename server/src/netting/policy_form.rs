//! The count-policy page's three forms without I/O: the netting policy as the
//! text a person types (tolerance per class and review limits, movement
//! sources' timing, reason codes) and back. Each refusal names the field and
//! says why, and a refused form keeps what was typed, so the page can show it
//! again.
//!
//! Lists are edited as the page showed them: rows carry an index (`code.0`,
//! `label.0`, `remove.0`, …) and the names the page listed travel with the form,
//! so the store can refuse a save over a list someone else changed meanwhile.

use super::service::{self, MAX_POLICY_ROWS, NettingSettings, ReasonCode, SourceTimingRow};
use super::tolerance::{BASIS_POINTS_PER_WHOLE, ClassTolerances, Tolerance};
use crate::planning::abc::Class;
use std::collections::BTreeMap;

/// A submitted form as name-value pairs, in the order sent.
pub type Fields = Vec<(String, String)>;

/// Longest reason label, in characters (the rule of `service::check_reason_codes`).
const MAX_LABEL_CHARS: usize = 200;
/// Longest reason code, in bytes of ASCII (the rule of `service::check_reason_codes`).
const MAX_CODE_LEN: usize = 32;
/// Longest source name, in characters (the rule of `service::check_sources`).
const MAX_SOURCE_CHARS: usize = 64;
/// Decimal places of money (minor units) and of percent (basis points).
const HUNDREDTHS: u32 = 2;
/// Decimal places of seconds typed for millisecond limits.
const THOUSANDTHS: u32 = 3;

/// One refused field: its form name and a sentence that names it for people.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FormError {
    pub field: String,
    pub message: String,
}

impl FormError {
    fn new(field: impl Into<String>, message: impl Into<String>) -> Self {
        Self {
            field: field.into(),
            message: message.into(),
        }
    }
}

/// A form's refusals, empty when it was not refused.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Errors(pub Vec<FormError>);

impl Errors {
    /// Says whether there is nothing to show.
    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    /// Says whether the field named `field` was refused.
    pub fn at(&self, field: &str) -> bool {
        self.0.iter().any(|e| e.field == field)
    }

    /// Says whether a class's limit (`{key}_{part}`, e.g. `b_percent`) was refused.
    pub fn at_class(&self, key: &str, part: &str) -> bool {
        self.at(&format!("{key}_{part}"))
    }

    /// Says whether the field `name` of row `i` (`{name}.{i}`) was refused.
    /// (`i` by reference: templates pass their loop index so.)
    pub fn at_row(&self, name: &str, i: &usize) -> bool {
        self.at(&format!("{name}.{i}"))
    }

    /// Returns the messages in the order found.
    pub fn messages(&self) -> impl Iterator<Item = &str> {
        self.0.iter().map(|e| e.message.as_str())
    }
}

fn text<'a>(fields: &'a Fields, name: &str) -> &'a str {
    fields
        .iter()
        .find(|(k, _)| k == name)
        .map_or("", |(_, v)| v.trim())
}

fn checked(fields: &Fields, name: &str) -> bool {
    fields.iter().any(|(k, v)| k == name && !v.is_empty())
}

/// Parses a decimal that is not negative, with at most `places` decimal places,
/// as a whole number of `10^-places` (e.g. `"2.5"` with 2 places is 250).
/// The error completes a sentence about the text: "must not be negative".
pub fn parse_fixed(text: &str, places: u32) -> Result<i64, String> {
    let t = text.trim();
    if t.starts_with('-') {
        return Err("must not be negative".into());
    }
    let (whole, frac) = t.split_once('.').unwrap_or((t, ""));
    let digits = |s: &str| s.chars().all(|c| c.is_ascii_digit());
    if whole.is_empty() || !digits(whole) || !digits(frac) {
        return Err(if places == 0 {
            "is not a whole number".into()
        } else {
            "is not a number like 2 or 2.5".into()
        });
    }
    if frac.len() > places as usize {
        return Err(if places == 0 {
            "is not a whole number".into()
        } else {
            format!("has more than {places} decimal places")
        });
    }
    let scale = 10_i64.pow(places);
    let frac_value: i64 = if frac.is_empty() {
        0
    } else {
        let shift = 10_i64.pow(places - frac.len() as u32);
        frac.parse::<i64>()
            .map_err(|_| "is too large".to_string())?
            * shift
    };
    whole
        .parse::<i64>()
        .ok()
        .and_then(|w| w.checked_mul(scale))
        .and_then(|w| w.checked_add(frac_value))
        .ok_or_else(|| "is too large".into())
}

/// Writes `n / 10^places` with as few decimals as it needs, but at least `keep`.
pub fn fixed(n: i64, places: u32, keep: u32) -> String {
    let scale = 10_i64.pow(places);
    let sign = if n < 0 { "-" } else { "" };
    let (whole, frac) = (
        n.unsigned_abs() / scale as u64,
        n.unsigned_abs() % scale as u64,
    );
    let mut digits = format!("{frac:0width$}", width = places as usize);
    while digits.len() > keep as usize && digits.ends_with('0') {
        digits.pop();
    }
    if digits.is_empty() {
        format!("{sign}{whole}")
    } else {
        format!("{sign}{whole}.{digits}")
    }
}

/// Reads a required limit: refused when empty.
fn required(
    errors: &mut Vec<FormError>,
    field: &str,
    label: &str,
    text: &str,
    places: u32,
) -> Option<i64> {
    if text.is_empty() {
        errors.push(FormError::new(
            field,
            format!("{label}: a value is required (0 or more)."),
        ));
        return None;
    }
    optional(errors, field, label, text, places).flatten()
}

/// Reads a limit that may be left empty (`Some(None)`); `None` when refused.
fn optional(
    errors: &mut Vec<FormError>,
    field: &str,
    label: &str,
    text: &str,
    places: u32,
) -> Option<Option<i64>> {
    if text.is_empty() {
        return Some(None);
    }
    match parse_fixed(text, places) {
        Ok(v) => Some(Some(v)),
        Err(why) => {
            errors.push(FormError::new(field, format!("{label}: '{text}' {why}.")));
            None
        }
    }
}

// ---------------------------------------------------------------------------
// Tolerances and review limits.

/// One class's tolerance as typed: empty text is a limit not set.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ToleranceText {
    pub class: &'static str,
    /// The class in field names: `a_units`, `a_percent`, `a_value`.
    pub key: &'static str,
    pub units: String,
    pub percent: String,
    pub value: String,
}

/// The form of tolerances and review limits.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SettingsForm {
    pub classes: Vec<ToleranceText>,
    pub auto_adjust: bool,
    pub manager_value: String,
    pub bulk_value: String,
}

fn class_key(class: Class) -> &'static str {
    match class {
        Class::A => "a",
        Class::B => "b",
        Class::C => "c",
    }
}

impl SettingsForm {
    /// Fills the form from stored settings.
    pub fn of(s: &NettingSettings) -> Self {
        let money = |v: i64| fixed(v, HUNDREDTHS, HUNDREDTHS);
        Self {
            classes: Class::ALL
                .into_iter()
                .map(|class| {
                    let t = s.tolerances.for_class(class);
                    ToleranceText {
                        class: class.as_str(),
                        key: class_key(class),
                        units: t.units.map(|u| u.to_string()).unwrap_or_default(),
                        percent: t
                            .percent_bp
                            .map(|bp| fixed(bp, HUNDREDTHS, 0))
                            .unwrap_or_default(),
                        value: t.value_minor.map(money).unwrap_or_default(),
                    }
                })
                .collect(),
            auto_adjust: s.auto_adjust,
            manager_value: money(s.manager_value_minor),
            bulk_value: money(s.bulk_value_minor),
        }
    }

    /// Keeps what was typed.
    pub fn read(fields: &Fields) -> Self {
        Self {
            classes: Class::ALL
                .into_iter()
                .map(|class| {
                    let key = class_key(class);
                    let part = |p: &str| text(fields, &format!("{key}_{p}")).to_string();
                    ToleranceText {
                        class: class.as_str(),
                        key,
                        units: part("units"),
                        percent: part("percent"),
                        value: part("value"),
                    }
                })
                .collect(),
            auto_adjust: checked(fields, "auto_adjust"),
            manager_value: text(fields, "manager_value").to_string(),
            bulk_value: text(fields, "bulk_value").to_string(),
        }
    }

    /// Turns the form into settings, or says which fields are wrong and why.
    pub fn parse(&self) -> Result<NettingSettings, Errors> {
        let mut errors = Vec::new();
        let mut tolerances = Vec::new();
        for t in &self.classes {
            let field = |p: &str| format!("{}_{p}", t.key);
            let label = |what: &str| format!("Class {} {what}", t.class);
            let units = optional(&mut errors, &field("units"), &label("units"), &t.units, 0);
            let percent = optional(
                &mut errors,
                &field("percent"),
                &label("percent"),
                &t.percent,
                HUNDREDTHS,
            );
            if let Some(Some(bp)) = percent
                && bp > BASIS_POINTS_PER_WHOLE
            {
                errors.push(FormError::new(
                    field("percent"),
                    format!(
                        "{}: '{}' is more than 100 %: a difference cannot be a larger share of \
                         the book than the whole of it.",
                        label("percent"),
                        t.percent
                    ),
                ));
            }
            let value = optional(
                &mut errors,
                &field("value"),
                &label("value"),
                &t.value,
                HUNDREDTHS,
            );
            tolerances.push(Tolerance {
                units: units.flatten(),
                percent_bp: percent.flatten(),
                value_minor: value.flatten(),
            });
        }
        let manager = required(
            &mut errors,
            "manager_value",
            "Only an inventory manager approves above",
            &self.manager_value,
            HUNDREDTHS,
        );
        let bulk = required(
            &mut errors,
            "bulk_value",
            "Bulk approval offered below",
            &self.bulk_value,
            HUNDREDTHS,
        );
        let (Some(manager_value_minor), Some(bulk_value_minor), [a, b, c], true) =
            (manager, bulk, tolerances.as_slice(), errors.is_empty())
        else {
            return Err(Errors(errors));
        };
        let s = NettingSettings {
            tolerances: ClassTolerances {
                a: *a,
                b: *b,
                c: *c,
            },
            auto_adjust: self.auto_adjust,
            manager_value_minor,
            bulk_value_minor,
        };
        s.check()
            .map_err(|m| Errors(vec![FormError::new("settings", m)]))?;
        Ok(s)
    }
}

// ---------------------------------------------------------------------------
// Lists: sources and reason codes.

/// A list as the page showed it (`shown`, by name) and as it should now be.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ListEdit<T> {
    pub shown: Vec<String>,
    pub rows: Vec<T>,
}

/// Gathers indexed fields (`name.0`, `name.1`, …) into rows of their values.
fn indexed(fields: &Fields, names: &[&str]) -> BTreeMap<usize, BTreeMap<String, String>> {
    let mut rows: BTreeMap<usize, BTreeMap<String, String>> = BTreeMap::new();
    for (k, v) in fields {
        let Some((name, index)) = k.split_once('.') else {
            continue;
        };
        let Ok(i) = index.parse::<usize>() else {
            continue;
        };
        if i < MAX_POLICY_ROWS && names.contains(&name) {
            rows.entry(i)
                .or_default()
                .insert(name.to_string(), v.trim().to_string());
        }
    }
    rows
}

fn cell(row: &BTreeMap<String, String>, name: &str) -> String {
    row.get(name).cloned().unwrap_or_default()
}

/// One movement source as typed; limits in seconds.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SourceText {
    pub source: String,
    pub uncertainty_s: String,
    pub lag_s: String,
    pub remove: bool,
}

/// The form of movement sources' timing, with a row for a new source.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct SourcesForm {
    pub rows: Vec<SourceText>,
    pub new_source: String,
    pub new_uncertainty_s: String,
    pub new_lag_s: String,
}

impl SourcesForm {
    /// Fills the form from stored rows.
    pub fn of(rows: &[SourceTimingRow]) -> Self {
        let seconds = |ms: i64| fixed(ms, THOUSANDTHS, 0);
        Self {
            rows: rows
                .iter()
                .map(|r| SourceText {
                    source: r.source.clone(),
                    uncertainty_s: seconds(r.uncertainty_ms),
                    lag_s: seconds(r.posting_lag_ms),
                    remove: false,
                })
                .collect(),
            ..Self::default()
        }
    }

    /// Keeps what was typed.
    pub fn read(fields: &Fields) -> Self {
        let rows = indexed(fields, &["source", "uncertainty_s", "lag_s", "remove"])
            .into_values()
            .map(|r| SourceText {
                source: cell(&r, "source"),
                uncertainty_s: cell(&r, "uncertainty_s"),
                lag_s: cell(&r, "lag_s"),
                remove: !cell(&r, "remove").is_empty(),
            })
            .collect();
        Self {
            rows,
            new_source: text(fields, "new_source").to_string(),
            new_uncertainty_s: text(fields, "new_uncertainty_s").to_string(),
            new_lag_s: text(fields, "new_lag_s").to_string(),
        }
    }

    /// Turns the form into the site's new list, or says which fields are wrong.
    pub fn parse(&self) -> Result<ListEdit<SourceTimingRow>, Errors> {
        let mut errors = Vec::new();
        let mut rows = Vec::new();
        let shown: Vec<String> = self.rows.iter().map(|r| r.source.clone()).collect();
        for (i, r) in self.rows.iter().enumerate() {
            if r.source.is_empty() {
                errors.push(FormError::new(
                    format!("source.{i}"),
                    format!(
                        "Row {}: the source's name is missing; reload the page.",
                        i + 1
                    ),
                ));
                continue;
            }
            if r.remove {
                continue;
            }
            let u = required(
                &mut errors,
                &format!("uncertainty_s.{i}"),
                &format!("Clock uncertainty of '{}' (seconds)", r.source),
                &r.uncertainty_s,
                THOUSANDTHS,
            );
            let lag = required(
                &mut errors,
                &format!("lag_s.{i}"),
                &format!("Posting lag of '{}' (seconds)", r.source),
                &r.lag_s,
                THOUSANDTHS,
            );
            if let (Some(uncertainty_ms), Some(posting_lag_ms)) = (u, lag) {
                rows.push(SourceTimingRow {
                    source: r.source.clone(),
                    uncertainty_ms,
                    posting_lag_ms,
                });
            }
        }
        let adding = !(self.new_source.is_empty()
            && self.new_uncertainty_s.is_empty()
            && self.new_lag_s.is_empty());
        if adding {
            let name = self.new_source.as_str();
            if name.is_empty() || name.chars().count() > MAX_SOURCE_CHARS {
                errors.push(FormError::new(
                    "new_source",
                    format!("New source: the name must be 1 to {MAX_SOURCE_CHARS} characters."),
                ));
            } else if shown.iter().any(|s| s == name) {
                errors.push(FormError::new(
                    "new_source",
                    format!("New source: '{name}' is already listed; change its row instead."),
                ));
            }
            let label = |what: &str| {
                if name.is_empty() {
                    format!("{what} of the new source (seconds)")
                } else {
                    format!("{what} of '{name}' (seconds)")
                }
            };
            let u = required(
                &mut errors,
                "new_uncertainty_s",
                &label("Clock uncertainty"),
                &self.new_uncertainty_s,
                THOUSANDTHS,
            );
            let lag = required(
                &mut errors,
                "new_lag_s",
                &label("Posting lag"),
                &self.new_lag_s,
                THOUSANDTHS,
            );
            if let (Some(uncertainty_ms), Some(posting_lag_ms)) = (u, lag) {
                rows.push(SourceTimingRow {
                    source: name.to_string(),
                    uncertainty_ms,
                    posting_lag_ms,
                });
            }
        } else if self.rows.is_empty() {
            errors.push(FormError::new(
                "new_source",
                "Nothing to save: name a new source and give its limits.",
            ));
        }
        if errors.is_empty()
            && let Err(m) = service::check_sources(&rows)
        {
            errors.push(FormError::new("sources", m));
        }
        if errors.is_empty() {
            Ok(ListEdit { shown, rows })
        } else {
            Err(Errors(errors))
        }
    }
}

/// One reason code as typed, with how many decisions name it (not typed: the
/// page fills it in from the store, since a used code is kept).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ReasonText {
    pub code: String,
    pub label: String,
    pub remove: bool,
    pub used: i64,
}

/// The form of reason codes, with a row for a new code.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ReasonsForm {
    pub rows: Vec<ReasonText>,
    pub new_code: String,
    pub new_label: String,
}

fn code_is_valid(code: &str) -> bool {
    (1..=MAX_CODE_LEN).contains(&code.len())
        && code
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-')
}

impl ReasonsForm {
    /// Fills the form from the site's codes and the decisions that name them.
    pub fn of(codes: &[ReasonCode], uses: &BTreeMap<String, i64>) -> Self {
        let mut form = Self {
            rows: codes
                .iter()
                .map(|r| ReasonText {
                    code: r.code.clone(),
                    label: r.label.clone(),
                    remove: false,
                    used: 0,
                })
                .collect(),
            ..Self::default()
        };
        form.count_uses(uses);
        form
    }

    /// Keeps what was typed.
    pub fn read(fields: &Fields) -> Self {
        let rows = indexed(fields, &["code", "label", "remove"])
            .into_values()
            .map(|r| ReasonText {
                code: cell(&r, "code"),
                label: cell(&r, "label"),
                remove: !cell(&r, "remove").is_empty(),
                used: 0,
            })
            .collect();
        Self {
            rows,
            new_code: text(fields, "new_code").to_string(),
            new_label: text(fields, "new_label").to_string(),
        }
    }

    /// Notes how many decisions name each code.
    pub fn count_uses(&mut self, uses: &BTreeMap<String, i64>) {
        for r in &mut self.rows {
            r.used = uses.get(&r.code).copied().unwrap_or(0);
        }
    }

    /// Turns the form into the site's new list, or says which fields are wrong.
    pub fn parse(&self) -> Result<ListEdit<ReasonCode>, Errors> {
        let mut errors = Vec::new();
        let mut rows = Vec::new();
        let shown: Vec<String> = self.rows.iter().map(|r| r.code.clone()).collect();
        let label_error = |label: &str, whose: &str| -> Option<String> {
            if label.is_empty() {
                Some(format!("Label of {whose} must not be empty."))
            } else if label.chars().count() > MAX_LABEL_CHARS {
                Some(format!(
                    "Label of {whose} is longer than {MAX_LABEL_CHARS} characters."
                ))
            } else {
                None
            }
        };
        for (i, r) in self.rows.iter().enumerate() {
            if r.code.is_empty() {
                errors.push(FormError::new(
                    format!("code.{i}"),
                    format!("Row {}: the code is missing; reload the page.", i + 1),
                ));
                continue;
            }
            if r.remove {
                continue;
            }
            match label_error(&r.label, &format!("'{}'", r.code)) {
                Some(m) => errors.push(FormError::new(format!("label.{i}"), m)),
                None => rows.push(ReasonCode {
                    code: r.code.clone(),
                    label: r.label.clone(),
                }),
            }
        }
        let (code, label) = (self.new_code.as_str(), self.new_label.as_str());
        if !code.is_empty() || !label.is_empty() {
            if !code_is_valid(code) {
                errors.push(FormError::new(
                    "new_code",
                    format!(
                        "New reason code '{code}': use 1 to {MAX_CODE_LEN} letters, digits, \
                         '_' or '-' (no spaces)."
                    ),
                ));
            } else if code == crate::review::AUTO_REASON_CODE {
                errors.push(FormError::new(
                    "new_code",
                    format!(
                        "New reason code '{code}' is kept for automatic adjustments; pick \
                         another."
                    ),
                ));
            } else if shown.iter().any(|c| c == code) {
                errors.push(FormError::new(
                    "new_code",
                    format!(
                        "New reason code '{code}' is already in the list; change its label \
                         above instead."
                    ),
                ));
            }
            let whose = if code.is_empty() {
                "the new reason code".to_string()
            } else {
                format!("'{code}'")
            };
            match label_error(label, &whose) {
                Some(m) => errors.push(FormError::new("new_label", m)),
                None => rows.push(ReasonCode {
                    code: code.to_string(),
                    label: label.to_string(),
                }),
            }
        } else if self.rows.is_empty() {
            errors.push(FormError::new(
                "new_code",
                "The form carried no reason codes: reload the page.",
            ));
        }
        if errors.is_empty() && rows.is_empty() {
            errors.push(FormError::new(
                "reasons",
                "Keep at least one reason code: reviewers choose from this list.",
            ));
        }
        if errors.is_empty()
            && let Err(m) = service::check_reason_codes(&rows)
        {
            errors.push(FormError::new("reasons", m));
        }
        if errors.is_empty() {
            Ok(ListEdit { shown, rows })
        } else {
            Err(Errors(errors))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn fields(pairs: &[(&str, &str)]) -> Fields {
        pairs
            .iter()
            .map(|(k, v)| (k.to_string(), v.to_string()))
            .collect()
    }

    #[test]
    fn fixed_point_text_reads_and_writes_exactly() {
        assert_eq!(parse_fixed("2.5", 2), Ok(250));
        assert_eq!(parse_fixed(" 12 ", 2), Ok(1_200));
        assert_eq!(parse_fixed("0.05", 2), Ok(5));
        assert_eq!(parse_fixed("1.5", 3), Ok(1_500));
        assert_eq!(parse_fixed("7", 0), Ok(7));
        assert_eq!(parse_fixed("12.", 2), Ok(1_200));
        assert_eq!(parse_fixed("-1", 2).unwrap_err(), "must not be negative");
        assert_eq!(parse_fixed("1.5", 0).unwrap_err(), "is not a whole number");
        assert_eq!(
            parse_fixed("2.555", 2).unwrap_err(),
            "has more than 2 decimal places"
        );
        for bad in ["", ".5", "1,5", "x", "1e3", "+1"] {
            assert!(parse_fixed(bad, 2).is_err(), "{bad}");
        }
        assert_eq!(
            parse_fixed("92233720368547758.08", 2).unwrap_err(),
            "is too large"
        );
        assert_eq!(fixed(250, 2, 0), "2.5");
        assert_eq!(fixed(200, 2, 0), "2");
        assert_eq!(fixed(5, 2, 2), "0.05");
        assert_eq!(fixed(50_000, 2, 2), "500.00");
        assert_eq!(fixed(900_000, 3, 0), "900");
        assert_eq!(fixed(1_500, 3, 0), "1.5");
        for n in [0, 1, 99, 100, 101, 12_345, i64::MAX] {
            assert_eq!(parse_fixed(&fixed(n, 3, 0), 3), Ok(n), "{n}");
        }
    }

    #[test]
    fn stored_settings_come_back_unchanged_through_the_form() {
        let mut s = NettingSettings::default();
        s.tolerances.a = Tolerance {
            units: Some(1),
            percent_bp: Some(50),
            value_minor: Some(1_250),
        };
        s.auto_adjust = true;
        let form = SettingsForm::of(&s);
        assert_eq!(form.classes[1].percent, "2");
        assert_eq!(form.classes[0].value, "12.50");
        assert_eq!(form.parse(), Ok(s));
    }

    #[test]
    fn the_settings_form_names_each_field_that_is_wrong() {
        let f = SettingsForm::read(&fields(&[
            ("a_units", "-1"),
            ("b_percent", "150"),
            ("c_value", "ten"),
            ("manager_value", ""),
            ("bulk_value", "50"),
        ]));
        let e = f.parse().unwrap_err();
        let named: Vec<&str> = e.0.iter().map(|e| e.field.as_str()).collect();
        assert_eq!(named, ["a_units", "b_percent", "c_value", "manager_value"]);
        let text: Vec<&str> = e.messages().collect();
        assert!(text[0].starts_with("Class A units: '-1' must not be negative"));
        assert!(text[1].starts_with("Class B percent: '150' is more than 100 %"));
        assert!(text[2].starts_with("Class C value: 'ten' is not a number"));
        assert!(text[3].contains("a value is required"));
        assert!(e.at_class("b", "percent"));
        assert!(!e.at("bulk_value"));
        // 100 % itself is allowed; empty limits are not set.
        let ok = SettingsForm::read(&fields(&[
            ("b_percent", "100"),
            ("manager_value", "0"),
            ("bulk_value", "0.5"),
        ]))
        .parse()
        .unwrap();
        assert_eq!(ok.tolerances.b.percent_bp, Some(10_000));
        let unset = Tolerance {
            units: None,
            percent_bp: None,
            value_minor: None,
        };
        assert_eq!(ok.tolerances.a, unset, "all empty: exact, by judge's rule");
        assert_eq!(ok.bulk_value_minor, 50);
        assert!(!ok.auto_adjust);
    }

    #[test]
    fn sources_are_edited_removed_and_added_by_row() {
        let f = SourcesForm::read(&fields(&[
            ("csrf", "t"),
            ("source.0", "host"),
            ("uncertainty_s.0", "2.5"),
            ("lag_s.0", "900"),
            ("source.1", "scanner"),
            ("uncertainty_s.1", "1"),
            ("lag_s.1", "0"),
            ("remove.1", "on"),
            ("new_source", "dock"),
            ("new_uncertainty_s", "0.25"),
            ("new_lag_s", "60"),
        ]));
        let edit = f.parse().unwrap();
        assert_eq!(edit.shown, ["host", "scanner"]);
        assert_eq!(
            edit.rows,
            [
                SourceTimingRow {
                    source: "host".into(),
                    uncertainty_ms: 2_500,
                    posting_lag_ms: 900_000
                },
                SourceTimingRow {
                    source: "dock".into(),
                    uncertainty_ms: 250,
                    posting_lag_ms: 60_000
                },
            ]
        );
        let bad = SourcesForm::read(&fields(&[
            ("source.0", "host"),
            ("uncertainty_s.0", "1"),
            ("lag_s.0", "-5"),
            ("new_source", "host"),
            ("new_uncertainty_s", "1"),
            ("new_lag_s", "1"),
        ]))
        .parse()
        .unwrap_err();
        let text: Vec<&str> = bad.messages().collect();
        assert_eq!(text.len(), 2, "{text:?}");
        assert!(text[0].starts_with("Posting lag of 'host' (seconds): '-5' must not be negative"));
        assert!(text[1].contains("'host' is already listed"));
        let empty = SourcesForm::read(&fields(&[("csrf", "t")])).parse();
        assert!(empty.unwrap_err().at("new_source"));
    }

    #[test]
    fn reason_codes_are_relabelled_removed_and_added_by_row() {
        let f = ReasonsForm::read(&fields(&[
            ("code.0", "damaged"),
            ("label.0", "Damaged on the shelf"),
            ("code.1", "mis_pick"),
            ("label.1", "Mis-pick found"),
            ("remove.1", "on"),
            ("new_code", "shrink"),
            ("new_label", "Shrinkage"),
        ]));
        let edit = f.parse().unwrap();
        assert_eq!(edit.shown, ["damaged", "mis_pick"]);
        let codes: Vec<(&str, &str)> = edit
            .rows
            .iter()
            .map(|r| (r.code.as_str(), r.label.as_str()))
            .collect();
        assert_eq!(
            codes,
            [("damaged", "Damaged on the shelf"), ("shrink", "Shrinkage")]
        );
        // The fields sent, the field refused, and a piece of what it says.
        type Case<'a> = (&'a [(&'a str, &'a str)], &'a str, &'a str);
        let cases: &[Case] = &[
            (
                &[("code.0", "damaged"), ("label.0", " ")],
                "label.0",
                "Label of 'damaged' must not be empty",
            ),
            (
                &[
                    ("code.0", "damaged"),
                    ("label.0", "x"),
                    ("new_code", "damaged"),
                    ("new_label", "again"),
                ],
                "new_code",
                "already in the list",
            ),
            (
                &[
                    ("code.0", "damaged"),
                    ("label.0", "x"),
                    ("new_code", "two words"),
                    ("new_label", "y"),
                ],
                "new_code",
                "no spaces",
            ),
            (
                &[("code.0", "damaged"), ("label.0", "x"), ("new_code", "z")],
                "new_label",
                "Label of 'z' must not be empty",
            ),
            (
                &[("code.0", "damaged"), ("label.0", "x"), ("remove.0", "on")],
                "reasons",
                "Keep at least one reason code",
            ),
            (&[("csrf", "t")], "new_code", "carried no reason codes"),
        ];
        for (given, field, says) in cases {
            let e = ReasonsForm::read(&fields(given)).parse().unwrap_err();
            assert!(e.at(field), "{given:?}: {e:?}");
            assert!(e.messages().any(|m| m.contains(says)), "{given:?}: {e:?}");
        }
    }
}
