//! Routes. Paths take an object by its internal id or any designation
//! (URL-encoded: `provID%3A2026%20ZA7` or `2026%20ZA7`).

use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Arc;
use std::time::Duration;

use axum::body::Bytes;
use axum::extract::rejection::BytesRejection;
use axum::extract::{DefaultBodyLimit, Path, Query, State};
use axum::http::{HeaderMap, StatusCode};
use axum::response::{IntoResponse, Response};
use axum::routing::{get, post};
use axum::{Json, Router};
use serde::{Deserialize, Serialize};
use tower_http::timeout::TimeoutLayer;

use crate::daemon::metrics::Metrics;
use crate::store::{ObjectState, SolutionSummary, Store};
use crate::watch::take::Taken;
use crate::watch::{take_one, Intake};

use super::auth::require_token;
use super::error::ApiError;

/// Largest body accepted (observations posted in one request).
pub const BODY_LIMIT_BYTES: usize = 8 * 1024 * 1024;

/// No request runs longer than this.
pub const REQUEST_TIMEOUT: Duration = Duration::from_secs(60);

const DEFAULT_PAGE: usize = 50;
const MAX_PAGE: usize = 1000;

/// What the handlers share.
pub struct ApiShared {
    pub store: Arc<dyn Store>,
    pub intake: Arc<Intake>,
    pub metrics: Arc<Metrics>,
    pub token: Option<String>,
    /// Posted bodies are written here before they are taken.
    pub staging: std::path::PathBuf,
    /// What predictions are computed with.
    pub predictions: Arc<crate::solve::SolveContext>,
    /// Set once the store is open and the first scan is done.
    pub ready: AtomicBool,
    uploads: AtomicU64,
    /// Store reads in flight at once.
    reads: tokio::sync::Semaphore,
}

/// Store reads in flight at once: a few per core keeps the disk and the
/// cores busy without letting a crowd of clients multiply memory.
pub const READS_IN_FLIGHT: usize = 8;

#[derive(Clone)]
pub struct ApiState(pub Arc<ApiShared>);

impl ApiState {
    pub fn new(
        store: Arc<dyn Store>,
        intake: Arc<Intake>,
        metrics: Arc<Metrics>,
        predictions: Arc<crate::solve::SolveContext>,
        token: Option<String>,
        staging: std::path::PathBuf,
    ) -> Self {
        Self(Arc::new(ApiShared {
            store,
            intake,
            metrics,
            predictions,
            token,
            staging,
            ready: AtomicBool::new(false),
            uploads: AtomicU64::new(0),
            reads: tokio::sync::Semaphore::new(READS_IN_FLIGHT),
        }))
    }
}

/// One route: what the router serves and what `/openapi.json` says of
/// it, declared once so the two cannot drift apart.
pub struct Route {
    pub method: &'static str,
    pub path: &'static str,
    pub summary: &'static str,
    /// Needs `Authorization: Bearer <token>`.
    pub token: bool,
    /// Query parameters: name, meaning.
    pub query: &'static [(&'static str, &'static str)],
    handler: axum::routing::MethodRouter<ApiState>,
}

const PAGE_QUERY: &[(&str, &str)] = &[
    ("cursor", "from the previous page's next_cursor"),
    ("limit", "entries per page, 1 to 1000 (default 50)"),
];

const SOLUTION_QUERY: &[(&str, &str)] = &[
    (
        "cursor",
        "from the previous page's next_cursor (older solutions follow)",
    ),
    ("limit", "entries per page, 1 to 1000 (default 50)"),
    (
        "since",
        "only solutions computed at or after this UTC time (ISO 8601)",
    ),
    (
        "until",
        "only solutions computed before this UTC time (ISO 8601)",
    ),
    (
        "model",
        "only solutions recommending this model (e.g. \"A1 water-ice\")",
    ),
];

const PREDICTION_QUERY: &[(&str, &str)] = &[
    ("station", "observing station code (required)"),
    ("from", "first UTC time, ISO 8601 (required)"),
    ("to", "last UTC time, ISO 8601 (required)"),
    ("step", "days between places (required)"),
    (
        "solution",
        "the stored solution's number (default: the latest)",
    ),
    (
        "model",
        "a model of that solution (default: its recommended one)",
    ),
    (
        "samples",
        "Monte Carlo samples, 10 to 2000 (default: linear covariance map)",
    ),
    ("seed", "seed of the Monte Carlo samples (default 1)"),
];

