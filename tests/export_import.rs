//! `perihelix export` and `perihelix import` on a store the real daemon
//! built: the invented outgassing body's first nights
//! (tests/reference/fixtures/synthetic/hyperbolic_outgassing/noisy.psv,
//! made by tests/reference/make_synthetic_astrometry.py) and a second
//! invented object in the same file, an analyst's override and an alert
//! acknowledged over the API. Exported while the daemon runs and again
//! after it stopped (the same bytes), imported into an empty store and
//! exported again (the same bytes), served from the imported store (the
//! same answers); one object likewise; a store that is not empty, a file
//! cut short and a garbled line refused with the reason and the line.

mod common;

use std::path::Path;
use std::process::Command;
use std::time::{Duration, Instant};

use serde_json::Value;

use common::daemon::{
    encode, poll_until, psv_file, psv_nights, run_bounded, DaemonDir, Running, TOKEN,
};
use common::repo;

const FIXTURE: &str = "tests/reference/fixtures/synthetic/hyperbolic_outgassing/noisy.psv";
const OBJECT: &str = "2026 ZB1";
/// A second invented object (half-month letter Z): a few rows of the
/// first night moved 10 degrees in RA, too few for an orbit, so its fit
/// fails quickly and raises an alert.
const OTHER: &str = "2026 ZD2";
const REFIT: &str = "quiet_period_s = 0.5\nmax_delay_s = 60\nrescan_interval_s = 2";

/// Generous bounds for a loaded 2-core machine; polls return as soon as
/// the state is reached.
const START: Duration = Duration::from_secs(60);
const FIT: Duration = Duration::from_secs(240);
const COMMAND: Duration = Duration::from_secs(60);
const POLL: Duration = Duration::from_millis(200);

/// `perihelix ARGS`: exit status, standard output, standard error.
fn perihelix(args: &[&str]) -> (std::process::ExitStatus, String, String) {
    run_bounded(
        Command::new(env!("CARGO_BIN_EXE_perihelix")).args(args),
        COMMAND,
    )
}

fn text(p: &Path) -> &str {
    p.to_str().expect("a UTF-8 path")
}

/// Exports into `file` (the whole store, or one object); the file's bytes.
fn export(dir: &DaemonDir, object: Option<&str>, file: &Path) -> Vec<u8> {
    let mut args = vec![
        "export",
        "--config",
        text(&dir.config),
        "--output",
        text(file),
    ];
    if let Some(o) = object {
        args.extend(["--object", o]);
    }
    let (status, _, err) = perihelix(&args);
    assert!(status.success(), "export {args:?}: {err}");
    std::fs::read(file).expect("the export is written")
}

fn import(dir: &DaemonDir, file: &Path) -> (std::process::ExitStatus, String, String) {
    perihelix(&["import", "--config", text(&dir.config), text(file)])
}

/// An object's stored solutions (0 while unknown).
fn solutions(d: &Running, object: &str) -> u64 {
    let (status, o) = d.get(&format!("/v1/objects/{}", encode(object)));
    if status == 200 {
        o["solutions"].as_u64().unwrap_or(0)
    } else {
        0
    }
}

fn wait_for(d: &Running, object: &str, seq: u64) {
    poll_until(&format!("solution {seq} of {object}"), FIT, POLL, || {
        (solutions(d, object) >= seq).then_some(())
    });
}

/// Every alert, with its deliveries.
fn alerts(d: &Running) -> Vec<Value> {
    let (status, page) = d.get("/v1/alerts?limit=1000");
    assert_eq!(status, 200, "{page}");
    assert!(page["next_cursor"].is_null(), "one page is enough here");
    page["alerts"].as_array().cloned().unwrap_or_default()
}

/// Every alert delivered on every channel (or given up): nothing left for
/// the outbox to journal.
fn outbox_settled(alerts: &[Value]) -> bool {
    alerts.iter().all(|a| {
        let channels = a["channels"].as_array().map_or(0, Vec::len);
        let deliveries = a["deliveries"].as_array().cloned().unwrap_or_default();
        deliveries.len() == channels && deliveries.iter().all(|d| d["state"] != "pending")
    })
}

