//! What a site and its planner set for the accuracy reports and the buffer:
//! the IRA target, the demand window and service level per class, and per
//! item (or per item group) the lead time, its spread and the review period.
//! Rows arrive by CSV import or as JSON and are validated here, before any SQL.
//! No I/O.

use super::buffer::MAX_DAYS;
use crate::batch::FieldError;
use crate::input::text::Kind;
use crate::master::codes::Sku;
use crate::master::read::{self, Page, ParamError};
use crate::planning::abc::Class;
use serde::{Deserialize, Serialize};

/// Longest demand window, in calendar days (ten years).
pub const MAX_WINDOW_DAYS: u32 = 3660;
/// Longest item group name accepted (the rule of names, `input::text`).
pub const MAX_GROUP_CHARS: usize = crate::input::text::MAX_NAME_CHARS;

/// A site's accuracy target, demand window and service levels.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct AccuracySettings {
    /// The IRA the site aims for, 0 to 1; the trend charts draw it as a line.
    pub ira_target: f64,
    /// Calendar days of issues the daily demand is measured over.
    pub demand_window_days: u32,
    /// Service level of each class, A first, each strictly between 0 and 1.
    pub service_level: [f64; 3],
}

impl Default for AccuracySettings {
    /// Returns a 95 % IRA target, a 90-day demand window and service levels
    /// 98 / 95 / 90 % for A / B / C (common practice, no source).
    fn default() -> Self {
        Self {
            ira_target: 0.95,
            demand_window_days: 90,
            service_level: [0.98, 0.95, 0.90],
        }
    }
}

impl AccuracySettings {
    /// Checks every setting; returns what is wrong.
    pub fn check(&self) -> Result<(), String> {
        if !(self.ira_target.is_finite() && (0.0..=1.0).contains(&self.ira_target)) {
            return Err(format!(
                "ira_target must be 0 to 1 (0.95 is 95 %), found {}",
                self.ira_target
            ));
        }
        if self.demand_window_days == 0 || self.demand_window_days > MAX_WINDOW_DAYS {
            return Err(format!(
                "demand_window_days must be 1 to {MAX_WINDOW_DAYS}, found {}",
                self.demand_window_days
            ));
        }
        for (class, p) in Class::ALL.iter().zip(self.service_level) {
            if !service_level_ok(p) {
                return Err(format!(
                    "service_level of class {class} must lie strictly between 0 and 1, found {p}"
                ));
            }
        }
        Ok(())
    }

    /// Returns the IRA target in basis points, as stored.
    pub fn target_bp(&self) -> i64 {
        (self.ira_target * 10_000.0).round() as i64
    }
}

fn service_level_ok(p: f64) -> bool {
    p.is_finite() && p > 0.0 && p < 1.0
}

/// One row of planner inputs as it arrives: for one item (`sku`) or, with
/// `group` instead, the default of an item group.
#[derive(Debug, Clone, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct PlannerInputRecord {
    #[serde(default)]
    pub sku: Option<String>,
    #[serde(default)]
    pub group: Option<String>,
    pub lead_time_days: f64,
    /// Empty means 0.
    #[serde(default)]
    pub lead_time_sd_days: Option<f64>,
    /// Empty means 0 (continuous review).
    #[serde(default)]
    pub review_days: Option<f64>,
    /// Leave empty to take the class's service level.
    #[serde(default)]
    pub service_level: Option<f64>,
    /// Read-only (who set the row, and when, is the server's): taken and ignored, so a
    /// row read back can be sent again as it is.
    #[serde(default)]
    #[schema(value_type = Option<serde_json::Value>)]
    pub updated_at: Option<serde::de::IgnoredAny>,
    /// Read-only, as `updated_at`.
    #[serde(default)]
    #[schema(value_type = Option<serde_json::Value>)]
    pub updated_by: Option<serde::de::IgnoredAny>,
}

/// What a planner input row applies to.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum InputTarget {
    Item(Sku),
    Group(String),
}

/// The figures of one planner input, in working days.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, utoipa::ToSchema)]
pub struct LeadTimes {
    pub lead_time_days: f64,
    pub lead_time_sd_days: f64,
    pub review_days: f64,
    pub service_level: Option<f64>,
}

