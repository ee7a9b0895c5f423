//! Taking files into a real store in a temporary directory. Every input
//! is the test's own construction: invented designations (half-month
//! letter Z) and the invented stations of config/stations.toml.

use std::path::Path;
use std::sync::atomic::{AtomicUsize, Ordering};

use super::*;
use crate::config::load_stations;
use crate::ingest::stream::Limits;
use crate::store::SledStore;

const OBJECT: &str = "2026 ZC4";

struct Setup {
    _root: tempfile::TempDir,
    config: Config,
    store: SledStore,
}

fn setup() -> Setup {
    let root = tempfile::tempdir().unwrap();
    let mut config = Config::embedded_default(root.path());
    config.stations =
        load_stations(&Path::new(env!("CARGO_MANIFEST_DIR")).join("config/stations.toml")).unwrap();
    for d in [&config.directories.incoming, &config.directories.archive] {
        std::fs::create_dir_all(d).unwrap();
    }
    let store = SledStore::open(&config.directories.database).unwrap();
    Setup {
        _root: root,
        config,
        store,
    }
}

impl Setup {
    fn drop_file(&self, name: &str, bytes: &[u8]) -> PathBuf {
        let path = self.config.directories.incoming.join(name);
        std::fs::write(&path, bytes).unwrap();
        path
    }

    fn stored(&self) -> u64 {
        self.store
            .object(&format!("provID:{OBJECT}"))
            .unwrap()
            .map_or(0, |o| o.observations)
    }
}

/// A PSV file of `good` valid rows (one every 9 s from ZQA), with a row
/// whose dec is out of range after every `bad_every` good ones.
fn psv(good: usize, bad_every: usize) -> String {
    let mut text = "# version=2022\n# observatory\n! mpcCode ZQA\n# submitter\n! name Invented\n\
                    provID|mode|stn|obsTime|ra|dec|astCat\n"
        .to_string();
    for i in 0..good {
        let (h, m, s) = (i / 400, (i / 60) % 60, i % 60);
        let day = 1 + i / 9000;
        let ra = 40.0 + i as f64 * 1e-5;
        text.push_str(&format!(
            "{OBJECT}|CCD|ZQA|2026-11-{day:02}T{:02}:{m:02}:{s:02}.{:03}Z|{ra:.6}|+12.0|Gaia3\n",
            h % 24,
            i % 1000
        ));
        if bad_every > 0 && (i + 1) % bad_every == 0 {
            text.push_str(&format!(
                "{OBJECT}|CCD|ZQA|2026-11-01T00:00:00Z|{ra:.6}|+91.0|Gaia3\n"
            ));
        }
    }
    text
}

fn archived(t: &Taken) -> (&BTreeMap<String, usize>, usize, usize, Option<&PathBuf>) {
    match t {
        Taken::Archived {
            added,
            duplicates,
            lines_rejected,
            errors,
            ..
        } => (added, *duplicates, *lines_rejected, errors.as_ref()),
        other => panic!("not archived: {other:?}"),
    }
}

fn report(path: &Path) -> serde_json::Value {
    serde_json::from_slice(&std::fs::read(path).unwrap()).unwrap()
}

#[test]
fn a_big_file_is_journaled_a_chunk_at_a_time_then_archived() {
    let s = setup();
    // 2,500 good rows and 2 bad ones (after rows 1,000 and 2,000): 2,508
    // lines, three chunks of at most 1,000 lines each.
    assert_eq!(Limits::DAEMON.chunk_lines, 1_000);
    let path = s.drop_file("big.psv", psv(2_500, 1_000).as_bytes());
    let taken = take_file(&path, &s.config, &s.store).unwrap();
    let (added, duplicates, lines_rejected, errors) = archived(&taken);
    assert_eq!(added.values().sum::<usize>(), 2_500);
    assert_eq!((duplicates, lines_rejected), (0, 2));
    // One journal entry per chunk.
    assert_eq!(s.store.journal_seq(), 3);
    assert_eq!(s.stored(), 2_500);
    assert!(!path.exists());
    let doc = report(errors.unwrap());
    assert_eq!(doc["observations_accepted"], 2_500);
    assert_eq!(doc["rejections"].as_array().unwrap().len(), 2);
    assert_eq!(doc["rejections"][0]["field"], "dec");
    // Line 7 is the first row; the bad row follows row 1,000.
    assert_eq!(doc["rejections"][0]["line"], 1_007);
}

#[test]
fn a_file_stopped_half_way_stays_and_is_taken_whole_later_without_repeats() {
    let s = setup();
    let path = s.drop_file("big.psv", psv(2_500, 0).as_bytes());
    let asked = AtomicUsize::new(0);
    // Stop when asked before the second chunk.
    let stop = || asked.fetch_add(1, Ordering::SeqCst) >= 1;
    let hooks = Hooks {
        progress: &|_| {},
        stop: &stop,
    };
    match take_file_with(&path, &s.config, &s.store, hooks) {
        Err(TakeError::Stopped { chunks: 1, .. }) => {}
        other => panic!("expected a stop after one chunk: {other:?}"),
    }
    assert!(path.exists(), "the file stays in the incoming directory");
    // The first chunk (1,000 lines: 6 header lines and 994 rows) is stored.
    assert_eq!(s.stored(), 994);
    let taken = take_file(&path, &s.config, &s.store).unwrap();
    let (added, duplicates, _, _) = archived(&taken);
    assert_eq!(added.values().sum::<usize>(), 2_500 - 994);
    assert_eq!(duplicates, 994);
    assert_eq!(s.stored(), 2_500);
}

