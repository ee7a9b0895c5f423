//! The planner decides (issue 12, point 5 and its third acceptance
//! criterion): starting from the first 60 days of the outgassing
//! fixture, one night of new observations at the planner's top-ranked
//! night must sharpen the choice between the recommended model and its
//! strongest rival by more than the same night's worth at its
//! lowest-ranked night, in at least 80% of 20 noise draws.
//!
//! Each draw: a fresh noise realisation of the fixture's first 60 days
//! (`Synthetic::realisation`), fitted from nothing as the daemon's job
//! fits it ([`perihelix::solve::solve`] with the stress harness's
//! settings: the default ladder, per-night inflation on as configured by
//! default, no distant 1/a); the plan of the following 60 days for the
//! fixture's four stations, made from the solution's document as the
//! command, the API and the daemon make it (`plan_stored`: every rival
//! weighed, docs/science/planning.md); then one tracklet (4 observations 20 minutes
//! apart around the night's best time, at that station's astrometric
//! sigma) made through the crate's own observation model
//! ([`perihelix::fit::observe::predict`]) from the fixture's truth
//! (truth state and truth force model integrated with
//! [`perihelix::astro::propagation::Trajectory`], the pattern of
//! tests/common/comet.rs), added once at the top night and once at the
//! bottom night, each refitted from nothing.
//!
//! The measure of "sharper", as the issue states it, for the recommended
//! model and the plan's heaviest rival: when the pair is
//! gravity alone against non-gravitational terms, the ladder's
//! non-gravitational significance (sigma); when it is one law against the
//! other or a term more or fewer, the law (or term) discrimination
//! |BIC(rival) - BIC(model)|. Both are printed for every draw.

mod common;

use std::collections::BTreeMap;

use perihelix::astro::ephemeris::Ephemeris;
use perihelix::astro::propagation::{PropagationSettings, Trajectory};
use perihelix::astro::time::{Epoch, TimeScales, UtcTime};
use perihelix::config::StationList;
use perihelix::fit::ladder::Ladder;
use perihelix::fit::observe::{predict, AstrometricObservation, ObserverAt, ARCSEC_PER_RAD};
use perihelix::fit::sampling::Gaussian;
use perihelix::solve::document::SolutionDocument;
use perihelix::solve::input::station_position;
use perihelix::solve::plan::{plan_stored, PlanNight, PlanStation};
use perihelix::solve::{solve, Solution, SolveSettings};

use common::stress::stress_settings;
use common::{de421, load, stations, Synthetic};

/// Noise draws: the number (issue 12, acceptance, third bullet).
const DRAWS: u64 = 20;
/// The top night must win in at least this share of the draws (issue 12,
/// acceptance, third bullet: "in at least 80% of 20 noise draws").
const WIN_SHARE: f64 = 0.8;
/// Seeds of this test: 610000..610019 for the fixture's noise, with the
/// added night's noise from 611000 + the draw; apart from fit_stress
/// (880000..), fit_calibration (50000..), fit_synthetic (1000..), the
/// benches (700000.., 900000.., 70000, 20261005, 20261101) and the
/// invented comets (20260917, 20261202).
const FIRST_SEED: u64 = 610_000;
const NIGHT_SEED_OFFSET: u64 = 1_000;
/// The arc the plan starts from: the fixture's first 60 days (issue 12).
const ARC_DAYS: f64 = 60.0;
/// The window planned over: the 60 days after the arc.
const WINDOW_DAYS: f64 = 60.0;
/// One night: a tracklet of this many observations, this far apart,
/// centred on the plan's best time (the planner's own tracklet size,
/// `perihelix::solve::plan::TRACKLET_OBSERVATIONS`).
const NIGHT_OBSERVATIONS: usize = perihelix::solve::plan::TRACKLET_OBSERVATIONS;
const SPACING_MINUTES: f64 = 20.0;
/// Tighter than the fits' 1e-9 so that the truth is not the limit (as in
/// `Synthetic::truth_state_at` and tests/common/comet.rs).
const TRUTH_TOLERANCE: f64 = 1e-11;