/// A validated planner input row.
#[derive(Debug, Clone, PartialEq)]
pub struct NewPlannerInput {
    pub target: InputTarget,
    pub times: LeadTimes,
}

/// A stored planner input, with who set it and when.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct PlannerInput {
    /// The item's SKU, or empty for a group default.
    pub sku: String,
    /// The group of a group default, or empty for an item's own row.
    pub group: String,
    #[serde(flatten)]
    pub times: LeadTimes,
    pub updated_at: crate::time::Timestamp,
    pub updated_by: String,
}

/// Which planner inputs to read, in the order of `(group, sku)`: items' own rows (group
/// empty) by SKU, then group defaults by group.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct InputQuery {
    /// Only this item's own row.
    pub sku: Option<Sku>,
    /// Only this group's default.
    pub group: Option<String>,
    /// The key `(group, sku)` of the last row of the previous page.
    pub after: Option<(String, String)>,
    /// Rows to read: the page's limit and one to spare.
    pub take: usize,
}

impl InputQuery {
    /// Every row of a site (the CSV export and the planner's own reads).
    pub fn every() -> Self {
        Self {
            sku: None,
            group: None,
            after: None,
            take: i64::MAX as usize,
        }
    }
}

/// Query parameters of `GET planner-inputs`: `sku`, `group`, `limit`, `after` (and
/// `format=csv`, which gives every row and is not paged).
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct InputParams {
    pub sku: Option<String>,
    pub group: Option<String>,
    pub limit: Option<String>,
    pub after: Option<String>,
    pub format: Option<String>,
}

impl InputParams {
    /// Checks the paging and filters; returns the query and the page's limit.
    pub fn query(&self) -> Result<(InputQuery, usize), ParamError> {
        let limit = read::limit(self.limit.as_deref())?;
        let given = |v: &Option<String>| {
            v.as_deref()
                .map(str::trim)
                .filter(|t| !t.is_empty())
                .map(str::to_owned)
        };
        let sku = given(&self.sku)
            .map(|t| {
                Sku::parse(&t).map_err(|e| ParamError {
                    param: "sku",
                    message: e.to_string(),
                })
            })
            .transpose()?;
        let group = given(&self.group)
            .map(|t| {
                crate::input::text::check(Kind::Name, &t).map_err(|e| ParamError {
                    param: "group",
                    message: e.to_string(),
                })
            })
            .transpose()?;
        Ok((
            InputQuery {
                sku,
                group,
                after: read::decode_cursor::<2>(self.after.as_deref())?.map(|[g, s]| (g, s)),
                take: limit + 1,
            },
            limit,
        ))
    }
}

/// Cuts a page of planner inputs (key: group, then SKU).
pub fn input_page(rows: Vec<PlannerInput>, limit: usize) -> Page<PlannerInput> {
    Page::cut(rows, limit, |p| vec![p.group.as_str(), p.sku.as_str()])
}

