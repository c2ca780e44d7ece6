//! The accuracy pages: the site's trend page (charts drawn as SVG on the
//! server, filters, each figure's definition beside it, CSV links for every
//! table), the record error of every counted item and of one, the buffer of
//! every item, and one item's buffer with every term of its derivation. The
//! two lists of every item are long tables: sorted, filtered and paged on the
//! server (`table`), the view in the URL. Book readers only; reading
//! changes nothing, so there are no forms to protect beyond the filter.

use super::chart::{self, Bars, Line};
use super::lists::{BUFFER_COLUMNS, ITEM_COLUMNS};
use super::routes::{ListParams, ReportParams, buffers_for, item_period, report_for};
use super::service::{self, BufferReport, GroupRow, ItemReport};
use super::table::{self, Shown};
use crate::AppState;
use crate::error::ApiError;
use crate::http::access::{Access, BOOK_READERS, CurrentUser, RouteTable};
use crate::http::extract::{CurrentSite, Params};
use crate::http::pages::{Me, PageError, render};
use crate::master::Site;
use crate::master::codes::Sku;
use askama::Template;
use axum::extract::{Path, State};
use axum::response::Html;

/// Adds the accuracy page routes.
pub fn routes(t: &mut RouteTable) {
    let read = Access::Site(BOOK_READERS);
    t.get("/sites/{site}/accuracy", read, accuracy_page)
        .get("/sites/{site}/accuracy/items", read, items_page)
        .get("/sites/{site}/accuracy/items/{sku}", read, item_page)
        .get("/sites/{site}/buffer", read, buffers_page)
        .get("/sites/{site}/buffer/{sku}", read, buffer_page);
}

/// What a chart says when the period has no counts to draw.
const NO_COUNTS: &str = "No counts in this period";

/// Writes a share as a percentage with one decimal, or a dash.
pub fn pct(v: Option<f64>) -> String {
    v.map_or("–".into(), |v| format!("{:.1} %", v * 100.0))
}

/// Writes minor units with thousands separators and a real minus sign.
pub fn money(minor: i64) -> String {
    let digits = minor.unsigned_abs().to_string();
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    if minor < 0 { format!("−{out}") } else { out }
}

/// Writes a figure with `places` decimals, or a dash.
pub fn num(v: Option<f64>, places: usize) -> String {
    v.map_or("–".into(), |v| format!("{v:.places$}"))
}

struct Row {
    key: String,
    hits: u64,
    counted: u64,
    ira: String,
    below: bool,
}

fn table_rows(rows: &[GroupRow], target: f64) -> Vec<Row> {
    rows.iter()
        .map(|r| Row {
            key: r.key.clone(),
            hits: r.hits,
            counted: r.counted,
            ira: pct(r.ira),
            below: r.ira.is_some_and(|v| v < target),
        })
        .collect()
}

struct WeekLine {
    week: String,
    counted: u64,
    ira: String,
    ira_a: String,
    ira_b: String,
    ira_c: String,
    net: String,
    gross: String,
    value_accuracy: String,
    planned: u64,
    done: u64,
    compliance: String,
}

struct CoverageLine {
    item: String,
    due_by: String,
    counted_on: String,
    on_time: bool,
}

#[derive(Template)]
#[template(path = "accuracy.html")]
struct AccuracyPage {
    me: Option<Me>,
    site: Site,
    /// The demo site: its counting history is simulated.
    simulated: bool,
    since: String,
    until: String,
    class: String,
    zone: String,
    zones: Vec<String>,
    target: String,
    counted: u64,
    pending: u64,
    ira: String,
    ira_below: bool,
    value_accuracy: String,
    counted_book_value: String,
    net: String,
    gross: String,
    compliance: String,
    compliance_of: String,
    coverage: String,
    coverage_of: String,
    ira_chart: String,
    adjustment_chart: String,
    compliance_chart: String,
    by_class: Vec<Row>,
    by_zone: Vec<Row>,
    by_counter: Vec<Row>,
    weeks: Vec<WeekLine>,
    coverage_items: Vec<CoverageLine>,
    /// The filter as a query string, for the CSV links.
    query: String,
    version: &'static str,
}

