//! Initial orbits with no hint, on the synthetic astrometry of three
//! invented bodies (truth from rebound 5.2.2 IAS15 with DE421 planets
//! through jplephem 2.24, Earth rotation from pyerfa 2.0.1.5; see
//! tests/reference/README.md), and the whole-arc differential correction
//! started from them. The check: that correction lands on the same
//! solution as the one started from the truth, to well within one formal
//! sigma in every parameter (the covariance of the fit from truth).

mod common;

use nalgebra::DVector;

use perihelix::astro::ephemeris::StateVector;
use perihelix::astro::forces::{ForceModel, FreeParameters, NonGravModel};
use perihelix::astro::spk::SpkEphemeris;
use perihelix::astro::time::Epoch;
use perihelix::fit::extend::{fit_by_extension, ExtensionSettings};
use perihelix::fit::initial::{initial_orbits, InitialOrbit, InitialOrbitSettings};
use perihelix::fit::lsq::{fit_orbit, FitProblem, FitSettings, OrbitFit, Termination};
use perihelix::fit::observe::AstrometricObservation;

use common::{de421, load, Synthetic};

/// The fits must agree to this fraction of a sigma (the brief asks 1).
const AGREEMENT_SIGMA: f64 = 1.0;

fn fit_settings() -> FitSettings {
    // The noise of the fixtures is independent per observation (truth.json,
    // "noise"), so no per-night inflation.
    let mut s = FitSettings::default();
    s.weights.night_inflation = false;
    s
}

/// The body's model with the named A_i free, started from zero: the
/// initial orbit knows nothing of the non-gravitational terms.
fn model_from_zero(body: &Synthetic, free: FreeParameters) -> ForceModel {
    let truth_model = body.model(free);
    match truth_model.nongrav() {
        Some(ng) => truth_model
            .without_nongrav()
            .with_nongrav(NonGravModel::new(ng.law, [0.0; 3], free))
            .unwrap(),
        None => truth_model,
    }
}

/// The true state at `epoch` along the truth model's trajectory (`free`
/// is always the truth's own set here).
fn true_state(
    eph: &SpkEphemeris,
    body: &Synthetic,
    free: FreeParameters,
    epoch: Epoch,
) -> StateVector {
    assert_eq!(
        free,
        body.truth_free(),
        "{}: not the truth's terms",
        body.name
    );
    body.truth_state_at(eph, epoch)
}

/// The fit of the whole arc started from the truth at `epoch`.
fn truth_at(eph: &SpkEphemeris, body: &Synthetic, free: FreeParameters, epoch: Epoch) -> OrbitFit {
    let model = body.model(free);
    let state = true_state(eph, body, free, epoch);
    let problem = FitProblem {
        ephemeris: eph,
        model: &model,
        observations: &body.noisy,
    };
    fit_orbit(&problem, epoch, &state, &fit_settings()).expect("fit from truth runs")
}

/// Largest |difference| / sigma over the parameters, sigma from `reference`.
fn sigma_distance(fit: &OrbitFit, reference: &OrbitFit) -> f64 {
    let c = reference.covariance.as_ref().expect("a covariance");
    let d: DVector<f64> = &fit.parameters - &reference.parameters;
    (0..d.len())
        .map(|i| d[i].abs() / c[(i, i)].sqrt())
        .fold(0.0, f64::max)
}

/// How far a candidate is from the truth at its epoch.
fn miss(
    eph: &SpkEphemeris,
    body: &Synthetic,
    free: FreeParameters,
    c: &InitialOrbit,
) -> (f64, f64) {
    let truth = true_state(eph, body, free, c.epoch);
    (
        (c.state.position_au - truth.position_au).norm(),
        (c.state.velocity_au_per_day - truth.velocity_au_per_day).norm(),
    )
}

fn report(eph: &SpkEphemeris, body: &Synthetic, free: FreeParameters, candidates: &[InitialOrbit]) {
    for c in candidates.iter().take(6) {
        let (dr, dv) = miss(eph, body, free, c);
        println!(
            "  rms {:10.3} arcsec ({:?}, {} obs) miss {dr:.2e} au {dv:.2e} au/d  {:?}",
            c.rms_arcsec, c.scored_with, c.scored_observations, c.method
        );
    }
}

/// Groups of observations separated by more than 0.3 day.
fn nights(observations: &[AstrometricObservation]) -> Vec<Vec<AstrometricObservation>> {
    let mut out: Vec<Vec<AstrometricObservation>> = Vec::new();
    for o in observations {
        match out.last_mut() {
            Some(g) if o.time.tdb().days_since(g[g.len() - 1].time.tdb()) <= 0.3 => {
                g.push(o.clone())
            }
            _ => out.push(vec![o.clone()]),
        }
    }
    out
}

