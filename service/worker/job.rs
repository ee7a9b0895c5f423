//! One refit: the object's stored observations through the same job as
//! `perihelix fit` ([`crate::solve::solve_records`]), kept as the object's
//! next solution record whatever the outcome. Blocking: run it on a
//! blocking thread.

use std::collections::{BTreeMap, BTreeSet};
use std::sync::Arc;
use std::time::Instant;

use sha2::{Digest, Sha256};

use crate::alerts::facts::{solution_facts, BatchFacts, FactsInput};
use crate::astro::time::Epoch;
use crate::astro::time::UtcTime;
use crate::config::{Config, EphemerisChoice};
use crate::fit::consistency::batch_consistency;
use crate::fit::lsq::Cancel;
use crate::ingest::{DesignationKey, Observation};
use crate::solve::document::SolutionDocument;
use crate::solve::stored::model_fit;
use crate::solve::{solve_records_in, SolveContext, SolveError, SolveRequest};
use crate::store::{
    all_observations, BatchCheck, IndexedObservation, ObjectState, OverrideState, PlaceShift,
    SolutionRecord, SolutionSummary, Store, StoreError, TermPoint, Trigger,
};
use crate::watch::clock::now_utc;

/// What every refit shares.
pub struct JobContext {
    pub config: Arc<Config>,
    pub store: Arc<dyn Store>,
    /// The ephemeris, time scales and settings, opened once.
    pub solve: Arc<SolveContext>,
    /// What the solutions were computed with (see [`identity`]).
    pub identity: BTreeMap<String, String>,
    /// The API's address as links in alerts give it (`http://HOST:PORT`).
    pub api_base: String,
    /// Told when a stored solution raised alerts.
    pub outbox: Arc<tokio::sync::Notify>,
    pub metrics: Arc<crate::daemon::metrics::Metrics>,
}