impl PlannerInputRecord {
    /// Validates the row.
    pub fn validate(self) -> Result<NewPlannerInput, Vec<FieldError>> {
        let mut errs = Vec::new();
        let sku = self.sku.as_deref().map(str::trim).filter(|s| !s.is_empty());
        let group = self
            .group
            .as_deref()
            .map(str::trim)
            .filter(|s| !s.is_empty());
        let target = match (sku, group) {
            (Some(s), None) => match Sku::parse(s) {
                Ok(sku) => Some(InputTarget::Item(sku)),
                Err(e) => {
                    errs.push(FieldError::new("sku", e.to_string()));
                    None
                }
            },
            (None, Some(g)) => match crate::input::text::field("group", Kind::Name, g) {
                Ok(g) => Some(InputTarget::Group(g)),
                Err(e) => {
                    errs.push(FieldError::new("group", e));
                    None
                }
            },
            (Some(_), Some(_)) => {
                errs.push(FieldError::new(
                    "group",
                    "give either sku (one item) or group (a group's default), not both",
                ));
                None
            }
            (None, None) => {
                errs.push(FieldError::new(
                    "sku",
                    "give sku (one item) or group (a group's default)",
                ));
                None
            }
        };
        let lead_time_sd_days = self.lead_time_sd_days.unwrap_or(0.0);
        let review_days = self.review_days.unwrap_or(0.0);
        for (field, value) in [
            ("lead_time_days", self.lead_time_days),
            ("lead_time_sd_days", lead_time_sd_days),
            ("review_days", review_days),
        ] {
            if !(value.is_finite() && (0.0..=MAX_DAYS).contains(&value)) {
                errs.push(FieldError::new(
                    field,
                    format!("must be a number of days from 0 to {MAX_DAYS}, found {value}"),
                ));
            }
        }
        if let Some(p) = self.service_level
            && !service_level_ok(p)
        {
            errs.push(FieldError::new(
                "service_level",
                format!("must lie strictly between 0 and 1 (e.g. 0.95), found {p}"),
            ));
        }
        match target {
            Some(target) if errs.is_empty() => Ok(NewPlannerInput {
                target,
                times: LeadTimes {
                    lead_time_days: self.lead_time_days,
                    lead_time_sd_days,
                    review_days,
                    service_level: self.service_level,
                },
            }),
            _ => Err(errs),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn record(
        sku: &str,
        group: &str,
        l: f64,
        sd: f64,
        r: f64,
        p: Option<f64>,
    ) -> PlannerInputRecord {
        PlannerInputRecord {
            sku: Some(sku.into()),
            group: Some(group.into()),
            lead_time_days: l,
            lead_time_sd_days: Some(sd),
            review_days: Some(r),
            service_level: p,
            updated_at: None,
            updated_by: None,
        }
    }

    #[test]
    fn a_row_names_an_item_or_a_group_and_sane_days() {
        let ok = record("S1", "", 5.0, 1.0, 2.0, Some(0.97))
            .validate()
            .unwrap();
        assert_eq!(ok.target, InputTarget::Item(Sku::parse("S1").unwrap()));
        let g = record("", "fasteners", 5.0, 0.0, 0.0, None)
            .validate()
            .unwrap();
        assert_eq!(g.target, InputTarget::Group("fasteners".into()));
        let both = record("S1", "fasteners", 5.0, 0.0, 0.0, None)
            .validate()
            .unwrap_err();
        assert_eq!(both[0].field, "group");
        let neither = record(" ", "", 5.0, 0.0, 0.0, None).validate().unwrap_err();
        assert_eq!(neither[0].field, "sku");
        let bad = record("S1", "", -1.0, f64::NAN, 4000.0, Some(1.0))
            .validate()
            .unwrap_err();
        let fields: Vec<_> = bad.iter().map(|e| e.field.as_str()).collect();
        assert_eq!(
            fields,
            [
                "lead_time_days",
                "lead_time_sd_days",
                "review_days",
                "service_level"
            ]
        );
    }

    #[test]
    fn settings_refuse_targets_and_levels_out_of_range() {
        assert!(AccuracySettings::default().check().is_ok());
        assert_eq!(AccuracySettings::default().target_bp(), 9500);
        let s = AccuracySettings {
            ira_target: 1.2,
            ..Default::default()
        };
        assert!(s.check().unwrap_err().contains("ira_target"));
        let s = AccuracySettings {
            service_level: [0.98, 1.0, 0.9],
            ..Default::default()
        };
        assert!(s.check().unwrap_err().contains("class B"));
        let s = AccuracySettings {
            demand_window_days: 0,
            ..Default::default()
        };
        assert!(s.check().is_err());
    }

    #[test]
    fn the_csv_export_of_planner_inputs_imports_again_its_read_only_columns_ignored() {
        // The header and a row as `GET planner-inputs?format=csv` writes them.
        let text = "sku,group,lead_time_days,lead_time_sd_days,review_days,service_level,updated_at,updated_by\n\
                    S1,,5,1,2,0.95,2026-03-02T08:00:00.000Z,pat\n";
        let mut rdr = csv::ReaderBuilder::new()
            .trim(csv::Trim::All)
            .from_reader(text.as_bytes());
        let rows: Vec<PlannerInputRecord> = rdr.deserialize().collect::<Result<_, _>>().unwrap();
        let row = rows.into_iter().next().unwrap().validate().unwrap();
        assert_eq!(row.target, InputTarget::Item(Sku::parse("S1").unwrap()));
        assert_eq!(row.times.service_level, Some(0.95));
    }
}
