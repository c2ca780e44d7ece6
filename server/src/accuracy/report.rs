//! The accuracy and buffer reports as tables: the same rows become CSV for
//! the API and the command line, and an aligned text table for a terminal.
//! Numbers are written in full (a float as Rust prints it, which reads back
//! to the same value), empty where there is no figure.

use super::inputs::PlannerInput;
use super::service::{AccuracyReport, BufferReport, GroupRow, ItemReport};

/// A named table of text cells.
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    pub name: &'static str,
    pub headers: Vec<&'static str>,
    pub rows: Vec<Vec<String>>,
}

/// The tables of an accuracy report, by the names the API's `table` takes.
pub const ACCURACY_TABLES: [&str; 7] = [
    "summary",
    "by_class",
    "by_zone",
    "by_counter",
    "by_week",
    "weeks",
    "coverage",
];

fn opt<T: ToString>(v: Option<T>) -> String {
    v.map(|v| v.to_string()).unwrap_or_default()
}

fn group_table(name: &'static str, rows: &[GroupRow]) -> Table {
    Table {
        name,
        headers: vec!["key", "hits", "counted", "ira"],
        rows: rows
            .iter()
            .map(|r| {
                vec![
                    r.key.clone(),
                    r.hits.to_string(),
                    r.counted.to_string(),
                    opt(r.ira),
                ]
            })
            .collect(),
    }
}

/// Returns one table of an accuracy report, or `None` for an unknown name.
pub fn accuracy_table(r: &AccuracyReport, name: &str) -> Option<Table> {
    Some(match name {
        "summary" => {
            let c = r.coverage;
            let rows = [
                ("since", r.period.since.to_string()),
                ("until", r.period.until.to_string()),
                ("class", opt(r.filter.class)),
                ("zone", r.filter.zone.clone().unwrap_or_default()),
                ("ira_target", r.ira_target.to_string()),
                ("counted", r.counted.to_string()),
                ("hits", r.ira.part.to_string()),
                ("pending", r.pending.to_string()),
                ("ira", opt(r.ira.value)),
                ("value_accuracy", opt(r.value_accuracy)),
                (
                    "counted_book_value_minor",
                    r.counted_book_value_minor.to_string(),
                ),
                ("net_adjustment_minor", r.net_adjustment_minor.to_string()),
                (
                    "gross_adjustment_minor",
                    r.gross_adjustment_minor.to_string(),
                ),
                ("tasks_planned", r.compliance.whole.to_string()),
                ("tasks_done", r.compliance.part.to_string()),
                ("compliance", opt(r.compliance.value)),
                ("a_items_due", opt(c.map(|c| c.whole))),
                ("a_items_on_time", opt(c.map(|c| c.part))),
                ("coverage", opt(c.and_then(|c| c.value))),
            ];
            Table {
                name: "summary",
                headers: vec!["metric", "value"],
                rows: rows
                    .into_iter()
                    .map(|(k, v)| vec![k.to_string(), v])
                    .collect(),
            }
        }
        "by_class" => group_table("by_class", &r.by_class),
        "by_zone" => group_table("by_zone", &r.by_zone),
        "by_counter" => group_table("by_counter", &r.by_counter),
        "by_week" => group_table("by_week", &r.by_week),
        "weeks" => Table {
            name: "weeks",
            headers: vec![
                "week",
                "counted",
                "hits",
                "ira",
                "ira_a",
                "ira_b",
                "ira_c",
                "counted_book_value_minor",
                "net_adjustment_minor",
                "gross_adjustment_minor",
                "value_accuracy",
                "planned",
                "done",
                "compliance",
            ],
            rows: r
                .weeks
                .iter()
                .map(|w| {
                    vec![
                        w.week.clone(),
                        w.counted.to_string(),
                        w.hits.to_string(),
                        opt(w.ira),
                        opt(w.ira_a),
                        opt(w.ira_b),
                        opt(w.ira_c),
                        w.counted_book_value_minor.to_string(),
                        w.net_adjustment_minor.to_string(),
                        w.gross_adjustment_minor.to_string(),
                        opt(w.value_accuracy),
                        w.planned.to_string(),
                        w.done.to_string(),
                        opt(w.compliance),
                    ]
                })
                .collect(),
        },
        "coverage" => Table {
            name: "coverage",
            headers: vec!["item", "due_by", "counted_on", "on_time"],
            rows: r
                .coverage_items
                .iter()
                .map(|c| {
                    vec![
                        c.item.clone(),
                        c.due_by.to_string(),
                        opt(c.counted_on),
                        c.on_time.to_string(),
                    ]
                })
                .collect(),
        },
        _ => return None,
    })
}

/// Returns the per-item record-error table.
pub fn items_table(items: &[ItemReport]) -> Table {
    Table {
        name: "items",
        headers: vec![
            "sku",
            "description",
            "class",
            "group",
            "keys",
            "counts",
            "hits",
            "hit_rate",
            "bias",
            "error_sd",
            "growth",
            "a",
            "b",
            "points",
            "note",
        ],
        rows: items
            .iter()
            .map(|i| {
                let f = &i.figures;
                vec![
                    i.item.sku.clone(),
                    i.item.description.clone(),
                    opt(i.item.class),
                    i.item.group.clone(),
                    i.item.keys.to_string(),
                    f.counts.to_string(),
                    f.hits.to_string(),
                    opt(f.hit_rate),
                    opt(f.bias),
                    opt(f.error_sd),
                    f.growth.status.to_string(),
                    opt(f.growth.a),
                    opt(f.growth.b),
                    f.growth.points.to_string(),
                    f.growth.note.clone().unwrap_or_default(),
                ]
            })
            .collect(),
    }
}

