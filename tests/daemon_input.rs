//! What lands in the incoming directory is not always good: the real
//! daemon on malformed, truncated, binary, empty and mixed files, on a big
//! file (taken in chunks, memory bounded) and on a full disk. After each
//! file the daemon still answers its API; good lines are stored (counted
//! through the API); each file is archived, with a report for its bad
//! lines, or rejected with its reason in NAME.errors.json.
//!
//! Every file here is the test's own construction: invented observations
//! of invented objects (half-month letter Z) from the invented stations
//! of config/stations.toml, and random bytes from a fixed seed.

mod common;

use std::io::Write as _;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Duration;

use serde_json::Value;

use common::daemon::{
    invented_block_header, invented_row, poll_until, proc_status_kib, write_invented_psv,
    DaemonDir, Running,
};
use perihelix::fit::sampling::Gaussian;

/// Bounds, not expectations: polls return as soon as the state is reached.
const START: Duration = Duration::from_secs(60);
const TAKE: Duration = Duration::from_secs(120);
const BIG_TAKE: Duration = Duration::from_secs(600);
const POLL: Duration = Duration::from_millis(100);

/// No refits while the tests look at the store: they are about intake.
const NO_REFIT: &str = "quiet_period_s = 3600\nmax_delay_s = 7200\nrescan_interval_s = 1";

/// `rows` generated rows of `object` in one block, as text.
fn psv_rows(object: &str, rows: usize, seed: u64) -> String {
    let mut out = Vec::new();
    write_invented_psv(&mut out, object, rows, rows, seed).expect("written to memory");
    String::from_utf8(out).expect("the generator writes text")
}

/// Waits until `name` has left the incoming directory, checking that the
/// API answers at every poll meanwhile.
fn wait_taken(dir: &DaemonDir, d: &Running, name: &str, limit: Duration) {
    let path = dir.path("incoming").join(name);
    poll_until(&format!("{name} to be taken"), limit, POLL, || {
        assert_eq!(d.get("/healthz").0, 200, "the API answers");
        (!path.exists()).then_some(())
    });
}

/// The file's place in the archive (any day), if it is there.
fn in_archive(dir: &DaemonDir, name: &str) -> Option<PathBuf> {
    dir.files_under("archive")
        .into_iter()
        .find(|p| p.file_name().is_some_and(|n| n == name))
}

fn rejected_file(dir: &DaemonDir, name: &str) -> bool {
    dir.path("rejected").join(name).is_file()
}

/// The reasons a report counts, as (reason, field, lines).
fn reasons(report: &Value) -> Vec<(String, String, u64)> {
    report["by_reason"]
        .as_array()
        .expect("the report counts lines by reason")
        .iter()
        .map(|r| {
            (
                r["reason"].as_str().unwrap_or_default().to_string(),
                r["field"].as_str().unwrap_or_default().to_string(),
                r["lines"].as_u64().unwrap_or(0),
            )
        })
        .collect()
}

/// Drops a file with nothing usable and returns its report, checking
/// that it went to the rejected directory and nothing was stored.
fn expect_rejected(dir: &DaemonDir, d: &Running, name: &str, bytes: &[u8]) -> Value {
    dir.drop_bytes(name, bytes);
    wait_taken(dir, d, name, TAKE);
    assert!(
        rejected_file(dir, name),
        "{name} is in the rejected directory"
    );
    assert!(in_archive(dir, name).is_none(), "{name} is not archived");
    let report = dir.errors_report(name).expect("a report beside it");
    assert_eq!(report["observations_accepted"], 0, "{name}");
    report
}