async fn accuracy_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Params(q): Params<ReportParams>,
) -> Result<Html<String>, PageError> {
    q.refuse(&["interval"])?;
    let r = report_for(&state, &site, &q).await?;
    let zones: Vec<String> = {
        let mut z: Vec<String> = state
            .store
            .bins(site.id, None)
            .await?
            .into_iter()
            .map(|b| b.zone.to_string())
            .collect();
        z.dedup();
        z
    };
    let weeks: Vec<String> = r.weeks.iter().map(|w| w.week.clone()).collect();
    let class_line = |label: &str, f: &dyn Fn(&service::WeekRow) -> Option<f64>| Line {
        label: label.to_string(),
        values: r.weeks.iter().map(f).collect(),
    };
    let class_lines = [
        class_line("A", &|w| w.ira_a),
        class_line("B", &|w| w.ira_b),
        class_line("C", &|w| w.ira_c),
    ];
    let ira_chart = chart::per_frame("chart-ira", |frame, id| {
        chart::share_lines(
            frame,
            id,
            "Record accuracy per week by class, against the site's target",
            &weeks,
            &class_lines,
            Some(r.ira_target),
            NO_COUNTS,
        )
    });
    // A week with no counts has no adjustment bar, rather than a zero one.
    let adjusted = |f: &dyn Fn(&service::WeekRow) -> i64| -> Vec<Option<f64>> {
        r.weeks
            .iter()
            .map(|w| (w.counted > 0).then(|| f(w) as f64))
            .collect()
    };
    let adjustments = [
        Bars {
            label: "net".into(),
            values: adjusted(&|w| w.net_adjustment_minor),
        },
        Bars {
            label: "gross".into(),
            values: adjusted(&|w| w.gross_adjustment_minor),
        },
    ];
    let money_axis = chart::BarAxis {
        fmt: &|v| money(v.round() as i64),
        min_step: 1.0,
    };
    let adjustment_chart = chart::per_frame("chart-adj", |frame, id| {
        chart::bars(
            frame,
            id,
            "Net and gross adjustment value per week (minor units)",
            &weeks,
            &adjustments,
            &money_axis,
            NO_COUNTS,
        )
    });
    let done = [Bars {
        label: "done / planned".into(),
        values: r.weeks.iter().map(|w| w.compliance).collect(),
    }];
    let share_axis = chart::BarAxis {
        fmt: &|v| format!("{:.0} %", v * 100.0),
        min_step: 0.01,
    };
    let compliance_chart = chart::per_frame("chart-comp", |frame, id| {
        chart::bars(
            frame,
            id,
            "Count compliance per week: planned tasks done",
            &weeks,
            &done,
            &share_axis,
            "No planned tasks in this period",
        )
    });
    let class = r.filter.class.map(|c| c.to_string()).unwrap_or_default();
    let zone = r.filter.zone.clone().unwrap_or_default();
    let query = format!(
        "since={}&until={}&class={}&zone={}",
        r.period.since,
        r.period.until,
        class,
        urlencode(&zone)
    );
    let page = AccuracyPage {
        simulated: crate::demo::is_demo_site(&site),
        me: Some(Me::at(&p, &site)),
        since: r.period.since.to_string(),
        until: r.period.until.to_string(),
        class,
        zone,
        zones,
        target: pct(Some(r.ira_target)),
        counted: r.counted,
        pending: r.pending,
        ira: pct(r.ira.value),
        ira_below: r.ira.value.is_some_and(|v| v < r.ira_target),
        value_accuracy: pct(r.value_accuracy),
        counted_book_value: money(r.counted_book_value_minor),
        net: money(r.net_adjustment_minor),
        gross: money(r.gross_adjustment_minor),
        compliance: pct(r.compliance.value),
        compliance_of: format!("{} of {} tasks", r.compliance.part, r.compliance.whole),
        coverage: pct(r.coverage.and_then(|c| c.value)),
        coverage_of: r.coverage.map_or("not shown for this class".into(), |c| {
            format!("{} of {} due A counts on time", c.part, c.whole)
        }),
        ira_chart,
        adjustment_chart,
        compliance_chart,
        by_class: table_rows(&r.by_class, r.ira_target),
        by_zone: table_rows(&r.by_zone, r.ira_target),
        by_counter: table_rows(&r.by_counter, r.ira_target),
        weeks: r
            .weeks
            .iter()
            .map(|w| WeekLine {
                week: w.week.clone(),
                counted: w.counted,
                ira: pct(w.ira),
                ira_a: pct(w.ira_a),
                ira_b: pct(w.ira_b),
                ira_c: pct(w.ira_c),
                net: money(w.net_adjustment_minor),
                gross: money(w.gross_adjustment_minor),
                value_accuracy: pct(w.value_accuracy),
                planned: w.planned,
                done: w.done,
                compliance: pct(w.compliance),
            })
            .collect(),
        coverage_items: r
            .coverage_items
            .iter()
            .map(|c| CoverageLine {
                item: c.item.clone(),
                due_by: c.due_by.to_string(),
                counted_on: c.counted_on.map_or("not counted".into(), |d| d.to_string()),
                on_time: c.on_time,
            })
            .collect(),
        query,
        site,
        version: crate::build_info::describe(),
    };
    Ok(render(&page)?)
}

