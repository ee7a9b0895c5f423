//! Predictions beyond the arc on the synthetic outgassing body (truth from
//! rebound 5.2.2 IAS15 with DE421 planets through jplephem 2.24; see
//! tests/reference/README.md): the fit on DE421, a place 30 days after the
//! last observation from one of the fixture's stations, its uncertainty
//! ellipse by the linear map and by Monte Carlo, and the truth's place.

mod common;

use std::time::Instant;

use perihelix::astro::forces::FreeParameters;
use perihelix::astro::propagation::{PropagationSettings, Trajectory};
use perihelix::astro::time::TimeScales;
use perihelix::fit::lsq::{fit_orbit, FitProblem, FitSettings, Termination};
use perihelix::fit::observe::{self, ObserverAt};
use perihelix::fit::predict::{
    predict_places, EllipseMethod, EllipseSource, PlacePrediction, PredictSettings, PredictionPoint,
};

use common::{de421, load};

/// The chi^2 quantile with 2 degrees of freedom at probability 0.999:
/// -2 ln(0.001) = 13.8155 (chi^2 with 2 dof is exponential with mean 2;
/// exact, and Abramowitz & Stegun, Handbook of Mathematical Functions,
/// table 26.8, lists 13.8155).
const CHI2_2DOF_999: f64 = 13.8155;

/// The acceptance criterion for the two ellipse methods: semi-axes within
/// 10% (the project's requirement for Monte Carlo predictions).
const METHOD_AGREEMENT: f64 = 0.10;

/// Samples: a sample sigma from N draws has a relative standard error of
/// about 1/sqrt(2 N) (normal theory; memory), 3.2% at 500, so the 10%
/// criterion is three of them.
const SAMPLES: usize = 500;

/// Days after the last observation.
const BEYOND_DAYS: f64 = 30.0;

#[test]
fn ellipse_methods_agree_and_contain_the_truth() {
    let body = load("hyperbolic_outgassing");
    let eph = de421();
    let free = FreeParameters::new(true, false, false);
    let model = body.model(free);
    let mut settings = FitSettings::default();
    // The fixture's noise is independent per observation: the stated
    // sigmas are the right weights.
    settings.weights.night_inflation = false;
    let problem = FitProblem {
        ephemeris: &eph,
        model: &model,
        observations: &body.noisy,
    };
    let started = Instant::now();
    let fit = fit_orbit(&problem, body.epoch, &body.state, &settings).expect("fit runs");
    let fit_s = started.elapsed().as_secs_f64();
    assert_eq!(fit.termination, Termination::Converged);

    // 30 days after the last observation, from its station.
    let last = body
        .noisy
        .iter()
        .max_by(|a, b| {
            a.time
                .tdb()
                .tdb_days_since_j2000()
                .total_cmp(&b.time.tdb().tdb_days_since_j2000())
        })
        .expect("observations");
    let time = TimeScales::builtin()
        .resolve_tdb(last.time.tdb().plus_days(BEYOND_DAYS), None)
        .expect("time scales");
    let point = PredictionPoint {
        time,
        observer: last.observer,
    };

    let started = Instant::now();
    let linear = predict_places(
        &eph,
        &fit,
        std::slice::from_ref(&point),
        &PredictSettings::default(),
    )
    .expect("linear prediction");
    let linear_s = started.elapsed().as_secs_f64();
    let started = Instant::now();
    let mc_settings = PredictSettings {
        method: EllipseMethod::MonteCarlo {
            samples: SAMPLES,
            seed: 20_261_202,
        },
        ..PredictSettings::default()
    };
    let mc = predict_places(&eph, &fit, std::slice::from_ref(&point), &mc_settings)
        .expect("Monte Carlo");
    let mc_s = started.elapsed().as_secs_f64();
    let (l, m) = (&linear[0], &mc[0]);
    assert_eq!(l.ellipse_source, EllipseSource::Linear);
    let EllipseSource::MonteCarlo {
        mean_offset_arcsec, ..
    } = m.ellipse_source
    else {
        panic!("the Monte Carlo run says {:?}", m.ellipse_source);
    };

    // The truth's place through the same observation model, on the
    // truth's own trajectory.
    let truth_model = body.model(free);
    let at = ObserverAt::of(
        &perihelix::fit::observe::AstrometricObservation {
            time,
            ..last.clone()
        },
        &eph,
    )
    .expect("observer");
    let truth_trajectory = Trajectory::integrate(
        &eph,
        &truth_model,
        body.epoch,
        &body.state,
        body.epoch,
        time.tdb(),
        &PropagationSettings {
            partials: false,
            ..PropagationSettings::default()
        },
    )
    .expect("truth trajectory");
    let truth = observe::predict(&truth_trajectory, &eph, &at, false).expect("truth place");

    let report = |name: &str, p: &PlacePrediction| {
        let offset = p.offset_arcsec(truth.ra_rad, truth.dec_rad);
        let chi2 = p.ellipse.mahalanobis2(offset).expect("invertible ellipse");
        println!(
            "{name}: {:.4} x {:.4} arcsec at PA {:.2} deg; truth offset ({:.4}, {:.4}) arcsec, chi2 {chi2:.3}",
            p.ellipse.semi_major_arcsec,
            p.ellipse.semi_minor_arcsec,
            p.ellipse.position_angle_deg,
            offset.x,
            offset.y,
        );
        chi2
    };
    let chi2_linear = report("linear", l);
    let chi2_mc = report("Monte Carlo", m);
    let major = m.ellipse.semi_major_arcsec / l.ellipse.semi_major_arcsec;
    let minor = m.ellipse.semi_minor_arcsec / l.ellipse.semi_minor_arcsec;
    println!(
        "MC / linear: major {major:.4}, minor {minor:.4}; MC mean offset ({:.4}, {:.4}) arcsec; \
         delta {:.4} au, r {:.4} au, elongation {:.2} deg, phase {:.2} deg; \
         fit {fit_s:.1} s, linear {linear_s:.2} s, Monte Carlo ({SAMPLES}) {mc_s:.1} s",
        mean_offset_arcsec.x,
        mean_offset_arcsec.y,
        l.delta_au,
        l.r_au,
        l.elongation_rad.to_degrees(),
        l.phase_rad.to_degrees(),
    );

    // The same nominal place whichever method makes the ellipse.
    assert_eq!((l.ra_rad, l.dec_rad), (m.ra_rad, m.dec_rad));
    assert!(
        (major - 1.0).abs() < METHOD_AGREEMENT,
        "major ratio {major}"
    );
    assert!(
        (minor - 1.0).abs() < METHOD_AGREEMENT,
        "minor ratio {minor}"
    );
    assert!(chi2_linear < CHI2_2DOF_999, "linear chi2 {chi2_linear}");
    assert!(chi2_mc < CHI2_2DOF_999, "Monte Carlo chi2 {chi2_mc}");
    // The ellipse beyond the arc is larger than the places on the arc are
    // known: the last observation's own prediction is the yardstick.
    let on_arc = predict_places(
        &eph,
        &fit,
        &[PredictionPoint {
            time: last.time,
            observer: last.observer,
        }],
        &PredictSettings::default(),
    )
    .expect("prediction at the last observation");
    assert!(
        l.ellipse.semi_major_arcsec > on_arc[0].ellipse.semi_major_arcsec,
        "{} vs {} on the arc",
        l.ellipse.semi_major_arcsec,
        on_arc[0].ellipse.semi_major_arcsec
    );
}
