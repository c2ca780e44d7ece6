//! Signing in and out in the browser, and enrolling a phone.
//!
//! A phone enrols once, online: `POST /api/v1/devices` with the counter's
//! name and PIN answers a device token, shown once and stored on the server as
//! a digest. The phone sends it as `Authorization: Bearer <token>`; it stays
//! valid offline for as long as needed (no expiry) until an admin revokes it.

use super::audit::{Action, AuditEvent};
use super::secret::{self, CsrfToken, DEVICE_TOKEN_PREFIX, Secret, Token};
use super::session::{self, FORM_COOKIE, SESSION_COOKIE};
use super::signin::{self, Proof, SignInError};
use super::store::{NewDevice, NewSession};
use super::{Role, throttle};
use crate::AppState;
use crate::error::ApiError;
use crate::http::access::{
    Access, ClientAddress, CounterDevice, CurrentUser, MaybeUser, RouteTable,
};
use crate::http::pages::{Me, render};
use crate::input::text::{self, Kind};
use crate::master::SiteCode;
use crate::time::Timestamp;
use askama::Template;
use axum::extract::State;
use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};
use axum::{Form, Json};
use axum_extra::extract::cookie::CookieJar;
use serde::{Deserialize, Serialize};
use serde_json::json;

/// Longest device name kept, in characters (the rule of names).
pub const MAX_DEVICE_NAME_CHARS: usize = crate::input::text::MAX_NAME_CHARS;

/// Adds the sign-in, sign-out and device routes.
pub fn routes(t: &mut RouteTable) {
    t.get("/sign-in", Access::Public, sign_in_page)
        .post("/sign-in", Access::Public, sign_in)
        .post("/sign-out", Access::SignedIn, sign_out)
        .post("/api/v1/devices", Access::Public, enrol)
        .get("/api/v1/device", Access::Device, this_device)
        .delete("/api/v1/device", Access::Device, forget_this_device);
}

#[derive(Template)]
#[template(path = "sign_in.html")]
struct SignInPage {
    me: Option<Me>,
    csrf: String,
    message: String,
    name: String,
    version: &'static str,
}

/// Returns the pre-session form token, making one if the browser has none.
fn form_token(jar: CookieJar, secure: bool) -> (CookieJar, String) {
    match jar.get(FORM_COOKIE).map(|c| c.value().to_string()) {
        Some(t) if !t.is_empty() => (jar, t),
        _ => {
            let t = CsrfToken::generate().0;
            (jar.add(session::cookie(FORM_COOKIE, t.clone(), secure)), t)
        }
    }
}

fn sign_in_form(
    jar: CookieJar,
    secure: bool,
    status: StatusCode,
    message: &str,
    name: &str,
) -> Result<Response, ApiError> {
    let (jar, csrf) = form_token(jar, secure);
    let page = render(&SignInPage {
        me: None,
        csrf,
        message: message.to_string(),
        name: name.to_string(),
        version: crate::build_info::describe(),
    })?;
    Ok((status, jar, page).into_response())
}

async fn sign_in_page(
    State(state): State<AppState>,
    MaybeUser(me): MaybeUser,
    jar: CookieJar,
) -> Result<Response, ApiError> {
    if me.is_some() {
        return Ok(Redirect::to("/").into_response());
    }
    sign_in_form(jar, state.config.secure_cookies, StatusCode::OK, "", "")
}

#[derive(Deserialize)]
struct SignInForm {
    user: String,
    password: Secret,
}

async fn sign_in(
    State(state): State<AppState>,
    ClientAddress(address): ClientAddress,
    jar: CookieJar,
    Form(form): Form<SignInForm>,
) -> Result<Response, ApiError> {
    let secure = state.config.secure_cookies;
    let checked = signin::check(
        state.store.as_ref(),
        &state.hashing,
        &form.user,
        form.password,
        Proof::Password,
        &address,
    )
    .await;
    let user = match checked {
        Ok(u) => u,
        Err(SignInError::Wrong(p)) => {
            return sign_in_form(
                jar,
                secure,
                StatusCode::UNAUTHORIZED,
                p.wrong_text(),
                &form.user,
            );
        }
        Err(SignInError::Locked) => {
            return sign_in_form(
                jar,
                secure,
                StatusCode::TOO_MANY_REQUESTS,
                throttle::LOCKED_TEXT,
                &form.user,
            );
        }
        Err(SignInError::Busy(e)) => {
            let mut page = sign_in_form(
                jar,
                secure,
                StatusCode::TOO_MANY_REQUESTS,
                &e.to_string(),
                &form.user,
            )?;
            page.headers_mut().insert(
                axum::http::header::RETRY_AFTER,
                axum::http::HeaderValue::from(super::hashing::BUSY_RETRY_AFTER_S),
            );
            return Ok(page);
        }
        Err(SignInError::Internal(e)) => return Err(ApiError::Internal(e)),
    };
    let id = secret::random_text();
    let at = Timestamp::now();
    let audit = AuditEvent::now(
        super::audit::Actor::User {
            id: user.id,
            name: user.name.to_string(),
        },
        Action::SignIn,
        user.name.as_str(),
    )
    .from_address(&address)
    .detail(json!({"by": "password"}));
    let id_digest = secret::token_digest(&id);
    state
        .store
        .start_session(
            NewSession {
                id_digest: id_digest.clone(),
                user: user.clone(),
                csrf: CsrfToken::generate(),
                at,
            },
            throttle::account_key(user.name.as_str()),
            audit,
        )
        .await?;
    let jar = jar
        .remove(session::removal(FORM_COOKIE, secure))
        .add(session::cookie(SESSION_COOKIE, id, secure));
    Ok((jar, Redirect::to(&landing(&state, id_digest).await?)).into_response())
}

