//! The daemon as an operator runs it: the real binary, real files renamed
//! into a watched directory, a real sled store on disk, real HTTP. The
//! observations are the invented outgassing body's nights
//! (tests/reference/fixtures/synthetic/hyperbolic_outgassing/noisy.psv,
//! made by tests/reference/make_synthetic_astrometry.py).

mod common;

use std::collections::BTreeSet;
use std::time::Duration;

use serde_json::Value;

use common::daemon::{poll_until, psv_file, psv_nights, DaemonDir, Running, TOKEN};
use common::repo;

const FIXTURE: &str = "tests/reference/fixtures/synthetic/hyperbolic_outgassing/noisy.psv";
const OBJECT: &str = "2026 ZB1";

/// Generous bounds: a fit of the whole arc takes seconds, more on a
/// loaded 2-core machine; polls return as soon as the state is reached.
const START: Duration = Duration::from_secs(60);
const FIT: Duration = Duration::from_secs(240);
const POLL: Duration = Duration::from_millis(200);

/// Solutions stored so far (0 when the object is not known yet).
fn solution_count(d: &Running) -> usize {
    let (status, o) = d.get(&format!("/v1/objects/{}", common::daemon::encode(OBJECT)));
    if status == 200 {
        o["solutions"].as_u64().unwrap_or(0) as usize
    } else {
        0
    }
}

/// Waits until solution `seq` exists, and returns it.
fn wait_for_solution(d: &Running, seq: usize) -> Value {
    poll_until(&format!("solution {seq}"), FIT, POLL, || {
        (solution_count(d) >= seq).then(|| {
            d.get(&format!(
                "/v1/objects/{}/solutions/{seq}",
                common::daemon::encode(OBJECT)
            ))
            .1
        })
    })
}

/// Rejected observations of a model document as (time, station).
fn rejected(model: &Value) -> BTreeSet<(String, String)> {
    model["rejected"]
        .as_array()
        .map(|a| {
            a.iter()
                .map(|r| {
                    (
                        r["obs_time"].as_str().unwrap_or_default().to_string(),
                        r["station"].as_str().unwrap_or_default().to_string(),
                    )
                })
                .collect()
        })
        .unwrap_or_default()
}