#[test]
fn files_with_nothing_usable_are_rejected_with_their_reason() {
    let dir = DaemonDir::new(NO_REFIT);
    let d = Running::start(&dir, START);

    // Malformed: text, but no version line (the first line of an ADES
    // PSV file must declare one).
    let r = expect_rejected(
        &dir,
        &d,
        "notes.psv",
        b"observed 2026 ZC4 twice\nclouds later\n",
    );
    assert_eq!(reasons(&r), [("bad_version".into(), String::new(), 1)]);
    assert_eq!(r["rejections"][0]["line"], 1);

    // Malformed JSON lines: every line a syntax error (2 lines).
    let r = expect_rejected(&dir, &d, "broken.jsonl", b"{\"prov_id\": \n[1, 2]\n");
    assert_eq!(reasons(&r), [("syntax".into(), String::new(), 2)]);

    // Binary: 4096 seeded random bytes, which are not UTF-8 (checked here).
    let mut rng = Gaussian::new(4096);
    let bytes: Vec<u8> = (0..4096).map(|_| (rng.uniform() * 256.0) as u8).collect();
    assert!(
        std::str::from_utf8(&bytes).is_err(),
        "the bytes are not UTF-8"
    );
    for name in ["noise.psv", "noise"] {
        let r = expect_rejected(&dir, &d, name, &bytes);
        assert_eq!(r["lines_rejected"], 1, "{name}");
        let why = r["rejections"][0]["problem"]["why"]
            .as_str()
            .unwrap_or_default();
        assert_eq!(why, "not UTF-8 text", "{name}");
    }

    // Empty, with and without an extension that names the format.
    let r = expect_rejected(&dir, &d, "empty.psv", b"");
    assert_eq!(reasons(&r), [("bad_version".into(), String::new(), 1)]);
    let r = expect_rejected(&dir, &d, "empty", b"");
    let why = r["rejections"][0]["problem"]["why"]
        .as_str()
        .unwrap_or_default();
    assert!(why.starts_with("cannot tell the format"), "{why}");

    assert_eq!(
        d.get("/v1/objects").1["objects"].as_array().map(Vec::len),
        Some(0),
        "nothing stored"
    );
    assert!(dir.files_under("archive").is_empty());
    assert!(d.stop(Duration::from_secs(30)).success());
}