/// Every route of the API.
pub fn routes() -> Vec<Route> {
    let r = |method, path, summary, token, query, handler| Route {
        method,
        path,
        summary,
        token,
        query,
        handler,
    };
    vec![
        r("get", "/healthz", "The process is alive.", false, &[], get(healthz)),
        r("get", "/readyz", "The store is open and the first scan is done.", false, &[], get(readyz)),
        r("get", "/metrics", "Counters in the Prometheus text format.", false, &[], get(metrics)),
        r("get", "/openapi.json", "This description of the API.", false, &[], get(openapi_json)),
        r("get", "/v1/objects", "Every object with its latest solution's summary.", false, &[], get(objects)),
        r("get", "/v1/objects/{id}", "One object, by internal id or any designation.", false, &[], get(object)),
        r("get", "/v1/objects/{id}/solutions", "The object's solutions, newest first.", false, SOLUTION_QUERY, get(solutions)),
        r("get", "/v1/objects/{id}/solutions/latest", "The latest solution record, whole.", false, &[], get(latest_solution)),
        r("get", "/v1/objects/{id}/solutions/{seq}", "One solution record, whole.", false, &[], get(solution)),
        r("get", "/v1/objects/{id}/solutions/{seq}/residuals", "Every observation's residual under that solution's recommended model, and under gravity alone when another model is recommended.", false, &[], get(residuals)),
        r("get", "/v1/objects/{id}/predictions", "Places and uncertainty ellipses from a stored solution, without refitting.", false, PREDICTION_QUERY, get(super::predict::predictions)),
        r("get", "/v1/objects/{id}/plan", "The nights that would best tell the recommended model from its rivals: stored with the solution, or for a window.", false, super::plan::PLAN_QUERY, get(super::plan::plan)),
        r("get", "/v1/objects/{id}/observations", "The object's observations in time order.", false, PAGE_QUERY, get(observations)),
        r("post", "/v1/objects/{id}/refit", "Ask for a refit now (optional JSON: by, reason); journaled, so it survives a stop.", true, &[], post(super::overrides::post_refit)),
        r("get", "/v1/objects/{id}/overrides", "The analysts' decisions about the object, in order.", false, &[], get(super::overrides::list_overrides)),
        r("post", "/v1/objects/{id}/overrides", "An analyst's decision (JSON: action, its argument, by, reason); triggers a refit.", true, &[], post(super::overrides::post_override)),
        r("get", "/v1/alerts", "Alerts, newest first, with their deliveries.", false, super::alerts::ALERT_QUERY, get(super::alerts::list)),
        r("post", "/v1/alerts/{id}/ack", "Acknowledge an alert (optional JSON: by).", true, &[], post(super::alerts::acknowledge)),
        r("post", "/v1/observations", "Observations (ADES PSV or XML, or JSON lines) through the same ingest as the watched directory.", true, &[], post(post_observations)),
    ]
}

/// The OpenAPI 3.1 description of [`routes`].
pub fn openapi() -> serde_json::Value {
    let mut paths = serde_json::Map::new();
    for route in routes() {
        let mut parameters: Vec<serde_json::Value> = route
            .path
            .split('/')
            .filter_map(|seg| seg.strip_prefix('{')?.strip_suffix('}'))
            .map(|name| {
                serde_json::json!({
                    "name": name, "in": "path", "required": true,
                    "schema": {"type": "string"},
                    "description": if name == "id" {
                        "internal id (obj-...) or any designation, URL-encoded"
                    } else {
                        "solution number"
                    },
                })
            })
            .collect();
        parameters.extend(route.query.iter().map(|(name, what)| {
            serde_json::json!({
                "name": name, "in": "query", "required": what.contains("(required)"),
                "schema": {"type": "string"}, "description": what,
            })
        }));
        let mut op = serde_json::json!({
            "summary": route.summary,
            "parameters": parameters,
            "responses": {
                "200": {"description": "the answer, as JSON (the metrics as text)"},
                "400": {"description": "a bad parameter: {error, message}"},
                "404": {"description": "no such object, solution or route: {error, message}"},
            },
        });
        if route.token {
            op["security"] = serde_json::json!([{"bearer": []}]);
            op["responses"]["401"] =
                serde_json::json!({"description": "no token, or not the configured one"});
            op["responses"]["413"] =
                serde_json::json!({"description": "the body is over the size limit"});
        }
        let entry = paths
            .entry(route.path.to_string())
            .or_insert_with(|| serde_json::json!({}));
        entry[route.method] = op;
    }
    serde_json::json!({
        "openapi": "3.1.0",
        "info": {
            "title": "perihelix",
            "version": env!("CARGO_PKG_VERSION"),
            "description": "Orbit solutions of newly found small bodies, refitted as observations arrive.",
        },
        "components": {"securitySchemes": {"bearer": {"type": "http", "scheme": "bearer"}}},
        "paths": paths,
    })
}

