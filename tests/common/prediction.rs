//! Calibration of predictions beyond the arc: fresh noise draws of a
//! synthetic body through the daemon's own job (the stress harness's
//! settings and [`perihelix::solve::solve`]: initial orbit, whole ladder),
//! then the place a month after the last observation from one station,
//! from the recommended model alone and averaged over the converged models
//! ([`perihelix::solve::prediction::predict_with_average`]), each measured
//! against the truth's place with its own 1-sigma ellipse. The bench
//! `prediction_calibration` runs many draws and writes its table to
//! docs/accuracy.md; `tests/fit_prediction_calibration.rs` runs a few.
//!
//! The truth's place is the fixture's truth state carried by the truth's
//! own force model (A_i and law as the fixture was made with) and seen
//! through the crate's observation model, so the check is of the
//! covariances and the averaging, not of the propagator against rebound
//! (checked in tests/fit_synthetic.rs and tests/fit_predict.rs).

use std::collections::BTreeMap;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

use nalgebra::Vector2;

use perihelix::astro::ephemeris::Ephemeris;
use perihelix::astro::observer::{observer_barycentric_state, ObserverPosition};
use perihelix::astro::propagation::{PropagationSettings, Trajectory};
use perihelix::astro::time::TimeScales;
use perihelix::fit::ladder::model_name;
use perihelix::fit::observe::{self, wrap_pi, ObserverAt, ARCSEC_PER_RAD};
use perihelix::fit::predict::PredictionPoint;
use perihelix::solve::prediction::predict_with_average;
use perihelix::solve::{solve, SolveSettings};

use super::stress::stress_settings;
use super::Synthetic;

/// The 95% point of chi^2 with 2 degrees of freedom: chi^2_2 is
/// exponential with mean 2, so the point is -2 ln(0.05) exactly
/// (5.991464547107982 from Python 3's `-2 * math.log(0.05)`);
/// Abramowitz & Stegun, Handbook of Mathematical Functions, table 26.8,
/// lists 5.99146 (memory).
pub const CHI2_2DOF_95: f64 = 5.991_464_547_107_982;

/// The probability the 95% ellipse should hold the truth.
pub const COVERAGE: f64 = 0.95;

/// Days after the arc's last observation (issue 12's acceptance).
pub const BEYOND_DAYS: f64 = 30.0;

/// The station with the most observations in the fixture (ties go to the
/// first code in alphabetical order).
pub fn busiest_station(body: &Synthetic) -> String {
    let mut counts: BTreeMap<&str, usize> = BTreeMap::new();
    for o in &body.clean {
        *counts.entry(o.station.as_str()).or_default() += 1;
    }
    let most = counts.values().copied().max().expect("observations");
    counts
        .into_iter()
        .find(|(_, n)| *n == most)
        .map(|(code, _)| code.to_string())
        .expect("a station")
}

/// The prediction point: `BEYOND_DAYS` after the arc's last observation,
/// from `station` of config/stations.toml (`common::stations()`).
pub fn prediction_point(body: &Synthetic, station: &str) -> PredictionPoint {
    let last = body
        .clean
        .iter()
        .map(|o| o.time.tdb())
        .max_by(|a, b| a.days_since(*b).total_cmp(&0.0))
        .expect("observations");
    let time = TimeScales::builtin()
        .resolve_tdb(last.plus_days(BEYOND_DAYS), None)
        .expect("time scales");
    let observer: ObserverPosition =
        perihelix::solve::input::station_position(&super::stations(), station)
            .expect("the station is in config/stations.toml");
    PredictionPoint { time, observer }
}