#[derive(Debug, thiserror::Error)]
pub enum JobError {
    #[error("object {0} is not in the store")]
    UnknownObject(String),
    #[error("{0}")]
    Store(#[from] StoreError),
}

fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// Hashes of what a solution depends on beyond its observations: the fit
/// configuration and station list, the ephemeris, the GM values and the
/// leap-second table. Two solutions with the same hashes and inputs are
/// the same computation.
pub fn identity(config: &Config) -> BTreeMap<String, String> {
    use crate::astro::constants::gm;
    let mut out = BTreeMap::new();
    let fit = serde_json::json!({ "fit": config.fit, "stations": config.stations });
    out.insert(
        "fit_configuration".into(),
        sha256_hex(fit.to_string().as_bytes()),
    );
    let ephemeris = match &config.ephemeris {
        EphemerisChoice::Embedded => "embedded".to_string(),
        EphemerisChoice::Spk { path } => match std::fs::read(path) {
            Ok(bytes) => format!("spk:{}", sha256_hex(&bytes)),
            Err(e) => format!("spk:{}: unreadable: {e}", path.display()),
        },
    };
    out.insert("ephemeris".into(), ephemeris);
    let gms = [
        gm::SUN,
        gm::MERCURY,
        gm::VENUS,
        gm::EARTH,
        gm::MOON,
        gm::MARS_SYSTEM,
        gm::JUPITER_SYSTEM,
        gm::SATURN_SYSTEM,
        gm::URANUS_SYSTEM,
        gm::NEPTUNE_SYSTEM,
    ];
    let text: Vec<String> = gms.iter().map(|g| format!("{g:e}")).collect();
    out.insert("gm_set".into(), sha256_hex(text.join(",").as_bytes()));
    let leap = match &config.leap_seconds_file {
        None => "built-in".to_string(),
        Some(p) => match std::fs::read(p) {
            Ok(bytes) => sha256_hex(&bytes),
            Err(e) => format!("{}: unreadable: {e}", p.display()),
        },
    };
    out.insert("leap_seconds".into(), leap);
    out
}

/// The name a person knows the object by (see
/// [`DesignationKey::best_name`]).
pub fn best_designation(state: &ObjectState) -> String {
    let keys: Vec<DesignationKey> = state
        .designations
        .iter()
        .filter_map(|d| DesignationKey::parse(d).ok())
        .collect();
    DesignationKey::best_name(&keys).unwrap_or_else(|| state.id.clone())
}

fn summary(
    doc: &SolutionDocument,
    seq: u64,
    created_utc: &str,
    trigger: Trigger,
) -> SolutionSummary {
    let rec = doc.models.iter().find(|m| m.recommended);
    SolutionSummary {
        seq,
        created_utc: created_utc.to_string(),
        trigger,
        converged: rec.is_some(),
        observations: doc.n_obs,
        used: doc.n_used,
        arc_days: Some(doc.arc_days),
        recommended: doc.recommended.clone(),
        // At the reference epoch when there is one: a history of e then
        // compares osculating values at one epoch.
        e: rec
            .and_then(|m| m.reference_elements.as_ref().or(m.elements.as_ref()))
            .map(|e| e.e),
        // The bound verdict's figure (averaged over the models when the
        // law is not determined), so the history, the page and the
        // alerts quote one number.
        one_over_a_original_per_au: doc.bound.as_ref().map(|b| b.one_over_a_original_per_au),
        ng_significance_sigma: doc.ng_significance_sigma,
        rms_arcsec: rec.and_then(|m| m.rms_arcsec),
        normalized_rms: rec.and_then(|m| m.normalized_rms),
        failure: None,
        gravity_normalized_rms: doc
            .models
            .first()
            .filter(|m| m.converged)
            .and_then(|m| m.normalized_rms),
        terms: term_points(doc),
        // Filled from the alert facts, which predict both solutions.
        place_shifts: Vec::new(),
    }
}

/// The verdict's terms with a measured value, justified ones first.
fn term_points(doc: &SolutionDocument) -> Vec<TermPoint> {
    let Some(t) = &doc.terms else {
        return Vec::new();
    };
    let justified = t.justified.iter().map(|s| (s, true));
    let open = t.not_determined.iter().map(|s| (s, false));
    justified
        .chain(open)
        .filter_map(|(s, justified)| {
            Some(TermPoint {
                term: s.term.clone(),
                model: s.model.clone()?,
                value: s.value?,
                justified,
            })
        })
        .collect()
}

/// Refits `object_id` and stores the record. Returns None when the fit was
/// cancelled (the daemon stopping): nothing is stored and the object stays
/// due, to be refitted after the restart.
pub fn refit(
    ctx: &JobContext,
    object_id: &str,
    trigger: Trigger,
    cancel: &Cancel,
) -> Result<Option<SolutionSummary>, JobError> {
    let started = Instant::now();
    let state = ctx
        .store
        .object(object_id)?
        .ok_or_else(|| JobError::UnknownObject(object_id.to_string()))?;
    let stored = all_observations(ctx.store.as_ref(), &state.id)?;
    let overrides = ctx.store.overrides(&state.id)?;
    let decided = OverrideState::of(&overrides);
    // Every observation and every decision journaled up to here is in.
    let inputs_journal_seq = stored
        .iter()
        .map(|o| o.journal_seq)
        .chain(overrides.iter().map(|o| o.journal_seq))
        .max()
        .unwrap_or(0);
    let mut records = Vec::with_capacity(stored.len());
    let mut protected = Vec::new();
    let mut unusable = Vec::new();
    for o in &stored {
        if decided.excluded_observations.contains(&o.entry.content_key) {
            continue;
        }
        match o.entry.record.observation(&ctx.config.stations) {
            Ok(r) => {
                if decided.included_observations.contains(&o.entry.content_key) {
                    protected.push(records.len());
                }
                records.push(r)
            }
            Err(why) => unusable.push(format!(
                "{}:{}: {why}",
                o.entry.record.file, o.entry.record.line
            )),
        }
    }
    for u in &unusable {
        tracing::warn!(object = %state.id, "stored observation no longer usable: {u}");
    }
    let name = best_designation(&state);
    let request = SolveRequest {
        elements_epoch: None,
        reference_epoch: state
            .reference_epoch_tdb_days_j2000
            .map(Epoch::from_tdb_days_since_j2000),
        distant: true,
        cancel: cancel.clone(),
        protected,
        excluded_models: decided.excluded_models.iter().cloned().collect(),
        pinned_model: decided.pinned_model.clone(),
    };
    let outcome = solve_records_in(&ctx.solve, &ctx.config, &name, &records, &request);
    if cancel.is_set() || matches!(outcome, Err(SolveError::Cancelled)) {
        return Ok(None);
    }
    let previous = ctx.store.solutions(&state.id, None, 1)?.into_iter().next();
    let (created_utc, _) = now_utc();
    let seq = state.solutions + 1;
    let (doc, failure) = match outcome {
        Ok(solved) => (
            Some((SolutionDocument::new(&solved), solved.solution.epoch)),
            None,
        ),
        Err(e) => (None, Some(e.to_string())),
    };
    let outliers = doc
        .as_ref()
        .map(|(d, _)| rejected_by(d))
        .unwrap_or_default();
    let new_batch = previous
        .as_ref()
        .and_then(|p| batch_check(ctx, p, &stored, &outliers));
    let document = doc.as_ref().and_then(|(d, _)| serde_json::to_value(d).ok());
    let (summary, reference_epoch) = match (&doc, &failure) {
        (Some((d, epoch)), _) => (
            summary(d, seq, &created_utc, trigger),
            Some(
                state
                    .reference_epoch_tdb_days_j2000
                    .unwrap_or_else(|| epoch.tdb_days_since_j2000()),
            ),
        ),
        (None, why) => (
            SolutionSummary::failed(
                seq,
                &created_utc,
                trigger,
                records.len(),
                why.clone().unwrap_or_default(),
            ),
            state.reference_epoch_tdb_days_j2000,
        ),
    };
    let (plan, plan_problem) = match document.as_ref() {
        Some(d) => match plan_ahead(ctx, d, &created_utc) {
            Ok(p) => (Some(p), None),
            Err(why) => {
                tracing::info!(object = %state.id, seq, "no observing plan: {why}");
                (None, Some(why))
            }
        },
        None => (None, None),
    };
    let facts = solution_facts(
        &ctx.solve,
        &ctx.config.stations,
        &FactsInput {
            object_id: &state.id,
            designation: &name,
            seq,
            created_utc: &created_utc,
            observations: records.len(),
            document: doc.as_ref().map(|(d, _)| d),
            document_value: document.as_ref(),
            failure: failure.as_deref(),
            previous_seq: previous.as_ref().map(|p| p.seq),
            previous_document: previous.as_ref().and_then(|p| p.document.as_ref()),
            previous_recommended: previous
                .as_ref()
                .and_then(|p| p.summary.recommended.as_deref()),
            previous_last_obs_utc: previous
                .as_ref()
                .and_then(|p| p.document.as_ref())
                .and_then(|d| d["last_obs_utc"].as_str()),
            batch: new_batch.as_ref().map(batch_facts),
            hours_without_solution: hours_without_solution(ctx, &state.id, &created_utc),
            prediction_days: &ctx.config.alerts.prediction_days,
        },
    );
    let states = previous
        .as_ref()
        .map(|p| p.alert_states.clone())
        .unwrap_or_default();
    let (alerts, alert_states) = crate::alerts::raise(
        &ctx.config.alerts,
        &facts,
        &states,
        &ctx.api_base,
        &created_utc,
    );
    let raised = alerts.len();
    for a in &alerts {
        tracing::info!(object = %state.id, seq, alert = %a.id, "alert: {}", a.subject);
    }
    let mut summary = summary;
    summary.place_shifts = facts
        .places
        .iter()
        .filter_map(|p| {
            Some(PlaceShift {
                days: p.days,
                shift_arcsec: p.shift_arcsec?,
                shift_sigma: p.shift_sigma,
            })
        })
        .collect();
    let record = SolutionRecord {
        object_id: state.id.clone(),
        seq,
        summary: summary.clone(),
        inputs_journal_seq,
        duration_s: started.elapsed().as_secs_f64(),
        software_version: env!("CARGO_PKG_VERSION").to_string(),
        identity: ctx.identity.clone(),
        document,
        reference_epoch_tdb_days_j2000: reference_epoch,
        new_batch,
        overrides,
        alerts,
        alert_states,
        plan,
        plan_problem,
    };
    ctx.store.add_solution(record)?;
    ctx.store.flush()?;
    if raised > 0 {
        crate::daemon::metrics::Metrics::add(&ctx.metrics.alerts_raised, raised as u64);
        ctx.outbox.notify_one();
    }
    Ok(Some(summary))
}

/// The nights of the coming month that would best tell the new
/// solution's recommended model from its rivals, at the stations that
/// observed the body.
fn plan_ahead(
    ctx: &JobContext,
    document: &serde_json::Value,
    created_utc: &str,
) -> Result<crate::solve::plan::Plan, String> {
    let (from, to) = crate::solve::plan::stored_window(created_utc).map_err(|e| e.to_string())?;
    crate::solve::plan::plan_stored(
        ctx.solve.ephemeris.as_ref(),
        &ctx.solve.scales,
        &ctx.solve.settings,
        &ctx.config.stations,
        Some(document),
        &[],
        None,
        &from,
        &to,
    )
    .map_err(|e| e.to_string())
}

/// The observations new since the previous solution, tested against that
/// solution's recommended orbit and its prediction covariance; None when
/// there is no previous solution or nothing new.
fn batch_check(
    ctx: &JobContext,
    previous: &SolutionRecord,
    stored: &[IndexedObservation],
    outliers: &BTreeSet<(i64, i64, String)>,
) -> Option<BatchCheck> {
    let new: Vec<&IndexedObservation> = stored
        .iter()
        .filter(|o| o.journal_seq > previous.inputs_journal_seq)
        .collect();
    if new.is_empty() {
        return None;
    }
    let is_outlier = |o: &IndexedObservation| {
        time_key(&o.entry.obs_time_utc, &o.entry.station).is_some_and(|k| outliers.contains(&k))
    };
    let fresh: Vec<Observation> = new
        .iter()
        .filter(|o| !is_outlier(o))
        .filter_map(|o| o.entry.record.observation(&ctx.config.stations).ok())
        .collect();
    let mut check = BatchCheck {
        against_solution: previous.seq,
        observations: fresh.len(),
        chi2: None,
        dof: None,
        p_value: None,
        log10_p_value: None,
        sigma: None,
        not_made: None,
        outliers_left_out: new.iter().filter(|o| is_outlier(o)).count(),
        files: sorted_unique(new.iter().map(|o| file_name(&o.entry.record.file))),
        stations: sorted_unique(new.iter().map(|o| o.entry.station.clone())),
    };
    if fresh.is_empty() {
        check.not_made = Some("every new observation was rejected as an outlier".into());
        return Some(check);
    }
    let settings = &ctx.solve.settings;
    let fit = match model_fit(
        previous.document.as_ref(),
        None,
        &settings.gravity,
        &settings.ladder.laws,
    ) {
        Ok((_, fit)) => fit,
        Err(e) => {
            check.not_made = Some(format!("solution {}: {e}", previous.seq));
            return Some(check);
        }
    };
    let (kept, _) =
        crate::solve::input::astrometric_all(&fresh, &ctx.config.stations, &ctx.solve.scales);
    let batch: Vec<_> = kept.into_iter().map(|(_, o)| o).collect();
    match batch_consistency(
        ctx.solve.ephemeris.as_ref(),
        &fit,
        &batch,
        &settings.ladder.fit.weights,
        &settings.ladder.fit.propagation,
    ) {
        Ok(c) => {
            check.chi2 = Some(c.chi2);
            check.dof = Some(c.dof);
            check.p_value = Some(c.p_value());
            check.log10_p_value = Some(c.ln_p_value / std::f64::consts::LN_10);
            check.sigma = Some(c.sigma);
        }
        Err(e) => check.not_made = Some(e.to_string()),
    }
    Some(check)
}

fn sorted_unique(items: impl Iterator<Item = String>) -> Vec<String> {
    items
        .collect::<std::collections::BTreeSet<_>>()
        .into_iter()
        .collect()
}

fn batch_facts(b: &BatchCheck) -> BatchFacts {
    BatchFacts {
        against_seq: b.against_solution,
        observations: b.observations,
        chi2: b.chi2,
        dof: b.dof,
        p_value: b.p_value,
        log10_p_value: b.log10_p_value,
        outliers_left_out: b.outliers_left_out,
        files: b.files.clone(),
        stations: b.stations.clone(),
    }
}

/// Hours from the latest converged solution (else from the first
/// solution, when none converged) to `now_utc`; None for an object's
/// first solution.
fn hours_without_solution(ctx: &JobContext, id: &str, now_utc: &str) -> Option<f64> {
    let summaries = match ctx.store.summaries(id, None, usize::MAX) {
        Ok(s) => s,
        Err(e) => {
            tracing::warn!(object = %id, "cannot read the solution history: {e}");
            return None;
        }
    };
    let since = summaries
        .iter()
        .find(|s| s.converged)
        .or(summaries.last())?;
    let (a, b) = (
        UtcTime::parse_iso8601(&since.created_utc).ok()?,
        UtcTime::parse_iso8601(now_utc).ok()?,
    );
    let days = (b.mjd() - a.mjd()) as f64 + (b.seconds_of_day() - a.seconds_of_day()) / 86_400.0;
    Some(days * 24.0)
}

/// An observation's time (MJD, milliseconds of the day) and station: how
/// a document's rejected list and the stored observations are matched.
fn time_key(utc: &str, station: &str) -> Option<(i64, i64, String)> {
    let t = UtcTime::parse_iso8601(utc).ok()?;
    Some((
        t.mjd(),
        (t.seconds_of_day() * 1000.0).round() as i64,
        station.to_string(),
    ))
}

/// The observations the recommended model rejected as outliers.
fn rejected_by(doc: &SolutionDocument) -> BTreeSet<(i64, i64, String)> {
    doc.models
        .iter()
        .filter(|m| m.recommended)
        .flat_map(|m| m.rejected.iter())
        .filter_map(|r| time_key(&r.obs_time, &r.station))
        .collect()
}

/// The name of an input file without its directory (where it was read
/// from is the incoming or staging directory, which says nothing).
fn file_name(path: &str) -> String {
    std::path::Path::new(path)
        .file_name()
        .map_or_else(|| path.to_string(), |n| n.to_string_lossy().into_owned())
}