async fn openapi_json() -> Json<serde_json::Value> {
    Json(openapi())
}

pub fn router(state: ApiState) -> Router {
    routes()
        .into_iter()
        .fold(Router::new(), |router, route| {
            router.route(route.path, route.handler)
        })
        // The pages are for people, not part of the JSON API's description.
        .route("/", get(crate::page::index))
        .route("/objects/{id}", get(crate::page::object))
        .fallback(|| async { ApiError::not_found("no such route") })
        .layer(axum::middleware::from_fn(refuse_declared_oversize))
        .layer(DefaultBodyLimit::max(BODY_LIMIT_BYTES))
        .layer(TimeoutLayer::with_status_code(
            StatusCode::REQUEST_TIMEOUT,
            REQUEST_TIMEOUT,
        ))
        .with_state(state)
}

/// A body whose declared length is over the limit is refused before a
/// byte of it is read (a body without a declared length is cut at the
/// limit as it is read, and refused the same way).
async fn refuse_declared_oversize(
    request: axum::extract::Request,
    next: axum::middleware::Next,
) -> Response {
    let declared = request
        .headers()
        .get(axum::http::header::CONTENT_LENGTH)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.parse::<u64>().ok());
    match declared {
        Some(n) if n > BODY_LIMIT_BYTES as u64 => ApiError::new(
            StatusCode::PAYLOAD_TOO_LARGE,
            "body_too_large",
            format!("the body declares {n} bytes; at most {BODY_LIMIT_BYTES} are accepted"),
        )
        .into_response(),
        _ => next.run(request).await,
    }
}

async fn healthz() -> Json<serde_json::Value> {
    Json(serde_json::json!({ "status": "ok" }))
}

async fn readyz(State(s): State<ApiState>) -> Response {
    if s.0.ready.load(Ordering::Relaxed) {
        Json(serde_json::json!({ "status": "ready" })).into_response()
    } else {
        ApiError::new(
            StatusCode::SERVICE_UNAVAILABLE,
            "starting",
            "the first scan of the incoming directory is not done yet",
        )
        .into_response()
    }
}

async fn metrics(State(s): State<ApiState>) -> Response {
    (
        [(
            axum::http::header::CONTENT_TYPE,
            "text/plain; version=0.0.4; charset=utf-8",
        )],
        s.0.metrics.render(),
    )
        .into_response()
}

/// Runs a store read off the executor (sled reads can touch the disk).
pub(crate) async fn blocking<T: Send + 'static>(
    s: &ApiState,
    f: impl FnOnce(&dyn Store) -> Result<T, crate::store::StoreError> + Send + 'static,
) -> Result<T, ApiError> {
    let store = s.0.store.clone();
    // Reads in flight are capped: a crowd of clients then queues here, in
    // a few bytes each, rather than as a blocking thread each holding its
    // answer.
    let _permit =
        s.0.reads.acquire().await.map_err(|e| {
            ApiError::new(StatusCode::SERVICE_UNAVAILABLE, "stopping", e.to_string())
        })?;
    tokio::task::spawn_blocking(move || f(store.as_ref()))
        .await
        .map_err(|e| {
            ApiError::new(
                StatusCode::INTERNAL_SERVER_ERROR,
                "internal",
                format!("a store read failed: {e}"),
            )
        })?
        .map_err(ApiError::from)
}

/// An object name from a path: any printable text of sensible length.
fn valid_name(name: &str) -> Result<(), ApiError> {
    if name.is_empty() || name.len() > 200 || name.chars().any(char::is_control) {
        return Err(ApiError::bad_request(
            "bad_id",
            "an object is named by its id or a designation (1 to 200 printable characters)",
        ));
    }
    Ok(())
}

