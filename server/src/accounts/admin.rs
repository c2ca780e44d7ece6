//! A site admin's pages: users and their roles, enrolled phones, integration
//! tokens, and the audit trail (with a CSV export). Every route here is for
//! `admin` at the site in the path; the access table says so, once.

use super::audit::{
    Action, AuditEvent, AuditRow, MAX_AUDIT_EXPORT_ROWS, MAX_AUDIT_PAGE_ROWS, to_csv,
};
use super::hashing::HashError;
use super::secret::{API_TOKEN_PREFIX, Secret, Token};
use super::store::{ApiTokenRow, DeviceRow, NewApiToken, NewUser};
use super::{DeviceId, Principal, Role, UserName, throttle};
use crate::AppState;
use crate::error::ApiError;
use crate::http::access::{ADMINS, Access, ClientAddress, CurrentUser, RouteTable};
use crate::http::extract::CurrentSite;
use crate::http::pages::{Me, render};
use crate::master::Site;
use crate::time::Timestamp;
use askama::Template;
use axum::Form;
use axum::extract::{Path, State};
use axum::http::{StatusCode, header};
use axum::response::{IntoResponse, Redirect, Response};

/// Longest display name or token name kept, in characters (the rule of names).
pub const MAX_LABEL_CHARS: usize = crate::input::text::MAX_NAME_CHARS;

/// Adds the admin routes.
pub fn routes(t: &mut RouteTable) {
    let admin = Access::Site(ADMINS);
    t.get("/sites/{site}/admin/users", admin, users_page)
        .post("/sites/{site}/admin/users", admin, create_user)
        .post("/sites/{site}/admin/roles", admin, set_roles)
        .post("/sites/{site}/admin/unlock", admin, unlock)
        .post("/sites/{site}/admin/zone", admin, set_zone)
        .post("/sites/{site}/admin/unlock-address", admin, unlock_address)
        .get("/sites/{site}/admin/devices", admin, devices_page)
        .post(
            "/sites/{site}/admin/devices/{device}/revoke",
            admin,
            revoke_device,
        )
        .get("/sites/{site}/admin/tokens", admin, tokens_page)
        .post("/sites/{site}/admin/tokens", admin, issue_token)
        .post(
            "/sites/{site}/admin/tokens/{token}/revoke",
            admin,
            revoke_token,
        )
        .get("/sites/{site}/admin/audit", admin, audit_page)
        .get("/sites/{site}/admin/audit.csv", admin, audit_csv);
}

/// A submitted form as name-value pairs (check boxes repeat their name).
type Fields = Vec<(String, String)>;

fn field<'a>(fields: &'a Fields, name: &str) -> &'a str {
    fields
        .iter()
        .find(|(k, _)| k == name)
        .map_or("", |(_, v)| v.as_str())
}

fn roles_of(fields: &Fields) -> Result<Vec<Role>, String> {
    let mut roles = Vec::new();
    for (k, v) in fields {
        if k == "role" {
            let r = Role::parse(v)?;
            if !roles.contains(&r) {
                roles.push(r);
            }
        }
    }
    roles.sort();
    Ok(roles)
}

/// Checks a display or token name by the free-text rule of names, naming the field.
fn label(field: &str, text: &str) -> Result<String, String> {
    crate::input::text::field(field, crate::input::text::Kind::Name, text)
}

fn back_to(site: &Site, page: &str) -> Response {
    Redirect::to(&format!("/sites/{}/admin/{page}", site.code)).into_response()
}

struct UserLine {
    name: String,
    display_name: String,
    roles: Vec<(Role, bool)>,
    has_pin: bool,
    failures: u32,
    locked: bool,
}

#[derive(Template)]
#[template(path = "admin_users.html")]
struct UsersPage {
    me: Option<Me>,
    csrf: String,
    site: Site,
    users: Vec<UserLine>,
    all_roles: [Role; 5],
    message: String,
    version: &'static str,
}

