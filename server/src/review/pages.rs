//! The review pages: the differences waiting for a decision (with filters and
//! bulk approval of small ones) and one difference's evidence with its
//! approve and reject forms.
//!
//! Book readers may read; the access table admits only [`DECIDERS`] to the
//! forms and checks their form token. Who may decide *this* difference (not
//! its counter; above the value limit only an inventory manager) is checked by
//! [`super::check_decision`] inside the store's transaction, so a page that
//! hides a button is never the only guard.

use super::store::{DifferenceDetail, DifferenceFilter, DifferenceRow, NewDecision};
use super::timeline::{self, Timeline};
use super::{
    DECIDERS, Decider, MAX_BULK_IDS, MAX_LIST_ROWS, ReasonCode, Refusal, RefusalKind, ReviewPolicy,
    investigation_note, is_settled, money, parse_money,
};
use crate::AppState;
use crate::accounts::{Principal, Role};
use crate::error::ApiError;
use crate::http::access::{Access, BOOK_READERS, ClientAddress, CurrentUser, RouteTable};
use crate::http::extract::{CurrentSite, Params};
use crate::http::pages::{Me, PageError, render};
use crate::master::Site;
use crate::netting::rule::{MoveId, NetMove, Place, Window};
use crate::netting::service::Evidence;
use crate::time::Timestamp;
use askama::Template;
use axum::Form;
use axum::extract::{Path, State};
use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};
use serde::Deserialize;

/// Adds the review pages.
pub fn routes(t: &mut RouteTable) {
    let read = Access::Site(BOOK_READERS);
    let decide = Access::Site(DECIDERS);
    t.get("/sites/{site}/differences", read, list_page)
        .post("/sites/{site}/differences/approve", decide, bulk_approve)
        .get("/sites/{site}/differences/{id}", read, detail_page)
        .post("/sites/{site}/differences/{id}/approve", decide, approve)
        .post("/sites/{site}/differences/{id}/reject", decide, reject);
}

/// The caution every review page shows.
pub const CAUTION: &str = "Approving a difference changes the stock records, and with them the \
    financial value of stock. Follow your company's own approval controls: Cairn's checks do \
    not replace them.";

/// A submitted form as name-value pairs.
type Fields = Vec<(String, String)>;

fn field<'a>(fields: &'a Fields, name: &str) -> &'a str {
    fields
        .iter()
        .find(|(k, _)| k == name)
        .map_or("", |(_, v)| v.trim())
}

/// Writes an instant for people in the site's local time: `2026-03-03 03:00:05 CST`.
fn when(site: &Site, t: Timestamp) -> String {
    site.time_zone.local_time(&t)
}

/// Writes an age as hours or days.
fn age(counted_at: Timestamp, now: Timestamp) -> String {
    let h = (now.0 - counted_at.0).max(0) / 3_600_000;
    if h < 48 {
        format!("{h} h")
    } else {
        format!("{} d", h / 24)
    }
}

fn signed(n: i64) -> String {
    if n > 0 {
        format!("+{n}")
    } else {
        n.to_string()
    }
}

fn status_words(s: &str) -> String {
    s.replace('_', " ")
}

fn decider(p: &Principal, site: &Site) -> Decider {
    Decider {
        user: p.user.id,
        inventory_manager: p.roles_at(site.id).any(|r| r == Role::InventoryManager),
    }
}

fn http_status(r: &Refusal) -> StatusCode {
    match r.kind() {
        RefusalKind::NotFound => StatusCode::NOT_FOUND,
        RefusalKind::Forbidden => StatusCode::FORBIDDEN,
        RefusalKind::Conflict => StatusCode::CONFLICT,
        RefusalKind::BadForm => StatusCode::BAD_REQUEST,
    }
}

/// One difference as the list shows it.
struct ListRow {
    id: i64,
    bin: String,
    zone: String,
    sku: String,
    description: String,
    lot: String,
    class: String,
    counted: i64,
    f_star: i64,
    variance: String,
    value: String,
    age: String,
    counter: String,
    settled: bool,
    settles_at: String,
    /// Offered for bulk approval (settled, below the bulk limit).
    bulk: bool,
    needs_manager: bool,
    /// The recount in words (empty when there is none).
    recount: String,
    recount_pending: bool,
}