/// The API's answers the imported store must give alike.
fn answers(d: &Running) -> Vec<(String, Value)> {
    let object = encode(OBJECT);
    [
        format!("/v1/objects/{object}/solutions?limit=1000"),
        format!("/v1/objects/{object}/solutions/latest"),
        format!("/v1/objects/{object}/overrides"),
        format!("/v1/objects/{}/solutions?limit=1000", encode(OTHER)),
        "/v1/alerts?limit=1000".to_string(),
    ]
    .into_iter()
    .map(|path| {
        let (status, body) = d.get(&path);
        assert_eq!(status, 200, "{path}: {body}");
        (path, body)
    })
    .collect()
}

/// The fixture's first nights, and a few rows of the other object.
fn observations() -> String {
    let (header, nights) = psv_nights(&repo().join(FIXTURE));
    let mut rows: Vec<String> = nights[..3].iter().flat_map(|(_, r)| r.clone()).collect();
    for row in &nights[0].1[..4] {
        let mut cols: Vec<String> = row.split('|').map(String::from).collect();
        cols[0] = cols[0].replacen(OBJECT, OTHER, 1);
        let ra: f64 = cols[4].trim().parse().expect("an RA");
        cols[4] = format!("{:12.8}", ra + 10.0);
        rows.push(cols.join("|"));
    }
    psv_file(&header, &rows)
}