async fn render_users(
    state: &AppState,
    p: &Principal,
    site: Site,
    status: StatusCode,
    message: String,
) -> Result<Response, ApiError> {
    let since = throttle::window_start(Timestamp::now());
    let users = state
        .store
        .site_users(site.id, since)
        .await?
        .into_iter()
        .map(|u| UserLine {
            name: u.user.name.to_string(),
            display_name: u.user.display_name,
            roles: Role::ALL
                .into_iter()
                .map(|r| (r, u.roles.contains(&r)))
                .collect(),
            has_pin: u.has_pin,
            failures: u.recent_failures,
            locked: u.recent_failures >= throttle::MAX_ACCOUNT_FAILURES,
        })
        .collect();
    let me = Me::at(p, &site);
    let page = render(&UsersPage {
        csrf: me.csrf.clone(),
        me: Some(me),
        site,
        users,
        all_roles: Role::ALL,
        message,
        version: crate::build_info::describe(),
    })?;
    Ok((status, page).into_response())
}

async fn users_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
) -> Result<Response, ApiError> {
    render_users(&state, &p, site, StatusCode::OK, String::new()).await
}

async fn create_user(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    ClientAddress(address): ClientAddress,
    Form(fields): Form<Fields>,
) -> Result<Response, ApiError> {
    let refused = |m: String| (StatusCode::BAD_REQUEST, m);
    let checked = (|| {
        let name = UserName::parse(field(&fields, "name")).map_err(refused)?;
        let password = Secret::new(field(&fields, "password"));
        password.check_password().map_err(refused)?;
        let pin = match field(&fields, "pin") {
            "" => None,
            text => {
                let pin = Secret::new(text);
                pin.check_pin().map_err(refused)?;
                Some(pin)
            }
        };
        let roles = roles_of(&fields).map_err(refused)?;
        if roles.is_empty() {
            return Err(refused("tick at least one role".into()));
        }
        let display =
            match label("display name", field(&fields, "display_name")).map_err(refused)? {
                d if d.is_empty() => name.to_string(),
                d => d,
            };
        Ok((name, password, pin, roles, display))
    })();
    let (name, password, pin, roles, display_name) = match checked {
        Ok(v) => v,
        Err((status, m)) => return render_users(&state, &p, site, status, m).await,
    };
    let hashed = async {
        let password = state.hashing.hash(password).await?;
        let pin = match pin {
            Some(pin) => Some(state.hashing.hash(pin).await?),
            None => None,
        };
        Ok::<_, HashError>((password, pin))
    };
    let (password, pin) = match hashed.await {
        Ok(v) => v,
        Err(e @ HashError::Busy) => {
            return render_users(
                &state,
                &p,
                site,
                StatusCode::TOO_MANY_REQUESTS,
                e.to_string(),
            )
            .await;
        }
        Err(HashError::Internal(e)) => return Err(ApiError::Internal(e)),
    };
    let audit = AuditEvent::now(p.actor(), Action::UserCreated, name.as_str())
        .at_site(site.id)
        .from_address(&address);
    let made = state
        .store
        .create_user(
            NewUser {
                name,
                display_name,
                password,
                pin,
                roles: roles.into_iter().map(|r| (site.id, r)).collect(),
            },
            audit,
        )
        .await;
    match made {
        Ok(_) => Ok(back_to(&site, "users")),
        Err(crate::store::error::StoreError::Conflict(m)) => {
            render_users(&state, &p, site, StatusCode::CONFLICT, m).await
        }
        Err(e) => Err(e.into()),
    }
}

async fn set_roles(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    ClientAddress(address): ClientAddress,
    Form(fields): Form<Fields>,
) -> Result<Response, ApiError> {
    let parsed = UserName::parse(field(&fields, "user")).and_then(|n| Ok((n, roles_of(&fields)?)));
    let (name, roles) = match parsed {
        Ok(v) => v,
        Err(m) => return render_users(&state, &p, site, StatusCode::BAD_REQUEST, m).await,
    };
    let audit = AuditEvent::now(p.actor(), Action::RolesChanged, name.as_str())
        .at_site(site.id)
        .from_address(&address);
    match state.store.set_roles(&name, site.id, roles, audit).await {
        Ok(()) => Ok(back_to(&site, "users")),
        Err(crate::store::error::StoreError::NotFound(m)) => {
            render_users(&state, &p, site, StatusCode::NOT_FOUND, m).await
        }
        Err(e) => Err(e.into()),
    }
}

