//! Every input here is the test's own construction, with the invented
//! stations ZQA and ZQB and invented designations (half-month letter Z).

use super::*;
use crate::config::Station;
use crate::ingest::read_path;

fn stations() -> StationList {
    StationList::new(["ZQA", "ZQB"].map(|c| Station {
        code: c.into(),
        name: "Invented".into(),
        longitude_deg: 0.0,
        latitude_deg: 0.0,
        height_m: 0.0,
        sigma_arcsec: None,
    }))
}

/// Two blocks with different observatories and submitters, a bad line in
/// each, blank lines, and a byte-order mark: whatever a chunk boundary
/// could break.
const TWO_BLOCKS: &str = "\u{feff}# version=2022
# observatory
! mpcCode ZQA
# submitter
! name Invented One

provID    |mode|stn|obsTime                 |ra        |dec       |astCat
2026 ZC4  |CCD |ZQA|2026-11-01T01:00:00.000Z|40.000001 |+12.000001|Gaia3
2026 ZC4  |CCD |ZQA|2026-11-01T01:00:09.000Z|40.000002 |+91.000002|Gaia3
2026 ZC4  |CCD |ZQA|2026-11-01T01:00:18.000Z|40.000003 |+12.000003|Gaia3
# observatory
! mpcCode ZQB
# submitter
! name Invented Two
stn|provID    |mode|obsTime                 |ra        |dec       |astCat
ZQB|2026 ZC4  |CCD |2026-11-02T01:00:00.000Z|41.000001 |+11.000001|Gaia3

ZQX|2026 ZC4  |CCD |2026-11-02T01:00:09.000Z|41.000002 |+11.000002|Gaia3
ZQB|2026 ZC4  |CCD |2026-11-02T01:00:18.000Z|41.000003 |+11.000003|Gaia3
";

const JSON_LINES: &str = r#"{"prov_id":"2026 ZC5","station":"ZQA","obs_time_utc":"2026-11-01T01:00:00Z","ra_deg":40.1,"dec_deg":12.1}
{"prov_id":"2026 ZC5","station":"ZQA","obs_time_utc":"2026-11-01T01:00:09Z","ra_deg":400.1,"dec_deg":12.1}