/// The truth's place at `point`: the fixture's truth state carried by the
/// truth's force model (`Synthetic::model(truth_free())`) at the tolerance
/// of `Synthetic::truth_state_at`, seen through the crate's light-time
/// observation model ([`observe::predict`], as tests/fit_predict.rs does).
/// (RA, Dec) radians.
pub fn truth_place(
    body: &Synthetic,
    ephemeris: &dyn Ephemeris,
    point: &PredictionPoint,
) -> (f64, f64) {
    let model = body.model(body.truth_free());
    let at = ObserverAt {
        tdb: point.time.tdb(),
        state: observer_barycentric_state(&point.observer, &point.time, ephemeris)
            .expect("the observer's state"),
    };
    // From the truth epoch to the prediction time, with a day's margin
    // before the earlier of the two for the light time.
    let (start, end) = if at.tdb.days_since(body.epoch) >= 0.0 {
        (body.epoch, at.tdb)
    } else {
        (at.tdb.plus_days(-1.0), body.epoch)
    };
    let settings = PropagationSettings {
        partials: false,
        tolerance: 1e-11,
        ..PropagationSettings::default()
    };
    let trajectory = Trajectory::integrate(
        ephemeris,
        &model,
        body.epoch,
        &body.state,
        start,
        end,
        &settings,
    )
    .expect("the truth propagates");
    let p = observe::predict(&trajectory, ephemeris, &at, false).expect("the truth's place");
    (p.ra_rad, p.dec_rad)
}

/// (truth - place) in (RA cos Dec, Dec), arcsec, in the place's tangent
/// frame (as `PlacePrediction::offset_arcsec`).
pub fn offset_arcsec(place: (f64, f64), truth: (f64, f64)) -> Vector2<f64> {
    Vector2::new(
        wrap_pi(truth.0 - place.0) * place.1.cos(),
        truth.1 - place.1,
    ) * ARCSEC_PER_RAD
}

/// One member of the average at the prediction point.
#[derive(Debug, Clone, PartialEq)]
pub struct MemberOutcome {
    pub name: String,
    pub weight: f64,
    /// d^2 of the truth's place with this member's own ellipse.
    pub d2: f64,
}

/// What one draw gave.
#[derive(Debug, Clone, PartialEq)]
pub struct PredictionDraw {
    pub seed: u64,
    pub recommended: String,
    /// The recommended model's weight in the average (0 when it took no
    /// part).
    pub recommended_weight: f64,
    pub members: Vec<MemberOutcome>,
    /// d^2 of the truth's place with the averaged ellipse, and with the
    /// recommended model's own.
    pub d2_averaged: f64,
    pub d2_recommended: f64,
    /// Semi-major axes of the two 1-sigma ellipses, arcsec.
    pub major_averaged_arcsec: f64,
    pub major_recommended_arcsec: f64,
    /// |truth - place|, arcsec.
    pub miss_averaged_arcsec: f64,
    pub miss_recommended_arcsec: f64,
    pub seconds: f64,
}

impl PredictionDraw {
    pub fn inside_averaged(&self) -> bool {
        self.d2_averaged <= CHI2_2DOF_95
    }

    pub fn inside_recommended(&self) -> bool {
        self.d2_recommended <= CHI2_2DOF_95
    }

    /// The member with the truth's model structure, when it took part.
    pub fn member(&self, name: &str) -> Option<&MemberOutcome> {
        self.members.iter().find(|m| m.name == name)
    }
}

/// The job's settings: the stress harness's ladder with the per-night
/// inflation off (the draws' noise is independent per observation, so the
/// stated sigmas are the right weights; with it on, the ellipses would be
/// inflated on purpose and the coverage would not test the covariance).
pub fn calibration_solve_settings() -> SolveSettings {
    stress_settings(false)
}

