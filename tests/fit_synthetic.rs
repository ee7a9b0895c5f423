//! The differential corrector on the synthetic astrometry of three invented
//! bodies (truth from rebound 5.2.2 IAS15 with DE421 planets through
//! jplephem 2.24, Earth rotation from pyerfa 2.0.1.5; see
//! tests/reference/README.md). The fitter runs on the same DE421 file, so a
//! miss measures the fitter, not an ephemeris difference.

mod common;

use nalgebra::DVector;

use perihelix::astro::forces::FreeParameters;
use perihelix::fit::lsq::{fit_orbit, FitProblem, FitSettings, OrbitFit, Termination};

use common::{de421, load, Synthetic};

/// chi^2 quantile 0.999: 7 dof 24.32, 6 dof 22.46, 8 dof 26.12 (Abramowitz
/// & Stegun, Handbook of Mathematical Functions, table 26.8; memory).
fn chi2_999(k: usize) -> f64 {
    match k {
        6 => 22.458,
        7 => 24.322,
        8 => 26.124,
        9 => 27.877,
        _ => panic!("no quantile for {k}"),
    }
}

fn truth_vector(body: &Synthetic, free: FreeParameters) -> DVector<f64> {
    let mut v: Vec<f64> = body
        .state
        .position_au
        .iter()
        .chain(body.state.velocity_au_per_day.iter())
        .copied()
        .collect();
    v.extend(free.indices().map(|i| body.a_au_per_day2[i]));
    DVector::from_vec(v)
}

fn mahalanobis2(fit: &OrbitFit, truth: &DVector<f64>) -> f64 {
    let c = fit.covariance.as_ref().expect("a covariance");
    let d = &fit.parameters - truth;
    let ci = c.clone().try_inverse().expect("invertible covariance");
    (d.transpose() * ci * &d)[(0, 0)]
}

fn fit(body: &Synthetic, free: FreeParameters, settings: &FitSettings) -> OrbitFit {
    let eph = de421();
    let model = body.model(free);
    let problem = FitProblem {
        ephemeris: &eph,
        model: &model,
        observations: &body.noisy,
    };
    fit_orbit(&problem, body.epoch, &body.state, settings).expect("fit runs")
}

fn no_inflation() -> FitSettings {
    let mut s = FitSettings::default();
    s.weights.night_inflation = false;
    s
}

#[test]
fn outgassing_body_from_truth() {
    let body = load("hyperbolic_outgassing");
    let free = FreeParameters::new(true, false, false);
    let f = fit(&body, free, &no_inflation());
    let truth = truth_vector(&body, free);
    let d2 = mahalanobis2(&f, &truth);
    let rejected: Vec<usize> = f
        .residuals
        .iter()
        .enumerate()
        .filter(|(_, r)| !r.used)
        .map(|(i, _)| i)
        .collect();
    println!(
        "{:?} chi2 {:.1} dof {} nrms {:.3} rms {:.3} d2 {d2:.2} rejected {rejected:?} A1 {:?} sigma {:.3e}",
        f.termination,
        f.chi2,
        f.dof,
        f.normalised_rms,
        f.rms_arcsec,
        f.nongrav_au_per_day2,
        f.covariance.as_ref().unwrap()[(6, 6)].sqrt()
    );
    assert_eq!(f.termination, Termination::Converged);
    assert!(d2 < chi2_999(7), "d2 {d2}");
    for o in &body.outliers {
        assert!(rejected.contains(o), "outlier {o} kept");
    }
}
