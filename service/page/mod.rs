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

use crate::alerts::event::{AlertRecord, Edge};
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

/// The alerts an analyst still has to look at: per rule, the newest
/// event, when it raised the rule and nobody acknowledged it. A rule
/// that has cleared since is not open, whoever saw it; a message that a
/// rule cleared is news, not an open alert. `alerts` newest first.
pub fn open_alerts(alerts: &[AlertRecord]) -> usize {
    let mut seen = std::collections::BTreeSet::new();
    alerts
        .iter()
        .filter(|a| seen.insert(a.event.rule_key.as_str()))
        .filter(|a| a.event.edge == Edge::Raised && a.acknowledged.is_none())
        .count()
}

/// `/`.
pub async fn index(State(s): State<ApiState>) -> Result<Html<String>, ApiError> {
    let rows = blocking(&s, |store| {
        let mut rows = Vec::new();
        for object in store.objects()? {
            if object.merged_into.is_some() {
                continue;
            }
            let open_alerts = open_alerts(&object_alerts(store, &object.id)?);
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
    let draw = |charts: Vec<(&'static str, svg::Chart)>| {
        charts
            .into_iter()
            .map(|(id, chart)| Ok((id, chart.to_svg()?)))
            .collect::<Result<Vec<_>, svg::ChartError>>()
    };
    let history = draw(charts::history_charts(
        summaries,
        first_obs_mjd,
        ng_threshold_sigma,
    ))?;
    let residuals = draw(document.map(charts::residual_charts).unwrap_or_default())?;
    let name = best_designation(object);
    let view = html::ObjectView {
        object,
        name: &name,
        solutions: summaries.len(),
        history,
        residuals,
        document,
        plan: latest.and_then(|r| r.plan.as_ref()),
        alerts,
    };
    Ok(html::object(&view))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::alerts::event::{Acknowledgement, AlertEvent, RuleKind};

    fn alert(seq: u64, rule_key: &str, edge: Edge, acknowledged: bool) -> AlertRecord {
        let id = AlertEvent::id_for("obj-1", seq, rule_key);
        AlertRecord {
            event: AlertEvent {
                id: id.clone(),
                object_id: "obj-1".into(),
                designation: "2026 ZZ9".into(),
                solution_seq: seq,
                previous_seq: seq.checked_sub(1),
                rule: RuleKind::Unbound,
                rule_key: rule_key.into(),
                edge,
                raised_utc: format!("2026-12-0{seq}T00:00:00Z"),
                value_before: None,
                value_after: None,
                threshold: None,
                unit: "sigma".into(),
                subject: "s".into(),
                text: "t".into(),
                details: serde_json::Value::Null,
                channels: Vec::new(),
            },
            journal_seq: seq,
            acknowledged: acknowledged.then(|| Acknowledgement {
                alert_id: id,
                by: "analyst".into(),
                at_utc: "2026-12-09T00:00:00Z".into(),
            }),
        }
    }

    #[test]
    fn open_alerts_are_raised_rules_nobody_saw_that_have_not_cleared() {
        // Newest first: `unbound` raised at 1, cleared at 3; `ng_needed`
        // raised at 2 and unseen; `gravity_fails` raised at 4, seen.
        let alerts = [
            alert(4, "gravity_fails", Edge::Raised, true),
            alert(3, "unbound", Edge::Cleared, false),
            alert(2, "ng_needed", Edge::Raised, false),
            alert(1, "unbound", Edge::Raised, false),
        ];
        assert_eq!(open_alerts(&alerts), 1);
        assert_eq!(open_alerts(&alerts[3..]), 1);
        assert_eq!(open_alerts(&[]), 0);
    }
}
