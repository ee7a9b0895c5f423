//! The JSON-lines format (docs/observations.md): good lines and one test
//! per kind of bad input asserting line, field and reason.

use perihelix::config::{Station, StationList};
use perihelix::ingest::{
    read_text, Field, Format, InertialPosition, ObserverLocation, Problem, Rejection,
};

fn stations() -> StationList {
    StationList::new(["XQ1"].map(|c| Station {
        code: c.into(),
        name: "Invented site".into(),
        longitude_deg: 10.0,
        latitude_deg: 45.0,
        height_m: 100.0,
        sigma_arcsec: None,
    }))
}

const GOOD: &str = r#"{"trk_sub": "qx01", "station": "XQ1", "obs_time_utc": "2026-03-14T05:12:33.25Z", "ra_deg": 215.656050, "dec_deg": -13.547872, "rms_ra_arcsec": 0.15, "rms_dec_arcsec": 0.13, "rms_corr": 0.21, "mode": "CCD", "astrometric_catalog": "Gaia3", "mag": 21.9, "band": "G"}"#;

fn with(key: &str, value: &str) -> String {
    let mut v: serde_json::Value = serde_json::from_str(GOOD).unwrap();
    v[key] = serde_json::from_str(value).unwrap();
    format!("{v}\n")
}

fn without(key: &str) -> String {
    let mut v: serde_json::Value = serde_json::from_str(GOOD).unwrap();
    v.as_object_mut().unwrap().remove(key);
    format!("{v}\n")
}

fn only_rejection(text: &str) -> Rejection {
    let r = read_text("bad.jsonl", text, Format::JsonLines, &stations());
    assert_eq!(r.rejected.len(), 1, "{:?}", r.rejected);
    r.rejected[0].clone()
}

fn check(text: &str, line: u32, field: Option<&str>, want: impl Fn(&Problem) -> bool) {
    let e = only_rejection(text);
    assert_eq!(e.line, line, "{e}");
    assert_eq!(e.field.as_deref(), field, "{e}");
    assert!(want(&e.problem), "{e}");
}

#[test]
fn good_line_keeps_number_text() {
    let text = format!("{GOOD}\n\n{GOOD}\n");
    let r = read_text("obs.jsonl", &text, Format::JsonLines, &stations());
    assert!(r.rejected.is_empty(), "{:?}", r.rejected);
    assert_eq!(r.observations.len(), 2);
    assert_eq!(r.observations[1].source.line, 3);
    assert_eq!(r.observations[0].text.get(Field::Ra), Some("215.656050"));
    assert_eq!(r.observations[0].ra_deg, 215.65605);
}

#[test]
fn observer_positions() {
    let text = with(
        "observer",
        r#"{"icrf_au": {"center_spice_id": 10, "x_au": 0.5, "y_au": -0.75, "z_au": 0.125}}"#,
    );
    let r = read_text("obs.jsonl", &text, Format::JsonLines, &stations());
    assert_eq!(
        r.observations[0].location,
        Some(ObserverLocation::Inertial {
            center: perihelix::ingest::SpiceId(10),
            position: InertialPosition::Au {
                x_au: 0.5,
                y_au: -0.75,
                z_au: 0.125
            }
        })
    );
}

#[test]
fn syntax_error() {
    check("{\"trk_sub\": \n", 1, None, |p| {
        matches!(p, Problem::Syntax { .. })
    });
}

#[test]
fn truncated_last_line() {
    check(&GOOD[..40], 1, None, |p| matches!(p, Problem::Truncated));
}

#[test]
fn unknown_field() {
    check(
        &with("colour", "\"red\""),
        1,
        None,
        |p| matches!(p, Problem::Syntax { why } if why.contains("colour")),
    );
}

#[test]
fn number_as_string() {
    check(&with("ra_deg", "\"215.6\""), 1, Some("ra_deg"), |p| {
        matches!(p, Problem::NotANumber { .. })
    });
}

#[test]
fn ra_outside_range() {
    check(&with("ra_deg", "400"), 1, Some("ra_deg"), |p| {
        matches!(p, Problem::OutOfRange { .. })
    });
}

#[test]
fn dec_outside_range() {
    let e = only_rejection(&with("dec_deg", "-90.5"));
    assert_eq!(
        e.to_string(),
        "bad.jsonl:1: field 'dec_deg': -90.5 is outside [-90, 90]"
    );
}

#[test]
fn zero_uncertainty() {
    check(
        &with("rms_dec_arcsec", "0"),
        1,
        Some("rms_dec_arcsec"),
        |p| matches!(p, Problem::NotPositive { .. }),
    );
}

#[test]
fn correlation_outside_range() {
    check(&with("rms_corr", "2"), 1, Some("rms_corr"), |p| {
        matches!(p, Problem::OutOfRange { .. })
    });
}

#[test]
fn bad_time() {
    check(
        &with("obs_time_utc", "\"2026-02-30T00:00:00Z\""),
        1,
        Some("obs_time_utc"),
        |p| matches!(p, Problem::BadTime { why, .. } if why.contains("day 30")),
    );
}

#[test]
fn missing_time() {
    check(&without("obs_time_utc"), 1, Some("obs_time_utc"), |p| {
        matches!(p, Problem::Missing)
    });
}

#[test]
fn unknown_station() {
    check(&with("station", "\"XQ5\""), 1, Some("station"), |p| {
        matches!(p, Problem::UnknownStation { .. })
    });
}

#[test]
fn missing_designation() {
    check(&without("trk_sub"), 1, None, |p| {
        matches!(p, Problem::MissingDesignation)
    });
}

#[test]
fn bad_observer_centre() {
    let text = with(
        "observer",
        r#"{"icrf_km": {"center_spice_id": 12345, "x_km": 1, "y_km": 2, "z_km": 3}}"#,
    );
    check(&text, 1, Some("observer.icrf_km.center_spice_id"), |p| {
        matches!(p, Problem::BadLocation { .. })
    });
}

#[test]
fn latitude_outside_range() {
    let text = with(
        "observer",
        r#"{"wgs84": {"longitude_deg": 10, "latitude_deg": 95, "height_m": 3}}"#,
    );
    check(&text, 1, Some("observer.wgs84.latitude_deg"), |p| {
        matches!(p, Problem::OutOfRange { .. })
    });
}

#[test]
fn bad_mode() {
    check(&with("mode", "\"XYZ\""), 1, Some("mode"), |p| {
        matches!(p, Problem::BadValue { .. })
    });
}

#[test]
fn not_an_object() {
    check("[1, 2]\n", 1, None, |p| matches!(p, Problem::Syntax { .. }));
}
