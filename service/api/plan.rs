//! `GET /v1/objects/{id}/plan`: the nights that would best tell a stored
//! solution's recommended model from its rivals. Without a
//! window, the plan the daemon stored with the solution (the month after
//! it); with `from` and `to`, one computed now from the stored solution,
//! without refitting.

use axum::extract::{Path, Query, State};
use axum::http::StatusCode;
use axum::Json;
use serde::Deserialize;

use crate::astro::time::UtcTime;
use crate::solve::plan::plan_stored;

use super::error::ApiError;
use super::routes::{blocking, find_object, ApiState};

pub const PLAN_QUERY: &[(&str, &str)] = &[
    (
        "from",
        "first UTC time, ISO 8601 or a date (default: the stored plan's window)",
    ),
    ("to", "last UTC time, ISO 8601 or a date; with from"),
    (
        "stations",
        "station codes, comma-separated (default: those that observed the object)",
    ),
    (
        "rival",
        "one model to tell the recommended one from (default: every other, weighed by exp(-dBIC/2))",
    ),
    (
        "solution",
        "the stored solution's number (default: the latest)",
    ),
];

#[derive(Deserialize)]
pub struct PlanQuery {
    from: Option<String>,
    to: Option<String>,
    stations: Option<String>,
    rival: Option<String>,
    solution: Option<u64>,
}

fn time(name: &str, text: &str) -> Result<UtcTime, ApiError> {
    UtcTime::parse_iso8601_or_date(text)
        .map_err(|e| ApiError::bad_request("bad_time", format!("{name}={text}: {e}")))
}

pub async fn plan(
    State(s): State<ApiState>,
    Path(id): Path<String>,
    Query(q): Query<PlanQuery>,
) -> Result<Json<serde_json::Value>, ApiError> {
    let window = match (&q.from, &q.to) {
        (None, None) => None,
        (Some(f), Some(t)) => Some((time("from", f)?, time("to", t)?)),
        _ => {
            return Err(ApiError::bad_request(
                "missing_parameter",
                "give both 'from' and 'to', or neither for the stored plan",
            ))
        }
    };
    let stations: Vec<String> = q
        .stations
        .as_deref()
        .map(|list| {
            list.split(',')
                .map(str::trim)
                .filter(|c| !c.is_empty())
                .map(str::to_string)
                .collect()
        })
        .unwrap_or_default();
    let object = find_object(&s, id).await?;
    let (oid, wanted) = (object.id.clone(), q.solution);
    let record = blocking(&s, move |store| match wanted {
        Some(seq) => store.solution(&oid, seq),
        None => store.solutions(&oid, None, 1).map(|v| v.into_iter().next()),
    })
    .await?
    .ok_or_else(|| ApiError::not_found(format!("object {} has no such solution", object.id)))?;
    let seq = record.seq;
    let stored_window = window.is_none() && stations.is_empty() && q.rival.is_none();
    let plan = if stored_window {
        record.plan.ok_or_else(|| {
            ApiError::new(
                StatusCode::CONFLICT,
                "no_plan",
                format!(
                    "solution {seq} has no stored plan: {}",
                    record
                        .plan_problem
                        .as_deref()
                        .unwrap_or("it was stored without one")
                ),
            )
        })?
    } else {
        let (from, to) = match window {
            Some(w) => w,
            None => crate::solve::plan::stored_window(&record.summary.created_utc)
                .map_err(|e| ApiError::bad_request("bad_time", e.to_string()))?,
        };
        let ctx = s.0.predictions.clone();
        let list = s.0.intake.config.stations.clone();
        let rival = q.rival.clone();
        let document = record.document;
        tokio::task::spawn_blocking(move || {
            plan_stored(
                ctx.ephemeris.as_ref(),
                &ctx.scales,
                &ctx.settings,
                &list,
                document.as_ref(),
                &stations,
                rival.as_deref(),
                &from,
                &to,
            )
        })
        .await
        .map_err(|e| ApiError::new(StatusCode::INTERNAL_SERVER_ERROR, "internal", e.to_string()))?
        .map_err(|e| ApiError::new(StatusCode::UNPROCESSABLE_ENTITY, "no_plan", e.to_string()))?
    };
    let mut value = serde_json::to_value(&plan).unwrap_or_default();
    if let Some(o) = value.as_object_mut() {
        o.insert("object_id".into(), object.id.into());
        o.insert("solution".into(), seq.into());
        o.insert("stored".into(), stored_window.into());
    }
    Ok(Json(value))
}
