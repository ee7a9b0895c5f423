//! From observation records to a complete solution: the one job that the
//! `fit` command and the daemon's worker share.
//!
//! The science in [`crate::fit`] never sees records, files or the
//! configuration; this module is where they meet it:
//! - [`input`]: records to fitter observations (time scales, observer places).
//! - [`catalog_bias`]: the user's star-catalogue bias table, if any.
//! - [`brightness`]: the brightness laws at the fitted orbit's geometry.
//! - [`settings`]: the configuration's fit section to the fitter's settings.
//! - [`sources`]: the ephemeris the configuration names.
//! - [`document`]: a solution as the JSON document the commands and the API
//!   return.
//! - [`report`]: the same solution as text for a person.
//! - [`numbers`]: values rounded to their sigma, never a negative zero.
//! - [`prediction`]: the time grid of a prediction request, a model's
//!   places with the model average beside them, as a JSON document and
//!   tables.
//! - [`outlook`]: the place a month after the arc under each model.
//! - [`plan`]: the nights and stations that would tell the recommended
//!   model from its strongest rival, ranked.
//! - [`verdicts`]: what the data decide and what they leave open (the
//!   law, the terms, bound or not, the cost of the terms, refusals).
//! - [`stored`]: a stored solution document read back (a model's fit
//!   rebuilt from its state and covariance, its brightness law).
//!
//! The job: an initial orbit from the observations alone, its state carried
//! to a round epoch near the middle of the arc, the whole model ladder, and
//! for every converged model the elements with sigmas (at a requested
//! epoch or the fit's), the original and future barycentric 1/a and the
//! residual trend test.

pub mod brightness;
pub mod catalog_bias;
pub mod document;
pub mod input;
pub mod numbers;
pub mod outlook;
pub mod plan;
pub mod prediction;
pub mod report;
pub mod settings;
pub mod sources;
pub mod stored;
pub mod verdicts;

#[cfg(test)]
pub(crate) mod test_support;

use std::sync::Arc;

use thiserror::Error;

use crate::astro::ephemeris::{Ephemeris, StateVector};
use crate::astro::forces::ForceModel;
use crate::astro::propagation::{PropagationError, PropagationSettings, Trajectory};
use crate::astro::time::Epoch;
use crate::fit::initial::{initial_orbits, InitialOrbit, InitialOrbitError, InitialOrbitSettings};
use crate::fit::ladder::{fit_ladder, Ladder, LadderSettings};
use crate::fit::lsq::{FitError, OrbitFit};
use crate::fit::observe::AstrometricObservation;
use crate::fit::solution::{
    distant_inverse_a, elements_with_sigmas, parameters_at, trend_test, Direction, DistantInverseA,
    ElementEstimates, TrendTest,
};

/// Initial orbits tried, best first, until one gives a converged ladder.
const STARTS_TRIED: usize = 3;

#[derive(Debug, Clone)]
pub struct SolveSettings {
    pub ladder: LadderSettings,
    pub initial: InitialOrbitSettings,
    /// Gravity of the fits: perturbers and relativity.
    pub gravity: ForceModel,
    /// Elements are reported at this epoch (the fit's own when None).
    pub elements_epoch: Option<Epoch>,
    /// Elements are also reported at this epoch, when given.
    pub reference_epoch: Option<Epoch>,
    /// Compute the original and future barycentric 1/a (each is a long
    /// integration with partials).
    pub distant_inverse_a: bool,
}

impl SolveSettings {
    /// Linear predictions carried by the fit's own integrator settings.
    pub fn predict_settings(&self) -> crate::fit::predict::PredictSettings {
        crate::fit::predict::PredictSettings {
            propagation: self.ladder.fit.propagation,
            ..Default::default()
        }
    }
}

impl Default for SolveSettings {
    fn default() -> Self {
        Self {
            ladder: LadderSettings::default(),
            initial: InitialOrbitSettings::default(),
            gravity: ForceModel::gravity(),
            elements_epoch: None,
            reference_epoch: None,
            distant_inverse_a: true,
        }
    }
}

