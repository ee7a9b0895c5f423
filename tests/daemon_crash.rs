//! The daemon's store under abuse, with the real binary, real files renamed
//! into the watched directory, a real sled store on disk and real HTTP:
//! - kill -9 at seeded random moments of a stream of 100 files, restarting
//!   each time: every observation stored once, every file archived or
//!   rejected whole, solution numbers without gaps, history never rewritten;
//! - the index deleted and rebuilt from the journal gives back the same
//!   observations and solution records;
//! - a damaged index or journal is refused at start with what is wrong and
//!   its remedy; a second daemon on the same store is told it is in use.
//!
//! kill -9 is not power loss. SIGKILL ends the process, but what it had
//! handed to the kernel (written pages, renames) is still there, so these
//! tests prove the order of the daemon's own steps (journal, index, flush,
//! move) whichever instruction the kill lands on; they say nothing about
//! writes a disk's cache loses when the power goes.
//!
//! The observations are the invented hyperbolic body's
//! (tests/reference/fixtures/synthetic/hyperbolic_gravity/noisy.psv, made
//! by tests/reference/make_synthetic_astrometry.py). Every daemon here
//! fits the gravity-only model on DE421: the embedded ephemeris fills its
//! tables for each fit (about 13 s for the original and future 1/a here)
//! and the non-gravitational rungs take up to 15 s on the stream's early
//! short arcs, while the store's behaviour does not depend on which models
//! are fitted. So a fit takes about half a second, short enough for a few
//! dozen crash trials and long enough for kills to land inside fits.

mod common;

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::process::{Command, ExitStatus};
use std::time::{Duration, Instant};

use serde_json::{json, Value};

use common::daemon::{encode, poll_until, psv_file, psv_nights, run_bounded, DaemonDir, Running};
use common::repo;
use perihelix::fit::sampling::Gaussian;

const FIXTURE: &str = "tests/reference/fixtures/synthetic/hyperbolic_gravity/noisy.psv";
/// The provisional designation of every row of FIXTURE.
const OBJECT: &str = "2026 ZC2";
/// A second invented body, so that the rebuilt index holds two objects.
const SECOND_FIXTURE: &str = "tests/reference/fixtures/synthetic/bound_comet/noisy.psv";

/// The crash stream: this many files over this many kill-and-restart
/// trials, so that each of the three aims below comes round eight times
/// or more.
const FILES: usize = 100;
const TRIALS: usize = 25;
/// File of the stream that holds no observation (rejected whole).
const JUNK_FILE: usize = 37;
/// File of the stream with one bad line among good ones (archived, with a
/// report of the bad line in the rejected directory).
const BAD_LINE_FILE: usize = 61;
/// Every this many files, one sends the previous file's rows again, as a
/// station re-sending a night does: stored once all the same.
const RESEND_EVERY: usize = 10;

/// The seed of the kill moments; PERIHELIX_CRASH_SEED replaces it to try
/// others. The same seed gives the same schedule, not the same run: the
/// daemon's own pace varies, so a failure may need a few runs to repeat.
const DEFAULT_SEED: u64 = 0x0C0F_FEE5_2026_1203;
/// A trial's files arrive at random moments within this span...
const DROP_SPAN_S: f64 = 0.6;
/// ...and a kill "anywhere" falls within this span of the trial's start:
/// the drops, their intake, the quiet period (0.3 s) and a fit (~0.5 s).
const KILL_SPAN_S: f64 = 2.0;
/// A kill "after a drop" falls this soon after the last file arrived:
/// while it is read, journaled, indexed, flushed and moved (a few
/// milliseconds for these small files).
const AFTER_DROP_S: f64 = 0.008;
/// A kill "during a fit" falls this soon after a fit is seen running.
const IN_FIT_S: f64 = 0.3;

/// Generous bounds on a loaded 2-core machine; every poll returns as soon
/// as the state is reached.
const START: Duration = Duration::from_secs(60);
const SETTLE: Duration = Duration::from_secs(240);
const COMMAND: Duration = Duration::from_secs(120);
const STOP: Duration = Duration::from_secs(60);
const POLL: Duration = Duration::from_millis(50);