pub(crate) async fn find_object(s: &ApiState, name: String) -> Result<ObjectState, ApiError> {
    valid_name(&name)?;
    let shown = name.clone();
    blocking(s, move |store| store.object(&name))
        .await?
        .ok_or_else(|| ApiError::not_found(format!("no object '{shown}'")))
}

#[derive(Serialize)]
struct ObjectList {
    objects: Vec<ObjectState>,
}

async fn objects(State(s): State<ApiState>) -> Result<Json<ObjectList>, ApiError> {
    let objects = blocking(&s, |store| store.objects()).await?;
    Ok(Json(ObjectList { objects }))
}

async fn object(
    State(s): State<ApiState>,
    Path(id): Path<String>,
) -> Result<Json<ObjectState>, ApiError> {
    Ok(Json(find_object(&s, id).await?))
}

#[derive(Deserialize)]
struct Page {
    cursor: Option<String>,
    limit: Option<usize>,
    /// Solutions created at or after this (ISO 8601 UTC, any precision).
    since: Option<String>,
    /// ...and before this.
    until: Option<String>,
    /// Only solutions whose recommended model has this name.
    model: Option<String>,
}

pub(super) fn page_limit(limit: Option<usize>) -> Result<usize, ApiError> {
    match limit {
        None => Ok(DEFAULT_PAGE),
        Some(n) if (1..=MAX_PAGE).contains(&n) => Ok(n),
        Some(n) => Err(ApiError::bad_request(
            "bad_limit",
            format!("limit {n} is outside 1..={MAX_PAGE}"),
        )),
    }
}

#[derive(Serialize)]
struct SolutionPage {
    object_id: String,
    solutions: Vec<SolutionSummary>,
    /// Pass as `cursor` for the next (older) page; absent on the last.
    next_cursor: Option<String>,
}

async fn solutions(
    State(s): State<ApiState>,
    Path(id): Path<String>,
    Query(page): Query<Page>,
) -> Result<Json<SolutionPage>, ApiError> {
    let limit = page_limit(page.limit)?;
    let before = match &page.cursor {
        None => None,
        Some(c) => Some(c.parse::<u64>().map_err(|_| {
            ApiError::bad_request("bad_cursor", format!("'{c}' is not a cursor of this list"))
        })?),
    };
    let object = find_object(&s, id).await?;
    let oid = object.id.clone();
    let (since, until, model) = (page.since, page.until, page.model);
    // Newest first, "before sequence number N" as the cursor: solutions
    // added while a client pages never shift the pages it has not read.
    // Only summaries are read, in batches, until the page is full.
    let (list, next) = blocking(&s, move |store| {
        let mut out = Vec::new();
        let mut before = before;
        let batch_size = limit.max(64);
        loop {
            let batch = store.summaries(&oid, before, batch_size)?;
            let exhausted = batch.len() < batch_size;
            for summary in batch {
                before = Some(summary.seq);
                let t = summary.created_utc.as_str();
                let keep = since.as_deref().is_none_or(|x| t >= x)
                    && until.as_deref().is_none_or(|x| t < x)
                    && model
                        .as_deref()
                        .is_none_or(|m| summary.recommended.as_deref() == Some(m));
                if keep {
                    out.push(summary);
                    if out.len() == limit {
                        let more = before.is_some_and(|b| b > 1);
                        return Ok((out, more.then(|| b_to_string(before))));
                    }
                }
            }
            if exhausted {
                return Ok((out, None));
            }
        }
    })
    .await?;
    Ok(Json(SolutionPage {
        object_id: object.id,
        solutions: list,
        next_cursor: next,
    }))
}

fn b_to_string(before: Option<u64>) -> String {
    before.map(|b| b.to_string()).unwrap_or_default()
}

/// A stored record served as the bytes the store holds (it is JSON
/// already): no decoding and encoding of a large document per request.
fn json_bytes(bytes: Vec<u8>) -> Response {
    (
        [(axum::http::header::CONTENT_TYPE, "application/json")],
        bytes,
    )
        .into_response()
}