/// One fresh noise draw: the whole ladder through the daemon's job, the
/// recommended and the averaged place at `point`, both against `truth`
/// (RA, Dec radians). Err says why a draw gave no prediction.
pub fn prediction_draw(
    body: &Synthetic,
    ephemeris: &dyn Ephemeris,
    point: &PredictionPoint,
    truth: (f64, f64),
    seed: u64,
    settings: &SolveSettings,
) -> Result<PredictionDraw, String> {
    let started = std::time::Instant::now();
    let observations = body.realisation(seed);
    let solution =
        solve(ephemeris, &body.name, observations, settings).map_err(|e| e.to_string())?;
    let ladder = &solution.ladder;
    let chosen = ladder
        .recommended_model()
        .ok_or("no model recommended")?
        .name();
    let candidates = ladder.converged_models();
    let predicted = predict_with_average(
        ephemeris,
        &candidates,
        &chosen,
        std::slice::from_ref(point),
        &settings.predict_settings(),
    )
    .map_err(|e| e.to_string())?;
    let rec = predicted.places.first().ok_or("no recommended place")?;
    let avg = predicted
        .average
        .places
        .first()
        .ok_or("no averaged place")?;
    let rec_offset = rec.offset_arcsec(truth.0, truth.1);
    let avg_offset = offset_arcsec((avg.ra_rad, avg.dec_rad), truth);
    let d2_recommended = rec
        .ellipse
        .mahalanobis2(rec_offset)
        .ok_or("the recommended ellipse is singular")?;
    let d2_averaged = avg
        .ellipse
        .mahalanobis2(avg_offset)
        .ok_or("the averaged ellipse is singular")?;
    let members = predicted
        .average
        .members
        .iter()
        .zip(&predicted.average.member_places)
        .map(|(m, places)| {
            let p = &places[0];
            MemberOutcome {
                name: m.name.clone(),
                weight: m.weight,
                d2: p
                    .ellipse
                    .mahalanobis2(p.offset_arcsec(truth.0, truth.1))
                    .unwrap_or(f64::NAN),
            }
        })
        .collect::<Vec<_>>();
    let recommended_weight = members
        .iter()
        .find(|m| m.name == chosen)
        .map_or(0.0, |m| m.weight);
    Ok(PredictionDraw {
        seed,
        recommended: chosen,
        recommended_weight,
        members,
        d2_averaged,
        d2_recommended,
        major_averaged_arcsec: avg.ellipse.semi_major_arcsec,
        major_recommended_arcsec: rec.ellipse.semi_major_arcsec,
        miss_averaged_arcsec: avg_offset.norm(),
        miss_recommended_arcsec: rec_offset.norm(),
        seconds: started.elapsed().as_secs_f64(),
    })
}

/// Draws `first_seed..first_seed + draws` over `threads` threads, in seed
/// order; `log` sees each as it ends.
pub fn run_draws(
    body: &Synthetic,
    ephemeris: &(dyn Ephemeris + Sync),
    point: &PredictionPoint,
    first_seed: u64,
    draws: usize,
    threads: usize,
    log: &(dyn Fn(u64, &Result<PredictionDraw, String>) + Sync),
) -> Vec<(u64, Result<PredictionDraw, String>)> {
    let settings = calibration_solve_settings();
    let truth = truth_place(body, ephemeris, point);
    let next = AtomicUsize::new(0);
    let results = Mutex::new(Vec::with_capacity(draws));
    std::thread::scope(|scope| {
        for _ in 0..threads.max(1) {
            scope.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::Relaxed);
                if i >= draws {
                    break;
                }
                let seed = first_seed + i as u64;
                let d = prediction_draw(body, ephemeris, point, truth, seed, &settings);
                log(seed, &d);
                if let Ok(mut r) = results.lock() {
                    r.push((seed, d));
                }
            });
        }
    });
    let mut r = results.into_inner().unwrap_or_default();
    r.sort_by_key(|(seed, _)| *seed);
    r
}

/// 0.95 +- 3 binomial sigma at R draws, sqrt(p (1 - p) / R) (the
/// binomial proportion's standard deviation; any statistics text, e.g.
/// Abramowitz & Stegun section 26.1; memory), clamped to [0, 1].
pub fn coverage_band(draws: usize) -> (f64, f64) {
    let sigma = (COVERAGE * (1.0 - COVERAGE) / draws as f64).sqrt();
    (
        (COVERAGE - 3.0 * sigma).max(0.0),
        (COVERAGE + 3.0 * sigma).min(1.0),
    )
}

/// Coverage and mean d^2 over a set of draws.
#[derive(Debug, Clone, PartialEq)]
pub struct Coverage {
    pub draws: usize,
    pub inside: usize,
    pub mean_d2: f64,
}

impl Coverage {
    pub fn of(d2: impl Iterator<Item = f64>) -> Self {
        let d2: Vec<f64> = d2.collect();
        Self {
            draws: d2.len(),
            inside: d2.iter().filter(|x| **x <= CHI2_2DOF_95).count(),
            mean_d2: d2.iter().sum::<f64>() / d2.len().max(1) as f64,
        }
    }

