//! `perihelix demo --quick` as a newcomer runs it, then its store read back
//! through the real daemon: the story the demo must tell comes out in the
//! right order (issue 14). The unbound alert and the non-gravitational
//! alert are each raised once, by the first solution that supports them
//! at the configured thresholds (the defaults: 3 sigma each), the
//! unbound one first; both are written as e-mail files; and the output
//! names the page.

mod common;

use std::process::Command;
use std::time::Duration;

use serde_json::Value;

use common::daemon::{run_bounded, DaemonDir, Running};

const OBJECT: &str = "2027 ZV9";
/// The default thresholds (config/example.toml, [alerts]).
const UNBOUND_SIGMA: f64 = 3.0;
const NG_SIGMA: f64 = 3.0;

#[test]
fn the_quick_demo_tells_the_story_in_order() {
    let root = tempfile::tempdir().expect("a temporary directory");
    let dir = root.path().join("demo");
    let (status, stdout, stderr) = run_bounded(
        Command::new(env!("CARGO_BIN_EXE_perihelix"))
            .args(["demo", "--quick", "--dir"])
            .arg(&dir),
        Duration::from_secs(600),
    );
    assert!(status.success(), "{status}\n{stdout}\n{stderr}");
    println!("{stdout}");
    for part in [
        "The solution history:",
        "The verdict now:",
        "Alert e-mails written",
        "serve this store again",
    ] {
        assert!(stdout.contains(part), "no '{part}' in:\n{stdout}");
    }

    // The store as the demo left it, through the daemon on its own
    // configuration.
    let daemon_dir = DaemonDir {
        config: dir.join("config.toml"),
        root,
    };
    let d = Running::start(&daemon_dir, Duration::from_secs(60));
    let mut summaries = d.solutions(OBJECT);
    summaries.reverse();
    assert!(summaries.len() >= 5, "{} solutions", summaries.len());
    let first_seq = |supports: &dyn Fn(&Value) -> bool| {
        summaries
            .iter()
            .find(|s| supports(s))
            .and_then(|s| s["seq"].as_u64())
    };
    let unbound_at = first_seq(&|s| {
        let (v, sigma) = (
            s["one_over_a_original_per_au"]["value"].as_f64(),
            s["one_over_a_original_per_au"]["sigma"].as_f64(),
        );
        matches!((v, sigma), (Some(v), Some(sg)) if sg > 0.0 && -v / sg >= UNBOUND_SIGMA)
    })
    .expect("the orbit becomes certainly unbound");
    let ng_at = first_seq(&|s| s["ng_significance_sigma"].as_f64() >= Some(NG_SIGMA))
        .expect("the push becomes necessary");
    assert!(unbound_at < ng_at, "unbound at {unbound_at}, NG at {ng_at}");
    // The push is not needed from the start: gravity alone explains the
    // first solutions.
    assert!(ng_at >= 3, "NG needed already at solution {ng_at}");

    let (status, alerts) = d.get("/v1/alerts?limit=1000");
    assert_eq!(status, 200);
    let raised = |rule: &str| -> Vec<u64> {
        alerts["alerts"]
            .as_array()
            .expect("a list")
            .iter()
            .filter(|a| a["rule_key"] == rule && a["edge"] == "raised")
            .filter_map(|a| a["solution_seq"].as_u64())
            .collect()
    };
    assert_eq!(raised("unbound"), [unbound_at], "{alerts}");
    assert_eq!(raised("ng_needed"), [ng_at], "{alerts}");

    let mail: Vec<String> = std::fs::read_dir(dir.join("mail"))
        .expect("the mail directory")
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().to_string())
        .collect();
    for rule in ["unbound", "ng_needed"] {
        assert_eq!(
            mail.iter()
                .filter(|m| m.ends_with(&format!(".{rule}.email.eml")))
                .count(),
            1,
            "{mail:?}"
        );
    }
    let status = d.stop(Duration::from_secs(30));
    assert!(status.success(), "exit status {status}");
}
