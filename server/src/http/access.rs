//! Who may use which route: the one place Cairn decides it.
//!
//! Every route is declared through [`RouteTable`] with an [`Access`] rule, so
//! a route without a rule cannot be written. One middleware, [`authorize`],
//! runs for every request: it finds the rule of the matched route (refusing a
//! route that has none), authenticates the sender (session cookie, device
//! token or integration token), checks the role at the site named in the
//! path, then the origin and form token of state-changing page requests, and hands the
//! handler a [`Principal`] through [`CurrentUser`] or [`CounterDevice`].
//!
//! Book quantities (balances, movement history, site counts) are open to
//! [`BOOK_READERS`] only, a list without `counter`: blind counts are enforced
//! here, for every route, not by the screens.

use crate::AppState;
use crate::accounts::secret::{API_TOKEN_PREFIX, DEVICE_TOKEN_PREFIX, token_digest};
use crate::accounts::session::{self, FORM_COOKIE, SESSION_COOKIE};
use crate::accounts::{Credential, DeviceId, Principal, Role};
use crate::error::ApiError;
use crate::master::{Site, SiteCode, SiteId};
use crate::time::Timestamp;
use axum::Router;
use axum::body::Body;
use axum::extract::{ConnectInfo, FromRequestParts, MatchedPath, Path, Request, State};
use axum::handler::Handler;
use axum::http::request::Parts;
use axum::http::{HeaderMap, Method, header};
use axum::middleware::Next;
use axum::response::{Html, IntoResponse, Response};
use axum_extra::extract::cookie::CookieJar;
use std::collections::HashMap;
use std::net::SocketAddr;
use std::sync::Arc;

/// Roles that may read book quantities. `counter` is deliberately absent.
pub const BOOK_READERS: &[Role] = &[
    Role::Supervisor,
    Role::InventoryManager,
    Role::Planner,
    Role::Admin,
];
/// Roles that may post movements and master data (people or integration tokens).
pub const BOOK_WRITERS: &[Role] = &[Role::InventoryManager, Role::Admin];
/// Roles that build, size and hand out the day's count list.
pub const LIST_KEEPERS: &[Role] = &[Role::Supervisor, Role::InventoryManager, Role::Admin];
/// Roles that set how a site counts: frequencies, classification, calendar.
pub const COUNT_POLICY: &[Role] = &[Role::InventoryManager, Role::Admin];
/// Roles that set the planner's buffer inputs and the site's accuracy target.
pub const PLANNERS: &[Role] = &[Role::Planner, Role::InventoryManager, Role::Admin];
/// Roles that administer a site's users, devices, tokens and audit trail.
pub const ADMINS: &[Role] = &[Role::Admin];
/// Everyone with a role at the site (how to open the phone app).
pub const SITE_MEMBERS: &[Role] = &Role::ALL;

/// The name of the header that carries a session's form token for scripts.
pub const CSRF_HEADER: &str = "x-csrf-token";
/// The name of the form field that carries it in pages.
pub const CSRF_FIELD: &str = "csrf";

/// Who may use a route.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Access {
    /// Anyone, signed in or not (health check, stylesheet, sign-in, enrolment).
    Public,
    /// Anyone signed in, with any role.
    SignedIn,
    /// An enrolled phone, by its device token.
    Device,
    /// A sender holding one of these roles at the site named by `{site}`.
    Site(&'static [Role]),
}

/// One route and its rule.
#[derive(Debug, Clone)]
pub struct Rule {
    pub method: Method,
    pub path: &'static str,
    pub access: Access,
}

impl Rule {
    /// Tells whether the route is part of the JSON API (bearer tokens) rather
    /// than a page (session cookie).
    pub fn is_api(&self) -> bool {
        is_api(self.path)
    }
}

fn is_api(path: &str) -> bool {
    path.starts_with("/api/")
}

/// Routes and their rules, built together so neither exists without the other.
pub struct RouteTable {
    router: Router<AppState>,
    rules: Vec<Rule>,
}

impl Default for RouteTable {
    fn default() -> Self {
        Self {
            router: Router::new(),
            rules: Vec::new(),
        }
    }
}