/// A daemon directory: a short quiet period so that fits happen during
/// the stream, the gravity-only model on DE421 (see the top of the file).
fn daemon_dir() -> DaemonDir {
    let spk = repo().join("tests/reference/data/de421.bsp");
    assert!(
        spk.is_file(),
        "{} is missing: run bash tests/reference/fetch-de421.sh",
        spk.display()
    );
    DaemonDir::new(&format!(
        "quiet_period_s = 0.3\nmax_delay_s = 5\nrescan_interval_s = 2\n\
         [fit]\nladder = [\"gravity\"]\n\
         [ephemeris]\nsource = \"spk\"\npath = \"{}\"",
        spk.display()
    ))
}

/// The obsTime of a data row, as the store keeps it (trimmed).
fn obs_time(header: &str, row: &str) -> String {
    let columns = header.lines().last().expect("a column header");
    let col = columns
        .split('|')
        .position(|c| c.trim() == "obsTime")
        .expect("an obsTime column");
    row.split('|')
        .nth(col)
        .expect("the row has an obsTime")
        .trim()
        .to_string()
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Kind {
    Data,
    /// Data and one line that cannot be read.
    BadLine,
    /// Nothing readable.
    Junk,
}

/// One file of the crash stream, with what it must leave in the store.
struct StreamFile {
    name: String,
    text: String,
    /// obsTime of every good row it carries (a re-sent row too).
    times: Vec<String>,
    kind: Kind,
}

/// The 100 files of the crash stream: FIXTURE's rows in time order over
/// the 99 files that are not junk, every RESEND_EVERY-th also carrying its
/// predecessor's rows, one with a bad line.
fn crash_stream() -> Vec<StreamFile> {
    let (header, nights) = psv_nights(&repo().join(FIXTURE));
    let rows: Vec<String> = nights.into_iter().flat_map(|(_, r)| r).collect();
    let carriers = FILES - 1;
    let mut chunks = (0..carriers)
        .map(|k| rows[k * rows.len() / carriers..(k + 1) * rows.len() / carriers].to_vec());
    let mut files = Vec::with_capacity(FILES);
    let mut previous: Vec<String> = Vec::new();
    for i in 0..FILES {
        let name = format!("stream-{i:03}.psv");
        if i == JUNK_FILE {
            files.push(StreamFile {
                name,
                text: "this is not an observation file\n".into(),
                times: Vec::new(),
                kind: Kind::Junk,
            });
            continue;
        }
        let own = chunks.next().expect("a chunk per carrying file");
        let mut good = Vec::new();
        if i % RESEND_EVERY == RESEND_EVERY - 1 {
            good.extend(previous.iter().cloned());
        }
        good.extend(own.iter().cloned());
        let mut lines = good.clone();
        let kind = if i == BAD_LINE_FILE {
            // A row whose right ascension is not a number: that line is
            // rejected, the others are stored.
            let mut fields: Vec<&str> = own[0].split('|').collect();
            fields[4] = "not-a-number";
            lines.insert(1, fields.join("|"));
            Kind::BadLine
        } else {
            Kind::Data
        };
        files.push(StreamFile {
            name,
            text: psv_file(&header, &lines),
            times: good.iter().map(|r| obs_time(&header, r)).collect(),
            kind,
        });
        previous = own;
    }
    files
}

/// /metrics as name -> value.
fn metrics(d: &Running) -> BTreeMap<String, f64> {
    d.get_text("/metrics")
        .lines()
        .filter(|l| !l.starts_with('#'))
        .filter_map(|l| {
            let (k, v) = l.rsplit_once(' ')?;
            Some((k.to_string(), v.parse().ok()?))
        })
        .collect()
}

/// Settled: nothing in the incoming directory, no object due for a refit
/// (the rule of ObjectState::needs_refit in service/store/records.rs: no
/// observation journaled after its latest solution's inputs), no fit
/// running or waiting.
fn settled(d: &Running, dir: &DaemonDir) -> bool {
    if !dir.files_under("incoming").is_empty() {
        return false;
    }
    let (status, list) = d.get("/v1/objects");
    if status != 200 {
        return false;
    }
    let objects = list["objects"].as_array().expect("an object list");
    let due = objects.iter().any(|o| {
        let seq = |f: &str| o[f].as_u64().unwrap_or_else(|| panic!("{f} in {o}"));
        seq("last_obs_journal_seq") > seq("latest_inputs_journal_seq")
    });
    if due {
        return false;
    }
    let m = metrics(d);
    m.get("perihelix_fits_running") == Some(&0.0)
        && m.get("perihelix_refit_queue_depth") == Some(&0.0)
}

fn wait_settled(d: &Running, dir: &DaemonDir) -> Duration {
    let started = Instant::now();
    poll_until("the daemon to settle", SETTLE, POLL, || {
        settled(d, dir).then_some(())
    });
    started.elapsed()
}

/// Every stored observation of an object, all pages.
fn observations(d: &Running, object: &str) -> Vec<Value> {
    let mut out = Vec::new();
    let mut cursor: Option<String> = None;
    loop {
        let mut path = format!("/v1/objects/{}/observations?limit=1000", encode(object));
        if let Some(c) = &cursor {
            path.push_str(&format!("&cursor={c}"));
        }
        let (status, page) = d.get(&path);
        assert_eq!(status, 200, "{page}");
        out.extend(page["observations"].as_array().expect("a page").clone());
        match page["next_cursor"].as_str() {
            Some(c) => cursor = Some(c.to_string()),
            None => return out,
        }
    }
}

/// The file name of an archived or rejected path.
fn name_of(p: &Path) -> String {
    p.file_name()
        .expect("a file name")
        .to_string_lossy()
        .into_owned()
}

/// What the restarted daemon and its directories must show after the
/// first `written` files of the stream, whatever the kills did: the
/// expected values all come from the stream's construction
/// (crash_stream). `history` holds the solution summaries seen so far,
/// oldest first, which no later run may change. Returns (observations,
/// solutions, extra rejection reports).
fn check_store(
    d: &Running,
    dir: &DaemonDir,
    written: &[StreamFile],
    history: &mut Vec<Value>,
) -> (usize, usize, usize) {
    // Observations: each distinct row once, none missing, none extra.
    let expected: BTreeSet<String> = written.iter().flat_map(|f| f.times.clone()).collect();
    let (_, list) = d.get("/v1/objects");
    let objects = list["objects"].as_array().expect("an object list");
    assert_eq!(objects.len(), 1, "one object in the stream: {list}");
    let object = &objects[0];
    assert_eq!(
        object["observations"].as_u64(),
        Some(expected.len() as u64),
        "stored observations"
    );
    let stored = observations(d, OBJECT);
    let keys: BTreeSet<&str> = stored
        .iter()
        .map(|o| o["content_key"].as_str().expect("a content key"))
        .collect();
    assert_eq!(keys.len(), stored.len(), "an observation stored twice");
    let times: BTreeSet<String> = stored
        .iter()
        .map(|o| {
            o["record"]["fields"]["obsTime"]
                .as_str()
                .expect("an obsTime")
                .to_string()
        })
        .collect();
    assert_eq!(times.len(), stored.len(), "two observations at one time");
    assert_eq!(times, expected, "the stored observations");

    // Files: none left in incoming, each in the archive or the rejected
    // directory exactly once and whole, reports beside the bad ones.
    assert!(dir.files_under("incoming").is_empty());
    let archived: Vec<PathBuf> = dir.files_under("archive");
    let rejected: Vec<PathBuf> = dir.files_under("rejected");
    let mut seen: BTreeMap<String, PathBuf> = BTreeMap::new();
    for p in archived.iter().chain(rejected.iter()) {
        let name = name_of(p);
        if name.contains(".errors") {
            continue;
        }
        assert!(
            seen.insert(name.clone(), p.clone()).is_none(),
            "{name} is kept twice"
        );
    }
    let mut reports = 0;
    for f in written {
        let at = seen
            .remove(&f.name)
            .unwrap_or_else(|| panic!("{} is neither archived nor rejected", f.name));
        let in_rejected = at.starts_with(dir.path("rejected"));
        assert_eq!(
            in_rejected,
            f.kind == Kind::Junk,
            "{} went to {}",
            f.name,
            at.display()
        );
        let kept = std::fs::read_to_string(&at).expect("a kept file reads");
        assert_eq!(kept, f.text, "{} was not kept whole", f.name);
        let mine: Vec<&PathBuf> = rejected
            .iter()
            .filter(|p| {
                let n = name_of(p);
                n.starts_with(&format!("{}.errors", f.name)) && n.ends_with(".json")
            })
            .collect();
        if f.kind == Kind::Data {
            assert!(mine.is_empty(), "a report for the good file {}", f.name);
            continue;
        }
        assert!(!mine.is_empty(), "no report beside {}", f.name);
        // Each such file has one bad line by construction (the junk file's
        // is its first, which is no version line); a report names the file
        // as it was called in the incoming directory (ErrorsDocument in
        // service/watch/take.rs).
        for r in &mine {
            let report: Value = serde_json::from_slice(&std::fs::read(r).expect("reads"))
                .unwrap_or_else(|e| panic!("{} is not whole: {e}", r.display()));
            assert_eq!(report["file"], f.name.as_str(), "{}", r.display());
            assert_eq!(report["lines_rejected"], 1, "{}", r.display());
        }
        reports += mine.len();
    }
    assert!(seen.is_empty(), "files nobody wrote: {seen:?}");
    let report_files = rejected
        .iter()
        .filter(|p| name_of(p).contains(".errors"))
        .count();
    assert_eq!(report_files, reports, "reports of no file: {rejected:?}");
    let extra_reports = reports - written.iter().filter(|f| f.kind != Kind::Data).count();

    // Solutions: numbered 1..n without gaps, the newest made from every
    // stored observation, the older ones as they were.
    let summaries = d.solutions(OBJECT);
    let n = object["solutions"].as_u64().expect("a solution count") as usize;
    assert!(n >= 1, "no solution after a settled stream");
    let seqs: Vec<u64> = summaries
        .iter()
        .map(|s| s["seq"].as_u64().expect("a seq"))
        .collect();
    let gapless: Vec<u64> = (1..=n as u64).rev().collect();
    assert_eq!(seqs, gapless, "solution numbers");
    assert_eq!(
        summaries[0]["observations"].as_u64(),
        Some(expected.len() as u64),
        "the newest solution's inputs"
    );
    let oldest_first: Vec<Value> = summaries.into_iter().rev().collect();
    assert!(oldest_first.len() >= history.len(), "solutions vanished");
    for (old, now) in history.iter().zip(&oldest_first) {
        assert_eq!(old, now, "a stored solution changed");
    }
    *history = oldest_first;
    (expected.len(), n, extra_reports)
}

/// Where a trial's kill is aimed (its moment is random within the aim).
#[derive(Debug, Clone, Copy)]
enum Aim {
    Anywhere,
    AfterDrop,
    DuringFit,
}

fn seed() -> u64 {
    match std::env::var("PERIHELIX_CRASH_SEED") {
        Ok(s) => s
            .trim()
            .parse()
            .expect("PERIHELIX_CRASH_SEED is an unsigned integer"),
        Err(_) => DEFAULT_SEED,
    }
}

/// One daemon directory carries on across the trials (the daemon is
/// restarted on it after each kill) rather than a fresh one per trial: a
/// store that has been through earlier kills, with their torn tails cut
/// and replays done, is the store a real crash meets; fresh directories
/// would only ever test the first crash of a small store.
#[test]
fn kill_9_at_random_moments_loses_nothing_and_doubles_nothing() {
    let seed = seed();
    let mut rng = Gaussian::new(seed);
    println!("seed {seed} (set PERIHELIX_CRASH_SEED to replay another)");
    let stream = crash_stream();
    assert_eq!(stream.len(), FILES);
    let per_trial = FILES / TRIALS;
    let dir = daemon_dir();
    let began = Instant::now();
    let mut d = Running::start(&dir, START);
    let mut written = 0;
    let mut history: Vec<Value> = Vec::new();
    let (mut fits_hit, mut intake_hit, mut torn_cut, mut replays, mut extra_reports) =
        (0, 0, 0, 0, 0);
    for trial in 0..TRIALS {
        let aim = match trial % 3 {
            0 => Aim::Anywhere,
            1 => Aim::AfterDrop,
            _ => Aim::DuringFit,
        };
        let mut drops: Vec<f64> = (0..per_trial)
            .map(|_| rng.uniform() * DROP_SPAN_S)
            .collect();
        drops.sort_by(f64::total_cmp);
        let last_drop = drops[drops.len() - 1];
        let kill_at = match aim {
            Aim::Anywhere => rng.uniform() * KILL_SPAN_S,
            Aim::AfterDrop => last_drop + rng.uniform() * AFTER_DROP_S,
            Aim::DuringFit => rng.uniform() * IN_FIT_S,
        };
        let files = &stream[written..written + per_trial];

        // The trial's files arrive at their moments; the kill comes at
        // its own, possibly before some of them.
        let t0 = Instant::now();
        let at = |s: f64| t0 + Duration::from_secs_f64(s);
        let mut next = 0;
        while next < files.len() && (matches!(aim, Aim::DuringFit) || drops[next] <= kill_at) {
            if let Some(wait) = at(drops[next]).checked_duration_since(Instant::now()) {
                std::thread::sleep(wait);
            }
            dir.drop_file(&files[next].name, &files[next].text);
            next += 1;
        }
        if matches!(aim, Aim::DuringFit) {
            // Every trial brings new observations, so a fit always comes.
            poll_until("a fit to start", SETTLE, Duration::from_millis(5), || {
                (metrics(&d).get("perihelix_fits_running") == Some(&1.0)).then_some(())
            });
            std::thread::sleep(Duration::from_secs_f64(kill_at));
        } else if let Some(wait) = at(kill_at).checked_duration_since(Instant::now()) {
            std::thread::sleep(wait);
        }
        // Whether a fit was running is asked just before the kill, except
        // when the kill is aimed at the intake, whose work is over sooner
        // than the question would take.
        let fitting = match aim {
            Aim::DuringFit => Some(true),
            Aim::AfterDrop => None,
            Aim::Anywhere => Some(metrics(&d).get("perihelix_fits_running") == Some(&1.0)),
        };
        d.kill9();
        // Files the dead daemon had not finished taking.
        let waiting = dir.files_under("incoming").len();
        fits_hit += usize::from(fitting == Some(true));
        intake_hit += usize::from(waiting > 0);
        // Files due after the kill arrive while the daemon is down.
        for f in &files[next..] {
            dir.drop_file(&f.name, &f.text);
        }
        written += per_trial;

        d = Running::start(&dir, START);
        let settle = wait_settled(&d, &dir);
        let log = d.log_text();
        let errors: Vec<&str> = log.lines().filter(|l| l.contains(" ERROR ")).collect();
        assert!(errors.is_empty(), "errors after the restart:\n{log}");
        let cut = log.contains("cutting off a torn last entry");
        let replayed = log
            .lines()
            .find(|l| l.contains("replayed the journal's tail"))
            .and_then(|l| l.rsplit("entries=").next())
            .and_then(|n| n.trim().parse::<usize>().ok())
            .unwrap_or(0);
        torn_cut += usize::from(cut);
        replays += usize::from(replayed > 0);
        let (obs, sols, extra) = check_store(&d, &dir, &stream[..written], &mut history);
        extra_reports = extra;
        println!(
            "trial {trial:2} {aim:?}: drops at {drops:.3?} s, kill at {kill_at:.3} s{}; at the kill \
             fit running: {}; left in incoming: {waiting}; restart: torn tail cut: {cut}, \
             entries replayed: {replayed}; settled in {settle:.1?}; {written} files, {obs} \
             observations, {sols} solutions",
            if matches!(aim, Aim::DuringFit) {
                " after a fit was seen running"
            } else {
                ""
            },
            fitting.map_or("not asked".to_string(), |f| f.to_string()),
        );
    }
    assert_eq!(written, FILES);
    // A clean stop and start after all that keeps it all.
    let status = d.stop(STOP);
    assert!(status.success(), "exit status {status}");
    let d = Running::start(&dir, START);
    assert!(settled(&d, &dir), "work left after a clean stop");
    check_store(&d, &dir, &stream, &mut history);
    assert!(d.stop(STOP).success());
    // Nothing went wrong in any of the runs, killed ones included.
    let logs: Vec<PathBuf> = std::fs::read_dir(dir.root.path())
        .expect("the daemon directory lists")
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| {
            let n = name_of(p);
            n.starts_with("daemon") && n.ends_with(".log")
        })
        .collect();
    assert_eq!(logs.len(), TRIALS + 2, "one log per run: {logs:?}");
    for log in &logs {
        let text = std::fs::read_to_string(log).expect("a log reads");
        assert!(
            !text.lines().any(|l| l.contains(" ERROR ")),
            "{}:\n{text}",
            log.display()
        );
    }
    println!(
        "{TRIALS} kills: {fits_hit} just after a fit was seen running, {intake_hit} left files \
         in incoming; {torn_cut} restarts cut a torn journal tail, {replays} replayed entries \
         into the index; {extra_reports} extra rejection report(s); {:.1?} in all",
        began.elapsed()
    );
}

