//! Server-rendered pages (askama): the list of a person's sites, a site's summary,
//! how to open the phone app, and the page chrome every page shares (the header
//! and a site's navigation bar, `nav`).

use crate::AppState;
use crate::accounts::{Credential, Principal, Role};
use crate::error::ApiError;
use crate::http::access::{Access, BOOK_READERS, CurrentUser, MaybeUser, RouteTable, SITE_MEMBERS};
use crate::http::extract::CurrentSite;
use crate::http::nav::{self, Nav, NavLink};
use crate::master::{Site, SiteCounts};
use askama::Template;
use axum::extract::State;
use axum::http::HeaderMap;
use axum::response::{Html, IntoResponse, Redirect, Response};

/// Adds the page routes.
pub fn routes(t: &mut RouteTable) {
    // Public so that a signed-out visitor is sent to the sign-in page, not refused.
    t.get("/", Access::Public, home)
        .get("/sites/{site}", Access::Site(BOOK_READERS), site_page)
        .get(
            "/sites/{site}/phone",
            Access::Site(SITE_MEMBERS),
            phone_page,
        );
}

/// Who is signed in, as the page header shows it, with the form token every
/// state-changing form of the page carries, and on a site's pages the site's bar.
pub struct Me {
    pub display_name: String,
    pub csrf: String,
    pub nav: Option<Nav>,
}

impl Me {
    /// Returns the header of a signed-in page that belongs to no site.
    pub fn of(p: &Principal) -> Self {
        let csrf = match &p.credential {
            Credential::Session { csrf } => csrf.0.clone(),
            _ => String::new(),
        };
        Self {
            display_name: p.user.display_name.clone(),
            csrf,
            nav: None,
        }
    }

    /// Returns the header of one of `site`'s pages, with the links `p` may open there.
    pub fn at(p: &Principal, site: &Site) -> Self {
        let roles: Vec<Role> = p.roles_at(site.id).collect();
        Self {
            nav: Some(nav::bar(site, &roles)),
            ..Self::of(p)
        }
    }
}

/// Renders a template, turning a template error into a logged 500.
pub fn render(page: &impl Template) -> Result<Html<String>, ApiError> {
    Ok(Html(
        page.render()
            .map_err(|e| anyhow::anyhow!("page template: {e}"))?,
    ))
}

#[derive(Template)]
#[template(path = "refusal.html")]
struct Refusal {
    me: Option<Me>,
    message: String,
    version: &'static str,
}

/// A page handler's failure, answered as a small page rather than JSON.
#[derive(Debug)]
pub struct PageError(pub ApiError);

impl<E: Into<ApiError>> From<E> for PageError {
    fn from(e: E) -> Self {
        PageError(e.into())
    }
}

impl IntoResponse for PageError {
    fn into_response(self) -> Response {
        let status = self.0.status();
        let page = Refusal {
            me: None,
            message: self.0.public_text(),
            version: crate::build_info::describe(),
        };
        match page.render() {
            Ok(html) => (status, Html(html)).into_response(),
            Err(e) => {
                tracing::error!(error = %e, "refusal page template");
                self.0.into_response()
            }
        }
    }
}

struct SiteLine {
    site: Site,
    roles: Vec<Role>,
    start: String,
    links: Vec<NavLink>,
}

impl SiteLine {
    fn role_list(&self) -> String {
        let labels: Vec<&str> = self.roles.iter().map(|r| r.label()).collect();
        labels.join(", ")
    }
}

#[derive(Template)]
#[template(path = "home.html")]
struct Home {
    me: Option<Me>,
    sites: Vec<SiteLine>,
    version: &'static str,
}

/// The sites a person holds roles at, each with their start page and the pages they
/// may open there; a signed-out visitor is sent to sign in.
async fn home(
    State(state): State<AppState>,
    MaybeUser(p): MaybeUser,
) -> Result<Response, ApiError> {
    let Some(p) = p else {
        return Ok(Redirect::to("/sign-in").into_response());
    };
    let mut sites = Vec::new();
    for site in state.store.sites().await? {
        let mut roles: Vec<Role> = p.roles_at(site.id).collect();
        if roles.is_empty() {
            continue;
        }
        roles.sort();
        sites.push(SiteLine {
            start: nav::start_page(&site, &roles).unwrap_or_default(),
            links: nav::bar(&site, &roles).links,
            site,
            roles,
        });
    }
    Ok(render(&Home {
        me: Some(Me::of(&p)),
        sites,
        version: crate::build_info::describe(),
    })?
    .into_response())
}

#[derive(Template)]
#[template(path = "site.html")]
struct SitePage {
    me: Option<Me>,
    site: Site,
    counts: SiteCounts,
    version: &'static str,
}

async fn site_page(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
) -> Result<Html<String>, ApiError> {
    let counts = state.store.site_counts(site.id).await?;
    render(&SitePage {
        me: Some(Me::at(&p, &site)),
        site,
        counts,
        version: crate::build_info::describe(),
    })
}

#[derive(Template)]
#[template(path = "phone.html")]
struct PhonePage {
    me: Option<Me>,
    site: Site,
    /// This server's address as the browser reached it, for the phone to type.
    address: String,
    version: &'static str,
}

/// How a counter opens the phone app, and what to mind while counting: the start page
/// of someone who only counts.
async fn phone_page(
    CurrentUser(p): CurrentUser,
    CurrentSite(site): CurrentSite,
    headers: HeaderMap,
) -> Result<Html<String>, ApiError> {
    let host = headers
        .get(axum::http::header::HOST)
        .and_then(|h| h.to_str().ok())
        .unwrap_or("this server");
    render(&PhonePage {
        me: Some(Me::at(&p, &site)),
        address: format!("{host}/app/"),
        site,
        version: crate::build_info::describe(),
    })
}