fn list_row(site: &Site, r: &DifferenceRow, policy: &ReviewPolicy, now: Timestamp) -> ListRow {
    let settled = is_settled(r.settled, r.settles_at, now);
    ListRow {
        id: r.id,
        bin: r.bin.clone(),
        zone: r.zone.clone(),
        sku: r.sku.clone(),
        description: r.description.clone(),
        lot: r.lot.clone(),
        class: r.class.clone(),
        counted: r.counted,
        f_star: r.f_star,
        variance: signed(r.variance),
        value: money(r.value_minor),
        age: age(r.counted_at, now),
        counter: r.counter.clone(),
        settled,
        settles_at: when(site, r.settles_at),
        bulk: settled && r.recount != "pending" && r.value_minor < policy.bulk_value_minor,
        needs_manager: r.value_minor > policy.manager_value_minor,
        recount: match r.recount.as_str() {
            "pending" => "recount pending".into(),
            "confirmed" => "confirmed by recount".into(),
            "book_right" => "recount found the book right".into(),
            "supervisor_count" => "supervisor count".into(),
            other => status_words(other),
        },
        recount_pending: r.recount == "pending",
    }
}

/// The list's filters as the form sends them (text, so a bad value is named).
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct ListParams {
    class: Option<String>,
    zone: Option<String>,
    min_value: Option<String>,
    max_value: Option<String>,
    min_age_h: Option<String>,
    max_age_h: Option<String>,
}

fn present(v: &Option<String>) -> Option<&str> {
    v.as_deref().map(str::trim).filter(|t| !t.is_empty())
}

impl ListParams {
    fn filter(&self) -> Result<DifferenceFilter, String> {
        let class = match present(&self.class) {
            None => None,
            Some(c @ ("A" | "B" | "C")) => c.chars().next(),
            Some(other) => return Err(format!("Class: '{other}' is not A, B or C")),
        };
        let amount = |what: &str, v: &Option<String>| {
            present(v)
                .map(|t| parse_money(t).map_err(|e| format!("{what}: {e}")))
                .transpose()
        };
        let hours = |what: &str, v: &Option<String>| {
            present(v)
                .map(|t| {
                    t.parse::<i64>()
                        .ok()
                        .filter(|h| *h >= 0)
                        .ok_or_else(|| format!("{what}: '{t}' is not a whole number of hours"))
                })
                .transpose()
        };
        Ok(DifferenceFilter {
            class,
            zone: present(&self.zone).map(str::to_string),
            min_value_minor: amount("Value from", &self.min_value)?,
            max_value_minor: amount("Value up to", &self.max_value)?,
            min_age_h: hours("Older than", &self.min_age_h)?,
            max_age_h: hours("Newer than", &self.max_age_h)?,
            limit: MAX_LIST_ROWS,
        })
    }
}

/// The filter form's current values, for redrawing it.
struct FilterForm {
    class: String,
    zone: String,
    min_value: String,
    max_value: String,
    min_age_h: String,
    max_age_h: String,
}

impl FilterForm {
    fn of(p: &ListParams) -> Self {
        let v = |o: &Option<String>| present(o).unwrap_or("").to_string();
        Self {
            class: v(&p.class),
            zone: v(&p.zone),
            min_value: v(&p.min_value),
            max_value: v(&p.max_value),
            min_age_h: v(&p.min_age_h),
            max_age_h: v(&p.max_age_h),
        }
    }
}

#[derive(Template)]
#[template(path = "differences.html")]
struct ListPage {
    me: Option<Me>,
    csrf: String,
    site: Site,
    decider: bool,
    message: String,
    outcomes: Vec<String>,
    form: FilterForm,
    rows: Vec<ListRow>,
    zones: Vec<String>,
    reasons: Vec<ReasonCode>,
    bulk_limit: String,
    manager_limit: String,
    full: bool,
    caution: &'static str,
    version: &'static str,
}

/// What a list page shows besides the rows.
struct ListShowing {
    status: StatusCode,
    message: String,
    outcomes: Vec<String>,
}