/// Feeds a fresh daemon FIXTURE in three groups of nights and SECOND_FIXTURE's
/// first nights, waiting for each group's solution: three solutions of
/// OBJECT and one of the second body (the counts come from this
/// construction: one settled fit per group).
fn feed(d: &Running, dir: &DaemonDir) {
    let (header, nights) = psv_nights(&repo().join(FIXTURE));
    let groups = [&nights[..6], &nights[6..20], &nights[20..]];
    for (k, group) in groups.iter().enumerate() {
        let rows: Vec<String> = group.iter().flat_map(|(_, r)| r.clone()).collect();
        dir.drop_file(&format!("group-{k}.psv"), &psv_file(&header, &rows));
        if k == 1 {
            let (h2, n2) = psv_nights(&repo().join(SECOND_FIXTURE));
            let rows: Vec<String> = n2[..8].iter().flat_map(|(_, r)| r.clone()).collect();
            dir.drop_file("second-body.psv", &psv_file(&h2, &rows));
        }
        wait_settled(d, dir);
    }
    let (_, o) = d.get(&format!("/v1/objects/{}", encode(OBJECT)));
    assert_eq!(o["solutions"], 3, "one solution per group: {o}");
}

/// What the API says of the whole store: every object with its
/// observations, its solution list, and every solution record (and its
/// residuals, where the API serves them apart), as JSON.
fn snapshot(d: &Running) -> Value {
    let (status, list) = d.get("/v1/objects");
    assert_eq!(status, 200, "{list}");
    let mut out = Vec::new();
    for o in list["objects"].as_array().expect("an object list") {
        let id = o["id"].as_str().expect("an id");
        let n = o["solutions"].as_u64().expect("a solution count");
        let records: Vec<Value> = (1..=n)
            .map(|seq| {
                let base = format!("/v1/objects/{}/solutions/{seq}", encode(id));
                let (status, record) = d.get(&base);
                assert_eq!(status, 200, "{record}");
                let (rs, residuals) = d.get(&format!("{base}/residuals"));
                json!({ "record": record, "residuals": [rs, residuals] })
            })
            .collect();
        out.push(json!({
            "object": o,
            "observations": observations(d, id),
            "solutions": d.solutions(id),
            "records": records,
        }));
    }
    Value::Array(out)
}

