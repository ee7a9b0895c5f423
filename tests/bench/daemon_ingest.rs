//! The daemon taking one huge file: generates about 100 MB of invented,
//! valid ADES PSV observations of one invented object (seeded; the rows
//! and padding of tests/bench/ingest.rs, a new block every 50,000 rows),
//! runs the real `perihelix serve` on a temporary directory, renames the
//! file into its incoming directory and reports the file's size and rows,
//! the time until the file is in the archive, the observations the API
//! then counts, and the daemon's peak resident memory (VmHWM of
//! /proc/PID/status) before the file and after it was taken, with the
//! largest VmRSS sampled meanwhile. Writes its section of
//! docs/performance.md.
//!
//! Run: `cargo bench --bench daemon_ingest`. Rows:
//! `PERIHELIX_DAEMON_INGEST_ROWS` (default 700,000, about 100 MB); output
//! file: `PERIHELIX_DAEMON_INGEST_OUT` (default docs/performance.md).

#[path = "../common/mod.rs"]
mod common;

use std::time::{Duration, Instant};

use common::daemon::{
    bytes_under, mib, poll_until, proc_status_kib, write_invented_psv, DaemonDir, Running,
    INVENTED_OBJECT,
};

const DEFAULT_ROWS: usize = 700_000;
const ROWS_PER_BLOCK: usize = 50_000;
const SEED: u64 = 20_261_101;

/// Bounds, not expectations: the daemon must be up within a minute and
/// take the file within half an hour even on a loaded 2-core machine.
const START: Duration = Duration::from_secs(60);
const TAKE: Duration = Duration::from_secs(1800);
const SAMPLE: Duration = Duration::from_millis(100);

