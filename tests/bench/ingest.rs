//! Ingest throughput: reads 1,000,000 ADES PSV observation lines, laid out
//! with padding like the ADES examples, and reports lines per second and
//! peak resident memory (VmHWM from /proc/self/status).
//!
//! Run with `cargo bench --bench ingest`.

use std::sync::Arc;
use std::time::Instant;

use perihelix::config::{Station, StationList};
use perihelix::ingest::{psv, read_text, Format};

const LINES: usize = 1_000_000;

fn vm_hwm_kib() -> Option<u64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

fn generate() -> String {
    let mut s = String::with_capacity(LINES * 170);
    s.push_str("# version=2022\n# observatory\n! mpcCode XQ1\n# submitter\n! name A. Nobody\n");
    s.push_str("permID |provID     |trkSub  |mode|stn |obsTime                 |ra          |dec         |rmsRA|rmsDec|rmsCorr|astCat|mag  |rmsMag|band|notes|remarks\n");
    for i in 0..LINES {
        let sec = i % 60;
        let min = (i / 60) % 60;
        let hour = (i / 3600) % 24;
        let day = 1 + (i / 86400) % 28;
        let ra = 100.0 + (i % 100_000) as f64 * 0.001;
        let dec = -30.0 + (i % 50_000) as f64 * 0.001;
        s.push_str(&format!(
            "       |2031 QA7   |  qx{:02}  | CCD|XQ1 |2026-03-{day:02}T{hour:02}:{min:02}:{sec:02}.125Z|{ra:<12.6}|{dec:<+12.6}|0.15 |0.13  | 0.21  |Gaia3 |21.9 |0.25  |   G|K    |\n",
            i % 100
        ));
    }
    s
}

fn main() {
    let stations = StationList::new([Station {
        code: "XQ1".into(),
        name: "Invented site".into(),
        longitude_deg: 10.0,
        latitude_deg: 45.0,
        height_m: 100.0,
        sigma_arcsec: None,
    }]);
    let text = generate();
    let base = vm_hwm_kib().unwrap_or(0);
    println!(
        "input: {LINES} lines, {:.1} MB; VmHWM after generating it: {base} KiB",
        text.len() as f64 / 1e6
    );
    let file: Arc<str> = Arc::from("bench.psv");
    for round in 0..3 {
        let t = Instant::now();
        let (mut ok, mut bad) = (0usize, 0usize);
        psv::read_with(&file, &text, &stations, |r| match r {
            Ok(_) => ok += 1,
            Err(_) => bad += 1,
        });
        let dt = t.elapsed().as_secs_f64();
        assert_eq!((ok, bad), (LINES, 0));
        println!(
            "streaming read, round {round}: {:.3} s, {:.0} lines/s, VmHWM {} KiB",
            dt,
            LINES as f64 / dt,
            vm_hwm_kib().unwrap_or(0)
        );
    }
    let t = Instant::now();
    let read = read_text("bench.psv", &text, Format::AdesPsv, &stations);
    let dt = t.elapsed().as_secs_f64();
    assert_eq!(read.observations.len(), LINES);
    let hwm = vm_hwm_kib().unwrap_or(0);
    println!(
        "collecting read: {:.3} s, {:.0} lines/s, VmHWM {hwm} KiB ({} KiB above the input, {:.0} bytes per kept observation)",
        dt,
        LINES as f64 / dt,
        hwm.saturating_sub(base),
        hwm.saturating_sub(base) as f64 * 1024.0 / LINES as f64
    );
}
