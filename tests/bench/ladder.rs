//! The whole model ladder (gravity and eight non-gravitational models, two
//! passes) on 1,000 observations over a one-year arc; one gravity-only fit
//! on the same data; and the ladder on the embedded ephemeris.
//!
//! The observations are made here, through the crate's own observation
//! model, from the invented bound comet's truth
//! (tests/reference/fixtures/synthetic/bound_comet/truth.json: state, A1
//! and A2 under the water-ice law) integrated on DE421. Four invented
//! stations of config/stations.toml observe it on nights when the Sun is
//! 12 degrees below their horizon, the comet more than 20 degrees above
//! it, and the Moon is not near full; clear nights are drawn at random.
//! Each tracklet is four exposures 15 minutes apart; 250 tracklets are
//! kept (the first and last visible ones among them, so that the arc is
//! the whole year). Gaussian noise of the stated sizes (0.35-0.5 arcsec)
//! comes from a fixed seed. The fits start from the truth state moved by
//! about 400 km and 0.2 m/s, with the A_i at zero: the ladder is the
//! subject, not the initial orbit.
//!
//! Run: `cargo bench --bench ladder` (needs
//! `bash tests/reference/fetch-de421.sh` first).

#[path = "../common/mod.rs"]
mod common;

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, SamplingMode};
use nalgebra::Vector3;

use perihelix::astro::embedded::EmbeddedEphemeris;
use perihelix::astro::ephemeris::{Body, Ephemeris, StateVector};
use perihelix::astro::forces::FreeParameters;
use perihelix::astro::observer::{geocentric_state, GeodeticSite, ObserverPosition};
use perihelix::astro::propagation::{PropagationSettings, Trajectory};
use perihelix::astro::time::{Epoch, ScaledInstant, TimeScales, UtcTime};
use perihelix::fit::ladder::{fit_ladder, Ladder, LadderSettings};
use perihelix::fit::lsq::{fit_orbit_from, FitProblem, FitSettings};
use perihelix::fit::observe::{predict, AstrometricObservation, ObserverAt, ARCSEC_PER_RAD};

use common::{de421, load, stations};
use perihelix::fit::sampling::Gaussian;

const OBSERVATIONS: usize = 1000;
const PER_TRACKLET: usize = 4;
const TRACKLET_SPACING_S: f64 = 900.0;
/// First night of the arc: 2026-10-05 UTC; the arc runs 365 nights.
const FIRST_NIGHT: (i64, u32, u32) = (2026, 10, 5);
const NIGHTS: i64 = 365;
const SUN_BELOW_DEG: f64 = -12.0;
const BODY_ABOVE_DEG: f64 = 20.0;
/// Sun-Moon elongation above which a night is bright time.
const BRIGHT_MOON_DEG: f64 = 150.0;
/// Stations and their stated (and actual) per-coordinate noise, arcsec.
const STATIONS: [(&str, f64); 4] = [("ZQA", 0.35), ("ZQB", 0.4), ("ZQC", 0.5), ("ZQD", 0.45)];
const NOISE_SEED: u64 = 20_261_005;

/// The data set and what the fits start from.
struct Scenario {
    observations: Vec<AstrometricObservation>,
    epoch: Epoch,
    start: StateVector,
    first: Epoch,
    last: Epoch,
}

fn altitude_deg(zenith: &Vector3<f64>, direction: &Vector3<f64>) -> f64 {
    (zenith.dot(direction) / (zenith.norm() * direction.norm()))
        .asin()
        .to_degrees()
}

/// One candidate tracklet: station index and its first instant.
struct Candidate {
    station: usize,
    time: ScaledInstant,
}

