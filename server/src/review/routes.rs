//! The host's feed of posted count adjustments: what the review approved and
//! what was posted automatically within tolerance (`automatic`), in ledger
//! order, paged by the ledger's sequence number so a host that stores the last
//! `next` it saw receives each adjustment exactly once.

use super::MAX_FEED_ROWS;
use super::store::AdjustmentRow;
use crate::AppState;
use crate::error::ApiError;
use crate::http::access::{Access, BOOK_READERS, RouteTable};
use crate::http::extract::{CurrentSite, Params};
use axum::Json;
use axum::extract::State;
use axum::http::{HeaderName, header};
use axum::response::{IntoResponse, Response};
use serde::{Deserialize, Serialize};

/// Adjustments per page when the caller names no limit.
const DEFAULT_FEED_ROWS: usize = 200;
/// The header that carries the next page's cursor of a CSV page.
pub const NEXT_HEADER: &str = "x-next-after";

/// Adds the feed's route.
pub fn routes(t: &mut RouteTable) {
    t.get(
        "/api/v1/sites/{site}/adjustments",
        Access::Site(BOOK_READERS),
        get_adjustments,
    );
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FeedParams {
    after: Option<String>,
    limit: Option<usize>,
    format: Option<String>,
}

/// A page of the feed.
#[derive(Debug, Serialize, utoipa::ToSchema)]
pub struct FeedPage {
    pub adjustments: Vec<AdjustmentRow>,
    /// Pass as `after` for the next page; absent on the last page.
    pub next: Option<String>,
}

/// The CSV columns, in order (`automatic` last, so readers of the earlier columns by
/// position are not disturbed; `review` is empty for an automatic adjustment).
pub const CSV_COLUMNS: [&str; 13] = [
    "id",
    "seq",
    "bin",
    "sku",
    "lot",
    "qty",
    "event_at",
    "review",
    "result",
    "reason_code",
    "approver",
    "approved_at",
    "automatic",
];

/// Writes a page of adjustments as CSV with a header line.
pub fn to_csv(rows: &[AdjustmentRow]) -> anyhow::Result<Vec<u8>> {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(CSV_COLUMNS)?;
    // Text columns go through the formula escape; `qty` and the ids are numbers.
    use crate::input::csv_cell::text;
    for r in rows {
        w.write_record([
            text(&r.id).into_owned(),
            r.seq.to_string(),
            text(&r.bin).into_owned(),
            text(&r.sku).into_owned(),
            text(&r.lot).into_owned(),
            r.qty.to_string(),
            r.event_at.to_string(),
            r.review.map(|v| v.to_string()).unwrap_or_default(),
            r.result.to_string(),
            text(&r.reason_code).into_owned(),
            text(&r.approver).into_owned(),
            r.approved_at.to_string(),
            r.automatic.to_string(),
        ])?;
    }
    w.into_inner()
        .map_err(|e| anyhow::anyhow!("cannot finish the adjustments CSV: {e}"))
}

async fn get_adjustments(
    State(state): State<AppState>,
    CurrentSite(site): CurrentSite,
    Params(p): Params<FeedParams>,
) -> Result<Response, ApiError> {
    let after = match p.after.as_deref().map(str::trim) {
        None | Some("") => 0,
        Some(t) => t.parse::<i64>().ok().filter(|n| *n >= 0).ok_or_else(|| {
            ApiError::BadRequest(format!(
                "after: '{t}' is not a cursor (pass the 'next' of the previous page)"
            ))
        })?,
    };
    let limit = p.limit.unwrap_or(DEFAULT_FEED_ROWS);
    if limit == 0 || limit > MAX_FEED_ROWS {
        return Err(ApiError::BadRequest(format!(
            "limit: {limit} is not 1 to {MAX_FEED_ROWS}"
        )));
    }
    let rows = state.store.adjustments(site.id, after, limit).await?;
    let next = rows
        .last()
        .filter(|_| rows.len() == limit)
        .map(|r| r.seq.to_string());
    match p.format.as_deref() {
        None | Some("json") => Ok(Json(FeedPage {
            adjustments: rows,
            next,
        })
        .into_response()),
        Some("csv") => {
            let csv = to_csv(&rows)?;
            let file = format!("attachment; filename=\"adjustments-{}.csv\"", site.code);
            let mut resp = (
                [
                    (header::CONTENT_TYPE, "text/csv; charset=utf-8".to_string()),
                    (header::CONTENT_DISPOSITION, file),
                ],
                csv,
            )
                .into_response();
            if let Some(n) = next.and_then(|n| n.parse().ok()) {
                resp.headers_mut()
                    .insert(HeaderName::from_static(NEXT_HEADER), n);
            }
            Ok(resp)
        }
        Some(other) => Err(ApiError::BadRequest(format!(
            "format '{other}' is not json or csv"
        ))),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::time::Timestamp;

    #[test]
    fn the_feed_csv_escapes_text_cells_and_keeps_negative_quantities_as_numbers() {
        let row = AdjustmentRow {
            id: "-m1".into(),
            seq: 7,
            bin: "A-01-01-1".into(),
            sku: "-SKU".into(),
            lot: "@L1".into(),
            qty: -3,
            event_at: Timestamp(1_772_438_400_000),
            review: Some(2),
            result: 5,
            reason_code: "lost".into(),
            approver: "-ivy".into(),
            approved_at: Timestamp(1_772_438_400_000),
            automatic: false,
        };
        let csv = String::from_utf8(to_csv(&[row]).unwrap()).unwrap();
        let line = csv.lines().nth(1).unwrap();
        // OWASP "CSV Injection": text cells starting with '-' or '@' get a leading quote.
        assert!(
            line.starts_with("'-m1,7,A-01-01-1,'-SKU,'@L1,-3,"),
            "{line}"
        );
        assert!(line.contains(",lost,'-ivy,"), "{line}");
    }
}
