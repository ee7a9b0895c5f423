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

// Issue 12, point 7: the batch commands work from anywhere.

/// The invented gravity-only body of tests/reference/fixtures/synthetic/
/// (tests/reference/make_synthetic_astrometry.py): 610 observations from the
/// stations of config/stations.toml.
const GRAVITY: &str = "tests/reference/fixtures/synthetic/hyperbolic_gravity/noisy.psv";

/// The default ladder's model names in order (FitSettings::default, the
/// same as config/example.toml's `ladder` and `laws`; each named as
/// fit::ladder::model_name names it).
const DEFAULT_MODELS: &str = "gravity, A2 water-ice, A1 water-ice, A1+A2 water-ice, \
     A1+A2+A3 water-ice, A2 inverse-square, A1 inverse-square, A1+A2 inverse-square, \
     A1+A2+A3 inverse-square";

/// The binary run in `dir`, away from the repository and its config/.
fn perihelix_in(dir: &Path) -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_perihelix"));
    c.current_dir(dir);
    c
}

/// A copy of the gravity fixture in `dir` with `extra` data lines from
/// station ZQX, which no list has, appended; returns the number of lines
/// before them.
fn fixture_with_unknown_station(dir: &Path, name: &str, extra: usize) -> usize {
    let repo = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut text = std::fs::read_to_string(repo.join(GRAVITY)).expect("the fixture");
    let lines = text.lines().count();
    for i in 0..extra {
        // Invented rows: the fixture's first row's form, another station,
        // later times (one a minute, so none is a duplicate).
        text.push_str(&format!(
            "2026 ZC2|CCD |ZQX|2026-08-21T03:{i:02}:00.000Z|167.98154333| 19.70959881| 0.45|  0.47|Gaia3 |17.5|V\n"
        ));
    }
    std::fs::write(dir.join(name), text).expect("the copy is written");
    lines
}

#[test]
fn fit_runs_from_any_directory_with_the_built_in_stations() {
    let dir = tempfile::tempdir().expect("a temporary directory");
    let before = fixture_with_unknown_station(dir.path(), "night.psv", 7);
    // No flags, a relative path, and no config/ in the working directory:
    // the stations come from the list built into the binary.
    let out = perihelix_in(dir.path())
        .args(["fit", "--json", "--no-distant", "night.psv"])
        .output()
        .expect("the binary runs");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{stderr}");
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("one JSON document");
    // Every one of the fixture's 610 rows is placed from the built-in list.
    assert_eq!(doc["n_obs"], 610, "{stderr}");
    // The seven rows from the unknown station: one line on stderr, with
    // the count and the first five lines (issue 12, point 7).
    let first: Vec<String> = (before + 1..=before + 5).map(|l| l.to_string()).collect();
    let expected = format!(
        "rejected: night.psv: 7 lines ({}, ...): field 'stn': station 'ZQX' is not in the station list",
        first.join(", ")
    );
    assert!(stderr.contains(&expected), "{stderr}");
    assert!(stderr.contains("--stations"), "{stderr}");
    assert_eq!(stderr.matches("rejected:").count(), 1, "{stderr}");
}

#[test]
fn one_reason_on_many_lines_is_reported_once_and_json_keeps_each() {
    let dir = tempfile::tempdir().expect("a temporary directory");
    let before = fixture_with_unknown_station(dir.path(), "night.psv", 3);
    let out = perihelix_in(dir.path())
        .args(["ingest", "night.psv"])
        .output()
        .expect("the binary runs");
    assert!(out.status.success());
    let stdout = String::from_utf8_lossy(&out.stdout);
    // Three lines, all shown: no "..." (issue 12, point 7).
    let expected = format!(
        "night.psv: 3 lines ({}, {}, {}): field 'stn': station 'ZQX' is not in the station list \
         (name a list that has it with --stations or the configuration's stations.file)",
        before + 1,
        before + 2,
        before + 3
    );
    assert!(stdout.contains(&expected), "{stdout}");
    let out = perihelix_in(dir.path())
        .args(["ingest", "--json", "night.psv"])
        .output()
        .expect("the binary runs");
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("one JSON document");
    let rejected = doc["rejected"].as_array().expect("the rejections");
    let lines: Vec<u64> = rejected.iter().filter_map(|r| r["line"].as_u64()).collect();
    let want: Vec<u64> = (before + 1..=before + 3).map(|l| l as u64).collect();
    assert_eq!(lines, want);
}