#[derive(Debug, Error)]
pub enum SolveError {
    #[error("no observations to fit")]
    NoObservations,
    #[error("{0}")]
    TimeScales(#[from] crate::astro::time::TimeError),
    #[error("{0}")]
    Source(#[from] sources::SourceError),
    #[error("{0}")]
    CatalogBias(#[from] catalog_bias::BiasTableError),
    #[error("force model: {0}")]
    Model(#[from] crate::astro::forces::ForceModelError),
    #[error("initial orbit: {0}")]
    Initial(#[from] InitialOrbitError),
    #[error("carrying the initial orbit to the fit epoch: {0}")]
    Propagation(#[from] PropagationError),
    #[error("the fit: {0}")]
    Fit(#[from] FitError),
    #[error("no model of the ladder converged from the {tried} best initial orbits")]
    NoConvergedModel { tried: usize },
    #[error("cancelled")]
    Cancelled,
}

/// What a converged model says beyond its fit.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelDerived {
    pub elements: Result<ElementEstimates, String>,
    /// At the reference epoch, when one was asked for.
    pub reference_elements: Option<Result<ElementEstimates, String>>,
    /// None: not asked for, or a bound orbit that never leaves the planets.
    pub original: Result<Option<DistantInverseA>, String>,
    pub future: Result<Option<DistantInverseA>, String>,
    pub trend: Option<TrendTest>,
}

#[derive(Debug, Clone)]
pub struct Solution {
    pub object: String,
    pub observations: Vec<AstrometricObservation>,
    pub first: Epoch,
    pub last: Epoch,
    /// The fit epoch: the middle of the arc, on a whole TDB day (JD .5).
    pub epoch: Epoch,
    /// The epoch of the reported elements.
    pub elements_epoch: Epoch,
    /// The epoch of the reference elements, when asked for.
    pub reference_epoch: Option<Epoch>,
    /// The model an analyst pinned, if any.
    pub pinned_model: Option<String>,
    pub initial: InitialOrbit,
    pub ladder: Ladder,
    /// One entry per ladder model, None where the model did not converge.
    pub derived: Vec<Option<ModelDerived>>,
}

impl Solution {
    pub fn arc_days(&self) -> f64 {
        self.last.days_since(self.first)
    }

    /// The recommended model's fit, if any model converged.
    pub fn recommended_fit(&self) -> Option<&OrbitFit> {
        self.ladder.recommended_model()?.converged_fit()
    }

    /// Gravity alone's fit (the ladder's first model), if it converged.
    pub fn gravity_fit(&self) -> Option<&OrbitFit> {
        self.ladder.models.first()?.converged_fit()
    }
}

/// The middle of `first..last`, moved to the nearest 0h TDB.
pub fn mid_arc_epoch(first: Epoch, last: Epoch) -> Epoch {
    let mid = first.plus_days(0.5 * last.days_since(first));
    // A day number is exact in one f64; only the rounding uses the JD.
    Epoch::from_tdb_jd((mid.tdb_jd() - 0.5).round() + 0.5, 0.0)
}

fn span(observations: &[AstrometricObservation]) -> Option<(Epoch, Epoch)> {
    let mut times = observations.iter().map(|o| o.time.tdb());
    let t0 = times.next()?;
    Some(times.fold((t0, t0), |(a, b), t| {
        (if t < a { t } else { a }, if t > b { t } else { b })
    }))
}

/// The state of `orbit` carried to `epoch` under gravity.
fn start_at(
    ephemeris: &dyn Ephemeris,
    gravity: &ForceModel,
    orbit: &InitialOrbit,
    epoch: Epoch,
    propagation: &PropagationSettings,
) -> Result<StateVector, PropagationError> {
    if orbit.epoch == epoch {
        return Ok(orbit.state);
    }
    let (a, b) = if orbit.epoch < epoch {
        (orbit.epoch, epoch)
    } else {
        (epoch, orbit.epoch)
    };
    let settings = PropagationSettings {
        partials: false,
        ..*propagation
    };
    Trajectory::integrate(
        ephemeris,
        gravity,
        orbit.epoch,
        &orbit.state,
        a,
        b,
        &settings,
    )?
    .state(epoch)
}

/// Fits `observations` of `object` from nothing: initial orbit, ladder,
/// and what each converged model implies.
pub fn solve(
    ephemeris: &dyn Ephemeris,
    object: &str,
    observations: Vec<AstrometricObservation>,
    settings: &SolveSettings,
) -> Result<Solution, SolveError> {
    let (first, last) = span(&observations).ok_or(SolveError::NoObservations)?;
    let epoch = mid_arc_epoch(first, last);
    let candidates = initial_orbits(ephemeris, &observations, &settings.initial)?;
    let propagation = settings.ladder.fit.propagation;
    let mut solved = None;
    let mut last_error = None;
    for orbit in candidates.iter().take(STARTS_TRIED) {
        let start = match start_at(ephemeris, &settings.gravity, orbit, epoch, &propagation) {
            Ok(s) => s,
            Err(e) => {
                last_error = Some(SolveError::from(e));
                continue;
            }
        };
        let ladder = fit_ladder(
            ephemeris,
            &settings.gravity,
            &observations,
            epoch,
            &start,
            &settings.ladder,
        );
        if settings.ladder.fit.cancel.is_set() {
            return Err(SolveError::Cancelled);
        }
        match ladder {
            Ok(ladder) if ladder.models.iter().any(|m| m.converged()) => {
                solved = Some((orbit.clone(), ladder));
                break;
            }
            Ok(_) => {}
            Err(e) => last_error = Some(SolveError::from(e)),
        }
    }
    let Some((initial, ladder)) = solved else {
        return Err(last_error.unwrap_or(SolveError::NoConvergedModel {
            tried: candidates.len().min(STARTS_TRIED),
        }));
    };
    let elements_epoch = settings.elements_epoch.unwrap_or(epoch);
    let derived = ladder
        .models
        .iter()
        .map(|m| {
            m.converged_fit().map(|fit| {
                derive(
                    ephemeris,
                    fit,
                    &observations,
                    elements_epoch,
                    settings.reference_epoch,
                    settings.distant_inverse_a,
                    &propagation,
                )
            })
        })
        .collect();
    Ok(Solution {
        object: object.to_string(),
        observations,
        first,
        last,
        epoch,
        elements_epoch,
        reference_epoch: settings.reference_epoch,
        pinned_model: settings.ladder.pinned.clone(),
        initial,
        ladder,
        derived,
    })
}

/// A solution from validated records and the configuration: the records
/// that cannot be placed come back with their reasons (file and line),
/// the rest are fitted.
pub struct RecordsSolved {
    pub solution: Solution,
    /// Where the Sun, planets and Moon came from, kept open for what the
    /// caller does next with the solution (predictions, consistency).
    pub ephemeris: Arc<sources::EphemerisSource>,
    /// What the configured catalogue bias table corrected.
    pub catalog_bias: Option<catalog_bias::BiasSummary>,
    /// The brightness laws at the recommended orbit (None without
    /// magnitudes or without a converged model).
    pub brightness: Option<brightness::BrightnessDocument>,
    /// The place a month after the arc under each model (None when no
    /// model converged or the prediction failed; logged).
    pub outlook: Option<outlook::Outlook>,
    pub refused: Vec<input::InputError>,
}

/// The time scales the configuration asks for: its leap-second file, or
/// the built-in table.
pub fn time_scales(
    config: &crate::config::Config,
) -> Result<crate::astro::time::TimeScales, crate::astro::time::TimeError> {
    use crate::astro::time::{LeapSecondTable, TimeScales};
    Ok(match &config.leap_seconds_file {
        Some(path) => TimeScales::new(LeapSecondTable::from_file(path)?),
        None => TimeScales::builtin().clone(),
    })
}

/// What a caller asks of [`solve_records`] beyond the configuration.
#[derive(Debug, Clone, Default)]
pub struct SolveRequest {
    /// Elements at this epoch (the fit's own when None).
    pub elements_epoch: Option<Epoch>,
    /// Elements also at this epoch (the daemon's per-object reference
    /// epoch, so that a history compares like with like).
    pub reference_epoch: Option<Epoch>,
    /// Compute the original and future barycentric 1/a.
    pub distant: bool,
    /// Raised to stop the job at the next fit iteration.
    pub cancel: crate::fit::lsq::Cancel,
    /// Records (by index) an analyst forced in: never rejected.
    pub protected: Vec<usize>,
    /// Models an analyst took off the ladder, by name.
    pub excluded_models: Vec<String>,
    /// A model an analyst pinned, by name.
    pub pinned_model: Option<String>,
}

/// What repeated jobs share, opened once: the ephemeris (whose embedded
/// tables fill as they are used), the time scales and the settings the
/// configuration gives.
pub struct SolveContext {
    pub ephemeris: Arc<sources::EphemerisSource>,
    pub scales: crate::astro::time::TimeScales,
    pub settings: SolveSettings,
}

impl SolveContext {
    pub fn new(config: &crate::config::Config) -> Result<Self, SolveError> {
        Ok(Self {
            ephemeris: Arc::new(sources::open(&config.ephemeris)?),
            scales: time_scales(config)?,
            settings: settings::solve_settings(&config.fit, &config.stations)?,
        })
    }
}

/// [`solve_records_in`] with the ephemeris and settings opened for this
/// job alone (the batch commands).
pub fn solve_records(
    config: &crate::config::Config,
    object: &str,
    records: &[crate::ingest::Observation],
    request: &SolveRequest,
) -> Result<RecordsSolved, SolveError> {
    solve_records_in(
        &SolveContext::new(config)?,
        config,
        object,
        records,
        request,
    )
}

/// Fits the records of one object in a shared context.
pub fn solve_records_in(
    context: &SolveContext,
    config: &crate::config::Config,
    object: &str,
    records: &[crate::ingest::Observation],
    request: &SolveRequest,
) -> Result<RecordsSolved, SolveError> {
    let scales = &context.scales;
    let (kept, refused) = input::astrometric_all(records, &config.stations, scales);
    let catalogs: Vec<Option<&str>> = kept.iter().map(|(i, _)| records[*i].ast_cat()).collect();
    let magnitudes: Vec<brightness::MagnitudeRecord> = kept
        .iter()
        .enumerate()
        .filter_map(|(index, (i, _))| {
            let r = &records[*i];
            Some(brightness::MagnitudeRecord {
                index,
                mag: r.mag?,
                band: r.band().map(str::to_string),
                sigma_mag: r.rms_mag,
            })
        })
        .collect();
    let protected: Vec<bool> = kept
        .iter()
        .map(|(i, _)| request.protected.contains(i))
        .collect();
    let mut observations: Vec<AstrometricObservation> = kept.into_iter().map(|(_, o)| o).collect();
    let catalog_bias = match &config.fit.catalog_bias_file {
        Some(path) => {
            Some(catalog_bias::BiasTable::from_file(path)?.correct(&mut observations, &catalogs))
        }
        None => None,
    };
    let ephemeris = context.ephemeris.clone();
    let mut settings = context.settings.clone();
    settings.elements_epoch = request.elements_epoch;
    settings.reference_epoch = request.reference_epoch;
    settings.distant_inverse_a = request.distant;
    settings.ladder.fit.cancel = request.cancel.clone();
    if protected.contains(&true) {
        settings.ladder.fit.protected = protected;
    }
    settings.ladder.excluded = request.excluded_models.clone();
    settings.ladder.pinned = request.pinned_model.clone();
    let solution = solve(ephemeris.as_ref(), object, observations, &settings)?;
    let brightness = solution.recommended_fit().and_then(|fit| {
        brightness::brightness(
            ephemeris.as_ref(),
            fit,
            &solution.observations,
            &magnitudes,
            &crate::fit::photometry::PhotometrySettings::default(),
        )
    });
    let outlook = match outlook::outlook(
        ephemeris.as_ref(),
        scales,
        &solution,
        &settings.predict_settings(),
    ) {
        Ok(o) => Some(o),
        Err(why) => {
            tracing::debug!(object, "no outlook: {why}");
            None
        }
    };
    Ok(RecordsSolved {
        solution,
        ephemeris,
        catalog_bias,
        brightness,
        outlook,
        refused,
    })
}

fn derive(
    ephemeris: &dyn Ephemeris,
    fit: &OrbitFit,
    observations: &[AstrometricObservation],
    elements_epoch: Epoch,
    reference_epoch: Option<Epoch>,
    distant: bool,
    propagation: &PropagationSettings,
) -> ModelDerived {
    let at = |epoch: Epoch| {
        parameters_at(ephemeris, fit, epoch, propagation)
            .and_then(|(state, c)| elements_with_sigmas(&state, &c, epoch))
            .map_err(|e| e.to_string())
    };
    let elements = at(elements_epoch);
    let reference_elements = reference_epoch.map(at);
    let far = |direction| {
        if distant {
            distant_inverse_a(ephemeris, fit, direction, propagation).map_err(|e| e.to_string())
        } else {
            Ok(None)
        }
    };
    ModelDerived {
        elements,
        reference_elements,
        original: far(Direction::Original),
        future: far(Direction::Future),
        trend: trend_test(fit, observations),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_fit_epoch_is_a_whole_tdb_day() {
        // JD 2461000.5 = 2025-09-18 0h; an arc centred on 2461000.8 moves
        // to 2461000.5, one centred on 2461001.2 to 2461001.5.
        let a = Epoch::from_tdb_jd(2_461_000.6, 0.0);
        let b = Epoch::from_tdb_jd(2_461_001.0, 0.0);
        let e = mid_arc_epoch(a, b);
        assert!((e.tdb_jd() - 2_461_000.5).abs() < 1e-9, "{}", e.tdb_jd());
        let b = Epoch::from_tdb_jd(2_461_001.8, 0.0);
        let e = mid_arc_epoch(a, b);
        assert!((e.tdb_jd() - 2_461_001.5).abs() < 1e-9, "{}", e.tdb_jd());
    }
}