/// The fixture's truth as one trajectory over `[start, end]`: its state
/// at its epoch under its own force model (the truth's law, its non-zero
/// A_i).
fn truth_trajectory(
    body: &Synthetic,
    ephemeris: &dyn Ephemeris,
    start: Epoch,
    end: Epoch,
) -> Trajectory {
    let settings = PropagationSettings {
        partials: false,
        tolerance: TRUTH_TOLERANCE,
        ..PropagationSettings::default()
    };
    Trajectory::integrate(
        ephemeris,
        &body.model(body.truth_free()),
        body.epoch,
        &body.state,
        if start < body.epoch {
            start
        } else {
            body.epoch
        },
        if end > body.epoch { end } else { body.epoch },
        &settings,
    )
    .expect("the truth integrates")
}

/// The truth's place for `observation`'s time and observer, by the
/// crate's own observation model (light time, topocentric).
fn truth_place(
    ephemeris: &dyn Ephemeris,
    truth: &Trajectory,
    observation: &AstrometricObservation,
) -> (f64, f64) {
    let at = ObserverAt::of(observation, ephemeris).expect("the observer's place");
    let p = predict(truth, ephemeris, &at, false).expect("a computed place");
    (p.ra_rad, p.dec_rad)
}

/// Each station's astrometric sigma: the median of what the fixture's
/// observations state there (as the daemon's plan takes the median stated
/// sigma of each observing station).
fn station_sigmas(body: &Synthetic) -> BTreeMap<String, f64> {
    let mut by_station: BTreeMap<String, Vec<f64>> = BTreeMap::new();
    for o in &body.clean {
        let s = 0.5 * (o.sigma_ra_arcsec.unwrap() + o.sigma_dec_arcsec.unwrap());
        by_station.entry(o.station.clone()).or_default().push(s);
    }
    by_station
        .into_iter()
        .map(|(code, mut s)| {
            s.sort_by(f64::total_cmp);
            (code, s[s.len() / 2])
        })
        .collect()
}

/// One night of synthetic observations at `night`'s station around its
/// best time, from the truth, with seeded noise of the station's sigma.
fn night_observations(
    ephemeris: &dyn Ephemeris,
    scales: &TimeScales,
    truth: &Trajectory,
    list: &StationList,
    station: &PlanStation,
    night: &PlanNight,
    seed: u64,
) -> Vec<AstrometricObservation> {
    let best = scales
        .resolve_utc(
            &UtcTime::parse_iso8601(&night.utc).expect("the plan's time"),
            None,
        )
        .expect("time scales")
        .tdb();
    let observer = station_position(list, &station.code).expect("a station place");
    let sigma = station.sigma_arcsec;
    let mut rng = Gaussian::new(seed);
    (0..NIGHT_OBSERVATIONS)
        .map(|i| {
            let offset_minutes =
                (i as f64 - 0.5 * (NIGHT_OBSERVATIONS - 1) as f64) * SPACING_MINUTES;
            let time = scales
                .resolve_tdb(best.plus_days(offset_minutes / 1440.0), None)
                .expect("time scales");
            let mut o = AstrometricObservation {
                time,
                observer,
                ra_rad: 0.0,
                dec_rad: 0.0,
                sigma_ra_arcsec: Some(sigma),
                sigma_dec_arcsec: Some(sigma),
                correlation: 0.0,
                sigma_time_s: None,
                station: station.code.clone(),
            };
            let (ra, dec) = truth_place(ephemeris, truth, &o);
            let noise = sigma / ARCSEC_PER_RAD;
            o.ra_rad =
                (ra + rng.next_normal() * noise / dec.cos()).rem_euclid(std::f64::consts::TAU);
            o.dec_rad = dec + rng.next_normal() * noise;
            o
        })
        .collect()
}

/// How sharply a ladder tells `model` from `rival`: the non-gravitational
/// significance when one of them is gravity alone, else |dBIC|; NaN when
/// the ladder gives no figure (a model that did not converge, an unknown
/// significance).
#[derive(Debug, Clone, Copy)]
struct Sharpness {
    ng_sigma: f64,
    bic_gap: f64,
}

fn sharpness(ladder: &Ladder, model: &str, rival: &str) -> Sharpness {
    let bic = |name: &str| {
        ladder
            .models
            .iter()
            .find(|m| m.name() == name && m.converged())
            .and_then(|m| m.bic)
            .unwrap_or(f64::NAN)
    };
    Sharpness {
        ng_sigma: ladder.ng_significance.sigma().unwrap_or(f64::NAN),
        bic_gap: (bic(rival) - bic(model)).abs(),
    }
}