fn urlencode(text: &str) -> String {
    let mut out = String::new();
    for b in text.bytes() {
        match b {
            b'A'..=b'Z' | b'a'..=b'z' | b'0'..=b'9' | b'-' | b'_' | b'.' => out.push(b as char),
            _ => out.push_str(&format!("%{b:02X}")),
        }
    }
    out
}

fn sku(text: &str) -> Result<Sku, PageError> {
    Sku::parse(text).map_err(|e| PageError(ApiError::BadRequest(e.to_string())))
}

struct PointLine {
    days: String,
    error: String,
}

#[derive(Template)]
#[template(path = "accuracy_item.html")]
struct ItemPage {
    me: Option<Me>,
    site: Site,
    r: ItemReport,
    class: String,
    hit_rate: String,
    bias: String,
    error_sd: String,
    a: String,
    b: String,
    points: Vec<PointLine>,
    version: &'static str,
}

async fn item_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Path((_, code)): Path<(String, String)>,
) -> Result<Html<String>, PageError> {
    let period = service::Period::new(
        Some(chrono::NaiveDate::from_ymd_opt(1970, 1, 1).expect("1970-01-01 is a date")),
        None,
        1,
        site.time_zone,
    )
    .map_err(ApiError::BadRequest)?;
    let r = service::item_reports(state.store.as_ref(), &site, period, Some(sku(&code)?))
        .await?
        .into_iter()
        .next()
        .ok_or_else(|| ApiError::NotFound(format!("no item '{code}' at this site")))?;
    let f = &r.figures;
    let page = ItemPage {
        me: Some(Me::at(&p, &site)),
        class: r
            .item
            .class
            .map_or("not classified".into(), |c| c.to_string()),
        hit_rate: pct(f.hit_rate),
        bias: num(f.bias, 3),
        error_sd: num(f.error_sd, 3),
        a: num(f.growth.a, 4),
        b: num(f.growth.b, 4),
        points: f
            .points
            .iter()
            .map(|p| PointLine {
                days: format!("{:.2}", p.days_since_previous),
                error: format!("{}", p.error),
            })
            .collect(),
        site,
        r,
        version: crate::build_info::describe(),
    };
    Ok(render(&page)?)
}

struct BufferLine {
    sku: String,
    description: String,
    group: String,
    class: String,
    d: String,
    lead: String,
    sigma_rec: String,
    safety_stock: String,
    order_point: String,
    monthly: String,
    note: bool,
}

#[derive(Template)]
#[template(path = "buffer_list.html")]
struct BuffersPage {
    me: Option<Me>,
    site: Site,
    until: String,
    window_days: String,
    t: Shown,
    rows: Vec<BufferLine>,
    version: &'static str,
}

/// Refuses a view the rows cannot show (a page past the last), naming the parameter.
fn bad(e: String) -> PageError {
    PageError(ApiError::BadRequest(e))
}