/// The first place two JSON values differ, for a readable failure.
fn first_difference(a: &Value, b: &Value, at: &str) -> Option<String> {
    match (a, b) {
        (Value::Object(x), Value::Object(y)) => {
            let keys: BTreeSet<&String> = x.keys().chain(y.keys()).collect();
            keys.into_iter().find_map(|k| {
                first_difference(
                    x.get(k).unwrap_or(&Value::Null),
                    y.get(k).unwrap_or(&Value::Null),
                    &format!("{at}.{k}"),
                )
            })
        }
        (Value::Array(x), Value::Array(y)) if x.len() == y.len() => x
            .iter()
            .zip(y)
            .enumerate()
            .find_map(|(i, (p, q))| first_difference(p, q, &format!("{at}[{i}]"))),
        _ if a == b => None,
        _ => {
            let short = |v: &Value| v.to_string().chars().take(400).collect::<String>();
            Some(format!("{at}: {} before, {} after", short(a), short(b)))
        }
    }
}

fn assert_same_store(before: &Value, after: &Value, when: &str) {
    if let Some(d) = first_difference(before, after, "store") {
        panic!("{when}: the store differs at {d}");
    }
}

/// Totals over a snapshot: (objects, observations, solutions).
fn totals(snapshot: &Value) -> (u64, u64, u64) {
    let objects = snapshot.as_array().expect("a snapshot");
    let sum = |f: &str| {
        objects
            .iter()
            .map(|o| o["object"][f].as_u64().expect("a count"))
            .sum()
    };
    (objects.len() as u64, sum("observations"), sum("solutions"))
}

