//! Unattended fits under stress: fresh noise draws of the synthetic bodies
//! through the daemon's own job ([`perihelix::solve::solve`], initial
//! orbit and ladder, no distant 1/a), counting every fit that did not
//! converge, by model and reason, and every verdict whose numbers
//! contradict each other. The bench `stress` runs many draws and writes
//! its table to docs/accuracy.md; `tests/fit_stress.rs` runs a few.

use std::collections::BTreeMap;

use perihelix::astro::ephemeris::Ephemeris;
use perihelix::astro::forces::FreeParameters;
use perihelix::fit::ladder::{Ladder, LadderSettings, ModelFit, Significance};
use perihelix::fit::lsq::{FitSettings, Termination};
use perihelix::solve::{solve, SolveSettings};

use super::Synthetic;

/// One configuration of the harness.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub struct StressConfig {
    /// "DE421" or "embedded".
    pub ephemeris: &'static str,
    pub night_inflation: bool,
}

/// Why a model's fit ended, as a table column.
pub fn reason_class(m: &ModelFit) -> &'static str {
    match &m.fit {
        Ok(f) => match f.termination {
            Termination::Converged => "converged",
            Termination::MaxIterations => "iteration limit",
            Termination::Diverged { .. } => "diverged",
            Termination::Singular { .. } => "singular",
            Termination::OutlierCycle => "outlier cycle",
            Termination::Cancelled => "cancelled",
        },
        Err(_) => "error",
    }
}

/// What one draw gave.
#[derive(Debug, Clone, Default)]
pub struct DrawOutcome {
    pub seed: u64,
    /// Model name -> reason class, for every model that did not converge.
    pub failures: BTreeMap<String, String>,
    /// The failure texts, for the log.
    pub failure_texts: Vec<String>,
    /// The gravity-only fit did not converge.
    pub gravity_failed: bool,
    /// The model with the truth's structure did not converge.
    pub truth_failed: bool,
    pub contradictions: Vec<String>,
    /// The whole job failed (no ladder at all), with the reason.
    pub no_solution: Option<String>,
    pub recommended: Option<String>,
    pub seconds: f64,
}

/// The default ladder with the per-night inflation set as asked.
pub fn stress_settings(night_inflation: bool) -> SolveSettings {
    let mut fit = FitSettings::default();
    fit.weights.night_inflation = night_inflation;
    SolveSettings {
        ladder: LadderSettings {
            fit,
            ..LadderSettings::default()
        },
        gravity: perihelix::astro::forces::ForceModel::new(
            &perihelix::astro::ephemeris::Body::PERTURBERS,
            true,
            None,
        )
        .expect("the gravity model"),
        distant_inverse_a: false,
        ..SolveSettings::default()
    }
}

/// Numbers of one ladder that contradict each other (empty when sound).
pub fn contradictions(l: &Ladder, threshold_sigma: f64) -> Vec<String> {
    let mut found = Vec::new();
    let gravity = &l.models[0];
    let tests: Vec<f64> = l
        .models
        .iter()
        .filter_map(|m| m.test_against_gravity.as_ref())
        .map(|t| t.sigma)
        .collect();
    match &l.ng_significance {
        Significance::Sigma(s) => {
            if !gravity.converged() {
                found.push(format!(
                    "significance {s:.1} against a gravity fit that did not converge"
                ));
            }
            let max = tests.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            if tests.is_empty() || (max - s).abs() > 1e-12 {
                found.push(format!(
                    "significance {s:.1} is not the largest test against gravity ({tests:?})"
                ));
            }
        }
        Significance::Unknown { reason } => {
            if gravity.converged() && !tests.is_empty() {
                found.push(format!(
                    "significance unknown ({reason}) though {} tests against gravity exist",
                    tests.len()
                ));
            }
        }
    }
    for m in &l.models {
        for t in [&m.test, &m.test_against_gravity].into_iter().flatten() {
            if !m.converged() || !l.models[t.against].converged() {
                found.push(format!(
                    "{} tested against {} with a fit that did not converge",
                    m.name(),
                    l.models[t.against].name()
                ));
            }
        }
    }
    if let Some(r) = l.recommended_model() {
        if !r.converged() {
            found.push(format!("{} recommended without converging", r.name()));
        }
        if r.free.count() > 0 {
            match l.ng_significance.sigma() {
                Some(s) if s >= threshold_sigma => {}
                other => found.push(format!(
                    "{} recommended at a non-gravitational significance of {other:?}",
                    r.name()
                )),
            }
        }
    } else if l.models.iter().any(ModelFit::converged) && l.ng_significance.sigma().is_some() {
        found.push("no model recommended though the comparison was made".into());
    }
    found
}

/// One fresh noise draw of `body` through the daemon's job.
pub fn stress_draw(
    body: &Synthetic,
    ephemeris: &dyn Ephemeris,
    seed: u64,
    settings: &SolveSettings,
) -> DrawOutcome {
    let started = std::time::Instant::now();
    let observations = body.realisation(seed);
    let mut out = DrawOutcome {
        seed,
        ..DrawOutcome::default()
    };
    let truth: FreeParameters = body.truth_free();
    match solve(ephemeris, &body.name, observations, settings) {
        Err(e) => out.no_solution = Some(e.to_string()),
        Ok(solution) => {
            let l = &solution.ladder;
            for m in &l.models {
                if m.converged() {
                    continue;
                }
                out.failures.insert(m.name(), reason_class(m).to_string());
                out.failure_texts
                    .push(format!("{}: {}", m.name(), m.termination_text()));
                if m.free.count() == 0 {
                    out.gravity_failed = true;
                }
                if m.free == truth && (m.free.count() == 0 || m.law == Some(body.law)) {
                    out.truth_failed = true;
                }
            }
            out.contradictions = contradictions(l, settings.ladder.significance_sigma);
            out.recommended = l.recommended_model().map(ModelFit::name);
        }
    }
    out.seconds = started.elapsed().as_secs_f64();
    out
}
