//! Time to evaluate one body's barycentric state from DE421.
//!
//! Run with `cargo bench --bench spk` after `bash tests/reference/fetch-de421.sh`.
//! Plain std::time::Instant over many evaluations; prints ns per body state.

use std::hint::black_box;
use std::time::Instant;

use perihelix::astro::ephemeris::{Body, Ephemeris};
use perihelix::astro::spk::SpkEphemeris;
use perihelix::astro::time::Epoch;

const EVALUATIONS: usize = 2_000_000;

fn main() {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/data/de421.bsp"
    );
    let start = Instant::now();
    let ephemeris = match SpkEphemeris::open(path) {
        Ok(e) => e,
        Err(err) => {
            eprintln!("{err}\nrun bash tests/reference/fetch-de421.sh");
            std::process::exit(1);
        }
    };
    println!(
        "open and decode de421.bsp: {:.1} ms",
        start.elapsed().as_secs_f64() * 1e3
    );
    let e: &dyn Ephemeris = &ephemeris;

    // Scattered: every call lands in a different record, cache misses
    // included. Stepping: 0.01 day apart, the way an integrator asks.
    let scattered =
        |i: usize| Epoch::from_tdb_days_since_j2000(-30_000.0 + (i % 40_000) as f64 * 1.237);
    let stepping = |i: usize| Epoch::from_tdb_days_since_j2000(-30_000.0 + i as f64 * 0.01);
    println!("scattered epochs:");
    run(e, &scattered);
    println!("stepping epochs:");
    run(e, &stepping);
}

fn run(e: &dyn Ephemeris, epoch: &dyn Fn(usize) -> Epoch) {
    let bodies = [
        Body::Sun,
        Body::Earth,
        Body::Moon,
        Body::Jupiter,
        Body::Neptune,
    ];
    for body in bodies {
        let t0 = Instant::now();
        let mut sum = 0.0;
        for i in 0..EVALUATIONS {
            if let Ok(s) = e.state(body, black_box(epoch(i))) {
                sum += s.position_au.x;
            }
        }
        let ns = t0.elapsed().as_secs_f64() * 1e9 / EVALUATIONS as f64;
        black_box(sum);
        println!("  {:<20} {ns:7.1} ns per state", body.name());
    }
    let t0 = Instant::now();
    let mut sum = 0.0;
    let n = EVALUATIONS / 4;
    for i in 0..n {
        let t = black_box(epoch(i));
        for body in Body::PERTURBERS {
            if let Ok(s) = e.state(body, t) {
                sum += s.position_au.x;
            }
        }
    }
    black_box(sum);
    let ns = t0.elapsed().as_secs_f64() * 1e9 / n as f64;
    println!("  all 9 perturbers     {ns:7.1} ns per epoch");
}
