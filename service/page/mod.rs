//! The read-only pages the daemon serves (issue 13): `/`, every object
//! with its latest verdict, and `/objects/{id}`, how its picture moved
//! solution by solution. Served on the API's address, without a token,
//! without JavaScript; they read the store through the same functions as
//! the JSON API and never run a fit.
//!
//! - [`svg`]: a small SVG chart writer (points, error bars, reference
//!   lines, legend) whose output can be checked by parsing it.
//! - [`charts`]: the object page's plots from the stored history.
//! - [`html`]: the pages' HTML.

pub mod charts;
pub mod html;
pub mod svg;

use axum::extract::{Path, State};
use axum::response::{Html, IntoResponse, Response};

use crate::alerts::event::AlertRecord;
use crate::api::error::ApiError;
use crate::api::routes::{blocking, find_object, ApiState};
use crate::store::{ObjectState, SolutionRecord, SolutionSummary, Store};
use crate::worker::job::best_designation;

/// Most solutions one page plots.
pub const MOST_SOLUTIONS: usize = 5000;
/// Most alerts one page lists.
const MOST_ALERTS: usize = 200;

/// Alerts of one object, newest first, up to [`MOST_ALERTS`].
fn object_alerts(
    store: &dyn Store,
    id: &str,
) -> Result<Vec<AlertRecord>, crate::store::StoreError> {
    let id = id.to_string();
    store
        .alerts(None, MOST_ALERTS, &move |a| a.event.object_id == id)
        .map(|(list, _)| list)
}

/// `/`.
pub async fn index(State(s): State<ApiState>) -> Result<Html<String>, ApiError> {
    let rows = blocking(&s, |store| {
        let mut rows = Vec::new();
        for object in store.objects()? {
            if object.merged_into.is_some() {
                continue;
            }
            let open_alerts = object_alerts(store, &object.id)?
                .iter()
                .filter(|a| a.acknowledged.is_none())
                .count();
            rows.push(html::IndexRow {
                name: best_designation(&object),
                object,
                open_alerts,
            });
        }
        // Most recent change first: the latest solution's time (ISO 8601
        // UTC strings sort as times).
        rows.sort_by(|a, b| {
            let t = |r: &html::IndexRow| r.object.latest.as_ref().map(|s| s.created_utc.clone());
            t(b).cmp(&t(a))
        });
        Ok(rows)
    })
    .await?;
    Ok(Html(html::index(&rows)))
}

/// `/objects/{id}`.
pub async fn object(
    State(s): State<ApiState>,
    Path(id): Path<String>,
) -> Result<Response, ApiError> {
    let object = find_object(&s, id).await?;
    let threshold = s.0.intake.config.alerts.ng_significance_sigma;
    let oid = object.id.clone();
    let (summaries, latest, alerts) = blocking(&s, move |store| {
        let mut summaries = store.summaries(&oid, None, MOST_SOLUTIONS)?;
        summaries.reverse();
        let latest = store.solutions(&oid, None, 1)?.into_iter().next();
        let alerts = object_alerts(store, &oid)?;
        Ok((summaries, latest, alerts))
    })
    .await?;
    let page =
        render_object(&object, &summaries, latest.as_ref(), &alerts, threshold).map_err(|e| {
            ApiError::new(
                axum::http::StatusCode::INTERNAL_SERVER_ERROR,
                "plot",
                e.to_string(),
            )
        })?;
    Ok(Html(page).into_response())
}

/// The object page from what the store holds: `summaries` oldest first,
/// the latest record, the object's alerts, the NG alert threshold. Pure:
/// the handler's reads done, this is the whole rendering (and what the
/// `page_render` bench times).
pub fn render_object(
    object: &ObjectState,
    summaries: &[SolutionSummary],
    latest: Option<&SolutionRecord>,
    alerts: &[AlertRecord],
    ng_threshold_sigma: f64,
) -> Result<String, svg::ChartError> {
    let first_obs_mjd = object
        .first_obs_utc
        .as_deref()
        .and_then(charts::mjd_of)
        .unwrap_or(0.0);
    let document = latest.and_then(|r| r.document.as_ref());
    let mut plots = Vec::new();
    let mut all = charts::history_charts(summaries, first_obs_mjd, ng_threshold_sigma);
    if let Some(doc) = document {
        all.extend(charts::residual_charts(doc));
    }
    for (id, chart) in all {
        plots.push((id, chart.to_svg()?));
    }
    let name = best_designation(object);
    let view = html::ObjectView {
        object,
        name: &name,
        solutions: summaries.len(),
        plots,
        document,
        plan: latest.and_then(|r| r.plan.as_ref()),
        alerts,
    };
    Ok(html::object(&view))
}
