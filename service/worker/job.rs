//! One refit: the object's stored observations through the same job as
//! `perihelix fit` ([`crate::solve::solve_records`]), kept as the object's
//! next solution record whatever the outcome. Blocking: run it on a
//! blocking thread.

use std::collections::BTreeMap;
use std::sync::Arc;
use std::time::Instant;

use sha2::{Digest, Sha256};

use crate::config::{Config, EphemerisChoice};
use crate::fit::lsq::Cancel;
use crate::solve::document::SolutionDocument;
use crate::solve::{solve_records, SolveError, SolveRequest};
use crate::store::{
    all_observations, ObjectState, SolutionRecord, SolutionSummary, Store, StoreError, Trigger,
};
use crate::watch::clock::now_utc;

/// What every refit shares.
pub struct JobContext {
    pub config: Arc<Config>,
    pub store: Arc<dyn Store>,
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
        e: rec.and_then(|m| m.elements.as_ref()).map(|e| e.e),
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
    let inputs_journal_seq = stored.iter().map(|o| o.journal_seq).max().unwrap_or(0);
    let mut records = Vec::with_capacity(stored.len());
    let mut unusable = Vec::new();
    for o in &stored {
        match o.entry.record.observation(&ctx.config.stations) {
            Ok(r) => records.push(r),
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
        distant: true,
        cancel: cancel.clone(),
    };
    let outcome = solve_records(&ctx.config, &name, &records, &request);
    if cancel.is_set() || matches!(outcome, Err(SolveError::Cancelled)) {
        return Ok(None);
    }
    let (created_utc, _) = now_utc();
    let seq = state.solutions + 1;
    let (summary, document) = match outcome {
        Ok(solved) => {
            let doc = SolutionDocument::new(&solved);
            let value = serde_json::to_value(&doc).ok();
            (summary(&doc, seq, &created_utc, trigger), value)
        }
        Err(e) => (
            SolutionSummary {
                seq,
                created_utc: created_utc.clone(),
                trigger,
                converged: false,
                observations: records.len(),
                used: 0,
                arc_days: None,
                recommended: None,
                e: None,
                one_over_a_original_per_au: None,
                ng_significance_sigma: None,
                rms_arcsec: None,
                normalized_rms: None,
                failure: Some(e.to_string()),
            },
            None,
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
    };
    ctx.store.add_solution(record)?;
    ctx.store.flush()?;
    Ok(Some(summary))
}