{"prov_id":"2026 ZC5","station":"ZQB","obs_time_utc":"2026-11-01T01:00:18Z","ra_deg":40.3,"dec_deg":12.3}
{"prov_id":"2026 ZC5","station":"ZQB","obs_ti"#;

fn write(dir: &tempfile::TempDir, name: &str, bytes: &[u8]) -> std::path::PathBuf {
    let path = dir.path().join(name);
    std::fs::write(&path, bytes).unwrap();
    path
}

fn limits(chunk_lines: usize) -> Limits {
    Limits {
        chunk_lines,
        ..Limits::DAEMON
    }
}

/// Every chunk of a file, in order.
fn chunks(path: &Path, limits: Limits) -> Vec<Chunk> {
    let stations = stations();
    let mut file = match open(path, &stations, limits) {
        Ok(f) => f,
        Err(e) => panic!("{path:?} refused: {e:?}"),
    };
    let mut out = Vec::new();
    while let Some(c) = file.next_chunk().unwrap() {
        out.push(c);
    }
    assert_eq!(file.bytes_read(), file.bytes_total());
    out
}

fn refusal(path: &Path, limits: Limits) -> Rejection {
    match open(path, &stations(), limits) {
        Err(Refused::Rejected(r)) => r,
        Err(Refused::Missing) => panic!("{path:?} reported missing"),
        Ok(_) => panic!("{path:?} was not refused"),
    }
}

/// Chunked reading gives exactly what reading the file whole gives, for
/// every chunk size from one line up.
fn same_as_whole(name: &str, text: &str) {
    let dir = tempfile::tempdir().unwrap();
    let path = write(&dir, name, text.as_bytes());
    let whole = read_path(&path, &stations());
    assert!(!whole.observations.is_empty() && !whole.rejected.is_empty());
    let lines = text.lines().count();
    for chunk_lines in 1..=lines + 1 {
        let got = chunks(&path, limits(chunk_lines));
        let observations: Vec<_> = got.iter().flat_map(|c| c.observations.clone()).collect();
        let rejected: Vec<_> = got.iter().flat_map(|c| c.rejected.clone()).collect();
        assert_eq!(
            observations, whole.observations,
            "{chunk_lines} lines a chunk"
        );
        assert_eq!(rejected, whole.rejected, "{chunk_lines} lines a chunk");
        // Chunks hold at most their lines' results.
        assert!(got.iter().all(|c| c.observations.len() <= chunk_lines));
    }
}

#[test]
fn psv_in_chunks_reads_as_whole_and_keeps_each_block_context() {
    same_as_whole("two.psv", TWO_BLOCKS);
    let dir = tempfile::tempdir().unwrap();
    let path = write(&dir, "two.psv", TWO_BLOCKS.as_bytes());
    // One line per chunk: the second block's observations still carry its
    // own submitter (line numbers and names from TWO_BLOCKS above).
    let all: Vec<Observation> = chunks(&path, limits(1))
        .into_iter()
        .flat_map(|c| c.observations)
        .collect();
    let at = |line: u32| all.iter().find(|o| o.source.line == line).unwrap();
    assert_eq!(at(8).submitter(), Some("Invented One"));
    assert_eq!(at(16).submitter(), Some("Invented Two"));
    assert_eq!(at(19).submitter(), Some("Invented Two"));
}

#[test]
fn json_lines_in_chunks_read_as_whole() {
    same_as_whole("obs.jsonl", JSON_LINES);
}

#[test]
fn chunks_also_end_at_the_byte_limit() {
    let dir = tempfile::tempdir().unwrap();
    let path = write(&dir, "two.psv", TWO_BLOCKS.as_bytes());
    let small = Limits {
        chunk_bytes: 1,
        ..Limits::DAEMON
    };
    // A chunk ends after the first line that reaches 1 byte: one line each,
    // so the 19 lines of TWO_BLOCKS make 19 chunks.
    assert_eq!(chunks(&path, small).len(), 19);
}

#[test]
fn an_over_long_line_is_rejected_with_its_number_and_the_rest_is_read() {
    let dir = tempfile::tempdir().unwrap();
    let mut text = TWO_BLOCKS.to_string();
    // Line 20 (TWO_BLOCKS has 19): 100 bytes without a line end, past an
    // 80-byte limit.
    text.push_str(&"x".repeat(100));
    let path = write(&dir, "long.psv", text.as_bytes());
    let tight = Limits {
        line_bytes: 80,
        ..Limits::DAEMON
    };
    let got = chunks(&path, tight);
    let rejected: Vec<Rejection> = got.iter().flat_map(|c| c.rejected.clone()).collect();
    let last = rejected.last().unwrap();
    assert_eq!(last.line, 20);
    assert_eq!(last.problem, Problem::LineTooLong { limit_bytes: 80 });
    // The lines before it (all under 80 bytes) read as before: 4 good
    // observations of TWO_BLOCKS.
    let observations: usize = got.iter().map(|c| c.observations.len()).sum();
    assert_eq!(observations, 4);
}

#[test]
fn a_file_that_is_not_utf8_is_refused_whole_at_its_first_bad_line() {
    let dir = tempfile::tempdir().unwrap();
    let mut bytes = TWO_BLOCKS.as_bytes().to_vec();
    // A lone continuation byte at the start of line 20.
    bytes.extend_from_slice(b"\x80 and more\n");
    let path = write(&dir, "bad.psv", &bytes);
    let r = refusal(&path, Limits::DAEMON);
    assert_eq!(r.line, 20);
    assert!(matches!(r.problem, Problem::Syntax { ref why } if why == "not UTF-8 text"));
    // The same as reading it whole says.
    assert_eq!(read_path(&path, &stations()).rejected, vec![r]);
}

#[test]
fn the_survey_finds_characters_cut_by_its_blocks_and_bad_bytes() {
    // 'é' (2 bytes) placed across the first block boundary.
    let mut text = "\u{feff}  \n".to_string();
    text.push_str(&"a".repeat(SURVEY_BLOCK - text.len() - 1));
    text.push_str("é\n#x\n");
    let s = survey(&mut text.as_bytes()).unwrap();
    assert_eq!(s.not_utf8_line, None);
    assert_eq!(s.bytes, text.len() as u64);
    assert_eq!(s.first, Some('a'));
    // A file ending inside a character is not UTF-8, on its last line (3).
    let mut cut = "#\n\n".as_bytes().to_vec();
    cut.push(0xC3);
    assert_eq!(survey(&mut cut.as_slice()).unwrap().not_utf8_line, Some(3));
    // An empty file: nothing at all.
    assert_eq!(survey(&mut [].as_slice()).unwrap(), Survey::default());
}

#[test]
fn empty_and_unknown_files_are_refused_as_when_read_whole() {
    let dir = tempfile::tempdir().unwrap();
    // An empty .psv is read, and its reader says it has no version line.
    let path = write(&dir, "empty.psv", b"");
    let got = chunks(&path, Limits::DAEMON);
    let rejected: Vec<Rejection> = got.into_iter().flat_map(|c| c.rejected).collect();
    assert_eq!(rejected, read_path(&path, &stations()).rejected);
    assert_eq!(rejected.len(), 1);
    // Without an extension or a telling first character: refused.
    let path = write(&dir, "noext", b"   \n  hello\n");
    let r = refusal(&path, Limits::DAEMON);
    assert_eq!(read_path(&path, &stations()).rejected, vec![r]);
    // A file that is gone.
    let gone = dir.path().join("gone.psv");
    assert!(matches!(
        open(&gone, &stations(), Limits::DAEMON),
        Err(Refused::Missing)
    ));
}

const XML: &str = r#"<?xml version="1.0" encoding="UTF-8"?>
<ades version="2022">
  <obsBlock>
    <obsContext>
      <observatory><mpcCode>ZQA</mpcCode></observatory>
      <submitter><name>Invented One</name></submitter>
    </obsContext>
    <obsData>
      <optical><provID>2026 ZC6</provID><mode>CCD</mode><stn>ZQA</stn><obsTime>2026-11-01T01:00:00Z</obsTime><ra>40.1</ra><dec>12.1</dec><astCat>Gaia3</astCat></optical>
      <optical><provID>2026 ZC6</provID><mode>CCD</mode><stn>ZQA</stn><obsTime>2026-11-01T01:00:09Z</obsTime><ra>40.2</ra><dec>92.1</dec><astCat>Gaia3</astCat></optical>
      <optical><provID>2026 ZC6</provID><mode>CCD</mode><stn>ZQA</stn><obsTime>2026-11-01T01:00:18Z</obsTime><ra>40.3</ra><dec>12.3</dec><astCat>Gaia3</astCat></optical>
    </obsData>
  </obsBlock>
</ades>
"#;

#[test]
fn xml_is_read_whole_handed_out_in_chunks_and_refused_when_too_large() {
    let dir = tempfile::tempdir().unwrap();
    let path = write(&dir, "obs.xml", XML.as_bytes());
    let whole = read_path(&path, &stations());
    // One observation a chunk: two chunks for the two good records, the
    // rejection (line 10, dec 92.1) with the first.
    let got = chunks(&path, limits(1));
    assert_eq!(got.len(), 2);
    assert_eq!(got[0].rejected, whole.rejected);
    assert_eq!(got[0].rejected[0].line, 10);
    let observations: Vec<_> = got.iter().flat_map(|c| c.observations.clone()).collect();
    assert_eq!(observations, whole.observations);
    let small = Limits {
        xml_bytes: 100,
        ..Limits::DAEMON
    };
    let r = refusal(&path, small);
    assert_eq!(
        r.problem,
        Problem::TooLarge {
            bytes: XML.len() as u64,
            limit_bytes: 100,
            format: "ADES XML",
        }
    );
    assert_eq!(r.line, 0);
}