impl Sharpness {
    fn measure(&self, against_gravity: bool) -> f64 {
        if against_gravity {
            self.ng_sigma
        } else {
            self.bic_gap
        }
    }
}

fn fit(
    ephemeris: &dyn Ephemeris,
    name: &str,
    observations: Vec<AstrometricObservation>,
    settings: &SolveSettings,
) -> Solution {
    solve(ephemeris, name, observations, settings).expect("the job fits")
}

/// What one draw gave.
struct Draw {
    seed: u64,
    model: String,
    rival: String,
    against_gravity: bool,
    top: PlanNight,
    bottom: PlanNight,
    before: Sharpness,
    after_top: Sharpness,
    after_bottom: Sharpness,
    recommended_after: (Option<String>, Option<String>),
    seconds: f64,
}

impl Draw {
    fn gain(&self, after: &Sharpness) -> f64 {
        after.measure(self.against_gravity) - self.before.measure(self.against_gravity)
    }

    /// The top night sharpened the decision by more (a NaN loses).
    fn top_wins(&self) -> bool {
        self.gain(&self.after_top) > self.gain(&self.after_bottom)
    }
}

#[allow(clippy::too_many_arguments)]
fn draw(
    body: &Synthetic,
    ephemeris: &dyn Ephemeris,
    scales: &TimeScales,
    list: &StationList,
    plan_stations: &[PlanStation],
    truth: &Trajectory,
    arc_start: Epoch,
    settings: &SolveSettings,
    seed: u64,
) -> Draw {
    let started = std::time::Instant::now();
    let arc: Vec<AstrometricObservation> = body
        .realisation(seed)
        .into_iter()
        .filter(|o| o.time.tdb().days_since(arc_start) <= ARC_DAYS)
        .collect();
    let before = fit(ephemeris, &body.name, arc.clone(), settings);
    let recommended = before
        .ladder
        .recommended_model()
        .expect("a recommended model on 60 days");
    let model = recommended.name();
    let from = scales
        .tdb_to_utc(arc_start.plus_days(ARC_DAYS))
        .expect("a UTC time");
    let to = scales
        .tdb_to_utc(arc_start.plus_days(ARC_DAYS + WINDOW_DAYS))
        .expect("a UTC time");
    // The plan as the command, the API and the daemon make it: from the
    // solution's document, for the fixture's stations.
    let document = serde_json::to_value(SolutionDocument::of_solution(
        &before,
        "de421".into(),
        None,
        None,
    ))
    .expect("the document as JSON");
    let codes: Vec<String> = plan_stations.iter().map(|s| s.code.clone()).collect();
    let plan = plan_stored(
        ephemeris,
        scales,
        settings,
        list,
        Some(&document),
        &codes,
        None,
        &from,
        &to,
    )
    .expect("a plan");
    assert!(
        plan.nights.len() >= 2,
        "seed {seed}: {} observable nights",
        plan.nights.len()
    );
    let rival = plan.rival.clone();
    let gravity_name = before.ladder.models[0].name();
    assert_eq!(before.ladder.models[0].free.count(), 0);
    let against_gravity = model == gravity_name || rival == gravity_name;
    let top = plan.nights[0].clone();
    let bottom = plan.nights[plan.nights.len() - 1].clone();
    let station_of = |n: &PlanNight| {
        plan_stations
            .iter()
            .find(|s| s.code == n.station)
            .expect("a planned station")
    };
    // The same noise for both nights (common random numbers): the two
    // additions differ only in where and when they were made.
    let night_seed = seed + NIGHT_SEED_OFFSET;
    let with_night = |n: &PlanNight| {
        let mut observations = arc.clone();
        observations.extend(night_observations(
            ephemeris,
            scales,
            truth,
            list,
            station_of(n),
            n,
            night_seed,
        ));
        fit(ephemeris, &body.name, observations, settings)
    };
    let after_top = with_night(&top);
    let after_bottom = with_night(&bottom);
    let recommended_name = |s: &Solution| s.ladder.recommended_model().map(|m| m.name());
    Draw {
        seed,
        before: sharpness(&before.ladder, &model, &rival),
        after_top: sharpness(&after_top.ladder, &model, &rival),
        after_bottom: sharpness(&after_bottom.ladder, &model, &rival),
        recommended_after: (
            recommended_name(&after_top),
            recommended_name(&after_bottom),
        ),
        model,
        rival,
        against_gravity,
        top,
        bottom,
        seconds: started.elapsed().as_secs_f64(),
    }
}

