//! Is the embedded default ephemeris good enough for fitting? The same
//! one-year arc of the invented bound comet 2026 ZD3 (tests/reference/
//! fixtures/synthetic/bound_comet: 834 observations over 361 days, made
//! with rebound 5.2.2, jplephem 2.24 on de421.bsp and pyerfa 2.0.1.5; see
//! tests/reference/README.md) is fitted with the same model, from the same
//! start, on the same observations, once on DE421 and once on the embedded
//! theories, and the two converged fits are compared observation by
//! observation.
//!
//! Limits and their sources:
//! - residuals change by less than 0.01 arcsec: the acceptance criterion
//!   of the embedded ephemeris (it must not move a one-year fit's
//!   residuals by more than this);
//! - the places of one fixed orbit differ by no more than the embedded
//!   Earth and Sun errors allow: 11.1 km and 5.6 km, the worst position
//!   differences from DE421 over 1990-2050 measured by
//!   `astro::embedded::tests::agrees_with_de421_1990_to_2050` (recorded in
//!   docs/science/embedded-ephemeris.md), seen from the closest approach
//!   of the arc;
//! - the fitted parameters move by well under one formal sigma, so the
//!   choice of ephemeris is lost in the noise of the solution (common
//!   practice: a systematic change below 1 sigma does not alter what the
//!   fit says).

mod common;

use nalgebra::{DVector, Vector2};

use perihelix::astro::embedded::EmbeddedEphemeris;
use perihelix::astro::ephemeris::Ephemeris;
use perihelix::astro::forces::{ForceModel, FreeParameters};
use perihelix::astro::propagation::{PropagationSettings, Trajectory};
use perihelix::astro::time::Epoch;
use perihelix::fit::lsq::{
    fit_orbit, fit_orbit_from, FitProblem, FitSettings, OrbitFit, Termination,
};
use perihelix::fit::observe::{predict, residual_arcsec, AstrometricObservation, ObserverAt};

use common::{de421, load, Synthetic};

/// The acceptance criterion: largest change of any residual component.
const RESIDUAL_CHANGE_LIMIT_ARCSEC: f64 = 0.01;

/// Worst embedded-minus-DE421 positions over 1990-2050, km
/// (docs/science/embedded-ephemeris.md, "Accuracy against JPL DE421").
const EARTH_ERROR_KM: f64 = 11.1;
const SUN_ERROR_KM: f64 = 5.6;

/// IAU 2012 Resolution B2 (exact).
const AU_KM: f64 = 149_597_870.7;

const ARCSEC_PER_RAD: f64 = perihelix::fit::observe::ARCSEC_PER_RAD;

/// The table reaches this far beyond the observations (the fit's own
/// margin is a day; light time is under 0.02 day here).
const TABLE_MARGIN_DAYS: f64 = 10.0;

/// The truth model: the water-ice law with A1 and A2 free (truth.json).
fn free() -> FreeParameters {
    FreeParameters::new(true, true, false)
}

fn settings(rejection: bool) -> FitSettings {
    let mut s = FitSettings::default();
    // The fixture's noise is independent per observation (truth.json,
    // "noise"), so the stated sigmas are the right weights and the formal
    // sigmas are the real ones.
    s.weights.night_inflation = false;
    s.outlier_rejection = rejection;
    s
}

/// First and last observation (TDB), widened to take in `epoch`.
fn arc(observations: &[AstrometricObservation], epoch: Epoch) -> (Epoch, Epoch) {
    let days = observations
        .iter()
        .map(|o| o.time.tdb().tdb_days_since_j2000());
    let (first, last) = days.fold(
        (epoch.tdb_days_since_j2000(), epoch.tdb_days_since_j2000()),
        |(a, b), t| (a.min(t), b.max(t)),
    );
    (
        Epoch::from_tdb_days_since_j2000(first),
        Epoch::from_tdb_days_since_j2000(last),
    )
}

fn embedded(body: &Synthetic) -> EmbeddedEphemeris {
    let (first, last) = arc(&body.noisy, body.epoch);
    EmbeddedEphemeris::new(
        first.plus_days(-TABLE_MARGIN_DAYS),
        last.plus_days(TABLE_MARGIN_DAYS),
    )
    .expect("the arc is inside 1900-2100")
}

fn fit_on(
    ephemeris: &dyn Ephemeris,
    model: &ForceModel,
    body: &Synthetic,
    used: &[bool],
) -> OrbitFit {
    let problem = FitProblem {
        ephemeris,
        model,
        observations: &body.noisy,
    };
    let f = fit_orbit_from(&problem, body.epoch, &body.state, &settings(false), used)
        .expect("fit runs");
    assert_eq!(f.termination, Termination::Converged);
    f
}

/// One fixed orbit (the truth, no refit) seen at each observation: O - C
/// in (RA cos Dec, Dec), arcsec, so that two ephemerides' values subtract
/// to minus the place difference, and the observer distance, au.
fn places_of_truth(ephemeris: &dyn Ephemeris, body: &Synthetic) -> Vec<(Vector2<f64>, f64)> {
    let (first, last) = arc(&body.noisy, body.epoch);
    let settings = PropagationSettings {
        partials: false,
        ..PropagationSettings::default()
    };
    let trajectory = Trajectory::integrate(
        ephemeris,
        // The true A_i; which are free matters only with partials.
        &body.model(free()),
        body.epoch,
        &body.state,
        first.plus_days(-1.0),
        last.plus_days(1.0),
        &settings,
    )
    .expect("truth integrates");
    body.noisy
        .iter()
        .map(|o| {
            let at = ObserverAt::of(o, ephemeris).expect("observer");
            let p = predict(&trajectory, ephemeris, &at, false).expect("prediction");
            (residual_arcsec(o, &p), p.rho_au.norm())
        })
        .collect()
}

