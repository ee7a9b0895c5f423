//! Growing a fit from a short arc to the whole one, as an analyst does
//! with a start that only fits a few nights: fit the nights the start came
//! from, widen the window about them by a factor, fit again from the last
//! solution, and so on until every observation is in.
//!
//! While the window is short the non-gravitational parameters are not
//! determined (their signal grows as the square of the arc), so windows
//! shorter than [`ExtensionSettings::nongrav_from_arc_days`] are fitted
//! with gravity alone; longer ones, and always the last, with the full
//! model. Each fit is made at the middle of its window; the state is
//! carried to the next window's epoch along the previous solution's
//! trajectory, and the last fit is made at the caller's epoch.

use thiserror::Error;

use crate::astro::ephemeris::{Ephemeris, StateVector};
use crate::astro::forces::{ForceModel, ForceModelError};
use crate::astro::propagation::{PropagationError, PropagationSettings, Trajectory};
use crate::astro::time::Epoch;

use super::lsq::{fit_orbit, FitError, FitProblem, FitSettings, OrbitFit, Termination};
use super::observe::AstrometricObservation;

#[derive(Debug, Clone, PartialEq)]
pub struct ExtensionSettings {
    /// Each window's half-width is this times the previous one's.
    pub growth: f64,
    /// Windows at least this long (days) carry the non-gravitational terms.
    pub nongrav_from_arc_days: f64,
    /// The seed window's half-width is at least this (days).
    pub min_half_width_days: f64,
    pub fit: FitSettings,
}

impl Default for ExtensionSettings {
    fn default() -> Self {
        Self {
            growth: 2.0,
            nongrav_from_arc_days: 30.0,
            min_half_width_days: 0.5,
            fit: FitSettings::default(),
        }
    }
}

/// What one window's fit did.
#[derive(Debug, Clone, PartialEq)]
pub struct ExtensionStep {
    pub first: Epoch,
    pub last: Epoch,
    pub observations: usize,
    pub epoch: Epoch,
    pub nongrav: bool,
    pub iterations: usize,
    pub rms_arcsec: f64,
    pub termination: Termination,
}