async fn latest_solution(
    State(s): State<ApiState>,
    Path(id): Path<String>,
) -> Result<Response, ApiError> {
    let object = find_object(&s, id).await?;
    let oid = object.id.clone();
    let latest = blocking(&s, move |store| {
        match store.summaries(&oid, None, 1)?.first() {
            Some(summary) => store.solution_bytes(&oid, summary.seq),
            None => Ok(None),
        }
    })
    .await?;
    latest
        .map(json_bytes)
        .ok_or_else(|| ApiError::not_found(format!("object {} has no solution yet", object.id)))
}

async fn solution(
    State(s): State<ApiState>,
    Path((id, seq)): Path<(String, String)>,
) -> Result<Response, ApiError> {
    let seq: u64 = seq.parse().map_err(|_| {
        ApiError::bad_request("bad_sequence", format!("'{seq}' is not a solution number"))
    })?;
    let object = find_object(&s, id).await?;
    let oid = object.id.clone();
    blocking(&s, move |store| store.solution_bytes(&oid, seq))
        .await?
        .map(json_bytes)
        .ok_or_else(|| ApiError::not_found(format!("object {} has no solution {seq}", object.id)))
}

async fn residuals(
    State(s): State<ApiState>,
    Path((id, seq)): Path<(String, String)>,
) -> Result<Json<serde_json::Value>, ApiError> {
    let seq: u64 = seq.parse().map_err(|_| {
        ApiError::bad_request("bad_sequence", format!("'{seq}' is not a solution number"))
    })?;
    let object = find_object(&s, id).await?;
    let oid = object.id.clone();
    let mut lists = blocking(&s, move |store| store.residuals(&oid, seq))
        .await?
        .ok_or_else(|| {
            ApiError::not_found(format!("object {} has no solution {seq}", object.id))
        })?;
    let mut answer = serde_json::json!({
        "object_id": object.id,
        "solution": seq,
        "residuals": lists.remove("residuals").unwrap_or(serde_json::Value::Array(Vec::new())),
    });
    // Present when another model than gravity alone is recommended.
    if let Some(gravity) = lists.remove("gravity_residuals") {
        answer["gravity_residuals"] = gravity;
    }
    Ok(Json(answer))
}

#[derive(Serialize)]
struct ObservationPage {
    object_id: String,
    observations: Vec<crate::store::IndexedObservation>,
    next_cursor: Option<String>,
}

/// A request body that may be left empty: `default` then, else the JSON
/// it holds, refused with `code` and what the body may be.
pub(super) fn optional_json<T: serde::de::DeserializeOwned>(
    body: &[u8],
    default: impl FnOnce() -> T,
    code: &'static str,
    may_be: &str,
) -> Result<T, ApiError> {
    if body.iter().all(u8::is_ascii_whitespace) {
        return Ok(default());
    }
    serde_json::from_slice(body).map_err(|e| {
        ApiError::bad_request(
            code,
            format!("{e}; the body is empty or JSON with {may_be}"),
        )
    })
}

pub(super) fn to_hex(b: &[u8]) -> String {
    b.iter().map(|x| format!("{x:02x}")).collect()
}

pub(super) fn from_hex(s: &str) -> Option<Vec<u8>> {
    if !s.len().is_multiple_of(2) || s.len() > 512 {
        return None;
    }
    (0..s.len())
        .step_by(2)
        .map(|i| u8::from_str_radix(s.get(i..i + 2)?, 16).ok())
        .collect()
}

async fn observations(
    State(s): State<ApiState>,
    Path(id): Path<String>,
    Query(page): Query<Page>,
) -> Result<Json<ObservationPage>, ApiError> {
    let limit = page_limit(page.limit)?;
    let after = match &page.cursor {
        None => None,
        Some(c) => Some(from_hex(c).ok_or_else(|| {
            ApiError::bad_request("bad_cursor", format!("'{c}' is not a cursor of this list"))
        })?),
    };
    let object = find_object(&s, id).await?;
    let oid = object.id.clone();
    let (list, next) = blocking(&s, move |store| {
        store.observations(&oid, after.as_deref(), limit)
    })
    .await?;
    Ok(Json(ObservationPage {
        object_id: object.id,
        observations: list,
        next_cursor: next.map(|k| to_hex(&k)),
    }))
}

/// The file extension a posted body is kept under, from its content type
/// (else the readers tell the format by its first character).
fn extension(headers: &HeaderMap) -> &'static str {
    let ct = headers
        .get(axum::http::header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .unwrap_or("");
    if ct.contains("xml") {
        "xml"
    } else if ct.contains("json") {
        "jsonl"
    } else if ct.contains("psv") {
        "psv"
    } else {
        "txt"
    }
}

