//! The count-policy page: the netting and review policy of a site as three
//! forms — tolerance per ABC class with the review limits, each movement
//! source's timing, and the reason codes reviewers give.
//!
//! The page and its forms use the access rules of the JSON policy routes
//! ([`READ_POLICY`], [`SET_POLICY`]), so the two can never disagree about who
//! may change the policy; the access table also checks each form's token.
//! A refused form is shown again with what was typed and each refusal named;
//! nothing is written then. A save is one write transaction.

use super::policy_form::{Errors, Fields, ReasonsForm, SettingsForm, SourcesForm};
use super::routes::{READ_POLICY, SET_POLICY};
use crate::AppState;
use crate::accounts::{Principal, audit};
use crate::http::access::{Access, ClientAddress, CurrentUser, RouteTable};
use crate::http::extract::{CurrentSite, Params};
use crate::http::pages::{Me, PageError, render};
use crate::master::Site;
use crate::store::error::StoreError;
use askama::Template;
use axum::Form;
use axum::extract::State;
use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};
use serde::Deserialize;

/// Adds the count-policy page and its forms.
pub fn routes(t: &mut RouteTable) {
    t.get("/sites/{site}/count-policy", READ_POLICY, policy_page)
        .post(
            "/sites/{site}/count-policy/settings",
            SET_POLICY,
            save_settings,
        )
        .post(
            "/sites/{site}/count-policy/sources",
            SET_POLICY,
            save_sources,
        )
        .post(
            "/sites/{site}/count-policy/reason-codes",
            SET_POLICY,
            save_reason_codes,
        );
}

/// The caution the page shows above its forms.
pub const CAUTION: &str = "These settings decide which count differences reach a person and \
    which pass without one (or, where allowed, adjust the stock record automatically): change \
    them only as your company's own controls require.";

#[derive(Template)]
#[template(path = "count_policy.html")]
struct PolicyPage {
    me: Option<Me>,
    csrf: String,
    site: Site,
    /// The signed-in user may change the policy (else the forms are read-only).
    editor: bool,
    saved: &'static str,
    settings: SettingsForm,
    settings_errors: Errors,
    sources: SourcesForm,
    source_errors: Errors,
    reasons: ReasonsForm,
    reason_errors: Errors,
    caution: &'static str,
    version: &'static str,
}

/// What the page shows besides the stored policy: a notice, or one form as
/// it was sent with its refusals.
struct Showing {
    status: StatusCode,
    saved: &'static str,
    settings: Option<(SettingsForm, Errors)>,
    sources: Option<(SourcesForm, Errors)>,
    reasons: Option<(ReasonsForm, Errors)>,
}

impl Showing {
    fn stored(saved: &'static str) -> Self {
        Self {
            status: StatusCode::OK,
            saved,
            settings: None,
            sources: None,
            reasons: None,
        }
    }
}

/// Says whether `p` may change the policy: the rule of the forms themselves.
fn may_set(p: &Principal, site: &Site) -> bool {
    match SET_POLICY {
        Access::Site(roles) => p.holds_any(site.id, roles),
        _ => false,
    }
}

async fn render_policy(
    state: &AppState,
    p: &Principal,
    site: Site,
    showing: Showing,
) -> Result<Response, PageError> {
    let store = &state.store;
    let (settings, settings_errors) = match showing.settings {
        Some(shown) => shown,
        None => (
            SettingsForm::of(&store.netting_settings(site.id).await?),
            Errors::default(),
        ),
    };
    let (sources, source_errors) = match showing.sources {
        Some(shown) => shown,
        None => (
            SourcesForm::of(&store.source_timings(site.id).await?),
            Errors::default(),
        ),
    };
    let uses = store.reason_code_uses(site.id).await?;
    let (reasons, reason_errors) = match showing.reasons {
        Some((mut form, errors)) => {
            form.count_uses(&uses);
            (form, errors)
        }
        None => (
            ReasonsForm::of(&store.review_reasons(site.id).await?, &uses),
            Errors::default(),
        ),
    };
    let me = Me::at(p, &site);
    let page = render(&PolicyPage {
        csrf: me.csrf.clone(),
        me: Some(me),
        editor: may_set(p, &site),
        site,
        saved: showing.saved,
        settings,
        settings_errors,
        sources,
        source_errors,
        reasons,
        reason_errors,
        caution: CAUTION,
        version: crate::build_info::describe(),
    })?;
    Ok((showing.status, page).into_response())
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct PageParams {
    saved: Option<String>,
}

/// The `saved` value of each form's redirect and the notice it brings.
const SAVED: &[(&str, &str)] = &[
    ("settings", "Saved: tolerances and review limits."),
    ("sources", "Saved: movement sources' timing."),
    ("reason-codes", "Saved: reason codes."),
];

async fn policy_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Params(q): Params<PageParams>,
) -> Result<Response, PageError> {
    let saved = SAVED
        .iter()
        .find(|(k, _)| Some(*k) == q.saved.as_deref())
        .map_or("", |(_, notice)| notice);
    render_policy(&state, &p, site, Showing::stored(saved)).await
}