async fn unlock(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    ClientAddress(address): ClientAddress,
    Form(fields): Form<Fields>,
) -> Result<Response, ApiError> {
    let name = match UserName::parse(field(&fields, "user")) {
        Ok(n) => n,
        Err(m) => return render_users(&state, &p, site, StatusCode::BAD_REQUEST, m).await,
    };
    let key = throttle::account_key(name.as_str());
    lift_lock(&state, &p, &site, &address, key, name.as_str()).await
}

/// Changes the site's time zone (audited with the zone it was and is).
async fn set_zone(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    ClientAddress(address): ClientAddress,
    Form(fields): Form<Fields>,
) -> Result<Response, ApiError> {
    let zone = match crate::time::day::SiteZone::parse(field(&fields, "time_zone")) {
        Ok(z) => z,
        Err(e) => {
            return render_users(&state, &p, site, StatusCode::BAD_REQUEST, e.to_string()).await;
        }
    };
    let audit = AuditEvent::now(p.actor(), Action::SiteZoneChanged, site.code.as_str())
        .at_site(site.id)
        .from_address(&address);
    state.store.set_site_zone(site.id, zone, audit).await?;
    Ok(back_to(&site, "users"))
}

/// Clears the sign-in failures behind one throttling key and audits who did it.
async fn lift_lock(
    state: &AppState,
    p: &Principal,
    site: &Site,
    address: &str,
    key: String,
    subject: &str,
) -> Result<Response, ApiError> {
    let audit = AuditEvent::now(p.actor(), Action::AccountUnlocked, subject)
        .at_site(site.id)
        .from_address(address);
    state.store.unlock_account(key, audit).await?;
    Ok(back_to(site, "users"))
}

/// Longest client address accepted (an IPv6 address with zone fits well inside).
const MAX_ADDRESS_CHARS: usize = 64;

async fn unlock_address(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    ClientAddress(address): ClientAddress,
    Form(fields): Form<Fields>,
) -> Result<Response, ApiError> {
    let typed = field(&fields, "address").trim();
    let ip = (typed.len() <= MAX_ADDRESS_CHARS)
        .then(|| typed.parse::<std::net::IpAddr>().ok())
        .flatten();
    let Some(ip) = ip else {
        let m = format!("'{typed}' is not an IP address, e.g. 192.0.2.10 or 2001:db8::7");
        return render_users(&state, &p, site, StatusCode::BAD_REQUEST, m).await;
    };
    let target = ip.to_string();
    let key = throttle::address_key(&target);
    lift_lock(
        &state,
        &p,
        &site,
        &address,
        key,
        &format!("address {target}"),
    )
    .await
}

#[derive(Template)]
#[template(path = "admin_devices.html")]
struct DevicesPage {
    me: Option<Me>,
    csrf: String,
    site: Site,
    devices: Vec<DeviceRow>,
    version: &'static str,
}

async fn devices_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
) -> Result<Response, ApiError> {
    let devices = state.store.devices(site.id).await?;
    let me = Me::at(&p, &site);
    Ok(render(&DevicesPage {
        csrf: me.csrf.clone(),
        me: Some(me),
        site,
        devices,
        version: crate::build_info::describe(),
    })?
    .into_response())
}

async fn revoke_device(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    ClientAddress(address): ClientAddress,
    Path((_, device)): Path<(String, i64)>,
) -> Result<Response, ApiError> {
    let audit = AuditEvent::now(p.actor(), Action::DeviceRevoked, format!("device {device}"))
        .at_site(site.id)
        .from_address(&address);
    state
        .store
        .revoke_device(site.id, DeviceId(device), audit)
        .await?;
    Ok(back_to(&site, "devices"))
}

#[derive(Template)]
#[template(path = "admin_tokens.html")]
struct TokensPage {
    me: Option<Me>,
    csrf: String,
    site: Site,
    tokens: Vec<ApiTokenRow>,
    all_roles: [Role; 5],
    new_token: String,
    message: String,
    version: &'static str,
}