fn perihelix(args: &[&str], dir: &DaemonDir) -> (ExitStatus, String, String) {
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_perihelix"));
    cmd.args(args)
        .arg("--config")
        .arg(&dir.config)
        .env("RUST_LOG", "info");
    run_bounded(&mut cmd, COMMAND)
}

/// `perihelix rebuild`, which must succeed and report the snapshot's
/// totals (what the API said before; the wording is service/main.rs's).
fn rebuild(dir: &DaemonDir, expected: &Value) {
    let (status, out, err) = perihelix(&["rebuild"], dir);
    assert!(status.success(), "rebuild failed ({status}):\n{err}");
    let (objects, observations, solutions) = totals(expected);
    let counts = format!("{objects} objects, {observations} observations, {solutions} solutions");
    assert!(out.contains(&counts), "rebuild said {out:?}, not {counts}");
}

#[test]
fn the_index_rebuilt_from_the_journal_gives_back_the_same_store() {
    let dir = daemon_dir();
    let d = Running::start(&dir, START);
    feed(&d, &dir);
    let before = snapshot(&d);
    assert!(d.stop(STOP).success());

    std::fs::remove_dir_all(dir.path("db/index")).expect("the index is deleted");
    let started = Instant::now();
    rebuild(&dir, &before);
    println!("rebuild took {:.1?}", started.elapsed());

    let d = Running::start(&dir, START);
    // Nothing is due after the rebuild, so nothing can change under the
    // comparison.
    assert!(settled(&d, &dir), "the rebuilt store has work to do");
    let after = snapshot(&d);
    assert_same_store(&before, &after, "after the rebuild");
    let (objects, observations, solutions) = totals(&after);
    println!("{objects} objects, {observations} observations, {solutions} solutions back");
    assert!(d.stop(STOP).success());
}