async fn buffers_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Params(l): Params<ListParams>,
) -> Result<Html<String>, PageError> {
    l.refuse(&["since", "format"])?;
    let view = l.view(&BUFFER_COLUMNS)?;
    let reports = buffers_for(&state, &site, &l.report(), None).await?;
    let (until, window_days) = reports.first().map_or((String::new(), String::new()), |r| {
        (r.demand.to.to_string(), r.demand.calendar_days.to_string())
    });
    let groups = table::groups(&reports);
    let page = view.page(&BUFFER_COLUMNS, reports).map_err(bad)?;
    let fixed = [
        ("until", l.until.clone().unwrap_or_default()),
        ("window_days", l.window_days.clone().unwrap_or_default()),
    ];
    let path = format!("/sites/{}/buffer", site.code);
    let t = table::shown(&view, &BUFFER_COLUMNS, &page, &path, &fixed, groups);
    let page = BuffersPage {
        me: Some(Me::at(&p, &site)),
        until,
        window_days,
        t,
        rows: page
            .rows
            .iter()
            .map(|r| BufferLine {
                sku: r.item.sku.clone(),
                description: r.item.description.clone(),
                group: r.item.group.clone(),
                class: r.item.class.map(|c| c.to_string()).unwrap_or_default(),
                d: num(r.demand.mean, 2),
                lead: r
                    .lead_time
                    .as_ref()
                    .map_or("–".into(), |l| format!("{}", l.times.lead_time_days)),
                sigma_rec: num(Some(r.record_error.sigma_rec), 2),
                safety_stock: num(r.buffer.map(|b| b.safety_stock), 2),
                order_point: r
                    .buffer
                    .map_or("–".into(), |b| b.order_point_units.to_string()),
                monthly: r.monthly_ss_change().map_or("–".into(), |v| signed(v, 2)),
                note: !r.notes.is_empty(),
            })
            .collect(),
        site,
        version: crate::build_info::describe(),
    };
    Ok(render(&page)?)
}

struct ItemLine {
    sku: String,
    description: String,
    group: String,
    class: String,
    counts: usize,
    hits: usize,
    hit_rate: String,
    bias: String,
    error_sd: String,
    repeat_counts: usize,
}

#[derive(Template)]
#[template(path = "accuracy_items.html")]
struct ItemsPage {
    me: Option<Me>,
    site: Site,
    since: String,
    until: String,
    t: Shown,
    rows: Vec<ItemLine>,
    version: &'static str,
}

async fn items_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Params(l): Params<ListParams>,
) -> Result<Html<String>, PageError> {
    let view = l.view(&ITEM_COLUMNS)?;
    l.refuse(&["window_days", "format"])?;
    let report = l.report();
    let period = item_period(&report, site.time_zone)?;
    let items = service::item_reports(state.store.as_ref(), &site, period, None).await?;
    let groups = table::groups(&items);
    let page = view.page(&ITEM_COLUMNS, items).map_err(bad)?;
    let fixed = [
        ("since", l.since.clone().unwrap_or_default()),
        ("until", l.until.clone().unwrap_or_default()),
    ];
    let path = format!("/sites/{}/accuracy/items", site.code);
    let t = table::shown(&view, &ITEM_COLUMNS, &page, &path, &fixed, groups);
    let page = ItemsPage {
        me: Some(Me::at(&p, &site)),
        since: period.since.to_string(),
        until: period.until.to_string(),
        t,
        rows: page
            .rows
            .iter()
            .map(|r| ItemLine {
                sku: r.item.sku.clone(),
                description: r.item.description.clone(),
                group: r.item.group.clone(),
                class: r.item.class.map(|c| c.to_string()).unwrap_or_default(),
                counts: r.figures.counts,
                hits: r.figures.hits,
                hit_rate: pct(r.figures.hit_rate),
                bias: num(r.figures.bias, 3),
                error_sd: num(r.figures.error_sd, 3),
                repeat_counts: r.figures.growth.points,
            })
            .collect(),
        site,
        version: crate::build_info::describe(),
    };
    Ok(render(&page)?)
}

/// One line of the derivation: symbol, what it is, its value, and where it came from.
struct Term {
    symbol: &'static str,
    name: &'static str,
    value: String,
    how: String,
}

#[derive(Template)]
#[template(path = "buffer_item.html")]
struct BufferPage {
    me: Option<Me>,
    site: Site,
    r: BufferReport,
    class: String,
    terms: Vec<Term>,
    whatif: Vec<WhatIfLine>,
    whatif_chart: String,
    asked: String,
    unit_cost: String,
    daily: Vec<(String, i64)>,
    query: String,
    version: &'static str,
}

