//! A comet that came in bound but is hyperbolic near the Sun: the bound
//! verdict must follow the original barycentric 1/a (Marsden, Sekanina &
//! Everhart 1978, AJ 83, 64), not the heliocentric osculating e.
//!
//! The invented comet 2026 ZK9 is made with the crate's own propagator
//! (tests/common/comet.rs): bound far out, then pulled by the planets onto
//! a heliocentric osculating orbit with e - 1 of about 1.4e-3 at
//! perihelion. Its astrometry comes from the crate's observation model at
//! the invented stations of config/stations.toml, and the built binary fits
//! it as a user would, `perihelix fit FILE --json` and the text report.
//! The outgassing fixture, which came in unbound, is the control.
//!
//! Ephemeris: DE421 (tests/reference/fetch-de421.sh) for making and
//! fitting alike. The embedded theories would do as well, but their
//! tables are filled as they are used, about 2 ms per 32-day segment and
//! body, and the original and future 1/a cross two centuries: with them
//! one fit of this comet took 25 s instead of 1 s, and this file 60 s on
//! an idle two-core machine.

mod common;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::OnceLock;
use std::time::Instant;

use serde_json::Value;

use perihelix::astro::time::Epoch;

use common::comet::{barycentric_inverse_a, observe, psv, Campaign, FarOrbit, InventedComet};

const DESIGNATION: &str = "2026 ZK9";
const OUTGASSING: &str = "tests/reference/fixtures/synthetic/hyperbolic_outgassing/noisy.psv";

/// The invented original orbit: bound, a = 33 000 au, inside the Oort
/// spike of original 1/a below 1e-4 1/au (Marsden, Sekanina & Everhart
/// 1978, AJ 83, 64; memory).
const ORIGINAL_INVERSE_A: f64 = 3.0e-5;

/// Invented geometry. Of the approach directions tried, this one leaves
/// the heliocentric osculating e above 1 at perihelion (the Sun's motion
/// about the barycentre and the planets' pull make the difference) and
/// keeps the comet away from solar conjunction for the whole arc.
fn far_orbit() -> FarOrbit {
    FarOrbit {
        q_au: 2.0,
        inverse_a_per_au: ORIGINAL_INVERSE_A,
        i_deg: 62.0,
        node_deg: 60.0,
        peri_deg: 180.0,
        // 2027 May 20.0 TDB: late enough that the fit's look back, 127
        // years in doubling stretches, stays inside DE421 (from 1899
        // July) and the embedded theories (from 1900).
        perihelion: Epoch::from_tdb_days_since_j2000(9_999.5),
    }
}

/// About 300 days around perihelion, a few positions on most nights, each
/// station with an invented astrometric sigma of 0.35-0.5 arcsec.
fn campaign(perihelion: Epoch) -> Campaign {
    Campaign {
        first_night: perihelion.plus_days(-150.0),
        nights: 300,
        night_probability: 0.75,
        per_night: 3..=4,
        stations: vec![("ZQA", 0.45), ("ZQB", 0.35), ("ZQC", 0.40), ("ZQD", 0.50)],
        min_elongation_deg: 45.0,
        seed: 20_260_917,
    }
}

/// What the comet really did, from the propagator that made it.
struct Truth {
    /// Barycentric 1/a at 250 au: the built-in original 1/a.
    inverse_a_250: f64,
    /// Barycentric 1/a where the fit took its original 1/a.
    inverse_a_at_fit_point: f64,
    perihelion: Epoch,
    q_au: f64,
    e_at_perihelion: f64,
    /// Heliocentric osculating e at the fit's elements epoch.
    e_at_elements_epoch: f64,
}

/// The binary's two answers for one file.
struct Fitted {
    json: Value,
    json_text: String,
    text: String,
}

struct BoundCase {
    rows: usize,
    truth: Truth,
    fitted: Fitted,
}

/// A configuration for `perihelix fit` in `dir`: DE421 and the invented
/// stations (the directories are required keys; the fit never uses them).
fn de421_config(dir: &Path) -> PathBuf {
    let repo = Path::new(env!("CARGO_MANIFEST_DIR"));
    let de421 = repo.join("tests/reference/data/de421.bsp");
    assert!(
        de421.is_file(),
        "{} is missing: run bash tests/reference/fetch-de421.sh",
        de421.display()
    );
    let path = dir.join("perihelix.toml");
    std::fs::write(
        &path,
        format!(
            "[directories]\nincoming = \"{d}/in\"\narchive = \"{d}/archive\"\n\
             rejected = \"{d}/rejected\"\ndatabase = \"{d}/db\"\n\
             [stations]\nfile = {:?}\n[ephemeris]\nsource = \"spk\"\npath = {:?}\n",
            repo.join("config/stations.toml"),
            de421,
            d = dir.display(),
        ),
    )
    .expect("the configuration is written");
    path
}

fn perihelix(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_perihelix"))
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .args(args)
        .output()
        .expect("the binary runs")
}