async fn post_observations(
    State(s): State<ApiState>,
    headers: HeaderMap,
    body: Result<Bytes, BytesRejection>,
) -> Result<Response, ApiError> {
    require_token(s.0.token.as_deref(), &headers)?;
    let body = body.map_err(|r| ApiError::new(r.status(), "bad_body", r.body_text()))?;
    if body.is_empty() {
        return Err(ApiError::bad_request(
            "empty_body",
            "the request carries no observations",
        ));
    }
    // The body becomes a file like any other, so the archive holds every
    // input and the same path takes it.
    let n = s.0.uploads.fetch_add(1, Ordering::Relaxed);
    let (stamp, _) = crate::watch::clock::now_utc();
    let stamp: String = stamp.chars().filter(char::is_ascii_digit).collect();
    let name = format!(
        "api-{stamp}-{}-{n}.{}",
        std::process::id(),
        extension(&headers)
    );
    let path = s.0.staging.join(&name);
    let staging = s.0.staging.clone();
    let write_path = path.clone();
    tokio::task::spawn_blocking(move || {
        std::fs::create_dir_all(&staging)?;
        std::fs::write(&write_path, &body)?;
        std::fs::File::open(&write_path)?.sync_all()
    })
    .await
    .map_err(|e| ApiError::new(StatusCode::INTERNAL_SERVER_ERROR, "internal", e.to_string()))?
    .map_err(|e| {
        ApiError::new(
            StatusCode::INSUFFICIENT_STORAGE,
            "cannot_stage",
            format!("the body could not be written: {e}"),
        )
    })?;
    match take_one(&s.0.intake, path).await {
        Ok(Taken::Archived {
            to,
            added,
            duplicates,
            lines_rejected,
            errors,
        }) => {
            let rejections = match &errors {
                Some(p) => std::fs::read(p)
                    .ok()
                    .and_then(|b| serde_json::from_slice::<serde_json::Value>(&b).ok())
                    .map(|v| v["rejections"].clone()),
                None => None,
            };
            Ok((
                StatusCode::CREATED,
                Json(serde_json::json!({
                    "archived_as": to.display().to_string(),
                    "accepted": added,
                    "duplicates": duplicates,
                    "lines_rejected": lines_rejected,
                    "rejections": rejections.unwrap_or(serde_json::Value::Array(Vec::new())),
                })),
            )
                .into_response())
        }
        Ok(Taken::Rejected { errors, reason, .. }) => {
            let details = std::fs::read(&errors)
                .ok()
                .and_then(|b| serde_json::from_slice::<serde_json::Value>(&b).ok())
                .unwrap_or_default();
            Err(ApiError::new(
                StatusCode::UNPROCESSABLE_ENTITY,
                "no_usable_observation",
                reason,
            )
            .with_details(details))
        }
        Ok(Taken::Gone) => Err(ApiError::new(
            StatusCode::INTERNAL_SERVER_ERROR,
            "internal",
            "the staged body disappeared",
        )),
        Err(e) => Err(ApiError::new(
            if e.is_disk_full() {
                StatusCode::INSUFFICIENT_STORAGE
            } else {
                StatusCode::SERVICE_UNAVAILABLE
            },
            "not_stored",
            e.to_string(),
        )),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_description_lists_exactly_the_routes() {
        let doc = openapi();
        let paths = doc["paths"].as_object().unwrap();
        let routes = routes();
        let operations: usize = paths.values().map(|p| p.as_object().unwrap().len()).sum();
        assert_eq!(operations, routes.len(), "one operation per route");
        for r in &routes {
            assert!(
                paths[r.path][r.method].is_object(),
                "{} {}",
                r.method,
                r.path
            );
            if r.token {
                assert!(paths[r.path][r.method]["security"].is_array());
            }
        }
    }

    #[test]
    fn cursors_round_trip_through_hex() {
        let key = b"obj-0123456789abcdef/2026-02-09T02:18:34.808000000Z/\x00\xff";
        assert_eq!(from_hex(&to_hex(key)).as_deref(), Some(&key[..]));
        assert_eq!(from_hex("zz"), None);
        assert_eq!(from_hex("abc"), None);
    }
}
