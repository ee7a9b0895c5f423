//! Unattended fits under stress: fresh noise draws of the three synthetic
//! bodies through the daemon's own job (initial orbit from nothing, the
//! whole default ladder, no distant 1/a), on DE421 and on the embedded
//! ephemeris, with the per-night weight inflation on and off. Counts, per
//! model and termination reason, the fits that did not converge, and every
//! verdict whose numbers contradict each other; writes its section of
//! docs/accuracy.md.
//!
//! Run: `cargo bench --bench stress` (after
//! `bash tests/reference/fetch-de421.sh`). Draws per body and
//! configuration: `PERIHELIX_STRESS_DRAWS` (default 200); threads:
//! `PERIHELIX_STRESS_THREADS` (default 2); output file:
//! `PERIHELIX_STRESS_OUT` (default docs/accuracy.md). The same seeds serve
//! every configuration, so configurations compare on identical noise.

#[path = "../common/mod.rs"]
mod common;

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::Instant;

use perihelix::astro::embedded::EmbeddedEphemeris;
use perihelix::astro::ephemeris::Ephemeris;

use common::stress::{stress_draw, stress_settings, DrawOutcome, StressConfig};
use common::{de421, load, Synthetic};

const BODIES: [&str; 3] = ["hyperbolic_outgassing", "hyperbolic_gravity", "bound_comet"];

/// Seeds of this binary, apart from the tests' and the other benches'.
const FIRST_SEED: u64 = 900_000;

const CONFIGS: [StressConfig; 4] = [
    StressConfig {
        ephemeris: "DE421",
        night_inflation: false,
    },
    StressConfig {
        ephemeris: "DE421",
        night_inflation: true,
    },
    StressConfig {
        ephemeris: "embedded",
        night_inflation: false,
    },
    StressConfig {
        ephemeris: "embedded",
        night_inflation: true,
    },
];

/// Every draw of one body in one configuration, over `threads` threads.
fn run(
    body: &Synthetic,
    body_index: usize,
    config: StressConfig,
    ephemeris: &(dyn Ephemeris + Sync),
    draws: usize,
    threads: usize,
) -> Vec<DrawOutcome> {
    let settings = stress_settings(config.night_inflation);
    let next = AtomicUsize::new(0);
    let results = Mutex::new(Vec::with_capacity(draws));
    std::thread::scope(|scope| {
        for _ in 0..threads {
            scope.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::Relaxed);
                if i >= draws {
                    break;
                }
                let seed = FIRST_SEED + 10_000 * body_index as u64 + i as u64;
                let d = stress_draw(body, ephemeris, seed, &settings);
                if !d.failures.is_empty() || !d.contradictions.is_empty() || d.no_solution.is_some()
                {
                    println!(
                        "  {} {:?} seed {seed}: failures {:?} contradictions {:?} no solution {:?}",
                        body.name, config, d.failure_texts, d.contradictions, d.no_solution
                    );
                }
                if let Ok(mut r) = results.lock() {
                    r.push(d);
                }
            });
        }
    });
    let mut r = results.into_inner().unwrap_or_default();
    r.sort_by_key(|d| d.seed);
    r
}

struct Row {
    config: StressConfig,
    body: &'static str,
    draws: Vec<DrawOutcome>,
}

impl Row {
    fn count(&self, f: impl Fn(&DrawOutcome) -> bool) -> usize {
        self.draws.iter().filter(|d| f(d)).count()
    }

    /// "model: reason n, ..." over the models that failed.
    fn failures(&self) -> String {
        let mut by: BTreeMap<(String, String), usize> = BTreeMap::new();
        for d in &self.draws {
            for (model, reason) in &d.failures {
                *by.entry((model.clone(), reason.clone())).or_default() += 1;
            }
        }
        if by.is_empty() {
            return "none".into();
        }
        by.iter()
            .map(|((m, r), n)| format!("{m}: {r} {n}"))
            .collect::<Vec<_>>()
            .join("; ")
    }

    fn recommended(&self) -> String {
        let mut by: BTreeMap<String, usize> = BTreeMap::new();
        for d in &self.draws {
            let name = d.recommended.clone().unwrap_or_else(|| "none".into());
            *by.entry(name).or_default() += 1;
        }
        by.iter()
            .map(|(m, n)| format!("{m} {n}"))
            .collect::<Vec<_>>()
            .join(", ")
    }
}