#[test]
fn a_file_stored_already_still_asks_for_the_refit_its_object_waits_for() {
    let s = setup();
    let text = psv(10, 0);
    let first = s.drop_file("a.psv", text.as_bytes());
    take_file(&first, &s.config, &s.store).unwrap();
    // The same observations again (as after a failure between journal and
    // archive): nothing new, but the object, never fitted, is listed.
    let again = s.drop_file("a-again.psv", text.as_bytes());
    let taken = take_file(&again, &s.config, &s.store).unwrap();
    let (added, duplicates, _, _) = archived(&taken);
    assert_eq!(duplicates, 10);
    assert_eq!(added.values().copied().collect::<Vec<_>>(), vec![0]);
}

#[test]
fn the_report_lists_the_first_bad_lines_and_counts_them_all_by_reason() {
    let s = setup();
    // 1,500 bad rows (a bad dec after every good row), then 100 lines with
    // an unknown station.
    let mut text = psv(1_500, 1);
    for i in 0..100 {
        text.push_str(&format!(
            "{OBJECT}|CCD|ZQX|2026-11-03T00:00:{:02}Z|40.0|+12.0|Gaia3\n",
            i % 60
        ));
    }
    let path = s.drop_file("bad.psv", text.as_bytes());
    let taken = take_file(&path, &s.config, &s.store).unwrap();
    let (_, _, lines_rejected, errors) = archived(&taken);
    assert_eq!(lines_rejected, 1_600);
    let doc = report(errors.unwrap());
    assert_eq!(doc["lines_rejected"], 1_600);
    assert_eq!(doc["rejections"].as_array().unwrap().len(), REPORT_LISTED);
    assert_eq!(doc["rejections_not_listed"], 1_600 - REPORT_LISTED);
    let by_reason = doc["by_reason"].as_array().unwrap();
    assert_eq!(by_reason.len(), 2);
    assert_eq!(by_reason[0]["reason"], "out_of_range");
    assert_eq!(by_reason[0]["field"], "dec");
    assert_eq!(by_reason[0]["lines"], 1_500);
    // The first bad row is line 8 (after row 1 on line 7).
    assert_eq!(by_reason[0]["first_line"], 8);
    assert_eq!(by_reason[1]["reason"], "unknown_station");
    assert_eq!(by_reason[1]["lines"], 100);
}

#[test]
fn files_with_nothing_usable_go_to_rejected_with_their_reason() {
    let s = setup();
    let cases: [(&str, &[u8], &str); 3] = [
        ("empty.psv", b"", "empty file"),
        (
            "binary.psv",
            b"# version=2022\n\xff\xfe\x00\x01\n",
            "not UTF-8",
        ),
        ("huge.xml", b"", "refused because they are read whole"),
    ];
    for (name, bytes, why) in cases {
        let path = if name == "huge.xml" {
            // Just over the XML limit; its content is never read.
            let p = s.drop_file(name, b"");
            let f = std::fs::File::options().write(true).open(&p).unwrap();
            f.set_len(Limits::DAEMON.xml_bytes + 1).unwrap();
            p
        } else {
            s.drop_file(name, bytes)
        };
        match take_file(&path, &s.config, &s.store).unwrap() {
            Taken::Rejected { to, errors, reason } => {
                assert!(reason.contains(why), "{name}: {reason}");
                assert!(to.exists() && !path.exists(), "{name}");
                assert_eq!(report(&errors)["lines_rejected"], 1, "{name}");
            }
            other => panic!("{name}: {other:?}"),
        }
    }
    assert_eq!(s.store.journal_seq(), 0);
}

#[test]
fn a_file_gone_before_it_is_read_is_gone() {
    let s = setup();
    let path = s.config.directories.incoming.join("never.psv");
    assert_eq!(take_file(&path, &s.config, &s.store).unwrap(), Taken::Gone);
}

#[test]
fn hidden_and_partial_names_are_left_alone() {
    for name in [".x.psv", "a.psv.part", "b.tmp", ".hidden"] {
        assert!(!is_candidate(Path::new(name)), "{name}");
    }
    for name in ["night1.psv", "batch.xml", "a.jsonl", "noext"] {
        assert!(is_candidate(Path::new(name)), "{name}");
    }
}

#[test]
fn archive_names_never_collide() {
    let dir = tempfile::tempdir().unwrap();
    let a = unique_path(dir.path(), "n1.psv");
    std::fs::write(&a, "x").unwrap();
    let b = unique_path(dir.path(), "n1.psv");
    assert_eq!(b.file_name().unwrap(), "n1~2.psv");
    std::fs::write(&b, "x").unwrap();
    assert_eq!(
        unique_path(dir.path(), "n1.psv").file_name().unwrap(),
        "n1~3.psv"
    );
}
