//! One refit: the object's stored observations through the same job as
//! `perihelix fit` ([`crate::solve::solve_records`]), kept as the object's
//! next solution record whatever the outcome. Blocking: run it on a
//! blocking thread.

use std::collections::BTreeMap;
use std::sync::Arc;
use std::time::Instant;

use sha2::{Digest, Sha256};

use crate::astro::time::Epoch;
use crate::config::{Config, EphemerisChoice};
use crate::fit::consistency::batch_consistency;
use crate::fit::lsq::Cancel;
use crate::ingest::Observation;
use crate::solve::document::SolutionDocument;
use crate::solve::stored::model_fit;
use crate::solve::{solve_records_in, SolveContext, SolveError, SolveRequest};
use crate::store::{
    all_observations, BatchCheck, IndexedObservation, ObjectState, OverrideState, SolutionRecord,
    SolutionSummary, Store, StoreError, Trigger,
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

/// The name a person knows the object by: its permanent designation, else
/// its provisional one, else its tracklet name with the station.
pub fn best_designation(state: &ObjectState) -> String {
    for prefix in ["permID:", "provID:"] {
        if let Some(d) = state.designations.iter().find(|d| d.starts_with(prefix)) {
            return d[prefix.len()..].to_string();
        }
    }
    state
        .designations
        .first()
        .map(|d| d.trim_start_matches("trkSub:").to_string())
        .unwrap_or_else(|| state.id.clone())
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
        one_over_a_original_per_au: rec.and_then(|m| m.one_over_a_original.as_ref()).map(|a| {
            crate::solve::document::ValueSigma {
                value: a.value,
                sigma: a.sigma,
            }
        }),
        ng_significance_sigma: doc.ng_significance_sigma,
        rms_arcsec: rec.and_then(|m| m.rms_arcsec),
        normalized_rms: rec.and_then(|m| m.normalized_rms),
        failure: None,
    }
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
    let new_batch = batch_check(ctx, &state, &stored);
    let (created_utc, _) = now_utc();
    let seq = state.solutions + 1;
    let (summary, document, reference_epoch) = match outcome {
        Ok(solved) => {
            let doc = SolutionDocument::new(&solved);
            let value = serde_json::to_value(&doc).ok();
            let reference = state
                .reference_epoch_tdb_days_j2000
                .unwrap_or_else(|| solved.solution.epoch.tdb_days_since_j2000());
            (
                summary(&doc, seq, &created_utc, trigger),
                value,
                Some(reference),
            )
        }
        Err(e) => (
            SolutionSummary::failed(seq, &created_utc, trigger, records.len(), e.to_string()),
            None,
            state.reference_epoch_tdb_days_j2000,
        ),
    };
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
    };
    ctx.store.add_solution(record)?;
    ctx.store.flush()?;
    Ok(Some(summary))
}

/// The observations new since the previous solution, tested against that
/// solution's recommended orbit and its prediction covariance; None when
/// there is no previous solution or nothing new.
fn batch_check(
    ctx: &JobContext,
    state: &ObjectState,
    stored: &[IndexedObservation],
) -> Option<BatchCheck> {
    let previous = match ctx.store.solutions(&state.id, None, 1) {
        Ok(list) => list.into_iter().next()?,
        Err(e) => {
            tracing::warn!(object = %state.id, "cannot read the previous solution: {e}");
            return None;
        }
    };
    let fresh: Vec<Observation> = stored
        .iter()
        .filter(|o| o.journal_seq > previous.inputs_journal_seq)
        .filter_map(|o| o.entry.record.observation(&ctx.config.stations).ok())
        .collect();
    if fresh.is_empty() {
        return None;
    }
    let mut check = BatchCheck {
        against_solution: previous.seq,
        observations: fresh.len(),
        chi2: None,
        dof: None,
        p_value: None,
        log10_p_value: None,
        sigma: None,
        not_made: None,
    };
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