fn scenario(eph: &dyn Ephemeris) -> Scenario {
    let body = load("bound_comet");
    let truth_model = body.model(FreeParameters::new(true, true, false));
    let scales = TimeScales::builtin();
    let list = stations();
    let sites: Vec<GeodeticSite> = STATIONS
        .iter()
        .map(|(code, _)| {
            let s = list.get(code).expect("station in config/stations.toml");
            GeodeticSite::new(s.longitude_deg, s.latitude_deg, s.height_m).expect("site")
        })
        .collect();
    let (y, m, d) = FIRST_NIGHT;
    let first_mjd = UtcTime::from_calendar(y, m, d, 0, 0, 0.0)
        .expect("date")
        .mjd();
    let instant = |mjd: i64, seconds: f64| -> ScaledInstant {
        let (mjd, seconds) = (
            mjd + seconds.div_euclid(86_400.0) as i64,
            seconds.rem_euclid(86_400.0),
        );
        let utc = UtcTime::from_mjd_seconds(mjd, seconds).expect("UTC");
        scales.resolve_utc(&utc, None).expect("time scales")
    };
    let arc_start = instant(first_mjd - 2, 0.0).tdb();
    let arc_end = instant(first_mjd + NIGHTS + 2, 0.0).tdb();
    let truth = Trajectory::integrate(
        eph,
        &truth_model,
        body.epoch,
        &body.state,
        arc_start,
        arc_end,
        &PropagationSettings {
            partials: false,
            ..PropagationSettings::default()
        },
    )
    .expect("truth integrates");

    // Nights: the first dark slot with the comet high enough, per station.
    let mut weather = Gaussian::new(NOISE_SEED ^ 0x5eed);
    let mut candidates = Vec::new();
    for night in 0..NIGHTS {
        let mjd = first_mjd + night;
        let noon = instant(mjd, 43_200.0).tdb();
        let sun = eph.state(Body::Sun, noon).unwrap().position_au;
        let earth = eph.state(Body::Earth, noon).unwrap().position_au;
        let moon = eph.state(Body::Moon, noon).unwrap().position_au;
        let elongation = (sun - earth).angle(&(moon - earth)).to_degrees();
        if elongation > BRIGHT_MOON_DEG {
            continue;
        }
        for (station, site) in sites.iter().enumerate() {
            // Half the nights clear (the sign of a standard normal deviate).
            if weather.next_normal() < 0.0 {
                continue;
            }
            // Local midnight, then half-hour slots from 18 h to 6 h local.
            let midnight_s = 86_400.0 - site.east_longitude_deg() / 15.0 * 3600.0;
            let position = ObserverPosition::Geodetic(*site);
            for slot in -12..=12 {
                let t = instant(mjd, midnight_s + slot as f64 * 1800.0);
                let zenith = geocentric_state(&position, &t).position_km;
                let at = ObserverAt::of(&shell(t, position, STATIONS[station]), eph).unwrap();
                let sun = eph.state(Body::Sun, t.tdb()).unwrap().position_au;
                let comet = truth.state(t.tdb()).unwrap().position_au + sun;
                let sun_alt = altitude_deg(&zenith, &(sun - at.state.position_au));
                let body_alt = altitude_deg(&zenith, &(comet - at.state.position_au));
                if sun_alt < SUN_BELOW_DEG && body_alt > BODY_ABOVE_DEG {
                    candidates.push(Candidate { station, time: t });
                    break;
                }
            }
        }
    }
    assert!(
        candidates.len() * PER_TRACKLET >= OBSERVATIONS,
        "{} visible tracklets",
        candidates.len()
    );
    // Keep the first and the last, and a seeded choice of the rest.
    let wanted = OBSERVATIONS / PER_TRACKLET;
    let mut order: Vec<(f64, usize)> = (1..candidates.len() - 1)
        .map(|i| (weather.next_normal(), i))
        .collect();
    order.sort_by(|a, b| a.0.total_cmp(&b.0));
    let mut kept: Vec<usize> = vec![0, candidates.len() - 1];
    kept.extend(order.iter().take(wanted - 2).map(|(_, i)| *i));
    kept.sort_unstable();

    let mut noise = Gaussian::new(NOISE_SEED);
    let mut observations = Vec::with_capacity(OBSERVATIONS);
    for c in kept.iter().map(|i| &candidates[*i]) {
        let utc = c.time.utc();
        for k in 0..PER_TRACKLET {
            let t = instant(
                utc.mjd(),
                utc.seconds_of_day() + k as f64 * TRACKLET_SPACING_S,
            );
            let mut o = shell(
                t,
                ObserverPosition::Geodetic(sites[c.station]),
                STATIONS[c.station],
            );
            let at = ObserverAt::of(&o, eph).expect("observer");
            let p = predict(&truth, eph, &at, false).expect("prediction");
            let sigma = STATIONS[c.station].1 / ARCSEC_PER_RAD;
            o.ra_rad = p.ra_rad + noise.next_normal() * sigma / p.dec_rad.cos();
            o.dec_rad = p.dec_rad + noise.next_normal() * sigma;
            observations.push(o);
        }
    }
    let first = observations[0].time.tdb();
    let last = observations[observations.len() - 1].time.tdb();
    println!(
        "{} observations in {} tracklets over {:.1} days ({} visible tracklets to choose from)",
        observations.len(),
        kept.len(),
        last.days_since(first),
        candidates.len()
    );
    let start = StateVector::new(
        body.state.position_au + Vector3::new(2.0e-6, -1.5e-6, 1.0e-6),
        body.state.velocity_au_per_day + Vector3::new(1.0e-7, 5.0e-8, -8.0e-8),
    );
    Scenario {
        observations,
        epoch: body.epoch,
        start,
        first,
        last,
    }
}