/// One row of the count-interval table, written for the page.
struct WhatIfLine {
    days: String,
    mark: &'static str,
    current: bool,
    sigma_rec: String,
    safety_stock: String,
    order_point: i64,
    ss_change: String,
    op_change: String,
    value_change: String,
}

/// Writes a change with its sign: `+1.50`, `−0.25`, `0`.
fn signed(v: f64, places: usize) -> String {
    let text = format!("{:.places$}", v.abs());
    if text.trim_start_matches(['0', '.']).is_empty() {
        "0".into()
    } else if v < 0.0 {
        format!("−{text}")
    } else {
        format!("+{text}")
    }
}

/// Draws safety stock per count interval as bars, today's labelled; empty without rows.
fn whatif_chart(r: &BufferReport, lines: &[WhatIfLine]) -> String {
    if lines.is_empty() {
        return String::new();
    }
    let x: Vec<String> = lines
        .iter()
        .map(|l| {
            if l.current {
                format!("{} d (today)", l.days)
            } else {
                format!("{} d", l.days)
            }
        })
        .collect();
    let series = [Bars {
        label: "safety stock".into(),
        values: r
            .counting
            .rows
            .iter()
            .map(|w| Some(w.safety_stock))
            .collect(),
    }];
    let axis = chart::BarAxis {
        fmt: &|v| format!("{v:.1}"),
        min_step: 0.1,
    };
    chart::per_frame("chart-intervals", |frame, id| {
        chart::bars(
            frame,
            id,
            "Safety stock (units) if counted every … days",
            &x,
            &series,
            &axis,
            "No rows",
        )
    })
}

fn whatif_lines(r: &BufferReport) -> Vec<WhatIfLine> {
    r.counting
        .rows
        .iter()
        .map(|w| WhatIfLine {
            days: if w.interval_days.fract() == 0.0 {
                format!("{}", w.interval_days)
            } else {
                format!("{:.1}", w.interval_days)
            },
            mark: match (w.current, w.asked) {
                (true, true) => "today, asked",
                (true, false) => "today",
                (false, true) => "asked",
                (false, false) => "",
            },
            current: w.current,
            sigma_rec: format!("{:.2}", w.sigma_rec),
            safety_stock: format!("{:.2}", w.safety_stock),
            order_point: w.order_point_units,
            ss_change: signed(w.safety_stock_change, 2),
            op_change: signed(w.order_point_units_change as f64, 0),
            value_change: {
                // Bounded by MAX_UNITS × the largest unit cost; rounding to whole minor units.
                let minor = w.safety_stock_value_change_minor.round() as i64;
                if minor > 0 {
                    format!("+{}", money(minor))
                } else {
                    money(minor)
                }
            },
        })
        .collect()
}