#[derive(Debug, Error)]
pub enum ExtendError {
    #[error("no observation lies in the seed window")]
    EmptySeed,
    #[error("the growth factor must exceed 1, got {growth}")]
    BadGrowth { growth: f64 },
    #[error("window {step} ({observations} observations): {source}")]
    Fit {
        step: usize,
        observations: usize,
        source: FitError,
    },
    #[error("carrying the state to the next epoch: {0}")]
    Propagation(#[from] PropagationError),
    #[error("model: {0}")]
    Model(#[from] ForceModelError),
}

/// Fits `observations` under `model` at `epoch`, starting from
/// `start_state` at `start_epoch`, which is expected to fit the
/// observations between `seed_first` and `seed_last`. Returns the last
/// (whole-arc) fit and every window's summary; the caller judges the last
/// fit's termination.
#[allow(clippy::too_many_arguments)]
pub fn fit_by_extension(
    ephemeris: &dyn Ephemeris,
    model: &ForceModel,
    observations: &[AstrometricObservation],
    seed_first: Epoch,
    seed_last: Epoch,
    epoch: Epoch,
    start_epoch: Epoch,
    start_state: &StateVector,
    settings: &ExtensionSettings,
) -> Result<(OrbitFit, Vec<ExtensionStep>), ExtendError> {
    if settings.growth.is_nan() || settings.growth <= 1.0 {
        return Err(ExtendError::BadGrowth {
            growth: settings.growth,
        });
    }
    let times: Vec<Epoch> = observations.iter().map(|o| o.time.tdb()).collect();
    let (Some(first), Some(last)) = (
        times
            .iter()
            .copied()
            .reduce(|a, b| if b < a { b } else { a }),
        times
            .iter()
            .copied()
            .reduce(|a, b| if b > a { b } else { a }),
    ) else {
        return Err(ExtendError::EmptySeed);
    };
    let centre = seed_first.plus_days(0.5 * seed_last.days_since(seed_first));
    let mut half_width = (0.5 * seed_last.days_since(seed_first)).max(settings.min_half_width_days);
    let mut state = *start_state;
    let mut state_epoch = start_epoch;
    let mut state_model = model.without_nongrav();
    let mut steps = Vec::new();
    let mut previous_count = 0;
    loop {
        let lo = centre.plus_days(-half_width);
        let hi = centre.plus_days(half_width);
        let whole = lo <= first && hi >= last;
        let subset: Vec<AstrometricObservation> = observations
            .iter()
            .zip(&times)
            .filter(|(_, t)| whole || (**t >= lo && **t <= hi))
            .map(|(o, _)| o.clone())
            .collect();
        if subset.is_empty() && steps.is_empty() {
            return Err(ExtendError::EmptySeed);
        }
        if subset.len() > previous_count || whole {
            previous_count = subset.len();
            let sub_first = subset
                .iter()
                .map(|o| o.time.tdb())
                .fold(hi, |a, b| if b < a { b } else { a });
            let sub_last = subset
                .iter()
                .map(|o| o.time.tdb())
                .fold(lo, |a, b| if b > a { b } else { a });
            let arc_days = sub_last.days_since(sub_first);
            let with_nongrav =
                model.nongrav().is_some() && (whole || arc_days >= settings.nongrav_from_arc_days);
            let step_model = if with_nongrav {
                carry_nongrav(model, &state_model)?
            } else {
                model.without_nongrav()
            };
            let step_epoch = if whole {
                epoch
            } else {
                sub_first.plus_days(0.5 * arc_days)
            };
            let start = carry(
                ephemeris,
                &state_model,
                state_epoch,
                &state,
                step_epoch,
                &settings.fit.propagation,
            )?;
            let problem = FitProblem {
                ephemeris,
                model: &step_model,
                observations: &subset,
            };
            let fit = fit_orbit(&problem, step_epoch, &start, &settings.fit).map_err(|source| {
                ExtendError::Fit {
                    step: steps.len(),
                    observations: subset.len(),
                    source,
                }
            })?;
            steps.push(ExtensionStep {
                first: sub_first,
                last: sub_last,
                observations: subset.len(),
                epoch: step_epoch,
                nongrav: with_nongrav,
                iterations: fit.iterations,
                rms_arcsec: fit.rms_arcsec,
                termination: fit.termination.clone(),
            });
            if whole {
                return Ok((fit, steps));
            }
            state = fit.state;
            state_epoch = fit.epoch;
            state_model = fit.model.clone();
        }
        half_width *= settings.growth;
    }
}

/// `model` with its free A_i started from the values in `fitted` when that
/// one already carried them (else from `model`'s own).
fn carry_nongrav(model: &ForceModel, fitted: &ForceModel) -> Result<ForceModel, ForceModelError> {
    match (model.nongrav(), fitted.nongrav()) {
        (Some(target), Some(previous)) => {
            let mut ng = *target;
            ng.a_au_per_day2 = previous.a_au_per_day2;
            model.clone().with_nongrav(ng)
        }
        _ => Ok(model.clone()),
    }
}

/// The state at `to` along the trajectory of (`model`, `from`, `state`),
/// integrated as the fits integrate.
fn carry(
    ephemeris: &dyn Ephemeris,
    model: &ForceModel,
    from: Epoch,
    state: &StateVector,
    to: Epoch,
    propagation: &PropagationSettings,
) -> Result<StateVector, PropagationError> {
    if from == to {
        return Ok(*state);
    }
    let settings = PropagationSettings {
        partials: false,
        ..*propagation
    };
    Trajectory::integrate(ephemeris, model, from, state, to, to, &settings)?.state(to)
}