#[test]
fn the_top_ranked_night_settles_more_than_the_lowest() {
    let eph = de421();
    let scales = TimeScales::builtin();
    let list = stations();
    let body = load("hyperbolic_outgassing");
    let settings = stress_settings(true);

    let arc_start = body
        .clean
        .iter()
        .map(|o| o.time.tdb())
        .reduce(|a, b| if b < a { b } else { a })
        .expect("observations");
    let end = arc_start.plus_days(ARC_DAYS + WINDOW_DAYS + 2.0);
    let truth = truth_trajectory(&body, &eph, arc_start.plus_days(-2.0), end);

    // The crate's model of the truth against the fixture's own clean
    // places (rebound and pyerfa, tests/reference/README.md) over the
    // first 60 days: the added nights come from the same truth as the arc.
    let worst_arcsec = body
        .clean
        .iter()
        .filter(|o| o.time.tdb().days_since(arc_start) <= ARC_DAYS)
        .map(|o| {
            let (ra, dec) = truth_place(&eph, &truth, o);
            let dra = (ra - o.ra_rad + std::f64::consts::PI).rem_euclid(std::f64::consts::TAU)
                - std::f64::consts::PI;
            (dra * dec.cos()).hypot(dec - o.dec_rad) * ARCSEC_PER_RAD
        })
        .fold(0.0, f64::max);
    println!(
        "truth trajectory against the fixture's clean places: worst {worst_arcsec:.2e} arcsec"
    );
    // A chosen tolerance (1 mas), far below the stations' 0.4-0.8 arcsec:
    // the added nights and the arc share one truth.
    assert!(
        worst_arcsec < 1e-3,
        "the crate's truth misses the fixture's clean places by {worst_arcsec} arcsec"
    );

    let sigmas = station_sigmas(&body);
    let plan_stations: Vec<PlanStation> = sigmas
        .iter()
        .map(|(code, sigma)| PlanStation {
            code: code.clone(),
            position: station_position(&list, code).expect("a fixture station"),
            sigma_arcsec: *sigma,
        })
        .collect();
    println!("stations planned for (median stated sigma, arcsec): {sigmas:?}");

    let started = std::time::Instant::now();
    let mut draws = Vec::new();
    for i in 0..DRAWS {
        let d = draw(
            &body,
            &eph,
            scales,
            &list,
            &plan_stations,
            &truth,
            arc_start,
            &settings,
            FIRST_SEED + i,
        );
        let unit = if d.against_gravity { "sigma" } else { "dBIC" };
        println!(
            "seed {} {} vs {} ({unit}): before ng {:.2} sigma |dBIC| {:.2}\n  \
             top    {} {} rank {:.2}, D {:.2} sigma ({:.3}\"): ng {:.2} |dBIC| {:.2} gain {:+.2} -> {:?}\n  \
             bottom {} {} rank {:.2}, D {:.2} sigma ({:.3}\"): ng {:.2} |dBIC| {:.2} gain {:+.2} -> {:?}\n  \
             top wins: {} ({:.1} s)",
            d.seed,
            d.model,
            d.rival,
            d.before.ng_sigma,
            d.before.bic_gap,
            d.top.station,
            d.top.utc,
            d.top.expected_sigma,
            d.top.separation_sigma,
            d.top.separation_arcsec,
            d.after_top.ng_sigma,
            d.after_top.bic_gap,
            d.gain(&d.after_top),
            d.recommended_after.0,
            d.bottom.station,
            d.bottom.utc,
            d.bottom.expected_sigma,
            d.bottom.separation_sigma,
            d.bottom.separation_arcsec,
            d.after_bottom.ng_sigma,
            d.after_bottom.bic_gap,
            d.gain(&d.after_bottom),
            d.recommended_after.1,
            d.top_wins(),
            d.seconds
        );
        draws.push(d);
    }
    let wins = draws.iter().filter(|d| d.top_wins()).count();
    let needed = (WIN_SHARE * DRAWS as f64).ceil() as usize;
    println!(
        "top-ranked night sharper in {wins} of {DRAWS} draws (needed {needed}); {:.0} s",
        started.elapsed().as_secs_f64()
    );
    assert!(
        wins >= needed,
        "the top-ranked night sharpened the decision by more in only {wins} of {DRAWS} draws \
         (issue 12 asks for {needed})"
    );
}