fn main() {
    // `cargo bench` passes --bench; nothing else is taken.
    let draws = common::count_from_env("PERIHELIX_STRESS_DRAWS", 200);
    let threads = common::count_from_env("PERIHELIX_STRESS_THREADS", 2);
    let out = std::env::var("PERIHELIX_STRESS_OUT")
        .map(std::path::PathBuf::from)
        .unwrap_or_else(|_| common::repo().join("docs/accuracy.md"));
    let de421 = de421();
    let embedded = EmbeddedEphemeris::full_span();
    let bodies: Vec<Synthetic> = BODIES.iter().map(|b| load(b)).collect();
    let started = Instant::now();
    let mut rows = Vec::new();
    for config in CONFIGS {
        let ephemeris: &(dyn Ephemeris + Sync) = match config.ephemeris {
            "DE421" => &de421,
            _ => &embedded,
        };
        for (b, body) in bodies.iter().enumerate() {
            let t = Instant::now();
            let r = run(body, b, config, ephemeris, draws, threads);
            let row = Row {
                config,
                body: BODIES[b],
                draws: r,
            };
            println!(
                "{:?} {}: {} draws, gravity failed {}, truth failed {}, contradictions {}, \
                 no solution {} ({:.0} s)",
                config,
                row.body,
                row.draws.len(),
                row.count(|d| d.gravity_failed),
                row.count(|d| d.truth_failed),
                row.count(|d| !d.contradictions.is_empty()),
                row.count(|d| d.no_solution.is_some()),
                t.elapsed().as_secs_f64()
            );
            rows.push(row);
        }
    }
    let total = started.elapsed().as_secs_f64();
    let date = hifitime::Epoch::now()
        .map(|e| {
            let (y, m, d, _, _, _, _) = e.to_gregorian_utc();
            format!("{y:04}-{m:02}-{d:02}")
        })
        .unwrap_or_else(|_| "unknown date".to_string());
    let profile = if cfg!(debug_assertions) {
        "dev"
    } else {
        "release"
    };
    let fit_seconds: f64 = rows
        .iter()
        .flat_map(|r| r.draws.iter().map(|d| d.seconds))
        .sum();
    let fits: usize = rows.iter().map(|r| r.draws.len()).sum();

    let mut doc = String::new();
    doc.push_str(HEADER);
    let _ = writeln!(
        doc,
        "Generated by `cargo bench --bench stress` (tests/bench/stress.rs) on {date}, {profile} \
         profile, {draws} draws per body and configuration (seeds {FIRST_SEED} + 10000 x body \
         + draw, the same in every configuration), {threads} threads; {fits} jobs, {:.2} s per \
         job on average, {total:.0} s in all on the shared 2-core development machine.\n",
        fit_seconds / fits.max(1) as f64
    );
    doc.push_str(
        "| ephemeris | per-night inflation | body | draws | gravity alone not converged | \
         truth structure not converged | contradictory verdicts | no solution | other models \
         not converged (model: reason count) | recommended |\n|---|---|---|---|---|---|---|---|---|---|\n",
    );
    for r in &rows {
        let _ = writeln!(
            doc,
            "| {} | {} | {} | {} | {} | {} | {} | {} | {} | {} |",
            r.config.ephemeris,
            if r.config.night_inflation {
                "on"
            } else {
                "off"
            },
            r.body,
            r.draws.len(),
            r.count(|d| d.gravity_failed),
            r.count(|d| d.truth_failed),
            r.count(|d| !d.contradictions.is_empty()),
            r.count(|d| d.no_solution.is_some()),
            r.failures(),
            r.recommended(),
        );
    }
    let gravity: usize = rows.iter().map(|r| r.count(|d| d.gravity_failed)).sum();
    let truth: usize = rows.iter().map(|r| r.count(|d| d.truth_failed)).sum();
    let contradictory: usize = rows
        .iter()
        .map(|r| r.count(|d| !d.contradictions.is_empty()))
        .sum();
    let _ = writeln!(
        doc,
        "\nIn all: {gravity} gravity-only and {truth} truth-structure fits that did not converge, \
         {contradictory} contradictory verdicts, over {fits} jobs.\n"
    );
    doc.push_str(FOOTER);
    if let Err(e) = common::write_section(&out, "stress", &doc) {
        eprintln!("cannot write {}: {e}", out.display());
        std::process::exit(1);
    }
    println!("wrote {} ({total:.1} s)", out.display());
}

const HEADER: &str = "## Unattended fits: does every fit end soundly?

The daemon refits with nobody watching, so every way a fit can stop must
be a sound one: a fit at its minimum must be called converged, a failure
must say why, and no verdict may quote a figure computed against a model
that did not converge. This harness runs fresh Gaussian noise draws of
each synthetic body (no gross outliers) through the daemon's own job,
`solve::solve`: an initial orbit from the observations alone, then the
whole default ladder (gravity; A2, A1, A1+A2, A1+A2+A3 under the water-ice
and the inverse-square laws), without the distant 1/a. For every draw it
records each model that did not converge, with its termination reason, and
checks the ladder's numbers against each other: the headline
significance is the largest test against gravity alone and is computed
only when gravity alone converged (otherwise it is unknown, with the
reason); no test is computed against a model that did not converge; a
non-gravitational model is recommended only at or above the significance
threshold; unknown is never taken for zero.

The truth structure is gravity alone for `hyperbolic_gravity`, A1
inverse-square for `hyperbolic_outgassing` and A1+A2 water-ice for
`bound_comet`. Other models may fail honestly (for example A1+A2+A3 on
data that do not determine A3 is singular); they are listed by reason.

";

const FOOTER: &str = "Rerun with `cargo bench --bench stress` (`PERIHELIX_STRESS_DRAWS=20` for a
quick look); `cargo test --test fit_stress` runs a few draws as a test.
";