#[test]
fn a_missing_file_says_cannot_open_without_a_line() {
    let dir = tempfile::tempdir().expect("a temporary directory");
    for command in ["fit", "ingest"] {
        let out = perihelix_in(dir.path())
            .args([command, "gone.psv"])
            .output()
            .expect("the binary runs");
        assert_eq!(out.status.code(), Some(1), "{command}");
        // ingest reports on stdout, fit on stderr.
        let all = format!(
            "{}{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        );
        // "cannot open FILE: reason" (issue 12, point 7), the reason from
        // the operating system.
        assert!(all.contains("cannot open gone.psv: "), "{command}: {all}");
        assert!(
            !all.contains(":0:") && !all.contains("line 0"),
            "{command}: {all}"
        );
    }
}

#[test]
fn an_unreadable_station_list_names_the_path_and_the_remedy() {
    let dir = tempfile::tempdir().expect("a temporary directory");
    let repo = Path::new(env!("CARGO_MANIFEST_DIR"));
    let observations = repo.join("docs/examples/invented-nights.psv");
    let out = perihelix_in(dir.path())
        .args(["ingest", "--stations", "absent.toml"])
        .arg(&observations)
        .output()
        .expect("the binary runs");
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("--stations absent.toml: cannot read the station list: "),
        "{err}"
    );

    // Named by a configuration: the key and the path as resolved.
    let config = dir.path().join("config.toml");
    std::fs::write(
        &config,
        "[directories]\nincoming = \"i\"\narchive = \"a\"\nrejected = \"r\"\ndatabase = \"d\"\n\
         [stations]\nfile = \"absent.toml\"\n",
    )
    .expect("the configuration is written");
    let out = perihelix_in(dir.path())
        .args(["ingest", "--config"])
        .arg(&config)
        .arg(&observations)
        .output()
        .expect("the binary runs");
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8_lossy(&out.stderr);
    let tried = dir.path().join("absent.toml");
    assert!(
        err.contains(&format!(
            "config.toml:7: key 'stations.file': cannot read the station list {}: ",
            tried.display()
        )),
        "{err}"
    );
}

#[test]
fn a_date_alone_is_a_time() {
    // A date alone means 00:00 UTC (issue 12, point 7); the grid's first
    // and last places are at those midnights.
    let out = perihelix()
        .args([
            "predict",
            GRAVITY,
            "--station",
            "ZQA",
            "--from",
            "2026-09-01",
            "--to",
            "2026-09-03",
            "--step",
            "1",
            "--json",
        ])
        .output()
        .expect("the binary runs");
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    for day in ["2026-09-01", "2026-09-02", "2026-09-03"] {
        assert!(
            stdout.contains(&format!("\"{day}T00:00:00.000Z\"")),
            "{stdout}"
        );
    }
    // A date that does not exist is refused with the option's name
    // (2026 is no leap year).
    let out = perihelix()
        .args(["fit", "--epoch", "2026-02-29", GRAVITY])
        .output()
        .expect("the binary runs");
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("--epoch 2026-02-29:") && err.contains("day 29 does not exist"),
        "{err}"
    );
}

#[test]
fn an_unknown_model_is_refused_before_anything_is_read() {
    // The observation file does not exist: the refusal is about the model,
    // so it came before the files were read, let alone fitted.
    let out = perihelix()
        .args([
            "predict",
            "/nonexistent/observations.psv",
            "--station",
            "ZQA",
            "--from",
            "2026-09-01",
            "--to",
            "2026-09-02",
            "--step",
            "1",
            "--model",
            "A4 water-ice",
        ])
        .output()
        .expect("the binary runs");
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains(&format!(
            "--model \"A4 water-ice\": no such model; the ladder has: {DEFAULT_MODELS}"
        )),
        "{err}"
    );
    assert!(!err.contains("cannot open"), "{err}");
}

/// The subcommands `perihelix --help` lists (all but `help` itself).
fn subcommands() -> Vec<String> {
    let out = perihelix().arg("--help").output().expect("the binary runs");
    let text = String::from_utf8_lossy(&out.stdout).into_owned();
    let mut names = Vec::new();
    let mut inside = false;
    for line in text.lines() {
        if line.starts_with("Commands:") {
            inside = true;
        } else if inside && !line.starts_with(' ') {
            break;
        } else if inside && line.starts_with("  ") && !line.starts_with("   ") {
            if let Some(name) = line.split_whitespace().next() {
                if name != "help" {
                    names.push(name.to_string());
                }
            }
        }
    }
    names
}

#[test]
fn every_option_and_argument_has_help_text() {
    let commands = subcommands();
    // The commands README.md lists, at least.
    for known in ["fit", "predict", "ingest", "serve", "history", "demo"] {
        assert!(commands.iter().any(|c| c == known), "{commands:?}");
    }
    for command in &commands {
        let out = perihelix()
            .args([command.as_str(), "--help"])
            .output()
            .expect("the binary runs");
        let text = String::from_utf8_lossy(&out.stdout).into_owned();
        let lines: Vec<&str> = text.lines().collect();
        let mut section = "";
        for (i, line) in lines.iter().enumerate() {
            if !line.starts_with(' ') {
                section = line;
                continue;
            }
            if section != "Arguments:" && section != "Options:" {
                continue;
            }
            // An entry starts two to six spaces in; a wrapped description
            // further.
            let entry = line.trim_start();
            let indent = line.len() - entry.len();
            if indent > 6 || !(entry.starts_with('-') || entry.starts_with('<')) {
                continue;
            }
            // The flag or argument, then at least two spaces, then help;
            // or, in clap's long layout, the help on the next line, further
            // in.
            let same_line = entry
                .split_once("  ")
                .is_some_and(|(_, help)| !help.trim().is_empty());
            let next_line = lines.get(i + 1).is_some_and(|next| {
                let help = next.trim_start();
                next.len() - help.len() > indent && !help.is_empty() && !help.starts_with('-')
            });
            assert!(
                same_line || next_line,
                "perihelix {command}: no help for `{entry}`"
            );
        }
    }
}

/// A second demo in the same directory would find its nights already
/// stored and wait for solutions that never come: it is refused at once.
#[test]
fn the_demo_refuses_a_directory_in_use() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("left-over.txt"), "x").unwrap();
    let out = perihelix()
        .args(["demo", "--dir"])
        .arg(dir.path())
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("is not empty"), "{stderr}");
}
