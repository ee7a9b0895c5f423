//! The alerts over HTTP: the list (newest first, filtered by object, rule
//! and time, paged by cursor) with each alert's deliveries, and an
//! analyst's acknowledgement.

use axum::body::Bytes;
use axum::extract::{Path, Query, State};
use axum::http::{HeaderMap, StatusCode};
use axum::response::{IntoResponse, Response};
use axum::Json;
use serde::Deserialize;

use crate::alerts::event::{Acknowledgement, AlertRecord, RuleKind};
use crate::astro::time::UtcTime;

use super::auth::require_token;
use super::error::ApiError;
use super::routes::{blocking, find_object, from_hex, optional_json, page_limit, to_hex, ApiState};

pub const ALERT_QUERY: &[(&str, &str)] = &[
    ("object", "only this object's (internal id or any designation)"),
    ("rule", "only this rule's: unbound, ng_needed, gravity_fails, model_changed, batch_disagrees, prediction_shift, outburst, fit_failed, no_solution"),
    ("since", "only those raised at or after this UTC time (ISO 8601)"),
    ("cursor", "from the previous page's next_cursor (older alerts follow)"),
    ("limit", "entries per page, 1 to 1000 (default 50)"),
];

#[derive(Deserialize)]
pub struct AlertQuery {
    object: Option<String>,
    rule: Option<String>,
    since: Option<String>,
    cursor: Option<String>,
    limit: Option<usize>,
}

/// Sortable text of a UTC time, for comparing raised times.
fn sortable(t: &UtcTime) -> (i64, f64) {
    (t.mjd(), t.seconds_of_day())
}

pub async fn list(
    State(s): State<ApiState>,
    Query(q): Query<AlertQuery>,
) -> Result<Json<serde_json::Value>, ApiError> {
    let limit = page_limit(q.limit)?;
    let before = match &q.cursor {
        None => None,
        Some(c) => Some(from_hex(c).ok_or_else(|| {
            ApiError::bad_request("bad_cursor", format!("'{c}' is not a cursor of this list"))
        })?),
    };
    let rule = match &q.rule {
        None => None,
        Some(r) => Some(RuleKind::parse(r).ok_or_else(|| {
            ApiError::bad_request(
                "bad_rule",
                format!("'{r}' is not a rule (see /openapi.json)"),
            )
        })?),
    };
    let since = match &q.since {
        None => None,
        Some(t) => Some(sortable(&UtcTime::parse_iso8601(t).map_err(|e| {
            ApiError::bad_request("bad_time", format!("since={t}: {e}"))
        })?)),
    };
    let object = match q.object {
        None => None,
        Some(name) => Some(find_object(&s, name).await?.id),
    };
    let (list, next, deliveries) = blocking(&s, move |store| {
        let keep = |a: &AlertRecord| {
            object.as_ref().is_none_or(|o| &a.event.object_id == o)
                && rule.is_none_or(|r| a.event.rule == r)
                && since.is_none_or(|t| {
                    UtcTime::parse_iso8601(&a.event.raised_utc)
                        .is_ok_and(|raised| sortable(&raised) >= t)
                })
        };
        let (list, next) = store.alerts(before.as_deref(), limit, &keep)?;
        let mut deliveries = Vec::with_capacity(list.len());
        for a in &list {
            let mut of_this = Vec::new();
            for c in &a.event.channels {
                if let Some(d) = store.delivery(&a.event.delivery_id(*c))? {
                    of_this.push(d);
                }
            }
            deliveries.push(of_this);
        }
        Ok((list, next, deliveries))
    })
    .await?;
    let alerts: Vec<serde_json::Value> = list
        .into_iter()
        .zip(deliveries)
        .map(|(a, d)| {
            let mut v = serde_json::to_value(&a).unwrap_or_default();
            if let Some(o) = v.as_object_mut() {
                o.insert(
                    "deliveries".into(),
                    serde_json::to_value(d).unwrap_or_default(),
                );
            }
            v
        })
        .collect();
    Ok(Json(serde_json::json!({
        "alerts": alerts,
        "next_cursor": next.map(|k| to_hex(&k)),
    })))
}

#[derive(Deserialize)]
struct AckBody {
    by: String,
}

pub async fn acknowledge(
    State(s): State<ApiState>,
    headers: HeaderMap,
    Path(id): Path<String>,
    body: Bytes,
) -> Result<Response, ApiError> {
    require_token(s.0.token.as_deref(), &headers)?;
    let by = optional_json(&body, || AckBody { by: "api".into() }, "bad_ack", "by")?.by;
    if by.trim().is_empty() || by.len() > 200 {
        return Err(ApiError::bad_request(
            "bad_ack",
            "'by' must name someone, in at most 200 bytes",
        ));
    }
    if id.len() > 300 {
        return Err(ApiError::bad_request("bad_id", "an alert id is shorter"));
    }
    let wanted = id.clone();
    let found = blocking(&s, move |store| store.alert(&wanted)).await?;
    let Some(alert) = found else {
        return Err(ApiError::not_found(format!("no alert '{id}'")));
    };
    if let Some(ack) = alert.acknowledged {
        return Ok((
            StatusCode::OK,
            Json(serde_json::json!({ "acknowledged": ack, "already": true })),
        )
            .into_response());
    }
    let ack = Acknowledgement {
        alert_id: id,
        by: by.trim().to_string(),
        at_utc: crate::watch::clock::now_utc().0,
    };
    let stored = ack.clone();
    blocking(&s, move |store| store.acknowledge(stored)).await?;
    Ok((
        StatusCode::OK,
        Json(serde_json::json!({ "acknowledged": ack })),
    )
        .into_response())
}