impl RouteTable {
    /// Adds a GET route (HEAD is answered by it too).
    pub fn get<H, T>(&mut self, path: &'static str, access: Access, handler: H) -> &mut Self
    where
        H: Handler<T, AppState>,
        T: 'static,
    {
        self.add(Method::GET, path, access, axum::routing::get(handler))
    }

    /// Adds a POST route.
    pub fn post<H, T>(&mut self, path: &'static str, access: Access, handler: H) -> &mut Self
    where
        H: Handler<T, AppState>,
        T: 'static,
    {
        self.add(Method::POST, path, access, axum::routing::post(handler))
    }

    /// Adds a PUT route.
    pub fn put<H, T>(&mut self, path: &'static str, access: Access, handler: H) -> &mut Self
    where
        H: Handler<T, AppState>,
        T: 'static,
    {
        self.add(Method::PUT, path, access, axum::routing::put(handler))
    }

    /// Adds a DELETE route.
    pub fn delete<H, T>(&mut self, path: &'static str, access: Access, handler: H) -> &mut Self
    where
        H: Handler<T, AppState>,
        T: 'static,
    {
        self.add(Method::DELETE, path, access, axum::routing::delete(handler))
    }

    fn add(
        &mut self,
        method: Method,
        path: &'static str,
        access: Access,
        route: axum::routing::MethodRouter<AppState>,
    ) -> &mut Self {
        assert!(
            !self
                .rules
                .iter()
                .any(|r| r.method == method && r.path == path),
            "route {method} {path} is declared twice"
        );
        if let Access::Site(roles) = access {
            assert!(
                path.contains("{site}"),
                "route {method} {path} has a site rule but no {{site}} in its path"
            );
            assert!(!roles.is_empty(), "route {method} {path} admits no role");
        }
        self.rules.push(Rule {
            method,
            path,
            access,
        });
        let router = std::mem::take(&mut self.router);
        self.router = router.route(path, route);
        self
    }

    /// Returns every route's rule.
    pub fn rules(&self) -> &[Rule] {
        &self.rules
    }

    /// Splits the table into its router and its rules.
    pub fn into_parts(self) -> (Router<AppState>, Vec<Rule>) {
        (self.router, self.rules)
    }
}

/// The rules by (method, matched path), as the middleware looks them up.
pub struct Guard {
    state: AppState,
    rules: HashMap<(Method, &'static str), Access>,
}

impl Guard {
    /// Indexes the rules for the middleware.
    pub fn new(state: AppState, rules: &[Rule]) -> Arc<Self> {
        Arc::new(Self {
            state,
            rules: rules
                .iter()
                .map(|r| ((r.method.clone(), r.path), r.access))
                .collect(),
        })
    }
}

/// The sender's address, as throttling and the audit trail see it.
#[derive(Debug, Clone)]
pub struct ClientAddress(pub String);

/// The site named in the path, already looked up by the middleware.
#[derive(Debug, Clone)]
pub struct PathSite(pub Site);

fn client_address(headers: &HeaderMap, parts: &axum::http::Extensions, trust: bool) -> String {
    if trust
        && let Some(last) = headers
            .get("x-forwarded-for")
            .and_then(|v| v.to_str().ok())
            .and_then(|v| v.rsplit(',').next())
    {
        return last.trim().to_string();
    }
    parts
        .get::<ConnectInfo<SocketAddr>>()
        .map(|c| c.0.ip().to_string())
        .unwrap_or_else(|| "unknown".into())
}

/// Renders a refusal: JSON for the API, a small page for the browser.
fn refuse(api: bool, e: ApiError) -> Response {
    if api {
        return e.into_response();
    }
    let status = e.status();
    let text = escape_html(&e.public_text());
    let sign_in = if status == axum::http::StatusCode::UNAUTHORIZED {
        r#"<p><a href="/sign-in">Sign in</a></p>"#
    } else {
        r#"<p><a href="/">Back to the start page</a></p>"#
    };
    let body = format!(
        "<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>Cairn</title>\
         <link rel=\"stylesheet\" href=\"/static/cairn.css\"></head><body><main>\
         <p class=\"refusal\">{text}</p>{sign_in}</main></body></html>"
    );
    (status, Html(body)).into_response()
}

fn escape_html(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// Finds who sent a request: a bearer token (API only) or a session cookie.
async fn authenticate(
    state: &AppState,
    headers: &HeaderMap,
    api: bool,
    safe: bool,
) -> Result<Option<Principal>, ApiError> {
    if let Some(value) = headers.get(header::AUTHORIZATION) {
        if !api {
            return Err(ApiError::Unauthorized(
                "pages need a browser sign-in, not a token".into(),
            ));
        }
        let token = value
            .to_str()
            .ok()
            .and_then(|v| v.strip_prefix("Bearer "))
            .map(str::trim)
            .ok_or_else(|| {
                ApiError::Unauthorized("send the token as 'Authorization: Bearer <token>'".into())
            })?;
        let stale = || ApiError::Unauthorized("this token is unknown or has been revoked".into());
        let digest = token_digest(token);
        if token.starts_with(DEVICE_TOKEN_PREFIX) {
            let (principal, last_seen) = state
                .store
                .device_principal(digest)
                .await?
                .ok_or_else(stale)?;
            let now = Timestamp::now();
            if let Credential::Device { id, .. } = principal.credential
                && session::due_for_touch(last_seen, now)
            {
                state.store.touch_device(id, now).await?;
            }
            return Ok(Some(principal));
        }
        if token.starts_with(API_TOKEN_PREFIX) {
            let principal = state
                .store
                .api_token_principal(digest)
                .await?
                .ok_or_else(stale)?;
            return Ok(Some(principal));
        }
        return Err(stale());
    }
    // The API takes a session cookie for reading only: a script that writes uses a token.
    if api && !safe {
        return Ok(None);
    }
    let jar = CookieJar::from_headers(headers);
    let Some(cookie) = jar.get(SESSION_COOKIE) else {
        return Ok(None);
    };
    let digest = token_digest(cookie.value());
    let Some(s) = state.store.session(digest.clone()).await? else {
        return Ok(None);
    };
    let now = Timestamp::now();
    if session::expired(s.created_at, s.last_seen_at, now) {
        state.store.end_session(digest, None).await?;
        return Ok(None);
    }
    if session::due_for_touch(s.last_seen_at, now) {
        state.store.touch_session(digest, now).await?;
    }
    Ok(Some(s.principal))
}

/// Reads the form token a state-changing page request carries, buffering a
/// form body so the handler can still read it.
async fn submitted_form_token(
    req: Request,
    limit: usize,
) -> Result<(Request, Option<String>), ApiError> {
    if let Some(v) = req.headers().get(CSRF_HEADER).and_then(|v| v.to_str().ok()) {
        let v = v.to_string();
        return Ok((req, Some(v)));
    }
    let is_form = req
        .headers()
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| v.starts_with("application/x-www-form-urlencoded"));
    if !is_form {
        return Ok((req, None));
    }
    let (parts, body) = req.into_parts();
    let bytes = axum::body::to_bytes(body, limit)
        .await
        .map_err(|_| ApiError::TooLarge(format!("a form is at most {limit} bytes")))?;
    let token = serde_urlencoded::from_bytes::<Vec<(String, String)>>(&bytes)
        .ok()
        .and_then(|fields| {
            fields
                .into_iter()
                .find(|(k, _)| k == CSRF_FIELD)
                .map(|(_, v)| v)
        });
    Ok((Request::from_parts(parts, Body::from(bytes)), token))
}

/// What a refused form token is told.
const STALE_FORM_TEXT: &str =
    "This form's security token is missing or out of date: reload the page and try again.";

async fn site_in_path(state: &AppState, parts: &mut Parts) -> Result<Option<Site>, ApiError> {
    let Ok(Path(params)) = Path::<HashMap<String, String>>::from_request_parts(parts, state).await
    else {
        return Ok(None);
    };
    let Some(raw) = params.get("site") else {
        return Ok(None);
    };
    let code = SiteCode::parse(raw).map_err(|e| ApiError::BadRequest(e.to_string()))?;
    let site = state
        .store
        .site(&code)
        .await?
        .ok_or_else(|| ApiError::NotFound(format!("unknown site '{code}'")))?;
    Ok(Some(site))
}

/// The middleware in front of every route: see the module comment.
pub async fn authorize(State(guard): State<Arc<Guard>>, req: Request, next: Next) -> Response {
    let Some(matched) = req.extensions().get::<MatchedPath>().cloned() else {
        // No route matched: the fallback answers 404 and reveals nothing.
        return next.run(req).await;
    };
    let path = matched.as_str();
    let api = is_api(path);
    match check(&guard, req, path).await {
        Ok(req) => next.run(req).await,
        Err(e) => refuse(api, e),
    }
}

async fn check(guard: &Guard, req: Request, path: &str) -> Result<Request, ApiError> {
    let state = &guard.state;
    let api = is_api(path);
    let method = match *req.method() {
        Method::HEAD => Method::GET,
        ref m => m.clone(),
    };
    let safe = method == Method::GET;
    let Some(&access) = guard.rules.get(&(method.clone(), path)) else {
        let allowed: Vec<&str> = guard
            .rules
            .keys()
            .filter(|(_, p)| *p == path)
            .map(|(m, _)| m.as_str())
            .collect();
        if !allowed.is_empty() {
            let mut allowed = allowed;
            allowed.sort_unstable();
            return Err(ApiError::MethodNotAllowed(format!(
                "{path} takes {}, not {method}",
                allowed.join(" or ")
            )));
        }
        tracing::error!(%method, path, "a route has no access rule; refusing it");
        return Err(ApiError::Forbidden("this route has no access rule".into()));
    };
    let address = client_address(
        req.headers(),
        req.extensions(),
        state.config.trust_forwarded_for,
    );
    // A public route answers whoever asks: a probe that sends a token out of habit, or a
    // stale one, is not refused (the token is then ignored).
    let principal = match authenticate(state, req.headers(), api, safe).await {
        Err(ApiError::Unauthorized(_)) if access == Access::Public => None,
        other => other?,
    };

    let (mut parts, body) = req.into_parts();
    match access {
        Access::Public => {}
        Access::SignedIn => {
            if principal.is_none() {
                return Err(unauthenticated(api));
            }
        }
        Access::Device => match &principal {
            None => return Err(unauthenticated(api)),
            Some(p) if matches!(p.credential, Credential::Device { .. }) => {}
            Some(_) => {
                return Err(ApiError::Forbidden(
                    "only an enrolled phone may use this".into(),
                ));
            }
        },
        Access::Site(roles) => {
            let Some(p) = &principal else {
                return Err(unauthenticated(api));
            };
            let site = site_in_path(state, &mut parts).await?.ok_or_else(|| {
                ApiError::Internal(anyhow::anyhow!("route {path} has a site rule but no site"))
            })?;
            if !p.holds_any(site.id, roles) {
                let needed: Vec<&str> = roles.iter().map(|r| r.label()).collect();
                return Err(ApiError::Forbidden(format!(
                    "this needs one of these roles at site {}: {}",
                    site.code,
                    needed.join(", ")
                )));
            }
            parts.extensions.insert(PathSite(site));
        }
    }
    parts.extensions.insert(ClientAddress(address));
    let mut req = Request::from_parts(parts, body);
    if !api && !safe {
        if !super::headers::same_origin(req.headers()) {
            return Err(ApiError::Forbidden(
                super::headers::FOREIGN_FORM_TEXT.into(),
            ));
        }
        // Public forms (sign-in) have no session yet: their token is the
        // pre-session cookie's, sent back in the form (double submit).
        let expected = match (&principal, access) {
            (
                Some(Principal {
                    credential: Credential::Session { csrf },
                    ..
                }),
                a,
            ) if a != Access::Public => Some(csrf.0.clone()),
            _ => CookieJar::from_headers(req.headers())
                .get(FORM_COOKIE)
                .map(|c| c.value().to_string()),
        };
        let (r, submitted) = submitted_form_token(req, state.config.max_body_bytes).await?;
        req = r;
        let ok = matches!((&expected, &submitted),
            (Some(e), Some(s)) if !e.is_empty() && crate::accounts::secret::same(e, s));
        if !ok {
            return Err(ApiError::BadRequest(STALE_FORM_TEXT.into()));
        }
    }

    if let Some(p) = principal {
        req.extensions_mut().insert(p);
    }
    Ok(req)
}

fn unauthenticated(api: bool) -> ApiError {
    ApiError::Unauthorized(if api {
        "sign in first: send 'Authorization: Bearer <token>'".into()
    } else {
        "Sign in first.".into()
    })
}

/// The authenticated sender of a request whose rule demands one.
pub struct CurrentUser(pub Principal);

impl<S: Send + Sync> FromRequestParts<S> for CurrentUser {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, _: &S) -> Result<Self, ApiError> {
        parts
            .extensions
            .get::<Principal>()
            .cloned()
            .map(CurrentUser)
            .ok_or_else(|| ApiError::Unauthorized("Sign in first.".into()))
    }
}

/// The sender if one is signed in, on a public route.
pub struct MaybeUser(pub Option<Principal>);

impl<S: Send + Sync> FromRequestParts<S> for MaybeUser {
    type Rejection = std::convert::Infallible;

    async fn from_request_parts(
        parts: &mut Parts,
        _: &S,
    ) -> Result<Self, std::convert::Infallible> {
        Ok(MaybeUser(parts.extensions.get::<Principal>().cloned()))
    }
}

/// An enrolled phone: its device id, its site and the counter behind it.
pub struct CounterDevice {
    pub principal: Principal,
    pub device: DeviceId,
    pub site: SiteId,
}

impl<S: Send + Sync> FromRequestParts<S> for CounterDevice {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, _: &S) -> Result<Self, ApiError> {
        let principal = parts
            .extensions
            .get::<Principal>()
            .cloned()
            .ok_or_else(|| ApiError::Unauthorized("send the phone's device token".into()))?;
        match principal.credential {
            Credential::Device { id, site } => Ok(CounterDevice {
                principal,
                device: id,
                site,
            }),
            _ => Err(ApiError::Forbidden(
                "only an enrolled phone may use this".into(),
            )),
        }
    }
}

impl<S: Send + Sync> FromRequestParts<S> for ClientAddress {
    type Rejection = std::convert::Infallible;

    async fn from_request_parts(
        parts: &mut Parts,
        _: &S,
    ) -> Result<Self, std::convert::Infallible> {
        Ok(parts
            .extensions
            .get::<ClientAddress>()
            .cloned()
            .unwrap_or_else(|| ClientAddress("unknown".into())))
    }
}