fn rms(values: impl Iterator<Item = f64>) -> f64 {
    let (sum, n) = values.fold((0.0, 0usize), |(s, n), v| (s + v * v, n + 1));
    (sum / n as f64).sqrt()
}

#[test]
fn one_year_fit_barely_notices_the_embedded_ephemeris() {
    let body = load("bound_comet");
    let (first, last) = arc(&body.noisy, body.epoch);
    let arc_days = last.days_since(first);
    assert!(arc_days > 350.0, "a one-year arc, got {arc_days} days");
    let de421 = de421();
    let table = embedded(&body);
    let model = body.model(free());

    // The used set comes from an ordinary fit on DE421 (rejection on);
    // both compared fits then keep exactly that set.
    let screening = fit_orbit(
        &FitProblem {
            ephemeris: &de421,
            model: &model,
            observations: &body.noisy,
        },
        body.epoch,
        &body.state,
        &settings(true),
    )
    .expect("screening fit runs");
    assert_eq!(screening.termination, Termination::Converged);
    let used: Vec<bool> = screening.residuals.iter().map(|r| r.used).collect();

    let on_de421 = fit_on(&de421, &model, &body, &used);
    // With the set fixed and rejection off, the DE421 fit is the screening
    // fit's own solution (its convergence test is 1e-3 sigma).
    let c = on_de421.covariance.as_ref().expect("a covariance");
    let refit_sigma = (0..c.nrows())
        .map(|i| (on_de421.parameters[i] - screening.parameters[i]).abs() / c[(i, i)].sqrt())
        .fold(0.0, f64::max);
    let on_embedded = fit_on(&table, &model, &body, &used);
    assert_eq!(on_de421.used_count(), on_embedded.used_count());

    // Residual changes, every observation (rejected ones too).
    let changes: Vec<Vector2<f64>> = on_de421
        .residuals
        .iter()
        .zip(&on_embedded.residuals)
        .map(|(d, e)| e.residual_arcsec - d.residual_arcsec)
        .collect();
    let max_change = changes
        .iter()
        .flat_map(|c| [c.x.abs(), c.y.abs()])
        .fold(0.0, f64::max);
    let rms_change = rms(changes
        .iter()
        .zip(&used)
        .filter(|(_, u)| **u)
        .flat_map(|(c, _)| [c.x, c.y]));

    // Parameter change in the DE421 fit's formal sigmas.
    let d: DVector<f64> = &on_embedded.parameters - &on_de421.parameters;
    let per_parameter: Vec<f64> = (0..d.len()).map(|i| d[i] / c[(i, i)].sqrt()).collect();
    let worst_sigma = per_parameter.iter().map(|x| x.abs()).fold(0.0, f64::max);
    let mahalanobis =
        (d.transpose() * c.clone().try_inverse().expect("invertible") * &d)[(0, 0)].sqrt();
    let position_km = d.rows(0, 3).norm() * AU_KM;

    // The same fixed orbit, no refit: what the fit had to absorb.
    let on_table = places_of_truth(&table, &body);
    let on_file = places_of_truth(&de421, &body);
    // Computed place embedded - DE421 = (O - C)_DE421 - (O - C)_embedded.
    let raw: Vec<Vector2<f64>> = on_table
        .iter()
        .zip(&on_file)
        .map(|((e, _), (d, _))| d - e)
        .collect();
    let raw_max = raw
        .iter()
        .flat_map(|c| [c.x.abs(), c.y.abs()])
        .fold(0.0, f64::max);
    let raw_rms = rms(raw.iter().flat_map(|c| [c.x, c.y]));
    let closest_au = on_file
        .iter()
        .map(|(_, r)| *r)
        .fold(f64::INFINITY, f64::min);
    // An Earth and a Sun error at their worst, side by side, seen from the
    // closest point of the arc; the body's own trajectory changes by far
    // less over a year (the outer planets' errors act only through their
    // small perturbations).
    let raw_bound = (EARTH_ERROR_KM + SUN_ERROR_KM) / (closest_au * AU_KM) * ARCSEC_PER_RAD;

    println!(
        "arc {arc_days:.1} d, {} of {} used; rms de421 {:.4} embedded {:.4} arcsec",
        on_de421.used_count(),
        body.noisy.len(),
        on_de421.rms_arcsec,
        on_embedded.rms_arcsec
    );
    println!("screening fit vs fixed-set DE421 fit: {refit_sigma:.2e} sigma");
    println!("residual change: max {max_change:.5} arcsec, rms {rms_change:.5} arcsec (used)");
    println!(
        "parameters (embedded - de421) / sigma: {per_parameter:.3?}; worst {worst_sigma:.3}, \
         mahalanobis {mahalanobis:.3}, position {position_km:.2} km"
    );
    println!(
        "fixed orbit, no refit: place difference max {raw_max:.5} arcsec, rms {raw_rms:.5} arcsec \
         (bound {raw_bound:.4} arcsec at {closest_au:.3} au)"
    );

    assert!(refit_sigma < 0.01, "{refit_sigma}");
    assert!(max_change < RESIDUAL_CHANGE_LIMIT_ARCSEC, "{max_change}");
    // Inside the one-sigma ellipsoid: no combination of the parameters
    // moves by as much as its own sigma.
    assert!(mahalanobis < 1.0, "{mahalanobis}");
    assert!(worst_sigma < 1.0, "{worst_sigma}");
    assert!(raw_max < raw_bound, "{raw_max} above {raw_bound}");
}
