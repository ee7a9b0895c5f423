use super::*;

fn example_path() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("config/example.toml")
}

/// Writes `text` as a config beside a copy of the shipped station list.
fn config_in_tempdir(text: &str) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    std::fs::copy(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("config/stations.toml"),
        dir.path().join("stations.toml"),
    )
    .unwrap();
    let path = dir.path().join("config.toml");
    std::fs::write(&path, text).unwrap();
    (dir, path)
}

#[test]
fn shipped_example_is_valid_and_complete() {
    let cfg = Config::load(&example_path()).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(cfg.stations.len(), 4);
    assert_eq!(cfg.ephemeris, EphemerisChoice::Embedded);
    assert_eq!(cfg.fit.ladder.len(), 5);
    assert_eq!(
        cfg.fit.ladder[4],
        vec![NonGravTerm::A1, NonGravTerm::A2, NonGravTerm::A3]
    );
    assert_eq!(
        cfg.links,
        vec![vec![
            DesignationKey::TrkSub {
                name: "P26zQa1".into(),
                station: "ZQA".into()
            },
            DesignationKey::ProvId("2026 ZA7".into()),
        ]]
    );
    assert_eq!(cfg.api.bind.port(), 8620);
}

#[test]
fn three_mistakes_are_all_reported_with_line_and_key() {
    let text = "\
[directories]
incoming = \"in\"
archive = \"arch\"
rejected = \"rej\"
database = \"db\"

[stations]
file = \"stations.toml\"

[fit]
reject_chi2 = 8.0
recover_chi = 7.0
sigma_floor_arcsec = -0.1

[api]
bind = \"localhost-ish\"
";
    let (_dir, path) = config_in_tempdir(text);
    let err = Config::load(&path).unwrap_err();
    let got: Vec<(usize, &str)> = err
        .problems
        .iter()
        .map(|p| (p.line, p.key.as_str()))
        .collect();
    assert_eq!(
        got,
        vec![
            (12, "fit.recover_chi"),
            (13, "fit.sigma_floor_arcsec"),
            (16, "api.bind")
        ],
        "{err}"
    );
    assert!(err.problems[0].reason.contains("unknown key"));
    assert!(err.problems[1].reason.contains("positive"));
    assert!(err.problems[2].reason.contains("not an address"));
    assert!(err.to_string().contains("3 problem(s)"));
}

#[test]
fn problems_in_the_station_list_name_that_file() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("stations.toml"),
        "[[station]]\ncode = \"ZQA\"\nlongitude_deg = 10.0\nlatitude_deg = 10.0\n",
    )
    .unwrap();
    let path = dir.path().join("config.toml");
    std::fs::write(
        &path,
        "[directories]\nincoming = \"a\"\narchive = \"b\"\nrejected = \"c\"\ndatabase = \"d\"\n[stations]\nfile = \"stations.toml\"\n",
    )
    .unwrap();
    let err = Config::load(&path).unwrap_err();
    assert_eq!(err.problems.len(), 1, "{err}");
    assert!(err.problems[0].file.ends_with("stations.toml"));
    assert_eq!(err.problems[0].key, "station[0].height_m");
    assert_eq!(err.problems[0].reason, "required key is missing");
}

/// Issue 12, point 7: an unreadable station list is reported at the key
/// that names it, with the path that was tried.
#[test]
fn an_unreadable_station_list_names_the_key_and_the_path() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("config.toml");
    std::fs::write(
        &path,
        "[directories]\nincoming = \"a\"\narchive = \"b\"\nrejected = \"c\"\ndatabase = \"d\"\n[stations]\nfile = \"absent.toml\"\n",
    )
    .unwrap();
    let err = Config::load(&path).unwrap_err();
    assert_eq!(err.problems.len(), 1, "{err}");
    let p = &err.problems[0];
    assert_eq!(p.file, path);
    assert_eq!((p.line, p.key.as_str()), (7, "stations.file"));
    let tried = dir.path().join("absent.toml");
    assert!(
        p.reason.starts_with(&format!(
            "cannot read the station list {}: ",
            tried.display()
        )),
        "{}",
        p.reason
    );
}