async fn render_list(
    state: &AppState,
    p: &Principal,
    site: Site,
    params: &ListParams,
    showing: ListShowing,
) -> Result<Response, PageError> {
    let now = Timestamp::now();
    let (filter, status, message) = match params.filter() {
        Ok(f) => (f, showing.status, showing.message),
        Err(m) => (
            DifferenceFilter {
                limit: MAX_LIST_ROWS,
                ..DifferenceFilter::default()
            },
            StatusCode::BAD_REQUEST,
            m,
        ),
    };
    let policy = state.store.review_policy(site.id).await?;
    let rows = state
        .store
        .differences(site.id, filter.clone(), now)
        .await?;
    let mut zones: Vec<String> = state
        .store
        .bins(site.id, None)
        .await?
        .into_iter()
        .map(|b| b.zone.as_str().to_string())
        .collect();
    zones.dedup();
    let me = Me::at(p, &site);
    let page = render(&ListPage {
        csrf: me.csrf.clone(),
        me: Some(me),
        decider: p.holds_any(site.id, DECIDERS),
        message,
        outcomes: showing.outcomes,
        form: FilterForm::of(params),
        full: rows.len() >= MAX_LIST_ROWS,
        rows: rows
            .iter()
            .map(|r| list_row(&site, r, &policy, now))
            .collect(),
        zones,
        reasons: state.store.review_reasons(site.id).await?,
        bulk_limit: money(policy.bulk_value_minor),
        manager_limit: money(policy.manager_value_minor),
        site,
        caution: CAUTION,
        version: crate::build_info::describe(),
    })?;
    Ok((status, page).into_response())
}

async fn list_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Params(q): Params<ListParams>,
) -> Result<Response, PageError> {
    let showing = ListShowing {
        status: StatusCode::OK,
        message: String::new(),
        outcomes: Vec::new(),
    };
    render_list(&state, &p, site, &q, showing).await
}

/// Approves the selected differences that are below the bulk limit; each
/// other one is refused and named.
async fn bulk_approve(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    ClientAddress(address): ClientAddress,
    Form(fields): Form<Fields>,
) -> Result<Response, PageError> {
    let refuse = |m: String| ListShowing {
        status: StatusCode::BAD_REQUEST,
        message: m,
        outcomes: Vec::new(),
    };
    let mut ids = Vec::new();
    for (k, v) in &fields {
        if k != "id" {
            continue;
        }
        match v.trim().parse::<i64>() {
            Ok(id) if !ids.contains(&id) => ids.push(id),
            Ok(_) => {}
            Err(_) => {
                let m = format!("'{v}' is not a difference number");
                return render_list(&state, &p, site, &ListParams::default(), refuse(m)).await;
            }
        }
    }
    if ids.is_empty() || ids.len() > MAX_BULK_IDS {
        let m = format!("Select 1 to {MAX_BULK_IDS} differences to approve together.");
        return render_list(&state, &p, site, &ListParams::default(), refuse(m)).await;
    }
    let reason = field(&fields, "reason").to_string();
    if reason.is_empty() {
        let m = "Choose the reason that applies to every selected difference.".to_string();
        return render_list(&state, &p, site, &ListParams::default(), refuse(m)).await;
    }
    let now = Timestamp::now();
    let decisions = ids
        .iter()
        .map(|&id| NewDecision {
            result: id,
            decider: decider(&p, &site),
            actor: p.actor(),
            reason: reason.clone(),
            note: String::new(),
            at: now,
            address: address.clone(),
        })
        .collect();
    let outcomes = crate::writes::approve(state.store.as_ref(), site.id, decisions, true).await?;
    let approved = outcomes.iter().filter(|o| o.is_ok()).count();
    let lines = outcomes
        .iter()
        .map(|o| match o {
            Ok(d) => format!("Difference {} approved (review {}).", d.result, d.review),
            Err(r) => format!("Not approved: {r}."),
        })
        .collect();
    let showing = ListShowing {
        status: StatusCode::OK,
        message: format!(
            "{approved} of {} selected difference(s) approved.",
            ids.len()
        ),
        outcomes: lines,
    };
    render_list(&state, &p, site, &ListParams::default(), showing).await
}

/// One feasible book state as the detail page lists it.
struct StateRow {
    qty: i64,
    at: String,
    moves: String,
    f_star: bool,
}

struct MoveRow {
    uid: String,
    kind: String,
    source: String,
    qty: String,
    event_at: String,
    recorded_at: String,
    uncertainty_ms: i64,
    place: &'static str,
}

struct HistoryRow {
    id: i64,
    counted: i64,
    f_star: i64,
    variance: String,
    verdict: String,
    renet_reason: String,
    computed_at: String,
    watermark: i64,
    current: bool,
}