#[test]
fn good_lines_are_stored_and_bad_lines_reported_from_mixed_and_truncated_files() {
    let dir = DaemonDir::new(NO_REFIT);
    let d = Running::start(&dir, START);

    // Mixed PSV: 20 generated rows of 2026 ZC6, with row 5's dec made
    // out of range and row 12's station unknown (ZQX is in no list).
    let text = psv_rows("2026 ZC6", 20, 6);
    let mut lines: Vec<String> = text.lines().map(String::from).collect();
    // The block header is 5 lines plus the column header (see
    // invented_block_header): row k, counting from 1, is on line 6 + k.
    let dec_line = 6 + 5;
    let stn_line = 6 + 12;
    let dec = lines[dec_line - 1].split('|').nth(7).unwrap().to_string();
    lines[dec_line - 1] = lines[dec_line - 1].replace(&dec, "+91.000000  ");
    lines[stn_line - 1] = lines[stn_line - 1].replace("|ZQA |", "|ZQX |");
    dir.drop_file("mixed.psv", &(lines.join("\n") + "\n"));
    wait_taken(&dir, &d, "mixed.psv", TAKE);
    assert!(in_archive(&dir, "mixed.psv").is_some());
    // 20 rows, 2 bad (this test's construction).
    assert_eq!(d.observation_count("2026 ZC6"), Some(18));
    let r = dir.errors_report("mixed.psv").expect("a report");
    assert_eq!(r["observations_accepted"], 18);
    assert_eq!(r["lines_rejected"], 2);
    let listed = r["rejections"].as_array().unwrap();
    assert_eq!(listed[0]["line"], dec_line as u64);
    assert_eq!(listed[0]["field"], "dec");
    assert_eq!(listed[0]["problem"]["reason"], "out_of_range");
    assert_eq!(listed[1]["line"], stn_line as u64);
    assert_eq!(listed[1]["field"], "stn");
    assert_eq!(listed[1]["problem"]["reason"], "unknown_station");
    assert!(listed[0]["file"].as_str().unwrap().ends_with("mixed.psv"));

    // Mixed JSON lines: 2 good, 1 with RA out of range, 1 not JSON.
    let jsonl = "\
{\"prov_id\":\"2026 ZC5\",\"station\":\"ZQB\",\"obs_time_utc\":\"2026-11-02T01:00:00Z\",\"ra_deg\":40.1,\"dec_deg\":12.1}
{\"prov_id\":\"2026 ZC5\",\"station\":\"ZQB\",\"obs_time_utc\":\"2026-11-02T01:00:09Z\",\"ra_deg\":400.1,\"dec_deg\":12.1}
this line is not JSON
{\"prov_id\":\"2026 ZC5\",\"station\":\"ZQC\",\"obs_time_utc\":\"2026-11-02T01:00:18Z\",\"ra_deg\":40.3,\"dec_deg\":12.3}
";
    dir.drop_file("mixed.jsonl", jsonl);
    wait_taken(&dir, &d, "mixed.jsonl", TAKE);
    assert!(in_archive(&dir, "mixed.jsonl").is_some());
    assert_eq!(d.observation_count("2026 ZC5"), Some(2));
    let r = dir.errors_report("mixed.jsonl").expect("a report");
    let listed = r["rejections"].as_array().unwrap();
    assert_eq!(listed.len(), 2);
    assert_eq!(
        (listed[0]["line"].as_u64(), listed[0]["field"].as_str()),
        (Some(2), Some("ra_deg"))
    );
    assert_eq!(
        (
            listed[1]["line"].as_u64(),
            listed[1]["problem"]["reason"].as_str()
        ),
        (Some(3), Some("syntax"))
    );

    // Truncated: 20 rows of 2026 ZC7 cut in the middle of the last row
    // (a writer that died part-way): 19 stored, the cut line reported.
    let text = psv_rows("2026 ZC7", 20, 7);
    let last_start = text.trim_end().rfind('\n').unwrap() + 1;
    let cut = last_start + (text.len() - last_start) / 2;
    dir.drop_file("cut.psv", &text[..cut]);
    wait_taken(&dir, &d, "cut.psv", TAKE);
    assert!(in_archive(&dir, "cut.psv").is_some());
    assert_eq!(d.observation_count("2026 ZC7"), Some(19));
    let r = dir.errors_report("cut.psv").expect("a report");
    assert_eq!(reasons(&r), [("truncated".into(), String::new(), 1)]);
    // The last row, the 20th, is on line 6 + 20.
    assert_eq!(r["rejections"][0]["line"], 26);

    // A file of good lines only: archived without a report.
    dir.drop_file("clean.psv", &psv_rows("2026 ZC8", 5, 8));
    wait_taken(&dir, &d, "clean.psv", TAKE);
    assert!(in_archive(&dir, "clean.psv").is_some());
    assert_eq!(d.observation_count("2026 ZC8"), Some(5));
    assert!(dir.errors_report("clean.psv").is_none());

    assert!(dir.files_under("incoming").is_empty());
    assert!(d.stop(Duration::from_secs(30)).success());
}

/// Rows of the big file, and where its blocks start: 150,000 rows (about
/// 21 MB) in blocks of 40,000, so that chunk boundaries (every 1,000
/// lines) fall inside blocks and the last block starts mid-chunk.
const BIG_ROWS: usize = 150_000;
const BIG_BLOCK: usize = 40_000;
const BIG_OBJECT: &str = "2026 ZC4";

/// Writes the big file: generated rows with one bad row (dec out of
/// range) after every 10,000th good row. Returns the bad rows' lines.
fn write_big(out: &mut dyn std::io::Write) -> std::io::Result<Vec<u64>> {
    let mut rng = Gaussian::new(150_000);
    let mut line = 0u64;
    let mut bad = Vec::new();
    for i in 0..BIG_ROWS {
        let block = i / BIG_BLOCK;
        if i % BIG_BLOCK == 0 {
            let header = invented_block_header(block);
            line += header.lines().count() as u64;
            out.write_all(header.as_bytes())?;
        }
        let station = common::daemon::INVENTED_STATIONS[block % 4];
        let row = invented_row(BIG_OBJECT, station, i, &mut rng);
        line += 1;
        out.write_all(row.as_bytes())?;
        if (i + 1) % 10_000 == 0 {
            line += 1;
            bad.push(line);
            let dec = row.split('|').nth(7).unwrap_or_default();
            out.write_all(row.replacen(dec, "-95.000000  ", 1).as_bytes())?;
        }
    }
    Ok(bad)
}

#[test]
fn a_big_file_is_taken_in_chunks_with_bounded_memory() {
    let dir = DaemonDir::new(NO_REFIT);
    let d = Running::start(&dir, START);
    let mut bad_lines = Vec::new();
    let bytes = dir.drop_streamed("big.psv", |out| {
        bad_lines = write_big(out)?;
        Ok(())
    });
    wait_taken(&dir, &d, "big.psv", BIG_TAKE);
    assert!(in_archive(&dir, "big.psv").is_some());
    assert_eq!(d.observation_count(BIG_OBJECT), Some(BIG_ROWS as u64));
    // One bad row after every 10,000th (write_big).
    assert_eq!(bad_lines.len(), BIG_ROWS / 10_000);
    let r = dir.errors_report("big.psv").expect("a report");
    assert_eq!(r["lines_rejected"], bad_lines.len() as u64);
    let listed: Vec<u64> = r["rejections"]
        .as_array()
        .unwrap()
        .iter()
        .filter_map(|x| x["line"].as_u64())
        .collect();
    assert_eq!(listed, bad_lines);

    // The journal holds one entry per chunk (at most 1,000 lines each, so
    // at least lines / 1,000 entries), and every observation in it carries
    // the submitter of its own block, wherever the chunk boundaries fell.
    let journal = std::fs::read_to_string(dir.path("db/journal/journal.jsonl")).unwrap();
    let mut entries = 0;
    let mut seen = 0;
    for line in journal.lines() {
        let entry: Value = serde_json::from_str(line).unwrap();
        entries += 1;
        for o in entry["observations"].as_array().unwrap() {
            let rec = &o["record"];
            let submitter = rec["submitter"].as_str().unwrap();
            let block: usize = submitter.rsplit(' ').next().unwrap().parse().unwrap();
            // Block k starts after k full blocks: its header's 4 context
            // lines and column line, 40,000 rows and 4 bad rows each (and
            // the version line once).
            let first_line = 1 + block * (5 + BIG_BLOCK + BIG_BLOCK / 10_000) + 6;
            let last_line = first_line + BIG_BLOCK + BIG_BLOCK / 10_000;
            let at = rec["line"].as_u64().unwrap() as usize;
            assert!(
                (first_line..last_line).contains(&at),
                "line {at} carries block {block}'s submitter"
            );
            seen += 1;
        }
    }
    assert_eq!(seen, BIG_ROWS);
    let lines = BIG_ROWS + bad_lines.len() + 1 + 5 * BIG_ROWS.div_ceil(BIG_BLOCK);
    assert!(entries >= lines / 1_000, "{entries} journal entries");
    assert!(d.log_text().contains("a big file taken in chunks"));

    // Memory. Before the daemon read in chunks, a 14 MB file of these rows
    // took it to 1.8 GiB (docs/performance.md); in chunks the daemon's peak
    // is flat in the file's size, about 150 MiB for 100 MB in the bench.
    // 600 MiB leaves four times that for a debug build and another
    // allocator's habits, and still fails at once if the file is held
    // whole again.
    let hwm_kib = proc_status_kib(d.pid(), "VmHWM").expect("the daemon's status");
    println!(
        "big file: {:.1} MB, daemon VmHWM {:.1} MiB",
        bytes as f64 / 1e6,
        hwm_kib as f64 / 1024.0
    );
    assert!(hwm_kib < 600 * 1024, "VmHWM {hwm_kib} KiB");
    assert!(d.stop(Duration::from_secs(30)).success());
}

/// Observations in the daemon's journal, counted entry by entry.
fn journaled_observations(dir: &DaemonDir) -> (usize, usize) {
    let journal = std::fs::read_to_string(dir.path("db/journal/journal.jsonl")).unwrap_or_default();
    let mut entries = 0;
    let mut observations = 0;
    for line in journal.lines() {
        let entry: Value = serde_json::from_str(line).expect("a journal entry");
        entries += 1;
        observations += entry["observations"].as_array().map_or(0, Vec::len);
    }
    (entries, observations)
}

#[test]
fn a_stop_in_the_middle_of_a_big_file_leaves_it_for_the_next_start() {
    let dir = DaemonDir::new(NO_REFIT);
    let d = Running::start(&dir, START);
    let mut bad_lines = Vec::new();
    dir.drop_streamed("big.psv", |out| {
        bad_lines = write_big(out)?;
        Ok(())
    });
    // Stop as soon as the first chunk is journaled: the file has about
    // 150 chunks to go (write_big), so the stop lands between two of them.
    poll_until(
        "the first chunk in the journal",
        BIG_TAKE,
        Duration::from_millis(10),
        || {
            (dir.path("db/journal/journal.jsonl")
                .metadata()
                .map_or(0, |m| m.len())
                > 0)
            .then_some(())
        },
    );
    stop_cleanly(d);
    assert!(dir.path("incoming/big.psv").is_file(), "the file stays");
    let (entries, stored) = journaled_observations(&dir);
    assert!(
        entries >= 1 && stored < BIG_ROWS,
        "{entries} entries, {stored} observations"
    );
    assert!(in_archive(&dir, "big.psv").is_none());

    // The next start takes the whole file; what the first run stored is
    // found stored, so every observation is in the journal exactly once.
    let d = Running::start(&dir, START);
    wait_taken(&dir, &d, "big.psv", BIG_TAKE);
    assert!(in_archive(&dir, "big.psv").is_some());
    assert_eq!(d.observation_count(BIG_OBJECT), Some(BIG_ROWS as u64));
    assert_eq!(journaled_observations(&dir).1, BIG_ROWS);
    let report = dir.errors_report("big.psv").expect("a report");
    assert_eq!(report["lines_rejected"], bad_lines.len() as u64);
    stop_cleanly(d);
}

/// A small tmpfs mounted on a directory for as long as it lives (we run as
/// root); unmounted when dropped, whatever happened.
struct Tmpfs {
    at: PathBuf,
}

impl Tmpfs {
    /// Mounts, or says why it cannot.
    fn mount(at: &Path, size: &str) -> Result<Self, String> {
        std::fs::create_dir_all(at).map_err(|e| e.to_string())?;
        let out = Command::new("mount")
            .args(["-t", "tmpfs", "-o", &format!("size={size}"), "tmpfs"])
            .arg(at)
            .output()
            .map_err(|e| format!("cannot run mount: {e}"))?;
        if !out.status.success() {
            return Err(String::from_utf8_lossy(&out.stderr).trim().to_string());
        }
        Ok(Self {
            at: at.to_path_buf(),
        })
    }
}

impl Drop for Tmpfs {
    fn drop(&mut self) {
        let ok = Command::new("umount")
            .arg(&self.at)
            .status()
            .is_ok_and(|s| s.success());
        if !ok {
            // Still busy (a daemon that has not let go): detach it now, it
            // goes once the last file on it is closed.
            let _ = Command::new("umount").arg("-l").arg(&self.at).status();
        }
    }
}

/// Fills the file system under `dir` with one file until it refuses.
fn fill(path: &Path) {
    let mut f = std::fs::File::create(path).expect("the filler is created");
    let block = vec![0u8; 64 << 10];
    loop {
        if let Err(e) = f.write_all(&block) {
            assert_eq!(e.raw_os_error(), Some(28), "filled until ENOSPC: {e}");
            break;
        }
    }
    // Whatever went in part-way stays; the disk is full.
    let _ = f.flush();
}

#[test]
fn a_full_disk_keeps_the_file_waiting_and_nothing_acknowledged_is_lost() {
    let dir = DaemonDir::new(NO_REFIT);
    // The database (journal and index) on a 16 MiB tmpfs. Declared before
    // the daemon, so the daemon is dropped (killed) first and the guard
    // then unmounts.
    let _tmpfs = match Tmpfs::mount(&dir.path("db"), "16m") {
        Ok(t) => t,
        Err(why) => {
            // Straight to the process's stderr: the test harness captures
            // println!, and a skip must not pass silently.
            let _ = writeln!(
                std::io::stderr(),
                "SKIPPED a_full_disk_keeps_the_file_waiting_and_nothing_acknowledged_is_lost: \
                 cannot mount a tmpfs on the database directory ({why}); this test needs root"
            );
            return;
        }
    };
    let d = Running::start(&dir, START);

    // 50 generated rows: the header's 6 lines, then the rows. The first
    // 20 go in while there is room: stored and archived.
    let all = psv_rows("2026 ZC9", 50, 9);
    let lines: Vec<&str> = all.lines().collect();
    let (header, rows) = lines.split_at(6);
    let file_of = |rows: &[&str]| format!("{}\n{}\n", header.join("\n"), rows.join("\n"));
    dir.drop_file("first.psv", &file_of(&rows[..20]));
    wait_taken(&dir, &d, "first.psv", TAKE);
    assert_eq!(d.observation_count("2026 ZC9"), Some(20));

    // The disk full: the next file (30 rows) waits in the incoming
    // directory, the daemon says so and keeps serving.
    let filler = dir.path("db/filler");
    fill(&filler);
    dir.drop_file("second.psv", &file_of(&rows[20..]));
    poll_until("the daemon to report the full disk", TAKE, POLL, || {
        d.log_text().contains("the disk is full").then_some(())
    });
    assert!(
        d.log_text()
            .contains("second.psv: kept in the incoming directory"),
        "{}",
        d.log_text()
    );
    assert!(dir.path("incoming/second.psv").is_file());
    assert_eq!(d.get("/healthz").0, 200);
    assert_eq!(d.observation_count("2026 ZC9"), Some(20));

    // Room again: the file is taken at the next retry, all 50 stored.
    std::fs::remove_file(&filler).expect("the filler goes");
    wait_taken(&dir, &d, "second.psv", TAKE);
    assert!(in_archive(&dir, "second.psv").is_some());
    assert_eq!(d.observation_count("2026 ZC9"), Some(50));

    // And after a restart, everything acknowledged is still there.
    stop_cleanly(d);
    let d = Running::start(&dir, START);
    assert_eq!(d.observation_count("2026 ZC9"), Some(50));
    stop_cleanly(d);
}

/// SIGTERM; the daemon must exit 0 (its log in the message if not).
fn stop_cleanly(d: Running) {
    let log = d.log.clone();
    let status = d.stop(Duration::from_secs(30));
    assert!(
        status.success(),
        "exit status {status}:\n{}",
        std::fs::read_to_string(log).unwrap_or_default()
    );
}