fn saved_url(site: &Site, form: &str) -> String {
    format!("/sites/{}/count-policy?saved={form}", site.code)
}

/// Turns a store refusal into the status and text a form shows; anything else fails the page.
fn refused(e: StoreError) -> Result<(StatusCode, Errors), PageError> {
    match e {
        StoreError::Conflict(m) => Ok((
            StatusCode::CONFLICT,
            Errors(vec![super::policy_form::FormError {
                field: String::new(),
                message: format!("Not saved: {m}."),
            }]),
        )),
        other => Err(other.into()),
    }
}

async fn save_settings(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    ClientAddress(address): ClientAddress,
    CurrentSite(site): CurrentSite,
    Form(fields): Form<Fields>,
) -> Result<Response, PageError> {
    let form = SettingsForm::read(&fields);
    match form.parse() {
        Ok(settings) => {
            let audit =
                audit::policy_change(&p, site.id, "settings", &settings).from_address(&address);
            state
                .store
                .put_netting_settings(site.id, settings, audit)
                .await?;
            Ok(Redirect::to(&saved_url(&site, "settings")).into_response())
        }
        Err(errors) => {
            let showing = Showing {
                status: StatusCode::UNPROCESSABLE_ENTITY,
                settings: Some((form, errors)),
                ..Showing::stored("")
            };
            render_policy(&state, &p, site, showing).await
        }
    }
}

async fn save_sources(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    ClientAddress(address): ClientAddress,
    CurrentSite(site): CurrentSite,
    Form(fields): Form<Fields>,
) -> Result<Response, PageError> {
    let form = SourcesForm::read(&fields);
    let (status, errors) = match form.parse() {
        Ok(edit) => match state
            .store
            .edit_source_timings(
                site.id,
                edit.shown,
                edit.rows.clone(),
                audit::policy_change(&p, site.id, "sources", &edit.rows).from_address(&address),
            )
            .await
        {
            Ok(()) => return Ok(Redirect::to(&saved_url(&site, "sources")).into_response()),
            Err(e) => refused(e)?,
        },
        Err(errors) => (StatusCode::UNPROCESSABLE_ENTITY, errors),
    };
    let showing = Showing {
        status,
        sources: Some((form, errors)),
        ..Showing::stored("")
    };
    render_policy(&state, &p, site, showing).await
}

async fn save_reason_codes(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    ClientAddress(address): ClientAddress,
    CurrentSite(site): CurrentSite,
    Form(fields): Form<Fields>,
) -> Result<Response, PageError> {
    let form = ReasonsForm::read(&fields);
    let (status, errors) = match form.parse() {
        Ok(edit) => match state
            .store
            .edit_reason_codes(
                site.id,
                edit.shown,
                edit.rows.clone(),
                audit::policy_change(&p, site.id, "reason-codes", &edit.rows)
                    .from_address(&address),
            )
            .await
        {
            Ok(()) => {
                return Ok(Redirect::to(&saved_url(&site, "reason-codes")).into_response());
            }
            Err(e) => refused(e)?,
        },
        Err(errors) => (StatusCode::UNPROCESSABLE_ENTITY, errors),
    };
    let showing = Showing {
        status,
        reasons: Some((form, errors)),
        ..Showing::stored("")
    };
    render_policy(&state, &p, site, showing).await
}