/// The columns of the buffer table, in order.
pub const BUFFER_HEADERS: [&str; 36] = [
    "sku",
    "description",
    "class",
    "group",
    "window_from",
    "window_to",
    "working_days",
    "extra_days",
    "samples",
    "issued",
    "demand_per_day",
    "demand_sd_per_day",
    "lead_source",
    "lead_time_days",
    "lead_time_sd_days",
    "review_days",
    "service_level",
    "service_level_source",
    "z",
    "count_interval_days",
    "count_interval_source",
    "per_key_sd",
    "keys",
    "record_error_sd",
    "exposure_days",
    "demand_variance",
    "lead_time_variance",
    "record_variance",
    "total_variance",
    "combined_sd",
    "safety_stock",
    "cycle_stock",
    "order_point",
    "order_point_units",
    "growth",
    "notes",
];

/// Returns the buffer table: one row per item, every term a column.
pub fn buffer_table(reports: &[BufferReport]) -> Table {
    Table {
        name: "buffer",
        headers: BUFFER_HEADERS.to_vec(),
        rows: reports
            .iter()
            .map(|r| {
                let b = r.buffer.as_ref();
                let l = r.lead_time.as_ref();
                let d = &r.demand;
                vec![
                    r.item.sku.clone(),
                    r.item.description.clone(),
                    opt(r.item.class),
                    r.item.group.clone(),
                    d.from.to_string(),
                    d.to.to_string(),
                    d.working_days.to_string(),
                    d.extra_days.to_string(),
                    d.samples.to_string(),
                    d.issued.to_string(),
                    opt(b.map(|b| b.inputs.demand_per_day).or(d.mean)),
                    opt(b.map(|b| b.inputs.demand_sd_per_day).or(d.sd)),
                    opt(l.map(|l| l.source.clone())),
                    opt(l.map(|l| l.times.lead_time_days)),
                    opt(l.map(|l| l.times.lead_time_sd_days)),
                    opt(l.map(|l| l.times.review_days)),
                    r.service_level.to_string(),
                    r.service_level_source.clone(),
                    opt(b.map(|b| b.z)),
                    r.record_error.at_days.to_string(),
                    r.record_error.interval_source.clone(),
                    opt(r.record_error.per_key_sd),
                    r.record_error.keys.to_string(),
                    r.record_error.sigma_rec.to_string(),
                    opt(b.map(|b| b.exposure_days)),
                    opt(b.map(|b| b.demand_variance)),
                    opt(b.map(|b| b.lead_time_variance)),
                    opt(b.map(|b| b.record_variance)),
                    opt(b.map(|b| b.total_variance)),
                    opt(b.map(|b| b.combined_sd)),
                    opt(b.map(|b| b.safety_stock)),
                    opt(b.map(|b| b.cycle_stock)),
                    opt(b.map(|b| b.order_point)),
                    opt(b.map(|b| b.order_point_units)),
                    r.record_error.growth.status.to_string(),
                    r.notes.join("; "),
                ]
            })
            .collect(),
    }
}

/// Returns the stored planner inputs as a table in the import's own columns.
pub fn inputs_table(inputs: &[PlannerInput]) -> Table {
    Table {
        name: "planner_inputs",
        headers: vec![
            "sku",
            "group",
            "lead_time_days",
            "lead_time_sd_days",
            "review_days",
            "service_level",
            "updated_at",
            "updated_by",
        ],
        rows: inputs
            .iter()
            .map(|p| {
                vec![
                    p.sku.clone(),
                    p.group.clone(),
                    p.times.lead_time_days.to_string(),
                    p.times.lead_time_sd_days.to_string(),
                    p.times.review_days.to_string(),
                    opt(p.times.service_level),
                    p.updated_at.to_string(),
                    p.updated_by.clone(),
                ]
            })
            .collect(),
    }
}

/// Writes a table as CSV with a header line.
pub fn to_csv(t: &Table) -> Result<String, csv::Error> {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(&t.headers)?;
    // A table's columns carry no types, so a cell is escaped unless it is a number.
    for row in &t.rows {
        w.write_record(
            row.iter()
                .map(|c| crate::input::csv_cell::cell(c).into_owned()),
        )?;
    }
    let bytes = w
        .into_inner()
        .map_err(|e| csv::Error::from(e.into_error()))?;
    Ok(String::from_utf8(bytes).expect("every cell is a Rust string, so the CSV is UTF-8"))
}

/// Writes a table as aligned text under its name.
pub fn to_text(t: &Table) -> String {
    let mut widths: Vec<usize> = t.headers.iter().map(|h| h.chars().count()).collect();
    for row in &t.rows {
        for (w, cell) in widths.iter_mut().zip(row) {
            *w = (*w).max(cell.chars().count());
        }
    }
    let line = |cells: Vec<&str>| {
        let mut s = String::new();
        for (i, (c, w)) in cells.iter().zip(&widths).enumerate() {
            if i > 0 {
                s.push_str("  ");
            }
            s.push_str(c);
            s.extend(std::iter::repeat_n(' ', w - c.chars().count()));
        }
        s.trim_end().to_string() + "\n"
    };
    let mut out = format!("{}\n", t.name);
    out.push_str(&line(t.headers.clone()));
    for row in &t.rows {
        out.push_str(&line(row.iter().map(String::as_str).collect()));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn text_tables_align_and_csv_quotes_commas() {
        let t = Table {
            name: "t",
            headers: vec!["key", "n"],
            rows: vec![
                vec!["a, b".into(), "1".into()],
                vec!["long key".into(), "22".into()],
            ],
        };
        assert_eq!(to_text(&t), "t\nkey       n\na, b      1\nlong key  22\n");
        assert_eq!(to_csv(&t).unwrap(), "key,n\n\"a, b\",1\nlong key,22\n");
    }
}