struct ReviewShown {
    id: i64,
    decision: String,
    reason: String,
    note: String,
    by: String,
    at: String,
    movement: String,
}

/// An adjustment Cairn posted by itself, shown where a decision would be.
struct AutoShown {
    id: i64,
    qty: String,
    event_at: String,
    posted_at: String,
    movement: String,
    reason: &'static str,
}

struct RecountShown {
    task: i64,
    status: String,
    counter: String,
    outcome: String,
}

#[derive(Template)]
#[template(path = "difference.html")]
struct DetailPage {
    me: Option<Me>,
    csrf: String,
    site: Site,
    message: String,
    done: String,
    row: ListRow,
    status: String,
    verdict: String,
    superseded_by: Option<i64>,
    window: String,
    counter_name: String,
    counted_from: String,
    counted_to: String,
    uncertainty_ms: i64,
    computed_at: String,
    watermark: i64,
    states: Vec<StateRow>,
    evidence_error: String,
    /// Why the count's times cannot be trusted, when its pass is held (DESIGN §6).
    held: String,
    svg: String,
    moves: Vec<MoveRow>,
    scans: Vec<(String, i64, i64, String)>,
    history: Vec<HistoryRow>,
    review: Option<ReviewShown>,
    automatic: Option<AutoShown>,
    recounts: Vec<RecountShown>,
    /// The signed-in user may decide here (role, not yet decided, current).
    can_decide: bool,
    own_count: bool,
    reasons: Vec<ReasonCode>,
    manager_limit: String,
    caution: &'static str,
    version: &'static str,
}

/// What a detail page shows besides the difference.
struct Showing {
    status: StatusCode,
    message: String,
    done: String,
}

fn place_word(p: Place) -> &'static str {
    match p {
        Place::Before => "before",
        Place::Inside => "inside",
        Place::After => "after",
    }
}

