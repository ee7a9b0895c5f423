//! An analyst's decisions about an object: an observation forced out or
//! in, a model pinned or taken off the ladder, designations linked. Each is
//! journaled with who, when and why, triggers a refit, and is listed in
//! every solution it affected.

use axum::body::Bytes;
use axum::extract::rejection::JsonRejection;
use axum::extract::{Path, State};
use axum::http::{HeaderMap, StatusCode};
use axum::response::{IntoResponse, Response};
use axum::Json;
use serde::Deserialize;

use crate::astro::forces::FreeParameters;
use crate::fit::ladder::model_name;
use crate::ingest::DesignationKey;
use crate::store::{OverrideAction, OverrideRecord, Trigger};

use super::auth::require_token;
use super::error::ApiError;
use super::routes::{blocking, find_object, optional_json, ApiState};

/// Longest `by` and `reason` kept.
const MAX_TEXT: usize = 1000;

#[derive(Deserialize)]
pub struct OverrideRequest {
    #[serde(flatten)]
    action: OverrideAction,
    /// Who decided.
    by: String,
    /// Why, in words another analyst will read later.
    reason: String,
}

/// Every model name the configured ladder can hold.
fn model_names(s: &ApiState) -> Vec<String> {
    let ladder = &s.0.predictions.settings.ladder;
    let mut names = vec![model_name(FreeParameters::new(false, false, false), None)];
    for law in &ladder.laws {
        for free in ladder.rungs.iter().filter(|f| f.count() > 0) {
            names.push(model_name(*free, Some(*law)));
        }
    }
    names
}

fn check_text(name: &str, text: &str) -> Result<(), ApiError> {
    if text.trim().is_empty() || text.len() > MAX_TEXT {
        return Err(ApiError::bad_request(
            "bad_override",
            format!("'{name}' must say something, in at most {MAX_TEXT} bytes"),
        ));
    }
    Ok(())
}

pub async fn post_override(
    State(s): State<ApiState>,
    headers: HeaderMap,
    Path(id): Path<String>,
    body: Result<Json<OverrideRequest>, JsonRejection>,
) -> Result<Response, ApiError> {
    require_token(s.0.token.as_deref(), &headers)?;
    let Json(request) = body.map_err(|r| {
        ApiError::new(
            r.status(),
            "bad_override",
            format!(
                "{}; the actions are exclude_observation, include_observation and \
                 clear_observation (with content_key), pin_model, exclude_model and clear_model \
                 (with model), and link (with designations), each with by and reason",
                r.body_text()
            ),
        )
    })?;
    check_text("by", &request.by)?;
    check_text("reason", &request.reason)?;
    let object = find_object(&s, id).await?;
    let mut action = request.action;
    match &mut action {
        OverrideAction::ExcludeObservation { content_key }
        | OverrideAction::IncludeObservation { content_key }
        | OverrideAction::ClearObservation { content_key } => {
            let key = crate::store::content_key_bytes(content_key)
                .map_err(|why| ApiError::bad_request("bad_override", why))?;
            let known = blocking(&s, move |store| store.has_observation(&key)).await?;
            if !known {
                return Err(ApiError::not_found(format!(
                    "no observation with content key {content_key} (see .../observations)"
                )));
            }
        }
        OverrideAction::PinModel { model }
        | OverrideAction::ExcludeModel { model }
        | OverrideAction::ClearModel { model } => {
            let names = model_names(&s);
            if !names.contains(model) {
                return Err(ApiError::bad_request(
                    "bad_override",
                    format!(
                        "'{model}' is not a model of the ladder: {}",
                        names.join(", ")
                    ),
                ));
            }
            if model == "gravity" && matches!(action, OverrideAction::ExcludeModel { .. }) {
                return Err(ApiError::bad_request(
                    "bad_override",
                    "gravity alone is what every model is tested against; it cannot be taken off",
                ));
            }
        }
        OverrideAction::Link { designations } => {
            if designations.is_empty() {
                return Err(ApiError::bad_request(
                    "bad_override",
                    "link needs designations (permID:..., provID:... or trkSub:NAME@STATION)",
                ));
            }
            for d in designations.iter() {
                DesignationKey::parse(d)
                    .map_err(|why| ApiError::bad_request("bad_override", why))?;
            }
            // Linked to this object through its own first designation.
            if let Some(own) = object.designations.first() {
                designations.insert(0, own.clone());
            }
        }
        OverrideAction::Refit => {}
    }
    journal_decision(
        &s,
        &object.id,
        action,
        &request.by,
        &request.reason,
        Trigger::Override,
    )
    .await
}

/// `POST .../refit`, with an optional JSON body `{by, reason}`: journaled
/// as a decision (so a stop before the fit does not lose it), then queued.
pub async fn post_refit(
    State(s): State<ApiState>,
    headers: HeaderMap,
    Path(id): Path<String>,
    body: Bytes,
) -> Result<Response, ApiError> {
    require_token(s.0.token.as_deref(), &headers)?;
    #[derive(Deserialize)]
    struct Asked {
        by: String,
        reason: String,
    }
    let asked = optional_json(
        &body,
        || Asked {
            by: "api".into(),
            reason: "a refit asked for over the API".into(),
        },
        "bad_refit",
        "by and reason",
    )?;
    check_text("by", &asked.by)?;
    check_text("reason", &asked.reason)?;
    let object = find_object(&s, id).await?;
    journal_decision(
        &s,
        &object.id,
        OverrideAction::Refit,
        &asked.by,
        &asked.reason,
        Trigger::Manual,
    )
    .await
}

/// Journals a decision (fsync, then the index), then queues the refit it
/// asks for.
async fn journal_decision(
    s: &ApiState,
    object_id: &str,
    action: OverrideAction,
    by: &str,
    reason: &str,
    trigger: Trigger,
) -> Result<Response, ApiError> {
    let record = OverrideRecord {
        object_id: object_id.to_string(),
        action,
        by: by.trim().to_string(),
        reason: reason.trim().to_string(),
        at_utc: crate::watch::clock::now_utc().0,
        journal_seq: 0,
    };
    let store = s.0.store.clone();
    let stored = record.clone();
    tokio::task::spawn_blocking(move || {
        store.add_override(stored)?;
        store.flush()
    })
    .await
    .map_err(|e| ApiError::new(StatusCode::INTERNAL_SERVER_ERROR, "internal", e.to_string()))??;
    s.0.intake.queue.mark(object_id, trigger);
    Ok((
        StatusCode::ACCEPTED,
        Json(serde_json::json!({ "override": record, "refit": "queued", "trigger": trigger })),
    )
        .into_response())
}

pub async fn list_overrides(
    State(s): State<ApiState>,
    Path(id): Path<String>,
) -> Result<Json<serde_json::Value>, ApiError> {
    let object = find_object(&s, id).await?;
    let oid = object.id.clone();
    let list = blocking(&s, move |store| store.overrides(&oid)).await?;
    Ok(Json(
        serde_json::json!({ "object_id": object.id, "overrides": list }),
    ))
}
