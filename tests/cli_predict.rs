//! `perihelix predict` as a user runs it, on the synthetic outgassing
//! body's observations (tests/reference/fixtures/synthetic/, made with
//! rebound 5.2.2, jplephem 2.24 and pyerfa 2.0.1.5) with the embedded
//! ephemeris and the shipped station list: no configuration file.

use std::process::{Command, Output};

use serde_json::Value;

const OBSERVATIONS: &str = "tests/reference/fixtures/synthetic/hyperbolic_outgassing/noisy.psv";

/// The fixture's last observation is 2026-08-20T15:56:18.922Z (its
/// truth.json); the grid starts the next day.
const AFTER_ARC: [&str; 6] = [
    "--from",
    "2026-08-21T00:00:00Z",
    "--to",
    "2026-10-20T00:00:00Z",
    "--step",
    "10",
];

fn perihelix(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_perihelix"))
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .arg("predict")
        .arg(OBSERVATIONS)
        .args(args)
        .output()
        .expect("the binary runs")
}

fn json(out: &Output) -> Value {
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("one JSON document")
}

fn number(v: &Value, path: &[&str]) -> f64 {
    let mut v = v;
    for key in path {
        v = &v[*key];
    }
    v.as_f64()
        .unwrap_or_else(|| panic!("{} is not a number: {v}", path.join(".")))
}

#[test]
fn linear_predictions_beyond_the_arc() {
    let mut args = vec!["--station", "ZQD", "--json"];
    args.extend(AFTER_ARC);
    let doc = json(&perihelix(&args));
    assert_eq!(doc["object"], "2026 ZB1", "the bare designation");
    assert_eq!(doc["method"], "linear");
    assert_eq!(doc["station"], "ZQD");
    assert!(doc["model"].as_str().is_some_and(|m| !m.is_empty()));
    assert!(doc["ephemeris"]
        .as_str()
        .is_some_and(|e| e.starts_with("embedded")));
    let entries = doc["entries"].as_array().expect("entries");
    // 2026-08-21 to 2026-10-20 every 10 days: 7 times, both ends included.
    assert_eq!(entries.len(), 7);
    assert_eq!(entries[0]["utc"], "2026-08-21T00:00:00.000Z");
    assert_eq!(entries[6]["utc"], "2026-10-20T00:00:00.000Z");
    let mut last_transverse = 0.0;
    for e in entries {
        assert_eq!(e["ellipse"]["method"], "linear");
        let ra = number(e, &["ra_deg"]);
        let dec = number(e, &["dec_deg"]);
        let delta = number(e, &["delta_au"]);
        let r = number(e, &["r_au"]);
        assert!((0.0..360.0).contains(&ra) && (-90.0..=90.0).contains(&dec));
        // The body recedes from the Sun (truth.json: q = 1 au at
        // 2026-04-14) and is beyond 1 au from the Earth; light time is
        // delta / c (c = 173.1446 au/day, IAU 2012 au and the SI c).
        assert!(r > 3.0 && delta > 2.0, "{e}");
        let light_time_s = number(e, &["light_time_s"]);
        assert!((light_time_s - delta / 173.144_632_674 * 86_400.0).abs() < 1e-3);
        let elongation = number(e, &["elongation_deg"]);
        let phase = number(e, &["phase_deg"]);
        assert!((0.0..=180.0).contains(&elongation) && (0.0..=180.0).contains(&phase));
        let rate = number(e, &["rates", "ra_cos_dec_arcsec_per_min"])
            .hypot(number(e, &["rates", "dec_arcsec_per_min"]));
        // Beyond 2 au a body moves well under an arcsec a minute.
        assert!(rate > 0.0 && rate < 1.0, "{rate}");
        let a = number(e, &["ellipse", "semi_major_arcsec"]);
        let b = number(e, &["ellipse", "semi_minor_arcsec"]);
        let pa = number(e, &["ellipse", "position_angle_deg"]);
        assert!(a >= b && b > 0.0 && (0.0..180.0).contains(&pa), "{e}");
        // The place's uncertainty across the line of sight, arcsec x au,
        // grows as the prediction leaves the arc. (The angle alone need
        // not: the body recedes faster than its uncertainty grows.)
        let transverse = a * delta;
        assert!(transverse > last_transverse, "{e}");
        last_transverse = transverse;
    }
    let first = number(&entries[0], &["ellipse", "semi_major_arcsec"]);
    let second = number(&entries[1], &["ellipse", "semi_major_arcsec"]);
    assert!(second > first, "{first} then {second}");
}