async fn render_detail(
    state: &AppState,
    p: &Principal,
    site: Site,
    id: i64,
    showing: Showing,
) -> Result<Response, PageError> {
    let d: DifferenceDetail = state.store.difference(site.id, id).await?.ok_or_else(|| {
        ApiError::NotFound(format!("difference {id} does not exist at {}", site.code))
    })?;
    let now = Timestamp::now();
    let policy = state.store.review_policy(site.id).await?;
    let window = Window {
        start: d.window_start,
        end: d.window_end,
    };
    let place = |m: &super::store::WindowMove| {
        window.place(&NetMove {
            id: MoveId(m.seq),
            event_at: m.event_at,
            delta: m.qty,
            uncertainty_ms: m.uncertainty_ms,
        })
    };
    let uid_of = |seq: i64| {
        d.moves
            .iter()
            .find(|m| m.seq == seq)
            .map_or_else(|| format!("#{seq}"), |m| m.uid.clone())
    };
    let (states, evidence_error) = match Evidence::parse(&d.evidence) {
        Ok(e) => {
            let star = e.f_star_index(d.row.f_star);
            let rows = e
                .netting
                .states
                .iter()
                .enumerate()
                .map(|(i, s)| StateRow {
                    qty: s.qty,
                    at: s
                        .at
                        .map_or_else(|| "opening, before the window".into(), |t| when(&site, t)),
                    moves: s
                        .moves
                        .iter()
                        .map(|m| uid_of(m.0))
                        .collect::<Vec<_>>()
                        .join(", "),
                    f_star: Some(i) == star,
                })
                .collect();
            (rows, String::new())
        }
        Err(e) => (Vec::new(), e),
    };
    let svg = Timeline {
        window_start: d.window_start,
        window_end: d.window_end,
        moves: d
            .moves
            .iter()
            .map(|m| timeline::Move {
                at: m.event_at,
                delta: m.qty,
                uncertainty_ms: m.uncertainty_ms,
                inside: place(m) == Place::Inside,
                what: format!("{} ({})", status_words(&m.kind), m.source),
            })
            .collect(),
        scans: d
            .scans
            .iter()
            .map(|s| timeline::Scan {
                at: s.at,
                qty: s.qty,
            })
            .collect(),
        zone: site.time_zone,
    }
    .svg();
    let me = Me::at(p, &site);
    let own_count = d.row.counter == p.user.name.as_str()
        || d.recounts.iter().any(|r| r.counter == p.user.name.as_str());
    let can_decide = p.holds_any(site.id, DECIDERS)
        && d.review.is_none()
        && d.automatic.is_none()
        && d.superseded_by.is_none();
    let page = render(&DetailPage {
        csrf: me.csrf.clone(),
        me: Some(me),
        message: showing.message,
        done: showing.done,
        row: list_row(&site, &d.row, &policy, now),
        status: status_words(&d.row.status),
        verdict: status_words(&d.verdict),
        superseded_by: d.superseded_by,
        window: format!(
            "{} to {}",
            when(&site, d.window_start),
            when(&site, d.window_end)
        ),
        counter_name: d.counter_name.clone(),
        counted_from: when(&site, d.pass_first_at),
        counted_to: d
            .pass_done_at
            .map_or_else(|| "not marked done".into(), |t| when(&site, t)),
        uncertainty_ms: d.pass_uncertainty_ms,
        computed_at: when(&site, d.computed_at),
        watermark: d.watermark,
        states,
        evidence_error,
        held: held_reason(&d.evidence),
        svg,
        moves: d
            .moves
            .iter()
            .map(|m| MoveRow {
                uid: m.uid.clone(),
                kind: status_words(&m.kind),
                source: m.source.clone(),
                qty: signed(m.qty),
                event_at: when(&site, m.event_at),
                recorded_at: when(&site, m.recorded_at),
                uncertainty_ms: m.uncertainty_ms,
                place: place_word(place(m)),
            })
            .collect(),
        scans: d
            .scans
            .iter()
            .map(|s| (when(&site, s.at), s.qty, s.packs, s.entry.clone()))
            .collect(),
        history: d
            .history
            .iter()
            .chain(std::iter::once(&super::store::OtherRow {
                id: d.row.id,
                counted: d.row.counted,
                f_star: d.row.f_star,
                variance: d.row.variance,
                verdict: d.verdict.clone(),
                renet_reason: d.renet_reason.clone(),
                computed_at: d.computed_at,
                watermark: d.watermark,
                superseded_by: d.superseded_by,
            }))
            .map(|h| HistoryRow {
                id: h.id,
                counted: h.counted,
                f_star: h.f_star,
                variance: signed(h.variance),
                verdict: status_words(&h.verdict),
                renet_reason: h.renet_reason.clone(),
                computed_at: when(&site, h.computed_at),
                watermark: h.watermark,
                current: h.id == d.row.id,
            })
            .collect(),
        review: d.review.as_ref().map(|r| ReviewShown {
            id: r.id,
            decision: r.decision.clone(),
            reason: r.reason_code.clone(),
            note: r.note.clone(),
            by: r.decided_by.clone(),
            at: when(&site, r.decided_at),
            movement: r.movement.clone().unwrap_or_default(),
        }),
        automatic: d.automatic.as_ref().map(|a| AutoShown {
            id: a.id,
            qty: signed(a.qty),
            event_at: when(&site, a.event_at),
            posted_at: when(&site, a.posted_at),
            movement: a.movement.clone(),
            reason: super::AUTO_REASON,
        }),
        recounts: d
            .recounts
            .iter()
            .map(|r| RecountShown {
                task: r.task,
                status: r.status.clone(),
                counter: r.counter.clone(),
                outcome: match &r.result {
                    None => "not netted yet".into(),
                    Some(o) => format!(
                        "counted {}, book {}, variance {} ({})",
                        o.counted,
                        o.f_star,
                        signed(o.variance),
                        status_words(&o.verdict)
                    ),
                },
            })
            .collect(),
        can_decide,
        own_count,
        reasons: state.store.review_reasons(site.id).await?,
        manager_limit: money(policy.manager_value_minor),
        site,
        caution: CAUTION,
        version: crate::build_info::describe(),
    })?;
    Ok((showing.status, page).into_response())
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct DetailParams {
    done: Option<String>,
}

async fn detail_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Path((_, id)): Path<(String, i64)>,
    Params(q): Params<DetailParams>,
) -> Result<Response, PageError> {
    let done = match q.done.as_deref() {
        Some("approved") => "Approved: the count adjustment is posted to the ledger.",
        Some("rejected") => "Rejected: the investigation note is kept with the difference.",
        _ => "",
    };
    let showing = Showing {
        status: StatusCode::OK,
        message: String::new(),
        done: done.into(),
    };
    render_detail(&state, &p, site, id, showing).await
}