/// Where a new session starts: the person's start page at their one site (what they
/// do there), or the list of their sites.
async fn landing(state: &AppState, session: String) -> Result<String, ApiError> {
    let Some(started) = state.store.session(session).await? else {
        return Ok("/".into());
    };
    let p = started.principal;
    let held: Vec<_> = state
        .store
        .sites()
        .await?
        .into_iter()
        .map(|site| {
            let roles: Vec<Role> = p.roles_at(site.id).collect();
            (site, roles)
        })
        .collect();
    Ok(crate::http::nav::landing(&held))
}

async fn sign_out(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    ClientAddress(address): ClientAddress,
    jar: CookieJar,
) -> Result<Response, ApiError> {
    let secure = state.config.secure_cookies;
    if let Some(c) = jar.get(SESSION_COOKIE) {
        let audit = AuditEvent::now(p.actor(), Action::SignOut, p.user.name.as_str())
            .from_address(&address);
        state
            .store
            .end_session(secret::token_digest(c.value()), Some(audit))
            .await?;
    }
    let jar = jar.remove(session::removal(SESSION_COOKIE, secure));
    Ok((jar, Redirect::to("/sign-in")).into_response())
}

/// What a phone sends to enrol.
#[derive(Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub(crate) struct EnrolRequest {
    user: String,
    #[schema(value_type = String)]
    pin: Secret,
    site: String,
    /// A name the admin will recognise, e.g. "phone 3, aisle team".
    #[serde(default)]
    device_name: String,
}

/// What an enrolled phone is told; the token is shown this once.
#[derive(Serialize, utoipa::ToSchema)]
pub(crate) struct Enrolled {
    token: String,
    device_id: i64,
    site: String,
    user: String,
    display_name: String,
    server_time: Timestamp,
}

async fn enrol(
    State(state): State<AppState>,
    ClientAddress(address): ClientAddress,
    body: axum::body::Bytes,
) -> Result<(StatusCode, Json<Enrolled>), ApiError> {
    let req: EnrolRequest = crate::input::json::read(&body).map_err(|e| {
        ApiError::BadRequest(format!("the enrolment body, at {}: {}", e.field, e.message))
    })?;
    let site_code = SiteCode::parse(&req.site).map_err(|e| ApiError::BadRequest(e.to_string()))?;
    let user = signin::check(
        state.store.as_ref(),
        &state.hashing,
        &req.user,
        req.pin,
        Proof::Pin,
        &address,
    )
    .await?;
    let site = state
        .store
        .site(&site_code)
        .await?
        .ok_or_else(|| ApiError::NotFound(format!("unknown site '{site_code}'")))?;
    if !state
        .store
        .roles_at(user.id, site.id)
        .await?
        .contains(&Role::Counter)
    {
        return Err(ApiError::Forbidden(format!(
            "{} is not a counter at site {}",
            user.name, site.code
        )));
    }
    let name = match text::field("device_name", Kind::Name, &req.device_name)
        .map_err(ApiError::BadRequest)?
    {
        n if n.is_empty() => "phone".to_string(),
        n => n,
    };
    let token = Token::generate(DEVICE_TOKEN_PREFIX);
    let audit = AuditEvent::now(
        super::audit::Actor::User {
            id: user.id,
            name: user.name.to_string(),
        },
        Action::DeviceEnrolled,
        "",
    )
    .at_site(site.id)
    .from_address(&address);
    let id = state
        .store
        .enrol_device(
            NewDevice {
                user: user.clone(),
                site: site.id,
                name,
                token_digest: token.digest(),
                at: Timestamp::now(),
            },
            throttle::account_key(user.name.as_str()),
            audit,
        )
        .await?;
    Ok((
        StatusCode::CREATED,
        Json(Enrolled {
            token: token.expose().to_string(),
            device_id: id.0,
            site: site.code.to_string(),
            user: user.name.to_string(),
            display_name: user.display_name,
            server_time: Timestamp::now(),
        }),
    ))
}

/// What a phone learns about itself; `server_time` lets it measure its clock.
#[derive(Serialize, utoipa::ToSchema)]
pub(crate) struct DeviceView {
    device_id: i64,
    site_id: i64,
    user: String,
    display_name: String,
    roles: Vec<Role>,
    server_time: Timestamp,
}

async fn this_device(device: CounterDevice) -> Json<DeviceView> {
    Json(DeviceView {
        device_id: device.device.0,
        site_id: device.site.0,
        user: device.principal.user.name.to_string(),
        display_name: device.principal.user.display_name.clone(),
        roles: device.principal.roles_at(device.site).collect(),
        server_time: Timestamp::now(),
    })
}

async fn forget_this_device(
    State(state): State<AppState>,
    ClientAddress(address): ClientAddress,
    device: CounterDevice,
) -> Result<StatusCode, ApiError> {
    let audit = AuditEvent::now(
        device.principal.actor(),
        Action::DeviceRevoked,
        format!("device {}", device.device.0),
    )
    .at_site(device.site)
    .from_address(&address)
    .detail(json!({"by": "the device itself"}));
    state
        .store
        .revoke_device(device.site, device.device, audit)
        .await?;
    Ok(StatusCode::NO_CONTENT)
}
