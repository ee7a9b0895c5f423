//! `GET /v1/objects/{id}/predictions`: places and their uncertainty from a
//! stored solution (the latest, or a chosen one), without refitting.

use std::sync::Arc;

use axum::extract::{Path, Query, State};
use axum::http::StatusCode;
use axum::Json;
use serde::Deserialize;

use crate::astro::time::UtcTime;
use crate::fit::predict::{EllipseMethod, PredictSettings, PredictionPoint, MIN_SAMPLES};
use crate::solve::prediction::{predict_stored, utc_grid, PredictionDocument, StoredPredictError};
use crate::solve::stored::magnitude_law;
use crate::solve::SolveContext;

use super::error::ApiError;
use super::routes::{find_object, ApiState};

/// Most Monte Carlo samples one request may ask for: each is a full
/// integration.
pub const MAX_SAMPLES: usize = 2000;

#[derive(Deserialize)]
pub struct PredictionQuery {
    station: Option<String>,
    from: Option<String>,
    to: Option<String>,
    /// Days between places.
    step: Option<f64>,
    /// The solution's sequence number (default: the latest).
    solution: Option<u64>,
    /// A model of that solution by name (default: the recommended one).
    model: Option<String>,
    /// Monte Carlo samples (default: the linear covariance map).
    samples: Option<usize>,
    seed: Option<u64>,
}

fn required<'a>(v: &'a Option<String>, name: &str) -> Result<&'a str, ApiError> {
    v.as_deref()
        .ok_or_else(|| ApiError::bad_request("missing_parameter", format!("'{name}' is required")))
}

pub async fn predictions(
    State(s): State<ApiState>,
    Path(id): Path<String>,
    Query(q): Query<PredictionQuery>,
) -> Result<Json<serde_json::Value>, ApiError> {
    let ctx: Arc<SolveContext> = s.0.predictions.clone();
    // Everything the request can get wrong is checked before any work.
    let station = required(&q.station, "station")?.to_string();
    let observer = crate::solve::input::station_position(&s.0.intake.config.stations, &station)
        .map_err(|e| ApiError::bad_request("bad_station", e.to_string()))?;
    let time = |name: &str, v: &Option<String>| -> Result<UtcTime, ApiError> {
        let text = required(v, name)?;
        UtcTime::parse_iso8601_or_date(text)
            .map_err(|e| ApiError::bad_request("bad_time", format!("{name}={text}: {e}")))
    };
    let (from, to) = (time("from", &q.from)?, time("to", &q.to)?);
    let step = q
        .step
        .ok_or_else(|| ApiError::bad_request("missing_parameter", "'step' (days) is required"))?;
    let times = utc_grid(&from, &to, step, &ctx.scales)
        .map_err(|e| ApiError::bad_request("bad_grid", e.to_string()))?;
    let method = match q.samples {
        None => EllipseMethod::Linear,
        Some(n) if (MIN_SAMPLES..=MAX_SAMPLES).contains(&n) => EllipseMethod::MonteCarlo {
            samples: n,
            seed: q.seed.unwrap_or(1),
        },
        Some(n) => {
            return Err(ApiError::bad_request(
                "bad_samples",
                format!("samples={n} is outside {MIN_SAMPLES}..={MAX_SAMPLES}"),
            ))
        }
    };
    let object = find_object(&s, id).await?;
    let store = s.0.store.clone();
    let (oid, wanted, model) = (object.id.clone(), q.solution, q.model.clone());
    let record = tokio::task::spawn_blocking(move || match wanted {
        Some(seq) => store.solution(&oid, seq),
        None => store.solutions(&oid, None, 1).map(|v| v.into_iter().next()),
    })
    .await
    .map_err(|e| ApiError::new(StatusCode::INTERNAL_SERVER_ERROR, "internal", e.to_string()))??
    .ok_or_else(|| ApiError::not_found(format!("object {} has no such solution", object.id)))?;
    let seq = record.seq;
    let name = crate::worker::job::best_designation(&object);
    let doc = tokio::task::spawn_blocking(move || {
        let points: Vec<PredictionPoint> = times
            .into_iter()
            .map(|time| PredictionPoint { time, observer })
            .collect();
        let settings = PredictSettings {
            method,
            magnitude: record.document.as_ref().and_then(magnitude_law),
            ..ctx.settings.predict_settings()
        };
        let predicted = predict_stored(
            ctx.ephemeris.as_ref(),
            record.document.as_ref(),
            model.as_deref(),
            &ctx.settings.gravity,
            &ctx.settings.ladder.laws,
            &points,
            &settings,
        )
        .map_err(|e| match e {
            StoredPredictError::Stored(e) => {
                ApiError::new(StatusCode::CONFLICT, "no_orbit", e.to_string())
            }
            StoredPredictError::Predict(e) => ApiError::new(
                StatusCode::UNPROCESSABLE_ENTITY,
                "prediction_failed",
                e.to_string(),
            ),
        })?;
        Ok::<_, ApiError>(PredictionDocument::new(
            &name,
            &predicted,
            method,
            &ctx.ephemeris.describe(),
            &station,
        ))
    })
    .await
    .map_err(|e| ApiError::new(StatusCode::INTERNAL_SERVER_ERROR, "internal", e.to_string()))??;
    let mut value = serde_json::to_value(&doc).unwrap_or_default();
    if let Some(o) = value.as_object_mut() {
        o.insert("object_id".into(), object.id.into());
        o.insert("solution".into(), seq.into());
    }
    Ok(Json(value))
}