fn detail_url(site: &Site, id: i64, done: &str) -> String {
    format!("/sites/{}/differences/{id}?done={done}", site.code)
}

async fn refused(
    state: &AppState,
    p: &Principal,
    site: Site,
    id: i64,
    r: Refusal,
) -> Result<Response, PageError> {
    if r.kind() == RefusalKind::NotFound {
        return Err(ApiError::NotFound(r.to_string()).into());
    }
    let showing = Showing {
        status: http_status(&r),
        message: format!("{r}."),
        done: String::new(),
    };
    render_detail(state, p, site, id, showing).await
}

async fn approve(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    ClientAddress(address): ClientAddress,
    Path((_, id)): Path<(String, i64)>,
    Form(fields): Form<Fields>,
) -> Result<Response, PageError> {
    let decision = NewDecision {
        result: id,
        decider: decider(&p, &site),
        actor: p.actor(),
        reason: field(&fields, "reason").to_string(),
        note: String::new(),
        at: Timestamp::now(),
        address,
    };
    let mut outcomes =
        crate::writes::approve(state.store.as_ref(), site.id, vec![decision], false).await?;
    match outcomes.pop() {
        Some(Ok(_)) => Ok(Redirect::to(&detail_url(&site, id, "approved")).into_response()),
        Some(Err(r)) => refused(&state, &p, site, id, r).await,
        None => Err(ApiError::Internal(anyhow::anyhow!("an approval returned no outcome")).into()),
    }
}

async fn reject(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    ClientAddress(address): ClientAddress,
    Path((_, id)): Path<(String, i64)>,
    Form(fields): Form<Fields>,
) -> Result<Response, PageError> {
    let note = match investigation_note(field(&fields, "note")) {
        Ok(n) => n,
        Err(r) => {
            if state.store.difference(site.id, id).await?.is_none() {
                return Err(ApiError::NotFound(Refusal::NotFound(id).to_string()).into());
            }
            return refused(&state, &p, site, id, r).await;
        }
    };
    let decision = NewDecision {
        result: id,
        decider: decider(&p, &site),
        actor: p.actor(),
        reason: field(&fields, "reason").to_string(),
        note,
        at: Timestamp::now(),
        address,
    };
    match crate::writes::reject(state.store.as_ref(), site.id, decision).await? {
        Ok(_) => Ok(Redirect::to(&detail_url(&site, id, "rejected")).into_response()),
        Err(r) => refused(&state, &p, site, id, r).await,
    }
}

/// Returns why a result is held for review (its pass's times cannot be trusted), or "".
fn held_reason(evidence: &str) -> String {
    serde_json::from_str::<serde_json::Value>(evidence)
        .ok()
        .and_then(|v| {
            let judged = v.get("judged")?;
            (judged.get("verdict")?.as_str()? == "held")
                .then(|| judged.get("reason")?.as_str().map(str::to_string))
                .flatten()
        })
        .unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_filter_form_names_the_field_that_is_wrong() {
        let ok = ListParams {
            class: Some("B".into()),
            zone: Some(" A ".into()),
            min_value: Some("12.5".into()),
            max_value: Some("".into()),
            min_age_h: Some("24".into()),
            max_age_h: None,
        }
        .filter()
        .unwrap();
        assert_eq!(ok.class, Some('B'));
        assert_eq!(ok.zone.as_deref(), Some("A"));
        assert_eq!(ok.min_value_minor, Some(1_250));
        assert_eq!(ok.max_value_minor, None);
        assert_eq!(ok.min_age_h, Some(24));
        let e = ListParams {
            class: Some("D".into()),
            ..ListParams::default()
        }
        .filter()
        .unwrap_err();
        assert!(e.starts_with("Class:"), "{e}");
        let e = ListParams {
            min_age_h: Some("-1".into()),
            ..ListParams::default()
        }
        .filter()
        .unwrap_err();
        assert!(e.starts_with("Older than:"), "{e}");
        let e = ListParams {
            max_value: Some("ten".into()),
            ..ListParams::default()
        }
        .filter()
        .unwrap_err();
        assert!(e.starts_with("Value up to:"), "{e}");
    }

    #[test]
    fn ages_read_in_hours_then_days() {
        let now = Timestamp(100 * 3_600_000);
        assert_eq!(age(Timestamp(99 * 3_600_000), now), "1 h");
        assert_eq!(age(Timestamp(0), now), "4 d");
    }
}
