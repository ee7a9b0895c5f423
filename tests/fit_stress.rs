//! A small sample of the stress harness (tests/bench/stress.rs): fresh
//! noise draws of each synthetic body through the daemon's own job, on
//! DE421 with the per-night inflation off (the configuration of the report
//! that prompted the harness) and on the embedded ephemeris with it on.
//! Every gravity-only and truth-structure fit must converge and no verdict
//! may contradict itself.

mod common;

use perihelix::astro::embedded::EmbeddedEphemeris;
use perihelix::astro::ephemeris::Ephemeris;

use common::stress::{stress_draw, stress_settings};
use common::{de421, load};

const BODIES: [&str; 3] = ["hyperbolic_outgassing", "hyperbolic_gravity", "bound_comet"];

/// Seeds of this test, apart from the bench's (900000..) and the others'.
const FIRST_SEED: u64 = 880_000;

fn sample(ephemeris: &dyn Ephemeris, night_inflation: bool, draws: u64) {
    let settings = stress_settings(night_inflation);
    for (b, name) in BODIES.iter().enumerate() {
        let body = load(name);
        for i in 0..draws {
            let seed = FIRST_SEED + 1000 * b as u64 + i;
            let d = stress_draw(&body, ephemeris, seed, &settings);
            println!(
                "{name} seed {seed}: recommended {:?}, failures {:?}, {:.1} s",
                d.recommended, d.failure_texts, d.seconds
            );
            assert_eq!(d.no_solution, None, "{name} seed {seed}");
            assert!(
                !d.gravity_failed,
                "{name} seed {seed}: {:?}",
                d.failure_texts
            );
            assert!(!d.truth_failed, "{name} seed {seed}: {:?}", d.failure_texts);
            assert!(
                d.contradictions.is_empty(),
                "{name} seed {seed}: {:?}",
                d.contradictions
            );
        }
    }
}

#[test]
fn de421_without_night_inflation() {
    sample(&de421(), false, 2);
}

#[test]
fn embedded_with_night_inflation() {
    sample(&EmbeddedEphemeris::full_span(), true, 1);
}
