//! Replays every committed fuzz seed through all three readers: a reader
//! may reject any input, but must never panic on it.

use perihelix::config::StationList;
use perihelix::ingest::{read_text, Format};

#[test]
fn every_corpus_file_reads_without_panic() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fuzz/corpus");
    let mut files = 0;
    for dir in ["psv", "xml", "jsonl"] {
        for entry in std::fs::read_dir(root.join(dir)).unwrap() {
            let path = entry.unwrap().path();
            let bytes = std::fs::read(&path).unwrap();
            let text = String::from_utf8_lossy(&bytes);
            for format in [Format::AdesPsv, Format::AdesXml, Format::JsonLines] {
                let read = read_text("seed", &text, format, &StationList::default());
                // Something was read or rejected: no input vanishes silently.
                assert!(
                    !read.observations.is_empty()
                        || !read.rejected.is_empty()
                        || text.trim().is_empty(),
                    "{}: {format:?} produced nothing",
                    path.display()
                );
            }
            files += 1;
        }
    }
    assert!(files >= 6, "corpus has only {files} files");
}
