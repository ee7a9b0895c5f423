//! The command line as a user runs it: real processes, real files.

use std::path::Path;
use std::process::Command;

fn perihelix() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_perihelix"));
    c.current_dir(env!("CARGO_MANIFEST_DIR"));
    c
}

#[test]
fn check_config_accepts_the_shipped_example() {
    let out = perihelix()
        .args(["check-config", "config/example.toml"])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(stdout.contains("valid (4 stations"), "{stdout}");
}

#[test]
fn check_config_reports_three_mistakes_at_once() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::copy(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("config/stations.toml"),
        dir.path().join("stations.toml"),
    )
    .unwrap();
    let cfg = dir.path().join("bad.toml");
    std::fs::write(
        &cfg,
        "[directories]\nincoming = \"i\"\narchive = \"a\"\nrejected = \"r\"\ndatabase = \"d\"\n\
         [stations]\nfile = \"stations.toml\"\n\
         [fit]\nreject_chi2 = \"eight\"\n\
         [alerts]\nrms_arcsec_abov = 1.0\n\
         [ephemeris]\nsource = \"almanac\"\n",
    )
    .unwrap();
    let out = perihelix().arg("check-config").arg(&cfg).output().unwrap();
    assert_eq!(out.status.code(), Some(1));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("3 problem(s)"), "{stderr}");
    assert!(
        stderr.contains("bad.toml:9: key 'fit.reject_chi2': expected a number"),
        "{stderr}"
    );
    assert!(
        stderr.contains("bad.toml:11: key 'alerts.rms_arcsec_abov': unknown key"),
        "{stderr}"
    );
    assert!(
        stderr.contains("bad.toml:13: key 'ephemeris.source': 'almanac' is not a source"),
        "{stderr}"
    );
}

#[test]
fn ingest_summarises_the_example_as_json() {
    let out = perihelix()
        .args([
            "ingest",
            "--json",
            "--stations",
            "config/stations.toml",
            "docs/examples/invented-nights.psv",
        ])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    // The example file holds 12 observations of one invented object from
    // two stations (docs/examples/invented-nights.psv).
    assert_eq!(v["observations_kept"], 12);
    assert_eq!(v["objects"].as_array().unwrap().len(), 1);
    assert_eq!(v["per_station"]["ZQA"], 8);
    assert_eq!(v["per_station"]["ZQB"], 4);
    assert_eq!(v["first_obs_time_utc"], "2026-03-14T02:10:00.00Z");
}

#[test]
fn ingest_lists_rejected_lines_and_keeps_good_ones() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("night.psv");
    std::fs::write(
        &file,
        "# version=2022\n\
         provID|mode|stn|obsTime|ra|dec|astCat\n\
         2026 ZA7|CCD|ZQA|2026-03-14T02:10:00Z|162.4|12.7|Gaia3\n\
         2026 ZA7|CCD|ZQA|2026-03-14T02:40:00Z|362.4|12.7|Gaia3\n\
         2026 ZA7|CCD|QQQ|2026-03-14T03:10:00Z|162.3|12.7|Gaia3\n",
    )
    .unwrap();
    let out = perihelix()
        .args(["ingest", "--stations", "config/stations.toml"])
        .arg(&file)
        .output()
        .unwrap();
    assert!(out.status.success());
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        stdout.contains("1 observations read, 2 lines rejected"),
        "{stdout}"
    );
    assert!(stdout.contains("night.psv:4"), "{stdout}");
    assert!(stdout.contains("night.psv:5"), "{stdout}");
}

#[test]
fn commands_not_built_yet_say_so_and_fail() {
    let out = perihelix().args(["demo"]).output().unwrap();
    assert_eq!(out.status.code(), Some(3));
    assert!(String::from_utf8_lossy(&out.stderr).contains("not available yet"));
}

/// The daemon's commands name the configuration they could not read.
#[test]
fn daemon_commands_need_a_readable_configuration() {
    for args in [
        vec!["serve", "--config", "/nonexistent/perihelix.toml"],
        vec![
            "history",
            "2026 ZA7",
            "--config",
            "/nonexistent/perihelix.toml",
        ],
        vec!["rebuild", "--config", "/nonexistent/perihelix.toml"],
    ] {
        let out = perihelix().args(&args).output().unwrap();
        assert_eq!(out.status.code(), Some(1), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(
            err.contains("/nonexistent/perihelix.toml"),
            "{args:?}: {err}"
        );
    }
}