#[test]
fn export_while_serving_then_import_round_trips_byte_for_byte() {
    let started = Instant::now();
    let dir = DaemonDir::new(REFIT);
    let d = Running::start(&dir, START);
    dir.drop_file("nights-01-03.psv", &observations());
    wait_for(&d, OBJECT, 1);
    wait_for(&d, OTHER, 1);

    // An analyst leaves an observation out: a second solution.
    let object = encode(OBJECT);
    let (_, page) = d.get(&format!("/v1/objects/{object}/observations?limit=1"));
    let key = page["observations"][0]["content_key"]
        .as_str()
        .expect("a content key")
        .to_string();
    let body = serde_json::json!({"action": "exclude_observation", "content_key": key,
                                  "by": "test analyst", "reason": "trailed image"});
    let (status, answer) = d.post(
        &format!("/v1/objects/{object}/overrides"),
        Some(TOKEN),
        "application/json",
        body.to_string().into_bytes(),
    );
    assert_eq!(status, 202, "{answer}");
    wait_for(&d, OBJECT, 2);

    // Every alert delivered (the mail goes to files), one acknowledged.
    let raised = poll_until("the outbox to settle", FIT, POLL, || {
        let list = alerts(&d);
        (!list.is_empty() && outbox_settled(&list)).then_some(list)
    });
    let id = raised[0]["id"].as_str().expect("an alert id").to_string();
    let (status, answer) = d.post(
        &format!("/v1/alerts/{}/ack", encode(&id)),
        Some(TOKEN),
        "application/json",
        br#"{"by":"test analyst"}"#.to_vec(),
    );
    assert_eq!(status, 200, "{answer}");
    let original = answers(&d);
    println!("store built in {:?}", started.elapsed());

    // While the daemon runs: to a file, and to standard output.
    let live = dir.path("live.jsonl");
    let whole = export(&dir, None, &live);
    let (status, out, err) = perihelix(&["export", "--config", text(&dir.config)]);
    assert!(status.success(), "{err}");
    assert_eq!(out.as_bytes(), &whole[..], "stdout and --output agree");
    assert!(err.contains("exported the store"), "{err}");
    let lines: Vec<Value> = whole
        .split(|b| *b == b'\n')
        .filter(|l| !l.is_empty())
        .map(|l| serde_json::from_slice(l).expect("JSON lines"))
        .collect();
    assert_eq!(lines[0]["format"], "perihelix-export");
    assert_eq!(lines[0]["scope"], "store");
    let end = lines.last().expect("an end line");
    assert_eq!(end["counts"]["solutions"], 3, "{end}");
    assert_eq!(end["counts"]["overrides"], 1, "{end}");
    assert_eq!(end["counts"]["acknowledgements"], 1, "{end}");
    assert!(end["counts"]["alerts"].as_u64() >= Some(1), "{end}");
    assert!(
        end["counts"]["delivery_attempts"].as_u64() >= Some(1),
        "{end}"
    );
    println!("whole export: {} bytes, {end}", whole.len());

    // Stopped: the same bytes, as nothing changed.
    assert!(d.stop(Duration::from_secs(30)).success());
    let stopped = export(&dir, None, &dir.path("stopped.jsonl"));
    assert!(
        stopped == whole,
        "the export changed after the daemon stopped"
    );
    let (status, out, err) = perihelix(&["import", "--check", text(&live)]);
    assert!(status.success(), "{err}");
    assert!(out.contains("a whole export"), "{out}");

    // Into an empty store, and out again: byte for byte.
    let restored = DaemonDir::new(REFIT);
    let (status, out, err) = import(&restored, &live);
    assert!(status.success(), "{err}");
    assert!(out.contains("2 objects"), "{out}");
    let again = export(&restored, None, &restored.path("again.jsonl"));
    assert!(again == whole, "the imported store exports differently");

    // Refused: a store that is not empty, a file cut short, a garbled line.
    let (status, _, err) = import(&restored, &live);
    assert!(!status.success());
    assert!(err.contains("not empty"), "{err}");
    assert!(err.contains(text(&restored.path("db"))), "{err}");
    let refused = DaemonDir::new(REFIT);
    let text_of = String::from_utf8(whole.clone()).expect("UTF-8");
    let all: Vec<&str> = text_of.lines().collect();
    let cut = refused.path("cut.jsonl");
    let keep = all.len() - 2;
    std::fs::write(&cut, all[..keep].join("\n") + "\n").expect("written");
    let (status, _, err) = import(&refused, &cut);
    assert!(!status.success());
    assert!(err.contains(&format!("line {}", keep + 1)), "{err}");
    assert!(err.contains("cut short"), "{err}");
    let half = &whole[..whole.len() - all[all.len() - 1].len() - 20];
    std::fs::write(&cut, half).expect("written");
    let (status, _, err) = import(&refused, &cut);
    assert!(!status.success());
    assert!(err.contains(&format!("line {}", all.len() - 1)), "{err}");
    let mut garbled = all.clone();
    let broken = all[2].replacen("\"kind\"", "\"kind", 1);
    garbled[2] = &broken;
    std::fs::write(&cut, garbled.join("\n") + "\n").expect("written");
    let (status, _, err) = import(&refused, &cut);
    assert!(!status.success());
    assert!(err.contains(&format!("{}, line 3", text(&cut))), "{err}");
    assert!(
        !refused.path("db").join("journal/journal.jsonl").exists(),
        "a refused import leaves no journal"
    );

    // One object: the other object's rows and solution left out,
    // renumbered, and the same bytes after a round trip.
    let one = export(&dir, Some(OBJECT), &dir.path("one.jsonl"));
    let one_text = String::from_utf8(one.clone()).expect("UTF-8");
    assert!(!one_text.contains(OTHER), "the other object is left out");
    assert!(one.len() < whole.len());
    println!(
        "one-object export: {} bytes, {}",
        one.len(),
        one_text.lines().last().unwrap_or_default()
    );
    let single = DaemonDir::new(REFIT);
    let (status, out, err) = import(&single, &dir.path("one.jsonl"));
    assert!(status.success(), "{err}");
    assert!(out.contains("1 objects"), "{out}");
    let one_again = export(&single, Some(OBJECT), &single.path("one.jsonl"));
    assert!(
        one_again == one,
        "the one-object export changed in a round trip"
    );

    // The imported store served: the same answers, and nothing to do.
    let d = Running::start(&restored, START);
    let served = answers(&d);
    for ((path, want), (_, got)) in original.iter().zip(&served) {
        assert_eq!(got, want, "{path}");
    }
    assert!(d.stop(Duration::from_secs(30)).success());
    let after = export(&restored, None, &restored.path("after.jsonl"));
    assert!(after == whole, "serving the imported store changed it");
    println!("whole test took {:?}", started.elapsed());
}