#[test]
fn wrong_types_and_bad_choices_are_explained() {
    let text = "\
[directories]
incoming = \"in\"
archive = \"in\"
rejected = \"rej\"
database = 7

[ephemeris]
source = \"spk\"

[fit]
ladder = [\"A1\", \"A4\"]
laws = [\"sunlight\"]

[alerts.email]
smtp_host = \"mail.invalid\"
from = \"nobody\"
to = []
";
    let (_dir, path) = config_in_tempdir(text);
    let err = Config::load(&path).unwrap_err();
    let text = err.to_string();
    for needle in [
        "directories.database': expected a string, found integer",
        "ephemeris.path': source = \"spk\" needs the path",
        "'A4' in rung 'A4' is not a term",
        "the first rung must be \"gravity\"",
        "'sunlight' is not a law",
        "'nobody' is not an e-mail address",
        "at least one recipient",
    ] {
        assert!(text.contains(needle), "missing {needle:?} in:\n{text}");
    }
}

#[test]
fn syntax_errors_give_the_line() {
    let (_dir, path) = config_in_tempdir("[directories]\nincoming = \"in\nx = 1\n");
    let err = Config::load(&path).unwrap_err();
    assert_eq!(err.problems.len(), 1);
    assert_eq!(err.problems[0].line, 2);
    assert!(err.problems[0].reason.starts_with("not valid TOML"));
}

#[test]
fn api_beyond_loopback_needs_a_token() {
    let text = "[directories]\nincoming = \"a\"\narchive = \"b\"\nrejected = \"c\"\ndatabase = \"d\"\n[api]\nbind = \"0.0.0.0:8620\"\n";
    let (_dir, path) = config_in_tempdir(text);
    let err = Config::load(&path).unwrap_err();
    assert!(err.to_string().contains("needs a token"), "{err}");
}

#[test]
fn a_bad_leap_second_table_is_reported_at_its_own_line() {
    let dir = tempfile::tempdir().unwrap();
    // IETF leap-seconds.list layout: NTP seconds, TAI-UTC, comment.
    std::fs::write(
        dir.path().join("leap.list"),
        "# test table\n2272060800\t10\t# 1 Jan 1972\nnot-a-number\t11\n",
    )
    .unwrap();
    let text = "[directories]\nincoming = \"a\"\narchive = \"b\"\nrejected = \"c\"\ndatabase = \"d\"\n[ephemeris]\nleap_seconds_file = \"leap.list\"\n";
    let path = dir.path().join("config.toml");
    std::fs::write(&path, text).unwrap();
    let err = Config::load(&path).unwrap_err();
    assert_eq!(err.problems.len(), 1, "{err}");
    assert!(err.problems[0].file.ends_with("leap.list"), "{err}");
    assert_eq!(err.problems[0].line, 3, "{err}");
}

#[test]
fn refit_and_logging_settings_are_read_and_checked() {
    let base =
        "[directories]\nincoming = \"a\"\narchive = \"b\"\nrejected = \"c\"\ndatabase = \"d\"\n";
    let text = format!(
        "{base}[refit]\nquiet_period_s = 1.5\nmax_delay_s = 30\nworkers = 2\nrescan_interval_s = 5\n[logging]\nlevel = \"perihelix=debug,info\"\nformat = \"json\"\n"
    );
    let (_dir, path) = config_in_tempdir(&text);
    let cfg = Config::load(&path).unwrap();
    assert_eq!(cfg.refit.quiet_period_s, 1.5);
    assert_eq!(cfg.refit.max_delay_s, 30.0);
    assert_eq!(cfg.refit.workers, 2);
    assert_eq!(cfg.refit.rescan_interval_s, 5.0);
    assert!(cfg.logging.json);
    let text = format!(
        "{base}[refit]\nquiet_period_s = 60\nmax_delay_s = 30\nworkers = 0\n[logging]\nformat = \"xml\"\n"
    );
    let (_dir, path) = config_in_tempdir(&text);
    let err = Config::load(&path).unwrap_err();
    let keys: Vec<&str> = err.problems.iter().map(|p| p.key.as_str()).collect();
    assert!(keys.contains(&"refit.workers"), "{err}");
    assert!(keys.contains(&"refit.max_delay_s"), "{err}");
    assert!(keys.contains(&"logging.format"), "{err}");
}
