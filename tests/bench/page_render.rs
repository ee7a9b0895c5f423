//! The object page for an object with 200 solutions: how long the server
//! takes to draw it (issue 13: under 200 ms). It times
//! `perihelix::page::render_object`, everything the handler does after
//! its store reads: the history and residual charts as SVG and the HTML.
//! The store reads (200 summaries from their own tree, the latest record,
//! the alerts) are timed by `api_load` for the JSON routes and are not
//! repeated here.
//!
//! The latest record's document is a real one: the invented outgassing
//! body's 610 observations fitted on the embedded ephemeris
//! (tests/reference/fixtures/synthetic/hyperbolic_outgassing), so the
//! residual plots carry 610 points. The 200 summaries are invented: an
//! arc growing night by night, 1/a and e tightening, the significance
//! rising past the threshold, gravity alone's RMS growing, two terms
//! tightening and the predicted places settling.
//!
//! Run: `cargo bench --bench page_render`. Prints the figures; the latest
//! are in docs/performance.md.

use std::time::Instant;

use perihelix::config::Config;
use perihelix::ingest::ObjectId;
use perihelix::solve::document::{SolutionDocument, ValueSigma};
use perihelix::store::{
    ObjectState, PlaceShift, SolutionRecord, SolutionSummary, TermPoint, Trigger,
};

const SOLUTIONS: u64 = 200;
const ROUNDS: usize = 30;
const FIXTURE: &str = "tests/reference/fixtures/synthetic/hyperbolic_outgassing/noisy.psv";

fn main() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let config = Config::embedded_default(root);
    let outcome = perihelix::ingest::ingest_files(
        &[root.join(FIXTURE)],
        &perihelix::config::shipped_stations().expect("the built-in station list"),
        &config.links,
    );
    let object = outcome.objects.first().expect("the fixture's object");
    let solved = perihelix::solve::solve_records(
        &Config {
            stations: perihelix::config::shipped_stations().expect("the built-in station list"),
            ..config
        },
        "2026 ZB1",
        &object.observations,
        &perihelix::solve::SolveRequest::default(),
    )
    .expect("the fixture fits");
    let document =
        serde_json::to_value(SolutionDocument::new(&solved)).expect("the document as JSON");

    let summaries: Vec<SolutionSummary> = (1..=SOLUTIONS)
        .map(|seq| {
            let k = seq as f64;
            let mut s = SolutionSummary::failed(
                seq,
                "2026-12-03T10:00:00Z",
                Trigger::NewObservations,
                (3 * seq) as usize,
                String::new(),
            );
            s.converged = true;
            s.failure = None;
            s.arc_days = Some(k);
            s.recommended = Some(if k < 60.0 { "gravity" } else { "A1 water-ice" }.into());
            s.one_over_a_original_per_au = Some(ValueSigma {
                value: -0.9 - 0.1 / k,
                sigma: 0.5 / k,
            });
            s.e = Some(ValueSigma {
                value: 2.0 - 0.01 / k,
                sigma: 0.2 / k,
            });
            s.ng_significance_sigma = Some(k / 4.0);
            s.normalized_rms = Some(if k < 60.0 { 1.0 + k / 60.0 } else { 0.9 });
            s.gravity_normalized_rms = Some(1.0 + k / 60.0);
            let term = |name: &str, value: f64, justified: bool| TermPoint {
                term: name.into(),
                model: "A1+A2 water-ice".into(),
                value: ValueSigma {
                    value,
                    sigma: 2e-8 / k,
                },
                justified,
            };
            s.terms = vec![term("A1", 1e-8, k >= 60.0), term("A2", 2e-9, false)];
            if seq > 1 {
                s.place_shifts = [7.0, 30.0]
                    .iter()
                    .map(|days| PlaceShift {
                        days: *days,
                        shift_arcsec: days * 300.0 / (k * k),
                        shift_sigma: Some(3.0 / k),
                    })
                    .collect();
            }
            s
        })
        .collect();
    let mut state = ObjectState::new(&ObjectId("obj-0000000000000001".into()));
    state.designations = vec!["provID:2026 ZB1".into()];
    state.observations = 610;
    state.first_obs_utc = Some("2026-02-09T02:18:34.808Z".into());
    state.solutions = SOLUTIONS;
    let latest = SolutionRecord {
        object_id: state.id.clone(),
        seq: SOLUTIONS,
        summary: summaries[summaries.len() - 1].clone(),
        inputs_journal_seq: 0,
        duration_s: 0.0,
        software_version: "bench".into(),
        identity: Default::default(),
        document: Some(document),
        reference_epoch_tdb_days_j2000: None,
        new_batch: None,
        overrides: Vec::new(),
        alerts: Vec::new(),
        alert_states: Default::default(),
        plan: None,
        plan_problem: None,
    };

    let mut times_ms = Vec::with_capacity(ROUNDS);
    let mut bytes = 0;
    for _ in 0..ROUNDS {
        let started = Instant::now();
        let page = perihelix::page::render_object(&state, &summaries, Some(&latest), &[], 3.0)
            .expect("the page renders");
        times_ms.push(started.elapsed().as_secs_f64() * 1e3);
        bytes = page.len();
    }
    times_ms.sort_by(f64::total_cmp);
    println!(
        "object page, {SOLUTIONS} solutions and {} residuals: median {:.1} ms, slowest {:.1} ms over {ROUNDS} renders; {:.0} kB of HTML",
        610,
        times_ms[ROUNDS / 2],
        times_ms[ROUNDS - 1],
        bytes as f64 / 1e3
    );
}