/// Copies a directory tree (the pristine store, put back before each kind
/// of damage).
fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).expect("a directory");
    for e in std::fs::read_dir(from).expect("a directory lists") {
        let e = e.expect("an entry");
        let target = to.join(e.file_name());
        if e.file_type().expect("a file type").is_dir() {
            copy_dir(&e.path(), &target);
        } else {
            std::fs::copy(e.path(), &target).expect("a file copies");
        }
    }
}

fn restore(dir: &DaemonDir, pristine: &Path) {
    let db = dir.path("db");
    std::fs::remove_dir_all(&db).expect("the store is removed");
    copy_dir(pristine, &db);
}

/// Overwrites `len` bytes at `offset` of a file with '#'.
fn overwrite(path: &Path, offset: usize, len: usize) {
    let mut bytes = std::fs::read(path).expect("the file reads");
    let end = (offset + len).min(bytes.len());
    bytes[offset..end].fill(b'#');
    std::fs::write(path, bytes).expect("the file is written");
}

/// Old indexes a rebuild moved aside.
fn moved_aside(dir: &DaemonDir) -> Vec<String> {
    std::fs::read_dir(dir.path("db"))
        .expect("the database directory lists")
        .filter_map(|e| e.ok().map(|e| e.file_name().to_string_lossy().into_owned()))
        .filter(|n| n.starts_with("index.replaced"))
        .collect()
}