/// The first night and the next two that start at least 1.5 days after
/// the previous one: three early nights a few days apart.
fn three_early_nights(observations: &[AstrometricObservation]) -> Vec<AstrometricObservation> {
    let all = nights(observations);
    let mut chosen = vec![all[0].clone()];
    for night in &all[1..] {
        let previous = &chosen[chosen.len() - 1];
        if night[0]
            .time
            .tdb()
            .days_since(previous[previous.len() - 1].time.tdb())
            >= 1.5
        {
            chosen.push(night.clone());
        }
        if chosen.len() == 3 {
            break;
        }
    }
    chosen.concat()
}

fn mid_arc(observations: &[AstrometricObservation]) -> Epoch {
    let first = observations[0].time.tdb();
    let last = observations[observations.len() - 1].time.tdb();
    first.plus_days(0.5 * last.days_since(first))
}

fn from_whole_arc(name: &str, free: FreeParameters) {
    let eph = de421();
    let body = load(name);
    let candidates =
        initial_orbits(&eph, &body.noisy, &InitialOrbitSettings::default()).expect("candidates");
    println!("{name}, whole arc: {} candidates", candidates.len());
    report(&eph, &body, free, &candidates);
    let best = &candidates[0];
    let model = model_from_zero(&body, free);
    let problem = FitProblem {
        ephemeris: &eph,
        model: &model,
        observations: &body.noisy,
    };
    let fit = fit_orbit(&problem, best.epoch, &best.state, &fit_settings()).expect("fit runs");
    let reference = truth_at(&eph, &body, free, best.epoch);
    let distance = sigma_distance(&fit, &reference);
    println!(
        "  fit from the initial orbit: {:?}, {} iterations, rms {:.3}; from truth {:?}, {} iterations; \
         largest difference {distance:.2e} sigma",
        fit.termination, fit.iterations, fit.rms_arcsec, reference.termination, reference.iterations
    );
    assert_eq!(reference.termination, Termination::Converged);
    assert_eq!(fit.termination, Termination::Converged);
    assert!(distance < AGREEMENT_SIGMA, "{distance} sigma");
}

fn from_three_nights(name: &str, free: FreeParameters) {
    let eph = de421();
    let body = load(name);
    let seed = three_early_nights(&body.noisy);
    let seed_first = seed[0].time.tdb();
    let seed_last = seed[seed.len() - 1].time.tdb();
    let candidates =
        initial_orbits(&eph, &seed, &InitialOrbitSettings::default()).expect("candidates");
    println!(
        "{name}, {} observations over {:.2} days: {} candidates",
        seed.len(),
        seed_last.days_since(seed_first),
        candidates.len()
    );
    report(&eph, &body, free, &candidates);
    let best = &candidates[0];
    let model = model_from_zero(&body, free);
    let epoch = mid_arc(&body.noisy);
    let settings = ExtensionSettings {
        fit: fit_settings(),
        ..ExtensionSettings::default()
    };
    let (fit, steps) = fit_by_extension(
        &eph,
        &model,
        &body.noisy,
        seed_first,
        seed_last,
        epoch,
        best.epoch,
        &best.state,
        &settings,
    )
    .expect("extension runs");
    for s in &steps {
        println!(
            "  window {:.1} d, {} obs, nongrav {}: {:?} in {} iterations, rms {:.3}",
            s.last.days_since(s.first),
            s.observations,
            s.nongrav,
            s.termination,
            s.iterations,
            s.rms_arcsec
        );
    }
    let reference = truth_at(&eph, &body, free, epoch);
    let distance = sigma_distance(&fit, &reference);
    println!("  largest difference from the fit started at truth {distance:.2e} sigma");
    assert_eq!(reference.termination, Termination::Converged);
    assert_eq!(fit.termination, Termination::Converged);
    assert!(distance < AGREEMENT_SIGMA, "{distance} sigma");
}

#[test]
fn gravity_hyperbola_from_whole_arc() {
    from_whole_arc("hyperbolic_gravity", FreeParameters::NONE);
}

#[test]
fn gravity_hyperbola_from_three_nights() {
    from_three_nights("hyperbolic_gravity", FreeParameters::NONE);
}

#[test]
fn outgassing_hyperbola_from_whole_arc() {
    from_whole_arc(
        "hyperbolic_outgassing",
        FreeParameters::new(true, false, false),
    );
}

#[test]
fn outgassing_hyperbola_from_three_nights() {
    from_three_nights(
        "hyperbolic_outgassing",
        FreeParameters::new(true, false, false),
    );
}

#[test]
fn bound_comet_from_whole_arc() {
    from_whole_arc("bound_comet", FreeParameters::new(true, true, false));
}

#[test]
fn bound_comet_from_three_nights() {
    from_three_nights("bound_comet", FreeParameters::new(true, true, false));
}