async fn render_tokens(
    state: &AppState,
    p: &Principal,
    site: Site,
    status: StatusCode,
    new_token: String,
    message: String,
) -> Result<Response, ApiError> {
    let tokens = state.store.api_tokens(site.id).await?;
    let me = Me::at(p, &site);
    let page = render(&TokensPage {
        csrf: me.csrf.clone(),
        me: Some(me),
        site,
        tokens,
        all_roles: Role::ALL,
        new_token,
        message,
        version: crate::build_info::describe(),
    })?;
    Ok((status, page).into_response())
}

async fn tokens_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
) -> Result<Response, ApiError> {
    render_tokens(
        &state,
        &p,
        site,
        StatusCode::OK,
        String::new(),
        String::new(),
    )
    .await
}

async fn issue_token(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    ClientAddress(address): ClientAddress,
    Form(fields): Form<Fields>,
) -> Result<Response, ApiError> {
    let parsed = UserName::parse(field(&fields, "user"))
        .and_then(|u| Ok((u, Role::parse(field(&fields, "role"))?)));
    let (user, role) = match parsed {
        Ok(v) => v,
        Err(m) => {
            return render_tokens(&state, &p, site, StatusCode::BAD_REQUEST, String::new(), m)
                .await;
        }
    };
    let name = match label("token name", field(&fields, "name")) {
        Ok(n) if n.is_empty() => format!("{user} ({role})"),
        Ok(n) => n,
        Err(m) => {
            return render_tokens(&state, &p, site, StatusCode::BAD_REQUEST, String::new(), m)
                .await;
        }
    };
    let token = Token::generate(API_TOKEN_PREFIX);
    let audit = AuditEvent::now(p.actor(), Action::ApiTokenIssued, "")
        .at_site(site.id)
        .from_address(&address);
    let issued = state
        .store
        .issue_api_token(
            NewApiToken {
                user,
                site: site.id,
                role,
                name,
                token_digest: token.digest(),
                at: Timestamp::now(),
            },
            audit,
        )
        .await;
    match issued {
        Ok(_) => {
            render_tokens(
                &state,
                &p,
                site,
                StatusCode::OK,
                token.expose().to_string(),
                String::new(),
            )
            .await
        }
        Err(
            crate::store::error::StoreError::Conflict(m)
            | crate::store::error::StoreError::NotFound(m),
        ) => render_tokens(&state, &p, site, StatusCode::BAD_REQUEST, String::new(), m).await,
        Err(e) => Err(e.into()),
    }
}

async fn revoke_token(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    ClientAddress(address): ClientAddress,
    Path((_, token)): Path<(String, i64)>,
) -> Result<Response, ApiError> {
    let audit = AuditEvent::now(p.actor(), Action::ApiTokenRevoked, format!("token {token}"))
        .at_site(site.id)
        .from_address(&address);
    state.store.revoke_api_token(site.id, token, audit).await?;
    Ok(back_to(&site, "tokens"))
}

#[derive(Template)]
#[template(path = "admin_audit.html")]
struct AuditPage {
    me: Option<Me>,
    site: Site,
    rows: Vec<AuditRow>,
    limit: usize,
    version: &'static str,
}

async fn audit_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
) -> Result<Response, ApiError> {
    let rows = state
        .store
        .audit_events(site.id, MAX_AUDIT_PAGE_ROWS)
        .await?;
    Ok(render(&AuditPage {
        me: Some(Me::at(&p, &site)),
        site,
        rows,
        limit: MAX_AUDIT_PAGE_ROWS,
        version: crate::build_info::describe(),
    })?
    .into_response())
}

async fn audit_csv(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
) -> Result<Response, ApiError> {
    let rows = state
        .store
        .audit_events(site.id, MAX_AUDIT_EXPORT_ROWS)
        .await?;
    let body = to_csv(&rows)?;
    let file = format!("attachment; filename=\"cairn-audit-{}.csv\"", site.code);
    Ok((
        [
            (header::CONTENT_TYPE, "text/csv; charset=utf-8".to_string()),
            (header::CONTENT_DISPOSITION, file),
        ],
        body,
    )
        .into_response())
}