fn stdout_of(out: Output, what: &str) -> String {
    assert!(
        out.status.success(),
        "{what}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).expect("UTF-8 output")
}

/// `perihelix fit` on `file`, the JSON and the report at once: each is a
/// single-threaded fit, so two cores run both in the time of one.
fn fit_both(file: &Path) -> Fitted {
    let dir = tempfile::tempdir().expect("a directory");
    let config = de421_config(dir.path());
    let config = config.to_str().expect("a UTF-8 path");
    let file = file.to_str().expect("a UTF-8 path");
    let common = ["--config", config, "--stations", "config/stations.toml"];
    let (json, text) = std::thread::scope(|s| {
        let json = s.spawn(|| perihelix(&[&["fit", file, "--json"][..], &common].concat()));
        let text = s.spawn(|| perihelix(&[&["fit", file][..], &common].concat()));
        (
            json.join().expect("the JSON run"),
            text.join().expect("the report run"),
        )
    });
    let json_text = stdout_of(json, "fit --json");
    Fitted {
        json: serde_json::from_str(&json_text).expect("one JSON document"),
        json_text,
        text: stdout_of(text, "fit"),
    }
}

fn recommended(doc: &Value) -> &Value {
    let models = doc["models"].as_array().expect("a model ladder");
    let picked: Vec<&Value> = models.iter().filter(|m| m["recommended"] == true).collect();
    assert_eq!(
        picked.len(),
        1,
        "one recommended model: {}",
        doc["recommended"]
    );
    picked[0]
}

fn number(v: &Value, what: &str) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("{what}: {v}"))
}

/// The comet made, observed, written and fitted once for every test here.
fn bound_case() -> &'static BoundCase {
    static CASE: OnceLock<BoundCase> = OnceLock::new();
    CASE.get_or_init(|| {
        let started = Instant::now();
        let ephemeris = common::de421();
        let far = far_orbit();
        let comet = InventedComet::build(&ephemeris, far, far.perihelion.plus_days(200.0));
        let plan = campaign(comet.perihelion);
        let arc = comet.arc(
            &ephemeris,
            plan.first_night.plus_days(-1.0),
            plan.first_night.plus_days(plan.nights as f64 + 2.0),
        );
        let rows = observe(&ephemeris, &arc, &common::stations(), &plan);
        let dir = tempfile::tempdir().expect("a directory");
        let path = dir.path().join("2026_ZK9.psv");
        std::fs::write(&path, psv(DESIGNATION, &rows)).expect("the file is written");
        let made = started.elapsed();
        let fitted = fit_both(&path);
        let fitting = started.elapsed() - made;

        let best = recommended(&fitted.json);
        let at = number(&best["one_over_a_original"]["tdb_jd"], "original 1/a epoch");
        let elements_epoch = number(&fitted.json["elements_epoch_tdb_jd"], "elements epoch");
        let at_perihelion = comet.osculating(&ephemeris, comet.perihelion);
        let truth = Truth {
            inverse_a_250: barycentric_inverse_a(&comet.far_state),
            inverse_a_at_fit_point: barycentric_inverse_a(
                &comet.barycentric(Epoch::from_tdb_jd(at, 0.0)),
            ),
            perihelion: comet.perihelion,
            q_au: at_perihelion.q_au,
            e_at_perihelion: at_perihelion.e,
            e_at_elements_epoch: comet
                .osculating(&ephemeris, Epoch::from_tdb_jd(elements_epoch, 0.0))
                .e,
        };
        println!(
            "truth: barycentric state at {:.1} au (TDB JD {:.1}): r {:?} au, v {:?} au/day",
            comet.far_state.position_au.norm(),
            comet.far_epoch.tdb_jd(),
            comet.far_state.position_au.as_slice(),
            comet.far_state.velocity_au_per_day.as_slice()
        );
        println!(
            "truth: 1/a {:.6e} at 250 au, {:.6e} where the fit took it; perihelion TDB JD {:.3}, \
             q {:.6} au, e {:.7} there and {:.7} at the elements epoch",
            truth.inverse_a_250,
            truth.inverse_a_at_fit_point,
            truth.perihelion.tdb_jd(),
            truth.q_au,
            truth.e_at_perihelion,
            truth.e_at_elements_epoch
        );
        println!(
            "fit: {} rows; recommended {}; original 1/a {}; e {}; bound {}",
            rows.len(),
            fitted.json["recommended"],
            best["one_over_a_original"],
            best["elements"]["e"],
            fitted.json["bound"]
        );
        println!("made in {made:.1?}, fitted (two runs at once) in {fitting:.1?}");
        BoundCase {
            rows: rows.len(),
            truth,
            fitted,
        }
    })
}