/// An observation of the place yet to be filled in.
fn shell(
    time: ScaledInstant,
    observer: ObserverPosition,
    (code, sigma): (&str, f64),
) -> AstrometricObservation {
    AstrometricObservation {
        time,
        observer,
        ra_rad: 0.0,
        dec_rad: 0.0,
        sigma_ra_arcsec: Some(sigma),
        sigma_dec_arcsec: Some(sigma),
        correlation: 0.0,
        sigma_time_s: None,
        station: code.to_string(),
    }
}

fn ladder(eph: &dyn Ephemeris, s: &Scenario) -> Ladder {
    let gravity = perihelix::astro::forces::ForceModel::gravity();
    fit_ladder(
        eph,
        &gravity,
        &s.observations,
        s.epoch,
        &s.start,
        &LadderSettings::default(),
    )
    .expect("ladder runs")
}

fn show(label: &str, l: &Ladder) {
    println!("{label}:");
    for m in &l.models {
        let f = m.fit.as_ref().ok();
        println!(
            "  {:26} converged {:5} chi2 {:9.2} nrms {:.3} iterations {:2} passes {} used {:4} bic {:9.2}{}",
            m.name(),
            m.converged(),
            f.map_or(f64::NAN, |f| f.chi2),
            f.map_or(f64::NAN, |f| f.normalised_rms),
            f.map_or(0, |f| f.iterations),
            f.map_or(0, |f| f.outlier_passes),
            f.map_or(0, |f| f.used_count()),
            m.bic.unwrap_or(f64::NAN),
            if m.recommended { "  <- recommended" } else { "" }
        );
    }
    println!("  non-gravitational significance {:?}", l.ng_significance);
}

fn benches(c: &mut Criterion) {
    let de421 = de421();
    let s = scenario(&de421);
    show("ladder on DE421", &ladder(&de421, &s));

    let mut g = c.benchmark_group("ladder");
    // Each run takes seconds: one iteration per sample.
    g.sample_size(10);
    g.sampling_mode(SamplingMode::Flat);
    g.warm_up_time(Duration::from_secs(1));
    g.measurement_time(Duration::from_secs(30));
    g.bench_function("whole ladder, 9 models, 1000 obs, 1 yr, de421", |b| {
        b.iter(|| black_box(ladder(&de421, &s)))
    });

    let gravity = perihelix::astro::forces::ForceModel::gravity();
    let all = vec![true; s.observations.len()];
    let problem = FitProblem {
        ephemeris: &de421,
        model: &gravity,
        observations: &s.observations,
    };
    let fit = fit_orbit_from(&problem, s.epoch, &s.start, &FitSettings::default(), &all)
        .expect("gravity fit");
    println!(
        "gravity-only fit: {:?}, {} iterations, {} outlier passes, nrms {:.3}",
        fit.termination, fit.iterations, fit.outlier_passes, fit.normalised_rms
    );
    g.bench_function("gravity-only fit_orbit_from, 1000 obs, 1 yr, de421", |b| {
        b.iter(|| {
            black_box(
                fit_orbit_from(&problem, s.epoch, &s.start, &FitSettings::default(), &all)
                    .expect("gravity fit"),
            )
        })
    });

    // The embedded table fills its segments on first use: built and warmed
    // by one whole ladder outside the timed loop, so the figure is the
    // fitting alone.
    let embedded =
        EmbeddedEphemeris::new(s.first.plus_days(-5.0), s.last.plus_days(5.0)).expect("span");
    show("ladder on the embedded ephemeris", &ladder(&embedded, &s));
    g.bench_function(
        "whole ladder, 9 models, 1000 obs, 1 yr, embedded (warm)",
        |b| b.iter(|| black_box(ladder(&embedded, &s))),
    );
    g.finish();
}

criterion_group!(group, benches);
criterion_main!(group);
