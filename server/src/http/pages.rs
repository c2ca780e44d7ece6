//! Server-rendered pages (askama).

use crate::AppState;
use crate::error::ApiError;
use crate::master::{Site, SiteCounts};
use askama::Template;
use axum::Router;
use axum::extract::State;
use axum::response::Html;
use axum::routing::get;

/// Returns the page routes.
pub fn routes() -> Router<AppState> {
    Router::new().route("/", get(home))
}

struct SiteLine {
    site: Site,
    counts: SiteCounts,
}

#[derive(Template)]
#[template(path = "home.html")]
struct Home {
    sites: Vec<SiteLine>,
    version: &'static str,
}

async fn home(State(state): State<AppState>) -> Result<Html<String>, ApiError> {
    let mut sites = Vec::new();
    for site in state.store.sites().await? {
        let counts = state.store.site_counts(site.id).await?;
        sites.push(SiteLine { site, counts });
    }
    let page = Home {
        sites,
        version: env!("CARGO_PKG_VERSION"),
    };
    Ok(Html(
        page.render()
            .map_err(|e| anyhow::anyhow!("home page: {e}"))?,
    ))
}
