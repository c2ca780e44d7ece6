//! The frequency-policy page: how the site sets its count intervals (`abc`,
//! `risk` or `blend`) and the class floors of `blend`, as one form.
//!
//! Its access is the JSON route's (`planning/frequency-policy`): anyone who may
//! read the book sees it; only [`COUNT_POLICY`] roles may change it, and the
//! access table checks the form's token. A refused form is shown again with
//! what was typed and each field named; nothing is written then. A save writes
//! the policy and its audit event in one transaction.

use super::policy::{FrequencyPolicy, MAX_FLOOR_PER_YEAR};
use crate::AppState;
use crate::accounts::{Principal, audit};
use crate::batch::FieldError;
use crate::http::access::{
    Access, BOOK_READERS, COUNT_POLICY, ClientAddress, CurrentUser, RouteTable,
};
use crate::http::extract::{CurrentSite, Params};
use crate::http::pages::{Me, PageError, render};
use crate::master::Site;
use askama::Template;
use axum::Form;
use axum::extract::State;
use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};
use serde::Deserialize;
use serde_json::{Map, Value};

/// Adds the frequency-policy page and its form.
pub fn routes(t: &mut RouteTable) {
    t.get(
        "/sites/{site}/frequency-policy",
        Access::Site(BOOK_READERS),
        policy_page,
    )
    .post(
        "/sites/{site}/frequency-policy",
        Access::Site(COUNT_POLICY),
        save_policy,
    );
}

/// The caution the page shows above its form.
pub const CAUTION: &str = "Changing the policy changes which bins are counted and how often, \
    from the next list built. Counts found wrong still lead to adjustments of the stock record: \
    keep to your company's own controls for those.";

/// One choice of the form.
struct Choice {
    value: &'static str,
    label: &'static str,
    hint: &'static str,
}

const CHOICES: [Choice; 3] = [
    Choice {
        value: "abc",
        label: "By class (abc)",
        hint: "Each class is counted the number of times a year set in the planning settings.",
    },
    Choice {
        value: "risk",
        label: "By risk",
        hint: "Each item's interval follows the value of record error it is expected to build up: \
               how often errors turn up in its repeat counts and its picks, its unit cost and \
               the minutes its bins take. \
               The day's counting minutes stay what the class frequencies take.",
    },
    Choice {
        value: "blend",
        label: "By risk, with a floor per class",
        hint: "As by risk, but no item of a class is counted less often than its floor below.",
    },
];

#[derive(Template)]
#[template(path = "frequency_policy.html")]
struct PolicyPage {
    me: Option<Me>,
    csrf: String,
    site: Site,
    editor: bool,
    saved: bool,
    choices: &'static [Choice],
    /// The form as shown: the stored policy, or what was typed.
    policy: String,
    floor_a: String,
    floor_b: String,
    floor_c: String,
    errors: Vec<FieldError>,
    caution: &'static str,
    max_floor: u32,
    version: &'static str,
}

impl PolicyPage {
    fn invalid(&self, field: &str) -> bool {
        self.errors.iter().any(|e| e.field == field)
    }
}

/// The form's fields as typed.
#[derive(Debug, Default, Deserialize)]
struct PolicyForm {
    #[serde(default)]
    policy: String,
    #[serde(default)]
    floor_a: String,
    #[serde(default)]
    floor_b: String,
    #[serde(default)]
    floor_c: String,
}

impl PolicyForm {
    fn of(p: &FrequencyPolicy) -> Self {
        Self {
            policy: p.policy.as_str().into(),
            floor_a: p.floor_a.to_string(),
            floor_b: p.floor_b.to_string(),
            floor_c: p.floor_c.to_string(),
        }
    }

    /// Reads the form through the same rules as the JSON route.
    fn parse(&self, current: &FrequencyPolicy) -> Result<FrequencyPolicy, Vec<FieldError>> {
        let mut body = Map::new();
        body.insert("policy".into(), Value::String(self.policy.trim().into()));
        let mut errors = Vec::new();
        for (name, text) in [
            ("floor_a", &self.floor_a),
            ("floor_b", &self.floor_b),
            ("floor_c", &self.floor_c),
        ] {
            match text.trim().parse::<u64>() {
                Ok(n) => {
                    body.insert(name.into(), Value::from(n));
                }
                Err(_) => errors.push(FieldError::new(
                    name,
                    format!(
                        "must be a whole number of counts a year from 0 (no floor) to {MAX_FLOOR_PER_YEAR}, found '{}'",
                        text.trim()
                    ),
                )),
            }
        }
        match FrequencyPolicy::from_json(&Value::Object(body), current) {
            Ok(p) if errors.is_empty() => Ok(p),
            Ok(_) => Err(errors),
            Err(more) => {
                errors.extend(more);
                Err(errors)
            }
        }
    }
}

fn may_set(p: &Principal, site: &Site) -> bool {
    p.holds_any(site.id, COUNT_POLICY)
}

fn page(
    p: &Principal,
    site: Site,
    form: PolicyForm,
    errors: Vec<FieldError>,
    saved: bool,
) -> Result<axum::response::Html<String>, PageError> {
    let me = Me::at(p, &site);
    Ok(render(&PolicyPage {
        csrf: me.csrf.clone(),
        me: Some(me),
        editor: may_set(p, &site),
        site,
        saved,
        choices: &CHOICES,
        policy: form.policy,
        floor_a: form.floor_a,
        floor_b: form.floor_b,
        floor_c: form.floor_c,
        errors,
        caution: CAUTION,
        max_floor: MAX_FLOOR_PER_YEAR,
        version: crate::build_info::describe(),
    })?)
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct PageParams {
    saved: Option<String>,
}

async fn policy_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    Params(q): Params<PageParams>,
) -> Result<Response, PageError> {
    let stored = state.store.frequency_policy(site.id).await?;
    let html = page(
        &p,
        site,
        PolicyForm::of(&stored),
        Vec::new(),
        q.saved.is_some(),
    )?;
    Ok(html.into_response())
}

async fn save_policy(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    ClientAddress(address): ClientAddress,
    CurrentSite(site): CurrentSite,
    Form(fields): Form<Vec<(String, String)>>,
) -> Result<Response, PageError> {
    let mut form = PolicyForm::default();
    for (k, v) in fields {
        match k.as_str() {
            "policy" => form.policy = v,
            "floor_a" => form.floor_a = v,
            "floor_b" => form.floor_b = v,
            "floor_c" => form.floor_c = v,
            _ => {}
        }
    }
    let before = state.store.frequency_policy(site.id).await?;
    match form.parse(&before) {
        Ok(policy) => {
            let audit =
                audit::interval_rule_change(&p, site.id, &before, &policy).from_address(&address);
            state
                .store
                .put_frequency_policy(site.id, policy, audit)
                .await?;
            let to = format!("/sites/{}/frequency-policy?saved=policy", site.code);
            Ok(Redirect::to(&to).into_response())
        }
        Err(errors) => {
            let html = page(&p, site, form, errors, false)?;
            Ok((StatusCode::UNPROCESSABLE_ENTITY, html).into_response())
        }
    }
}