fn env_or<T: std::str::FromStr>(name: &str, default: T) -> T {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

/// A count with thousands separators, as the other sections write them.
fn thousands(n: u64) -> String {
    let digits = n.to_string();
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    out
}

struct Figures {
    rows: usize,
    file_bytes: u64,
    take_s: f64,
    stored: u64,
    hwm_before_kib: u64,
    hwm_after_kib: u64,
    rss_max_kib: u64,
    rss_after_kib: u64,
    journal_bytes: u64,
    index_bytes: u64,
    chunks: usize,
}

fn run(rows: usize) -> Figures {
    // No refit while the file is taken: the figure is the intake alone.
    let dir = DaemonDir::new("quiet_period_s = 3600\nmax_delay_s = 7200\nrescan_interval_s = 2");
    let daemon = Running::start(&dir, START);
    let pid = daemon.pid();
    let hwm_before_kib = proc_status_kib(pid, "VmHWM").unwrap_or(0);

    // Generated beside the incoming directory, then renamed in, as a
    // careful producer delivers it.
    let staged = dir.path("huge.psv");
    let t = Instant::now();
    {
        let file = std::fs::File::create(&staged).expect("the file is created");
        let mut out = std::io::BufWriter::with_capacity(1 << 20, file);
        write_invented_psv(&mut out, INVENTED_OBJECT, rows, ROWS_PER_BLOCK, SEED)
            .expect("the file is written");
        let file = out.into_inner().expect("the file is flushed");
        file.sync_all().expect("the file is synced");
    }
    let generate_s = t.elapsed().as_secs_f64();
    let file_bytes = std::fs::metadata(&staged).map_or(0, |m| m.len());
    println!(
        "generated {rows} rows, {:.1} MB in {generate_s:.1} s; daemon VmHWM before: {:.1} MiB",
        file_bytes as f64 / 1e6,
        mib(hwm_before_kib)
    );

    let t = Instant::now();
    std::fs::rename(&staged, dir.path("incoming").join("huge.psv")).expect("renamed in");
    let mut rss_max_kib = 0;
    poll_until("the file to be archived", TAKE, SAMPLE, || {
        rss_max_kib = rss_max_kib.max(proc_status_kib(pid, "VmRSS").unwrap_or(0));
        let archived = !dir.files_under("archive").is_empty();
        (archived && dir.files_under("incoming").is_empty()).then_some(())
    });
    let take_s = t.elapsed().as_secs_f64();
    let hwm_after_kib = proc_status_kib(pid, "VmHWM").unwrap_or(0);
    let rss_after_kib = proc_status_kib(pid, "VmRSS").unwrap_or(0);
    let stored = daemon.observation_count(INVENTED_OBJECT).unwrap_or(0);
    let journal = dir.path("db/journal/journal.jsonl");
    let chunks = std::fs::read_to_string(&journal)
        .map(|t| t.lines().count())
        .unwrap_or(0);
    let figures = Figures {
        rows,
        file_bytes,
        take_s,
        stored,
        hwm_before_kib,
        hwm_after_kib,
        rss_max_kib,
        rss_after_kib,
        journal_bytes: std::fs::metadata(&journal).map_or(0, |m| m.len()),
        index_bytes: bytes_under(&dir.path("db/index")),
        chunks,
    };
    let status = daemon.stop(Duration::from_secs(60));
    assert!(status.success(), "the daemon stopped with {status}");
    figures
}

fn section(f: &Figures) -> String {
    let (_, day) = perihelix::watch::clock::now_utc();
    let load = std::fs::read_to_string("/proc/loadavg")
        .ok()
        .and_then(|l| l.split_whitespace().next().map(str::to_string))
        .unwrap_or_else(|| "unknown".into());
    let cores = std::thread::available_parallelism().map_or(0, |n| n.get());
    format!(
        "## The daemon taking a huge file

Bench: `cargo bench --bench daemon_ingest` (tests/bench/daemon_ingest.rs).
It generates {rows} invented, valid ADES PSV observations of one invented
object (seeded, the rows and padding of the ingest bench, a new
observatory/submitter block every {per_block} rows), starts the real
`perihelix serve` on a temporary directory with refits held off (quiet
period 3600 s), renames the file into the incoming directory and polls
until it is in the archive. Memory is the daemon's own: VmHWM (peak
resident) from /proc/PID/status before the file and after it was taken,
and the largest VmRSS sampled every 0.1 s meanwhile. Measured {day} on the
shared development machine ({cores} cores, load average {load} at the end;
with other builds running the time varies by tens of percent, the memory
by about 10%), bench profile.

| what | figure |
|---|---|
| file | {mb:.1} MB, {rows} data rows |
| time from rename to archived | {take:.1} s ({rate} observations/s) |
| observations stored (API count) | {stored} |
| journal entries written | {chunks} |
| journal / index on disk afterwards | {jmb:.0} MB / {imb:.0} MB |
| daemon VmHWM before the file | {before:.1} MiB |
| daemon VmHWM after the file | {after:.1} MiB |
| largest VmRSS sampled while taking it | {rss_max:.1} MiB |
| VmRSS after | {rss_after:.1} MiB |
",
        rows = thousands(f.rows as u64),
        per_block = thousands(ROWS_PER_BLOCK as u64),
        mb = f.file_bytes as f64 / 1e6,
        take = f.take_s,
        rate = thousands((f.stored as f64 / f.take_s.max(1e-9)).round() as u64),
        stored = thousands(f.stored),
        chunks = thousands(f.chunks as u64),
        jmb = f.journal_bytes as f64 / 1e6,
        imb = f.index_bytes as f64 / 1e6,
        before = mib(f.hwm_before_kib),
        after = mib(f.hwm_after_kib),
        rss_max = mib(f.rss_max_kib),
        rss_after = mib(f.rss_after_kib),
    )
}

fn main() {
    let rows = env_or("PERIHELIX_DAEMON_INGEST_ROWS", DEFAULT_ROWS);
    let out = std::env::var("PERIHELIX_DAEMON_INGEST_OUT")
        .map(std::path::PathBuf::from)
        .unwrap_or_else(|_| common::repo().join("docs/performance.md"));
    let f = run(rows);
    let text = section(&f);
    println!("{text}");
    if f.stored != rows as u64 {
        eprintln!(
            "stored {} of {rows} observations: not writing the section",
            f.stored
        );
        std::process::exit(1);
    }
    if let Err(e) = common::write_section(&out, "daemon_ingest", &text) {
        eprintln!("cannot write {}: {e}", out.display());
        std::process::exit(1);
    }
    println!("wrote {}", out.display());
}