#[test]
fn the_fit_recovers_the_bound_original_orbit() {
    let case = bound_case();
    let doc = &case.fitted.json;
    let object = doc["object"].as_str().expect("the object's name");
    assert!(object.contains(DESIGNATION), "{object}");
    assert_eq!(number(&doc["n_obs"], "n_obs") as usize, case.rows);
    // By construction (tests/common/comet.rs): the far state is on the
    // conic with this 1/a, so only round-off separates them.
    let truth = case.truth.inverse_a_250;
    assert!((truth - ORIGINAL_INVERSE_A).abs() < 1e-12, "{truth}");

    let original = &recommended(doc)["one_over_a_original"];
    let value = number(&original["value"], "original 1/a");
    let sigma = number(&original["sigma"], "original 1/a sigma");
    let distance = number(&original["distance_au"], "original 1/a distance");
    assert!(sigma > 0.0, "{original}");
    assert!(value > 0.0, "came in bound: {original}");
    // Against the truth built in (the propagator's own), at the 3 sigma
    // the issue asks for.
    assert!(
        (value - truth).abs() < 3.0 * sigma,
        "original 1/a {value:.3e} +/- {sigma:.1e} against the built-in {truth:.3e}"
    );
    // Both ephemerides start about 1900, so the fit's look back ends near
    // 140 au rather than 250 au. Beyond 100 au the planets change 1/a by
    // some 1e-7 1/au (the estimate in tests/common/comet.rs), and the
    // propagator's own truth at the fit's point confirms that it is the
    // 250 au value to a small fraction of the fit's sigma: the comparison
    // above is fair.
    assert!(distance > 100.0, "{distance} au");
    let drift = case.truth.inverse_a_at_fit_point - truth;
    assert!(
        drift.abs() < 0.1 * sigma,
        "the truth's 1/a at {distance:.0} au differs by {drift:.2e}"
    );
}

#[test]
fn the_heliocentric_orbit_near_the_sun_is_hyperbolic() {
    let case = bound_case();
    // The trap as built: the propagator's own truth is hyperbolic near the
    // Sun although it came in bound.
    let at_perihelion = case.truth.e_at_perihelion;
    assert!(at_perihelion > 1.0, "{at_perihelion}");
    let elements = &recommended(&case.fitted.json)["elements"];
    let e = number(&elements["e"]["value"], "e");
    let e_sigma = number(&elements["e"]["sigma"], "sigma(e)");
    let sigmas = number(&elements["e_minus_one_sigmas"], "(e - 1)/sigma");
    assert!(e > 1.0, "{elements}");
    assert!(sigmas > 10.0, "{elements}");
    // The propagator's own truth at the elements epoch.
    let truth = case.truth.e_at_elements_epoch;
    assert!(
        (e - truth).abs() < 3.0 * e_sigma,
        "e {e} +/- {e_sigma:.1e} against the propagator's {truth}"
    );
}

#[test]
fn the_verdict_says_bound() {
    let case = bound_case();
    let doc = &case.fitted.json;
    let bound = &doc["bound"];
    assert!(
        bound.is_object(),
        "the document has no `bound` verdict: {:?}",
        doc.as_object().map(|o| o.keys().collect::<Vec<_>>())
    );
    assert_eq!(bound["verdict"], "bound", "{bound}");
    let value = number(&bound["one_over_a_original_per_au"]["value"], "verdict 1/a");
    let sigma = number(
        &bound["one_over_a_original_per_au"]["sigma"],
        "verdict 1/a sigma",
    );
    let from_zero = number(&bound["sigmas_from_zero"], "sigmas_from_zero");
    // 3 sigma: the threshold for a decided verdict.
    assert!(from_zero >= 3.0, "{bound}");
    // The document prints every digit (serde_json float_roundtrip), so
    // only the division's round-off may separate them.
    assert!(
        (from_zero - value / sigma).abs() <= 1e-9 * from_zero.abs(),
        "{bound}"
    );
    // The propagator's own truth, as in the check of the model's 1/a.
    let truth = case.truth.inverse_a_250;
    assert!(
        (value - truth).abs() < 3.0 * sigma,
        "{bound} against {truth:.3e}"
    );
    assert!(bound["averaged"].is_boolean(), "{bound}");
    let said = bound["text"].as_str().expect("the verdict's text");
    assert!(!said.to_lowercase().contains("came in unbound"), "{said}");
    assert!(
        !case
            .fitted
            .json_text
            .to_lowercase()
            .contains("interstellar"),
        "{bound}"
    );

    let text = &case.fitted.text;
    let lower = text.to_lowercase();
    assert!(lower.contains("came in bound"), "{text}");
    assert!(!lower.contains("came in unbound"), "{text}");
    assert!(!lower.contains("interstellar"), "{text}");
    // v_inf belongs to an orbit that came in unbound, not to this one.
    assert!(
        !text.lines().any(|l| l.trim_start().starts_with("v_inf")),
        "{text}"
    );
}

#[test]
fn the_outgassing_body_came_in_unbound() {
    let fitted = fit_both(&Path::new(env!("CARGO_MANIFEST_DIR")).join(OUTGASSING));
    let bound = &fitted.json["bound"];
    assert_eq!(bound["verdict"], "unbound", "{bound}");
    let lower = fitted.text.to_lowercase();
    assert!(lower.contains("came in unbound"), "{}", fitted.text);
    // The control for the bound comet's missing v_inf line: the report
    // does print one, in this form, for a body that came in unbound.
    assert!(
        fitted
            .text
            .lines()
            .any(|l| l.trim_start().starts_with("v_inf")),
        "{}",
        fitted.text
    );
}