    pub fn fraction(&self) -> f64 {
        self.inside as f64 / self.draws.max(1) as f64
    }
}

/// The whole calibration over the draws that gave a prediction.
#[derive(Debug, Clone, PartialEq)]
pub struct PredictionCalibration {
    pub draws: usize,
    /// Draws that gave no prediction, with the reason.
    pub failed: Vec<(u64, String)>,
    pub averaged: Coverage,
    pub recommended: Coverage,
    /// The model with the truth's structure alone, over the draws where
    /// it took part in the average.
    pub truth_structure: Coverage,
    pub truth_structure_name: String,
    pub band: (f64, f64),
    pub mean_recommended_weight: f64,
    /// Model -> draws that recommended it.
    pub recommended_counts: BTreeMap<String, usize>,
    pub mean_major_averaged_arcsec: f64,
    pub mean_major_recommended_arcsec: f64,
    pub mean_seconds: f64,
}

impl PredictionCalibration {
    pub fn of(body: &Synthetic, results: &[(u64, Result<PredictionDraw, String>)]) -> Self {
        let ok: Vec<&PredictionDraw> = results
            .iter()
            .filter_map(|(_, r)| r.as_ref().ok())
            .collect();
        let failed = results
            .iter()
            .filter_map(|(s, r)| r.as_ref().err().map(|e| (*s, e.clone())))
            .collect();
        let n = ok.len().max(1) as f64;
        let mean = |f: &dyn Fn(&PredictionDraw) -> f64| ok.iter().map(|d| f(d)).sum::<f64>() / n;
        let truth_structure_name = model_name(body.truth_free(), Some(body.law));
        let mut recommended_counts = BTreeMap::new();
        for d in &ok {
            *recommended_counts.entry(d.recommended.clone()).or_default() += 1;
        }
        Self {
            draws: ok.len(),
            failed,
            averaged: Coverage::of(ok.iter().map(|d| d.d2_averaged)),
            recommended: Coverage::of(ok.iter().map(|d| d.d2_recommended)),
            truth_structure: Coverage::of(
                ok.iter()
                    .filter_map(|d| d.member(&truth_structure_name).map(|m| m.d2)),
            ),
            truth_structure_name,
            band: coverage_band(ok.len().max(1)),
            mean_recommended_weight: mean(&|d| d.recommended_weight),
            recommended_counts,
            mean_major_averaged_arcsec: mean(&|d| d.major_averaged_arcsec),
            mean_major_recommended_arcsec: mean(&|d| d.major_recommended_arcsec),
            mean_seconds: mean(&|d| d.seconds),
        }
    }

    pub fn averaged_within_band(&self) -> bool {
        (self.band.0..=self.band.1).contains(&self.averaged.fraction())
    }

    /// The figures in one line, as the test and the bench print them.
    pub fn summary_line(&self) -> String {
        format!(
            "averaged inside {}/{} = {:.3} (band [{:.3}, {:.3}]), mean d2 {:.2}; \
             recommended alone inside {}/{} = {:.3}, mean d2 {:.2}; \
             {} alone inside {}/{}, mean d2 {:.2}; mean weight of the recommended {:.2}; \
             recommended: {}",
            self.averaged.inside,
            self.averaged.draws,
            self.averaged.fraction(),
            self.band.0,
            self.band.1,
            self.averaged.mean_d2,
            self.recommended.inside,
            self.recommended.draws,
            self.recommended.fraction(),
            self.recommended.mean_d2,
            self.truth_structure_name,
            self.truth_structure.inside,
            self.truth_structure.draws,
            self.truth_structure.mean_d2,
            self.mean_recommended_weight,
            self.recommended_text(),
        )
    }

    /// "A1 inverse-square 7, A1 water-ice 5".
    pub fn recommended_text(&self) -> String {
        self.recommended_counts
            .iter()
            .map(|(m, n)| format!("{m} {n}"))
            .collect::<Vec<_>>()
            .join(", ")
    }
}