#[test]
fn nights_arrive_and_each_quiet_period_gives_one_solution() {
    let dir = DaemonDir::new("quiet_period_s = 1\nmax_delay_s = 120\nrescan_interval_s = 2");
    let d = Running::start(&dir, START);
    let (header, nights) = psv_nights(&repo().join(FIXTURE));
    let total: usize = nights.iter().map(|(_, r)| r.len()).sum();

    // The first six nights in one file, then two single nights: one
    // solution each, with the observations that had arrived.
    let mut sent = 0;
    let first: Vec<String> = nights[..6].iter().flat_map(|(_, r)| r.clone()).collect();
    sent += first.len();
    dir.drop_file("nights-01-06.psv", &psv_file(&header, &first));
    let s1 = wait_for_solution(&d, 1);
    assert_eq!(
        s1["summary"]["observations"].as_u64(),
        Some(sent as u64),
        "{s1}"
    );
    for (k, (date, rows)) in nights[6..8].iter().enumerate() {
        sent += rows.len();
        dir.drop_file(&format!("night-{date}.psv"), &psv_file(&header, rows));
        let s = wait_for_solution(&d, 2 + k);
        assert_eq!(s["summary"]["observations"].as_u64(), Some(sent as u64));
        assert_eq!(s["summary"]["trigger"], "new-observations");
    }

    // The rest as a burst of 200 files: coalesced into at most 3 fits.
    let rest: Vec<String> = nights[8..].iter().flat_map(|(_, r)| r.clone()).collect();
    let per_file = rest.len().div_ceil(200);
    let mut files = 0;
    for (i, chunk) in rest.chunks(per_file).enumerate() {
        dir.drop_file(&format!("burst-{i:03}.psv"), &psv_file(&header, chunk));
        files += 1;
    }
    assert!((150..=200).contains(&files), "{files} files");
    let before = solution_count(&d);
    let all = poll_until("every observation in a solution", FIT, POLL, || {
        let list = d.solutions(OBJECT);
        let newest = list.first()?;
        (newest["observations"].as_u64() == Some(total as u64)).then_some(list)
    });
    let burst_fits = all.len() - before;
    assert!(
        (1..=3).contains(&burst_fits),
        "{burst_fits} fits for the burst"
    );
    // Every file archived, none left or rejected.
    poll_until("the incoming directory to empty", FIT, POLL, || {
        dir.files_under("incoming").is_empty().then_some(())
    });
    assert_eq!(dir.files_under("archive").len(), files + 3);
    assert!(dir.files_under("rejected").is_empty());

    // Sequence numbers without gaps, newest first.
    let seqs: Vec<u64> = all.iter().filter_map(|s| s["seq"].as_u64()).collect();
    let expected: Vec<u64> = (1..=seqs.len() as u64).rev().collect();
    assert_eq!(seqs, expected);

    // The daemon's latest solution is what `perihelix fit --json` says of
    // the same observations with the same configuration.
    let latest = d
        .get(&format!(
            "/v1/objects/{}/solutions/latest",
            common::daemon::encode(OBJECT)
        ))
        .1;
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_perihelix"))
        .args(["fit", "--json", "--config"])
        .arg(&dir.config)
        .arg(repo().join(FIXTURE))
        .output()
        .expect("the fit command runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let batch: Value = serde_json::from_slice(&out.stdout).expect("fit --json prints JSON");
    let stored = &latest["document"];
    assert_eq!(stored["recommended"], batch["recommended"]);
    assert_eq!(stored["n_obs"], batch["n_obs"]);
    let (ms, mb) = (
        stored["models"].as_array().unwrap(),
        batch["models"].as_array().unwrap(),
    );
    assert_eq!(ms.len(), mb.len());
    for (a, b) in ms.iter().zip(mb) {
        assert_eq!(a["name"], b["name"]);
        assert_eq!(a["converged"], b["converged"], "{}", a["name"]);
        if let (Some(x), Some(y)) = (a["chi2"].as_f64(), b["chi2"].as_f64()) {
            assert!(
                (x - y).abs() <= 1e-9 * y.abs(),
                "{}: chi2 {x} stored, {y} from fit --json",
                a["name"]
            );
        }
        assert_eq!(rejected(a), rejected(b), "{}", a["name"]);
    }

    // Residuals of every observation, kept with the solution.
    let seq = latest["seq"].as_u64().unwrap();
    let (status, r) = d.get(&format!(
        "/v1/objects/{}/solutions/{seq}/residuals",
        common::daemon::encode(OBJECT)
    ));
    assert_eq!(status, 200, "{r}");
    let list = r["residuals"].as_array().unwrap();
    assert_eq!(list.len(), total);
    let used = list.iter().filter(|x| x["used"] == true).count();
    assert_eq!(Some(used as u64), stored["n_used"].as_u64());

    // Predictions from the stored state, without a refit, agree with the
    // predict command, which fits the same observations afresh.
    let grid = ["2026-09-01T00:00:00Z", "2026-09-21T00:00:00Z", "10"];
    let (status, p) = d.get(&format!(
        "/v1/objects/{}/predictions?station=ZQA&from={}&to={}&step={}",
        common::daemon::encode(OBJECT),
        grid[0],
        grid[1],
        grid[2]
    ));
    assert_eq!(status, 200, "{p}");
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_perihelix"))
        .args([
            "predict",
            "--json",
            "--station",
            "ZQA",
            "--from",
            grid[0],
            "--to",
            grid[1],
            "--step",
            grid[2],
            "--config",
        ])
        .arg(&dir.config)
        .arg(repo().join(FIXTURE))
        .output()
        .expect("the predict command runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let batch: Value = serde_json::from_slice(&out.stdout).expect("predict --json prints JSON");
    let (a, b) = (
        p["entries"].as_array().unwrap(),
        batch["entries"].as_array().unwrap(),
    );
    assert_eq!(a.len(), 3);
    assert_eq!(a.len(), b.len());
    for (x, y) in a.iter().zip(b) {
        for key in ["ra_deg", "dec_deg"] {
            let (u, v) = (x[key].as_f64().unwrap(), y[key].as_f64().unwrap());
            // The same fit within its convergence tolerance: far below a
            // milliarcsecond (1e-9 deg is 3.6 microarcsec).
            assert!((u - v).abs() < 1e-9, "{key}: {u} vs {v}");
        }
        let (u, v) = (
            x["ellipse"]["semi_major_arcsec"].as_f64().unwrap(),
            y["ellipse"]["semi_major_arcsec"].as_f64().unwrap(),
        );
        assert!((u - v).abs() <= 1e-6 * v, "ellipse {u} vs {v}");
    }
    // The model average beside them: the same from the store and from the
    // command; the weights sum to 1 (normalisation, issue 12 point 2).
    let (a, b) = (&p["averaged"], &batch["averaged"]);
    let weights: f64 = a["members"]
        .as_array()
        .unwrap()
        .iter()
        .map(|m| m["weight"].as_f64().unwrap())
        .sum();
    assert!((weights - 1.0).abs() < 1e-12, "weights sum to {weights}");
    assert_eq!(
        a["members"].as_array().unwrap().len(),
        b["members"].as_array().unwrap().len()
    );
    for (x, y) in a["entries"]
        .as_array()
        .unwrap()
        .iter()
        .zip(b["entries"].as_array().unwrap())
    {
        for key in ["ra_deg", "dec_deg"] {
            let (u, v) = (x[key].as_f64().unwrap(), y[key].as_f64().unwrap());
            assert!((u - v).abs() < 1e-9, "averaged {key}: {u} vs {v}");
        }
    }

    // The plan stored with the solution: the recommended model against its
    // rivals, nights ranked by the expected separation; and a plan for a
    // window, from the store and from the command, alike.
    let object = common::daemon::encode(OBJECT);
    let (status, stored_plan) = d.get(&format!("/v1/objects/{object}/plan"));
    assert_eq!(status, 200, "{stored_plan}");
    assert_eq!(stored_plan["stored"], true);
    assert_eq!(stored_plan["model"], stored["recommended"]);
    assert_ne!(stored_plan["rival"], stored_plan["model"]);
    let ranked: Vec<f64> = stored_plan["nights"]
        .as_array()
        .unwrap()
        .iter()
        .map(|n| n["expected_sigma"].as_f64().unwrap())
        .collect();
    assert!(ranked.windows(2).all(|w| w[0] >= w[1]), "{ranked:?}");
    let window = ["2026-09-01", "2026-09-15"];
    let (status, api_plan) = d.get(&format!(
        "/v1/objects/{object}/plan?from={}&to={}",
        window[0], window[1]
    ));
    assert_eq!(status, 200, "{api_plan}");
    assert_eq!(api_plan["stored"], false);
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_perihelix"))
        .args([
            "plan", "--json", "--from", window[0], "--to", window[1], "--config",
        ])
        .arg(&dir.config)
        .arg(repo().join(FIXTURE))
        .output()
        .expect("the plan command runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let cli_plan: Value = serde_json::from_slice(&out.stdout).expect("plan --json prints JSON");
    assert_eq!(api_plan["rival"], cli_plan["rival"]);
    let (a, b) = (
        api_plan["nights"].as_array().unwrap(),
        cli_plan["nights"].as_array().unwrap(),
    );
    assert!(!a.is_empty());
    assert_eq!(a.len(), b.len());
    // Keyed by station and night: nights of nearly equal rank may swap.
    let by_night = |nights: &[Value]| -> std::collections::BTreeMap<(String, String), f64> {
        nights
            .iter()
            .map(|n| {
                (
                    (n["station"].to_string(), n["night"].to_string()),
                    n["expected_sigma"].as_f64().unwrap(),
                )
            })
            .collect()
    };
    let (x, y) = (by_night(a), by_night(b));
    assert_eq!(x.keys().collect::<Vec<_>>(), y.keys().collect::<Vec<_>>());
    for (key, u) in &x {
        let v = y[key];
        assert!(
            (u - v).abs() <= 1e-6 * v.max(1e-3),
            "{key:?}: separation {u} vs {v}"
        );
    }

    // The pages (issue 13): the index links the object; its page plots
    // one 1/a point per converged solution, read back from the SVG.
    let index = d.get_text("/");
    assert!(index.contains("2026 ZB1"), "{index}");
    assert!(!index.contains("<script"), "{index}");
    let page = d.get_text(&format!("/objects/{object}"));
    let figure = |id: &str| -> String {
        let start = page
            .find(&format!("<figure class=\"plot\" id=\"{id}\">"))
            .unwrap_or_else(|| panic!("no figure {id}"));
        let rest = &page[start..];
        let from = rest.find("<svg").expect("an svg");
        let to = rest.find("</figure>").expect("the figure's end");
        rest[from..to].to_string()
    };
    let converged = d
        .solutions(OBJECT)
        .iter()
        .filter(|s| s["converged"] == true)
        .count();
    let svg = figure("plot-inverse-a");
    let tree = roxmltree::Document::parse(&svg).expect("the plot is well-formed SVG");
    let points = tree
        .descendants()
        .filter(|n| n.attribute("class") == Some("point"))
        .count();
    assert!(converged > 0);
    assert_eq!(points, converged);
    for id in common::daemon::OUTGASSING_PAGE_PLOTS {
        roxmltree::Document::parse(&figure(id)).expect("well-formed SVG");
    }
    let status = d.stop(Duration::from_secs(30));
    assert!(status.success(), "exit status {status}");
}

#[test]
fn a_stop_during_a_fit_is_prompt_and_the_refit_resumes_after_restart() {
    let dir = DaemonDir::new("quiet_period_s = 0.5\nmax_delay_s = 60\nrescan_interval_s = 2");
    let d = Running::start(&dir, START);
    dir.drop_file(
        "all.psv",
        &std::fs::read_to_string(repo().join(FIXTURE)).unwrap(),
    );
    // Wait until the fit is running, then stop: the fit is cancelled at
    // its next iteration and the daemon exits 0 well within its bound.
    poll_until("a fit to start", FIT, Duration::from_millis(50), || {
        d.get_text("/metrics")
            .contains("perihelix_fits_running 1")
            .then_some(())
    });
    let started = std::time::Instant::now();
    let status = d.stop(Duration::from_secs(30));
    assert!(status.success(), "exit status {status}");
    let stop_took = started.elapsed();
    assert_eq!(
        solution_count_offline(&dir),
        0,
        "a cancelled fit stores nothing"
    );
    // After the restart the object is still due and is refitted.
    let d = Running::start(&dir, START);
    let s = wait_for_solution(&d, 1);
    assert_eq!(s["summary"]["converged"], true, "{s}");
    let status = d.stop(Duration::from_secs(30));
    assert!(status.success());
    println!("stop took {stop_took:?}");

    // A refit asked for over the API just before a stop: journaled, so
    // whether its fit was cancelled by the stop or had finished, solution
    // 2 exists after the restart and names who asked and why. (That the
    // journaled request keeps the object due is checked in the store's
    // own tests.)
    let d = Running::start(&dir, START);
    let body = serde_json::json!({"by": "test analyst", "reason": "check after the stop"});
    let (status, answer) = d.post(
        &format!("/v1/objects/{}/refit", common::daemon::encode(OBJECT)),
        Some(TOKEN),
        "application/json",
        body.to_string().into_bytes(),
    );
    assert_eq!(status, 202, "{answer}");
    assert_eq!(answer["override"]["action"], "refit", "{answer}");
    let status = d.stop(Duration::from_secs(30));
    assert!(status.success());
    let d = Running::start(&dir, START);
    let s = wait_for_solution(&d, 2);
    let asked = s["overrides"]
        .as_array()
        .into_iter()
        .flatten()
        .find(|o| o["action"] == "refit")
        .cloned()
        .unwrap_or(Value::Null);
    assert_eq!(asked["by"], "test analyst", "{s}");
    assert_eq!(asked["reason"], "check after the stop");
    let status = d.stop(Duration::from_secs(30));
    assert!(status.success());
}

/// Sends only the head of a POST declaring `length` bytes; returns the
/// status and the body of the answer.
fn oversized_post(d: &Running, length: usize) -> (u16, String) {
    use std::io::{Read, Write};
    let mut s = std::net::TcpStream::connect(d.addr).expect("connects");
    s.set_read_timeout(Some(Duration::from_secs(30))).unwrap();
    write!(
        s,
        "POST /v1/observations HTTP/1.1\r\nHost: {}\r\nAuthorization: Bearer {TOKEN}\r\n\
         Content-Type: text/psv\r\nContent-Length: {length}\r\nConnection: close\r\n\r\n",
        d.addr
    )
    .unwrap();
    let mut answer = Vec::new();
    let _ = s.read_to_end(&mut answer);
    let text = String::from_utf8_lossy(&answer).to_string();
    let status = text
        .split_whitespace()
        .nth(1)
        .and_then(|c| c.parse().ok())
        .unwrap_or(0);
    let body = text
        .split("\r\n\r\n")
        .nth(1)
        .unwrap_or_default()
        .to_string();
    (status, body)
}

/// Solutions in the store, read with the history command (no daemon).
fn solution_count_offline(dir: &DaemonDir) -> usize {
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_perihelix"))
        .args(["history", OBJECT, "--json", "--config"])
        .arg(&dir.config)
        .output()
        .expect("history runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: Value = serde_json::from_slice(&out.stdout).expect("JSON");
    assert_eq!(v["source"], "store");
    v["solutions"].as_array().map_or(0, Vec::len)
}

#[test]
fn api_refuses_what_it_must() {
    let dir = DaemonDir::new("quiet_period_s = 3600\nmax_delay_s = 3600");
    let d = Running::start(&dir, START);
    // Unknown objects and routes: 404 with a JSON error.
    let (status, body) = d.get("/v1/objects/2099%20ZZ9");
    assert_eq!(status, 404);
    assert_eq!(body["error"], "not_found");
    assert_eq!(d.get("/v1/nothing").0, 404);
    // Writes without the token, or with a wrong one: 401, nothing stored.
    let text = std::fs::read(repo().join(FIXTURE)).unwrap();
    let (status, body) = d.post("/v1/observations", None, "text/psv", text.clone());
    assert_eq!(status, 401, "{body}");
    let (status, _) = d.post("/v1/observations", Some("wrong"), "text/psv", text.clone());
    assert_eq!(status, 401);
    assert_eq!(
        d.get("/v1/objects").1["objects"].as_array().map(Vec::len),
        Some(0)
    );
    assert!(dir.files_under("archive").is_empty());
    // An oversized body is refused from its declared length, before it
    // is read: 413 as JSON. (Sent by hand: an HTTP client that is still
    // sending when the answer comes reports a broken connection instead.)
    let (status, body) = oversized_post(&d, 9 * 1024 * 1024);
    assert_eq!(status, 413, "{body}");
    assert!(body.contains("\"error\""), "{body}");
    // With the token: stored, archived as a file, and found by designation.
    let (status, body) = d.post("/v1/observations", Some(TOKEN), "text/psv", text);
    assert_eq!(status, 201, "{body}");
    assert_eq!(dir.files_under("archive").len(), 1);
    let (status, o) = d.get(&format!("/v1/objects/{}", common::daemon::encode(OBJECT)));
    assert_eq!(status, 200);
    assert_eq!(o["observations"], 610);
    // Bad page parameters are explained.
    let (status, body) = d.get(&format!(
        "/v1/objects/{}/solutions?limit=0",
        common::daemon::encode(OBJECT)
    ));
    assert_eq!(status, 400);
    assert_eq!(body["error"], "bad_limit");
    // Observations page through without repeats.
    let mut seen = BTreeSet::new();
    let mut cursor: Option<String> = None;
    loop {
        let mut path = format!(
            "/v1/objects/{}/observations?limit=97",
            common::daemon::encode(OBJECT)
        );
        if let Some(c) = &cursor {
            path.push_str(&format!("&cursor={c}"));
        }
        let (status, page) = d.get(&path);
        assert_eq!(status, 200, "{page}");
        for o in page["observations"].as_array().unwrap() {
            assert!(seen.insert(o["content_key"].as_str().unwrap().to_string()));
        }
        match page["next_cursor"].as_str() {
            Some(c) => cursor = Some(c.to_string()),
            None => break,
        }
    }
    assert_eq!(seen.len(), 610);

    // Every route the description lists is served (answered by its own
    // handler, not the fallback), and only those methods.
    let (status, api) = d.get("/openapi.json");
    assert_eq!(status, 200);
    let paths = api["paths"].as_object().expect("paths");
    assert!(paths.len() >= 14, "{} paths", paths.len());
    for (path, methods) in paths {
        let concrete = path
            .replace("{id}", &common::daemon::encode(OBJECT))
            .replace("{seq}", "1");
        for method in methods.as_object().unwrap().keys() {
            let (status, body) = match method.as_str() {
                "get" => d.get(&concrete),
                "post" => d.post(&concrete, None, "text/psv", b"x".to_vec()),
                other => panic!("unexpected method {other}"),
            };
            assert_ne!(status, 405, "{method} {path}");
            assert_ne!(body["message"], "no such route", "{method} {path}");
        }
    }
    assert!(d.stop(Duration::from_secs(30)).success());
}

#[test]
fn analysts_overrides_are_kept_and_change_the_next_fit() {
    let dir = DaemonDir::new("quiet_period_s = 0.5\nmax_delay_s = 60\nrescan_interval_s = 2");
    let d = Running::start(&dir, START);
    let (header, nights) = psv_nights(&repo().join(FIXTURE));
    let rows: Vec<String> = nights[..8].iter().flat_map(|(_, r)| r.clone()).collect();
    dir.drop_file("nights-01-08.psv", &psv_file(&header, &rows));
    let first = wait_for_solution(&d, 1);
    let n = first["summary"]["observations"].as_u64().unwrap();
    let object = common::daemon::encode(OBJECT);

    // Refused: no token, an unknown action, gravity taken off.
    let body = |v: Value| serde_json::to_vec(&v).unwrap();
    let path = format!("/v1/objects/{object}/overrides");
    let exclude = |key: &str| {
        serde_json::json!({"action": "exclude_observation", "content_key": key,
                           "by": "test analyst", "reason": "trailed image"})
    };
    let (status, _) = d.post(
        &path,
        None,
        "application/json",
        body(exclude(&"0".repeat(64))),
    );
    assert_eq!(status, 401);
    let (status, e) = d.post(
        &path,
        Some(TOKEN),
        "application/json",
        body(serde_json::json!({"action": "unlink", "by": "x", "reason": "y"})),
    );
    assert!(status == 400 || status == 422, "{status} {e}");
    assert!(
        e["message"]
            .as_str()
            .unwrap()
            .contains("exclude_observation"),
        "{e}"
    );
    let (status, _) = d.post(
        &path,
        Some(TOKEN),
        "application/json",
        body(serde_json::json!({"action": "exclude_model", "model": "gravity", "by": "x", "reason": "y"})),
    );
    assert_eq!(status, 400);

    // One observation out: the next solution has one fewer and says why.
    let (_, page) = d.get(&format!("/v1/objects/{object}/observations?limit=1"));
    let key = page["observations"][0]["content_key"]
        .as_str()
        .unwrap()
        .to_string();
    let (status, r) = d.post(&path, Some(TOKEN), "application/json", body(exclude(&key)));
    assert_eq!(status, 202, "{r}");
    let second = wait_for_solution(&d, 2);
    assert_eq!(second["summary"]["trigger"], "override");
    assert_eq!(second["summary"]["observations"].as_u64(), Some(n - 1));
    assert_eq!(second["overrides"][0]["by"], "test analyst");
    assert_eq!(second["overrides"][0]["reason"], "trailed image");

    // A converged model the tests did not recommend, pinned: recommended
    // by the pin, and the report says so.
    let models = second["document"]["models"].as_array().unwrap();
    let other = models
        .iter()
        .find(|m| m["converged"] == true && m["recommended"] == false)
        .expect("a converged model that is not recommended")["name"]
        .as_str()
        .unwrap()
        .to_string();
    let (status, r) = d.post(
        &path,
        Some(TOKEN),
        "application/json",
        body(
            serde_json::json!({"action": "pin_model", "model": other, "by": "test analyst",
                                "reason": "a comparison"}),
        ),
    );
    assert_eq!(status, 202, "{r}");
    let third = wait_for_solution(&d, 3);
    assert_eq!(third["document"]["recommended"], other.as_str());
    assert_eq!(third["document"]["recommended_by_pin"], true);
    assert_eq!(third["overrides"].as_array().map(Vec::len), Some(2));
    let (_, list) = d.get(&path);
    assert_eq!(list["overrides"].as_array().map(Vec::len), Some(2));
    assert!(d.stop(Duration::from_secs(30)).success());
}

/// Pages through the observations, `limit` at a time, calling `between`
/// after the first page; the rows seen, in order, by content key and time.
fn observation_pages(
    d: &Running,
    limit: usize,
    mut between: impl FnMut(),
) -> Vec<(String, String)> {
    let mut seen = Vec::new();
    let mut cursor: Option<String> = None;
    loop {
        let mut path = format!(
            "/v1/objects/{}/observations?limit={limit}",
            common::daemon::encode(OBJECT)
        );
        if let Some(c) = &cursor {
            path.push_str(&format!("&cursor={c}"));
        }
        let (status, page) = d.get(&path);
        assert_eq!(status, 200, "{page}");
        for o in page["observations"].as_array().into_iter().flatten() {
            seen.push((
                o["content_key"].as_str().unwrap_or_default().to_string(),
                o["obs_time_utc"].as_str().unwrap_or_default().to_string(),
            ));
        }
        if cursor.is_none() {
            between();
        }
        match page["next_cursor"].as_str() {
            Some(c) => cursor = Some(c.to_string()),
            None => return seen,
        }
    }
}

/// A client paging through history while solutions and observations
/// arrive between its pages sees every item of its first look exactly
/// once, in order: pages are cut by sequence number (solutions) and by
/// time and content key (observations), never by position.
#[test]
fn pages_hold_still_while_data_arrive_over_http() {
    let dir = DaemonDir::new("quiet_period_s = 0.5\nmax_delay_s = 60\nrescan_interval_s = 2");
    let d = Running::start(&dir, START);
    let (header, nights) = psv_nights(&repo().join(FIXTURE));
    // The first look holds nights 2 to 5, so that a night before it and
    // one after it can arrive later.
    let first: Vec<String> = nights[1..5].iter().flat_map(|(_, r)| r.clone()).collect();
    dir.drop_file("nights-02-05.psv", &psv_file(&header, &first));
    wait_for_solution(&d, 1);
    let refit = |why: &str| {
        let body = serde_json::json!({"by": "test analyst", "reason": why});
        let path = format!("/v1/objects/{}/refit", common::daemon::encode(OBJECT));
        let (status, answer) = d.post(
            &path,
            Some(TOKEN),
            "application/json",
            body.to_string().into_bytes(),
        );
        assert_eq!(status, 202, "{answer}");
    };
    refit("a second solution to page through");
    wait_for_solution(&d, 2);

    // Solutions, one a page: a new solution is stored between the pages.
    let list = |cursor: Option<&str>| {
        let mut path = format!(
            "/v1/objects/{}/solutions?limit=1",
            common::daemon::encode(OBJECT)
        );
        if let Some(c) = cursor {
            path.push_str(&format!("&cursor={c}"));
        }
        let (status, page) = d.get(&path);
        assert_eq!(status, 200, "{page}");
        page
    };
    let page1 = list(None);
    refit("a solution that arrives between two pages");
    wait_for_solution(&d, 3);
    let mut seqs: Vec<u64> = Vec::new();
    let mut page = page1;
    loop {
        seqs.extend(
            page["solutions"]
                .as_array()
                .into_iter()
                .flatten()
                .filter_map(|s| s["seq"].as_u64()),
        );
        match page["next_cursor"].as_str() {
            Some(c) => page = list(Some(c)),
            None => break,
        }
    }
    assert_eq!(seqs, [2, 1], "the pages of the first look, once each");

    // Observations, a few a page: a night before and a night after the
    // first look's arc are posted between the pages.
    let before: Vec<(String, String)> = observation_pages(&d, 1000, || {});
    let count_before = before.len();
    let earlier = psv_file(&header, &nights[0].1);
    let later = psv_file(&header, &nights[nights.len() - 1].1);
    let paged = observation_pages(&d, 7, || {
        for text in [&later, &earlier] {
            let (status, answer) = d.post(
                "/v1/observations",
                Some(TOKEN),
                "text/psv",
                text.clone().into_bytes(),
            );
            assert_eq!(status, 201, "{answer}");
        }
    });
    let after = observation_pages(&d, 1000, || {});
    assert!(after.len() > count_before, "the posted nights are stored");
    let once: BTreeSet<&(String, String)> = paged.iter().collect();
    assert_eq!(once.len(), paged.len(), "no observation twice");
    for o in &before {
        assert!(once.contains(o), "{o:?} of the first look was skipped");
    }
    assert!(
        paged.windows(2).all(|w| w[0].1 <= w[1].1),
        "in time order across pages"
    );
    let status = d.stop(Duration::from_secs(30));
    assert!(status.success(), "exit status {status}");
}