fn terms(r: &BufferReport) -> Vec<Term> {
    let d = &r.demand;
    let l = r.lead_time.as_ref();
    let e = &r.record_error;
    let f6 = |v: f64| format!("{v:.6}");
    let mut t = vec![
        Term {
            symbol: "p",
            name: "service level",
            value: format!("{}", r.service_level),
            how: format!("from the {}", r.service_level_source),
        },
        Term {
            symbol: "d",
            name: "mean demand per day",
            value: num(d.mean, 6),
            how: format!(
                "{} units issued over {} sampled days ({} working days from {} to {}, plus {} non-working days with picks); a day without picks counts as 0",
                d.issued, d.samples, d.working_days, d.from, d.to, d.extra_days
            ),
        },
        Term {
            symbol: "σd",
            name: "standard deviation of demand per day",
            value: num(d.sd, 6),
            how: "sample standard deviation (n − 1) of the same daily figures".into(),
        },
        Term {
            symbol: "L",
            name: "lead time (working days)",
            value: l.map_or("–".into(), |l| format!("{}", l.times.lead_time_days)),
            how: l.map_or("not set".into(), |l| format!("from the {} input", l.source)),
        },
        Term {
            symbol: "σL",
            name: "standard deviation of lead time",
            value: l.map_or("–".into(), |l| format!("{}", l.times.lead_time_sd_days)),
            how: l.map_or("not set".into(), |l| format!("from the {} input", l.source)),
        },
        Term {
            symbol: "R",
            name: "review period (working days)",
            value: l.map_or("–".into(), |l| format!("{}", l.times.review_days)),
            how: "0 means continuous review".into(),
        },
        Term {
            symbol: "T",
            name: "count interval (calendar days)",
            value: format!("{:.2}", e.at_days),
            how: format!(
                "{}; the buffer is held through the count cycle, so σrec is taken just before the next count",
                e.interval_source
            ),
        },
        Term {
            symbol: "σkey",
            name: "record error of one bin at age T",
            value: num(e.per_key_sd, 6),
            how: match (e.growth.a, e.growth.b) {
                (Some(a), Some(b)) => format!(
                    "sqrt(a + b·T) = sqrt({a:.6} + {b:.6} × {:.2}) from {} repeat counts",
                    e.at_days, e.growth.points
                ),
                _ => e.growth.note.clone().unwrap_or_default(),
            },
        },
        Term {
            symbol: "k",
            name: "bins holding the item",
            value: e.keys.to_string(),
            how: "bin-lot keys with stock now (at least 1); their errors add as independent".into(),
        },
        Term {
            symbol: "σrec",
            name: "record error",
            value: f6(e.sigma_rec),
            how: "σkey · sqrt(k), or 0 without a fit".into(),
        },
    ];
    if let Some(b) = &r.buffer {
        t.extend([
            Term {
                symbol: "z",
                name: "standard normal quantile of p",
                value: f6(b.z),
                how: "Φ⁻¹(p)".into(),
            },
            Term {
                symbol: "L + R",
                name: "days the buffer covers",
                value: format!("{}", b.exposure_days),
                how: "L + R".into(),
            },
            Term {
                symbol: "(L + R)·σd²",
                name: "variance from demand",
                value: f6(b.demand_variance),
                how: format!("{} × {:.6}²", b.exposure_days, b.inputs.demand_sd_per_day),
            },
            Term {
                symbol: "d²·σL²",
                name: "variance from lead time",
                value: f6(b.lead_time_variance),
                how: format!(
                    "{:.6}² × {}²",
                    b.inputs.demand_per_day, b.inputs.lead_time_sd_days
                ),
            },
            Term {
                symbol: "σrec²",
                name: "variance from record error",
                value: f6(b.record_variance),
                how: format!("{:.6}²", b.inputs.record_error_sd),
            },
            Term {
                symbol: "σ",
                name: "combined standard deviation",
                value: f6(b.combined_sd),
                how: format!("sqrt({:.6})", b.total_variance),
            },
            Term {
                symbol: "SS",
                name: "safety stock",
                value: f6(b.safety_stock),
                how: format!("z · σ = {:.6} × {:.6}", b.z, b.combined_sd),
            },
            Term {
                symbol: "d·(L + R)",
                name: "cycle stock",
                value: f6(b.cycle_stock),
                how: format!("{:.6} × {}", b.inputs.demand_per_day, b.exposure_days),
            },
            Term {
                symbol: "OP",
                name: "order point",
                value: f6(b.order_point),
                how: format!("d·(L + R) + SS; {} units rounded up", b.order_point_units),
            },
        ]);
    }
    t
}

async fn buffer_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Path((_, code)): Path<(String, String)>,
    Params(q): Params<ReportParams>,
) -> Result<Html<String>, PageError> {
    let r = buffers_for(&state, &site, &q, Some(sku(&code)?))
        .await?
        .into_iter()
        .next()
        .ok_or_else(|| ApiError::NotFound(format!("no item '{code}' at this site")))?;
    let query = format!(
        "until={}&window_days={}",
        r.demand.to, r.demand.calendar_days
    );
    let whatif = whatif_lines(&r);
    let page = BufferPage {
        me: Some(Me::at(&p, &site)),
        class: r
            .item
            .class
            .map_or("not classified".into(), |c| c.to_string()),
        terms: terms(&r),
        whatif_chart: whatif_chart(&r, &whatif),
        whatif,
        asked: q.interval.clone().unwrap_or_default(),
        unit_cost: money(r.item.unit_cost_minor),
        daily: r
            .demand
            .daily
            .iter()
            .map(|(d, q)| (d.to_string(), *q))
            .collect(),
        query,
        site,
        r,
        version: crate::build_info::describe(),
    };
    Ok(render(&page)?)
}
