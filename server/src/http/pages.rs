//! Server-rendered pages (askama): the start page and a site's summary, and
//! the page chrome every page shares.

use crate::AppState;
use crate::accounts::{Credential, Principal, Role};
use crate::error::ApiError;
use crate::http::access::{Access, BOOK_READERS, CurrentUser, RouteTable};
use crate::http::extract::CurrentSite;
use crate::master::{Site, SiteCounts};
use askama::Template;
use axum::extract::State;
use axum::response::{Html, IntoResponse, Response};

/// Adds the page routes.
pub fn routes(t: &mut RouteTable) {
    t.get("/", Access::SignedIn, home)
        .get("/sites/{site}", Access::Site(BOOK_READERS), site_page);
}

/// Who is signed in, as the page header shows it, with the form token every
/// state-changing form of the page carries.
pub struct Me {
    pub display_name: String,
    pub csrf: String,
}

impl Me {
    /// Returns the header of a signed-in page.
    pub fn of(p: &Principal) -> Self {
        let csrf = match &p.credential {
            Credential::Session { csrf } => csrf.0.clone(),
            _ => String::new(),
        };
        Self {
            display_name: p.user.display_name.clone(),
            csrf,
        }
    }
}

/// Cairn's version, for the page footer.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");

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
            version: VERSION,
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
    reads_book: bool,
    admin: bool,
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

async fn home(
    State(state): State<AppState>,
    CurrentUser(p): CurrentUser,
) -> Result<Html<String>, ApiError> {
    let mut sites = Vec::new();
    for site in state.store.sites().await? {
        let mut roles: Vec<Role> = p.roles_at(site.id).collect();
        if roles.is_empty() {
            continue;
        }
        roles.sort();
        sites.push(SiteLine {
            reads_book: p.holds_any(site.id, BOOK_READERS),
            admin: roles.contains(&Role::Admin),
            site,
            roles,
        });
    }
    render(&Home {
        me: Some(Me::of(&p)),
        sites,
        version: VERSION,
    })
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
        me: Some(Me::of(&p)),
        site,
        counts,
        version: VERSION,
    })
}