#[test]
fn monte_carlo_with_a_named_model_and_a_table() {
    let mut args = vec![
        "--station",
        "ZQA",
        "--json",
        "--model",
        "A1 inverse-square",
        "--monte-carlo",
        "60",
        "--seed",
        "7",
    ];
    args.extend(AFTER_ARC);
    let doc = json(&perihelix(&args));
    assert_eq!(doc["model"], "A1 inverse-square");
    assert_eq!(doc["method"], "monte-carlo");
    assert_eq!(doc["monte_carlo"]["samples"], 60);
    assert_eq!(doc["monte_carlo"]["seed"], 7);
    for e in doc["entries"].as_array().expect("entries") {
        assert_eq!(e["ellipse"]["method"], "monte-carlo");
        let offset = e["ellipse"]["mean_offset_arcsec"]
            .as_array()
            .expect("mean offset");
        let a = number(e, &["ellipse", "semi_major_arcsec"]);
        // The mean of 60 samples lies within a few sigma / sqrt(60) of
        // the nominal place.
        for o in offset {
            assert!(o.as_f64().unwrap().abs() < 5.0 * a / 60f64.sqrt(), "{e}");
        }
    }
    // The model average beside the chosen model, by the same method; its
    // weights are normalised (exp(-dBIC/2) over the members, issue 12).
    let averaged = &doc["averaged"];
    let members = averaged["members"].as_array().expect("members");
    let total: f64 = members.iter().map(|m| number(m, &["weight"])).sum();
    assert!((total - 1.0).abs() < 1e-12, "{averaged}");
    let entries = averaged["entries"].as_array().expect("averaged entries");
    assert_eq!(entries.len(), doc["entries"].as_array().unwrap().len());
    for e in entries {
        assert_eq!(e["ellipse"]["method"], "monte-carlo");
        assert!(number(e, &["between_models_arcsec"]) >= 0.0);
    }

    let out = perihelix(&[
        "--station",
        "ZQB",
        "--from",
        "2026-09-01T00:00:00Z",
        "--to",
        "2026-09-01T12:00:00Z",
        "--step",
        "0.25",
    ]);
    assert!(out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("station ZQB"), "{text}");
    assert!(text.contains("1 sigma, linear covariance map"), "{text}");
    assert!(text.contains("2026-09-01T06:00:00.000Z"), "{text}");
    // Three times, in the model's table and again averaged over the models.
    assert_eq!(
        text.lines()
            .filter(|l| l.starts_with("2026-09-01T"))
            .count(),
        6
    );
    assert!(text.contains("Averaged over the models"), "{text}");
    for heading in [
        "from obs.",
        "from Sun",
        "elongation",
        "phase",
        "PA (deg)",
        "(\"/min)",
    ] {
        assert!(text.contains(heading), "{heading}: {text}");
    }
}

/// The error (exit status 1) names the option and the reason.
fn refused(args: &[&str], expected: &str) {
    let out = perihelix(args);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{args:?}: {stderr}");
    assert!(stderr.contains(expected), "{args:?}: {stderr}");
}

#[test]
fn bad_requests_name_the_option() {
    let day = |from: &'static str, to: &'static str, step: &'static str| {
        vec![
            "--station",
            "ZQD",
            "--from",
            from,
            "--to",
            to,
            "--step",
            step,
        ]
    };
    let a = "2026-09-01T00:00:00Z";
    let b = "2026-09-02T00:00:00Z";
    let mut unknown = day(a, b, "1");
    unknown[1] = "ZQX";
    refused(
        &unknown,
        "--station ZQX: station ZQX is not in the station list",
    );
    refused(&day(b, a, "1"), "--to: the last time");
    refused(
        &day(a, b, "0"),
        "--step: the step must be a positive number",
    );
    refused(
        &day(a, b, "-1"),
        "--step: the step must be a positive number",
    );
    refused(
        &day(a, "2027-09-02T00:00:00Z", "0.01"),
        "is 36601 times; at most 10000 are allowed",
    );
    // A date alone is a time (issue 12, point 7), but it must exist:
    // September has 30 days.
    refused(&day("2026-09-31", b, "1"), "--from 2026-09-31:");
    let mut few = day(a, b, "1");
    few.extend(["--monte-carlo", "3"]);
    refused(&few, "--monte-carlo 3: at least 10 samples");
    let mut model = day(a, b, "1");
    model.extend(["--model", "A4"]);
    refused(
        &model,
        "--model \"A4\": no such model; the ladder has: gravity",
    );
}