/// Starts the daemon on a store that must be refused, and returns what it
/// said.
fn refused(dir: &DaemonDir, what: &str) -> String {
    match Running::try_start(dir, START) {
        Ok(d) => {
            let log = d.log_text();
            drop(d);
            panic!("the daemon started on {what}:\n{log}")
        }
        Err(r) => {
            assert!(!r.status.success(), "{what}: exit status {}", r.status);
            r.stderr
        }
    }
}

#[test]
fn a_damaged_store_is_refused_with_its_remedy_and_a_second_daemon_is_told_it_is_in_use() {
    let dir = daemon_dir();
    let mut d = Running::start(&dir, START);
    feed(&d, &dir);

    // A second daemon on the same database directory: told the store is
    // in use, exits non-zero; the first goes on serving and taking files.
    // "in use" is StoreError::Locked's wording (service/store/error.rs).
    let (status, _, err) = perihelix(&["serve"], &dir);
    assert!(!status.success(), "a second daemon ran: {err}");
    assert!(err.contains("in use"), "{err}");
    // A rebuild under the running daemon: refused the same way, its index
    // left where it is.
    let (status, _, err) = perihelix(&["rebuild"], &dir);
    assert!(
        !status.success(),
        "a rebuild ran under a live daemon: {err}"
    );
    assert!(err.contains("in use"), "{err}");
    assert!(moved_aside(&dir).is_empty(), "{:?}", moved_aside(&dir));
    assert!(
        d.child.try_wait().expect("waits").is_none(),
        "the first daemon stopped"
    );
    let (header, nights) = psv_nights(&repo().join(FIXTURE));
    let before = d.observation_count(OBJECT).expect("the object is known");
    // A night the feed already sent, in a new file: taken (archived), and
    // stored as nothing new.
    dir.drop_file("again.psv", &psv_file(&header, &nights[3].1));
    poll_until("the first daemon to take a file", SETTLE, POLL, || {
        (dir.files_under("incoming").is_empty() && settled(&d, &dir)).then_some(())
    });
    assert_eq!(d.observation_count(OBJECT), Some(before));
    assert!(dir
        .files_under("archive")
        .iter()
        .any(|p| name_of(p) == "again.psv"));
    let good = snapshot(&d);
    assert!(d.stop(STOP).success());
    let pristine = dir.path("db.pristine");
    copy_dir(&dir.path("db"), &pristine);

    // The index's settings damaged: sled cannot open the index. Refused,
    // naming the index and `perihelix rebuild`; after the rebuild the
    // daemon starts and the store is as it was.
    // (The remedy is StoreError::Index's wording, service/store/error.rs.)
    overwrite(&dir.path("db/index/conf"), 0, 16);
    let err = refused(&dir, "a damaged index");
    assert!(err.contains("db/index"), "{err}");
    assert!(err.contains("perihelix rebuild"), "{err}");
    rebuild(&dir, &good);
    let d = Running::start(&dir, START);
    assert_same_store(&good, &snapshot(&d), "after rebuilding a damaged index");
    assert!(d.stop(STOP).success());

    // The index's log damaged in its middle, at seeded places: sled either
    // cannot open it (refused with the remedy, as above) or reads the log
    // up to the damage, and the journal's replay brings back the rest.
    // Either way the daemon never serves a wrong store.
    let mut rng = Gaussian::new(seed());
    for trial in 0..3 {
        restore(&dir, &pristine);
        let log = dir.path("db/index/db");
        let size = std::fs::metadata(&log).expect("the index log").len() as usize;
        let offset = size / 4 + (rng.uniform() * (size / 2) as f64) as usize;
        overwrite(&log, offset, 256);
        let outcome = match Running::try_start(&dir, START) {
            Ok(d) => {
                assert_same_store(&good, &snapshot(&d), "after a damaged index log");
                assert!(d.stop(STOP).success());
                "started, the journal's replay filling in"
            }
            Err(r) => {
                assert!(r.stderr.contains("perihelix rebuild"), "{}", r.stderr);
                rebuild(&dir, &good);
                let d = Running::start(&dir, START);
                assert_same_store(&good, &snapshot(&d), "after rebuilding");
                assert!(d.stop(STOP).success());
                "refused, then rebuilt"
            }
        };
        println!("index log damaged at byte {offset} of {size} (trial {trial}): {outcome}");
    }

    // The journal damaged in its middle: the truth itself. Refused, naming
    // the journal and the line; a rebuild cannot help and must not move
    // the good index aside; with the journal put right the store is back.
    restore(&dir, &pristine);
    let journal = dir.path("db/journal/journal.jsonl");
    let text = std::fs::read_to_string(&journal).expect("the journal reads");
    let lines: Vec<&str> = text.lines().collect();
    assert!(lines.len() >= 3, "{} journal entries", lines.len());
    // The middle line (1-based, as the message counts), damaged inside its
    // JSON with its newline kept, so that it is no torn tail.
    let line = lines.len() / 2 + 1;
    let offset: usize = lines[..line - 1].iter().map(|l| l.len() + 1).sum::<usize>() + 20;
    overwrite(&journal, offset, 8);
    let err = refused(&dir, "a damaged journal");
    assert!(err.contains("journal.jsonl"), "{err}");
    assert!(err.contains(&format!("line {line}")), "{err}");
    let (status, _, err) = perihelix(&["rebuild"], &dir);
    assert!(
        !status.success(),
        "a rebuild from a damaged journal succeeded"
    );
    assert!(err.contains(&format!("line {line}")), "{err}");
    assert!(
        moved_aside(&dir).is_empty(),
        "the index was moved aside: {:?}",
        moved_aside(&dir)
    );
    std::fs::copy(pristine.join("journal/journal.jsonl"), &journal).expect("put right");
    let d = Running::start(&dir, START);
    assert_same_store(&good, &snapshot(&d), "with the journal put right");
    assert!(d.stop(STOP).success());
}
