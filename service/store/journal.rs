//! The append-only journal: one JSON line per entry, fsync'd before the
//! append returns, so an entry the caller has seen acknowledged survives a
//! crash of the process or of the machine (as far as the disk keeps its
//! promise to fsync).
//!
//! A crash in the middle of an append leaves a last line without its
//! newline (or cut inside its JSON). That entry was never acknowledged, so
//! opening the journal cuts it off. A damaged line anywhere else is not a
//! torn append but corruption, and opening refuses with its line number.

use std::fs::{File, OpenOptions};
use std::io::{BufRead, BufReader, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

use super::error::StoreError;
use super::records::{JournalEntry, JournalLine};

pub const JOURNAL_FILE: &str = "journal.jsonl";

pub struct Journal {
    path: PathBuf,
    file: File,
    /// Bytes in the file (the offset of the next entry).
    length: u64,
    /// Sequence number of the last entry (0 when empty).
    last_seq: u64,
}

/// One entry read back, with where it sits in the file.
pub struct ReadEntry {
    pub line: JournalLine,
    pub span: Span,
}

impl ReadEntry {
    /// Where the next entry starts.
    pub fn end_offset(&self) -> u64 {
        self.span.end()
    }
}

/// Where an entry sits in the journal file: its first byte and its length
/// with the newline. Lines never move (the journal is only appended to),
/// so a span stays valid for as long as the file exists.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Span {
    pub start: u64,
    pub len: u64,
}

impl Span {
    pub fn end(&self) -> u64 {
        self.start + self.len
    }

    /// Sixteen bytes, big-endian start then length, as the index keeps it.
    pub fn to_bytes(self) -> [u8; 16] {
        let mut b = [0u8; 16];
        b[..8].copy_from_slice(&self.start.to_be_bytes());
        b[8..].copy_from_slice(&self.len.to_be_bytes());
        b
    }

    pub fn from_bytes(b: &[u8]) -> Option<Self> {
        let start = u64::from_be_bytes(b.get(..8)?.try_into().ok()?);
        let len = u64::from_be_bytes(b.get(8..16)?.try_into().ok()?);
        (b.len() == 16).then_some(Self { start, len })
    }
}

/// Reads single entries at known spans, beside the appender: positioned
/// reads share the file without a lock or a seek position. The large
/// solution documents are read this way rather than kept in the index,
/// so that they sit in the kernel's page cache (which gives memory back
/// under pressure) and not in the daemon's resident memory.
pub struct JournalReader {
    path: PathBuf,
    file: File,
}

impl JournalReader {
    pub fn open(dir: &Path) -> Result<Self, StoreError> {
        let path = dir.join(JOURNAL_FILE);
        let file = File::open(&path).map_err(|e| StoreError::io(&path, e))?;
        Ok(Self { path, file })
    }

    /// The entry at `span`, which the index recorded when it applied it.
    pub fn read(&self, span: Span) -> Result<JournalLine, StoreError> {
        let bytes = self.read_bytes(span)?;
        serde_json::from_slice(&bytes).map_err(|e| self.corrupt(span, &e.to_string()))
    }

    /// The JSON line at `span`, unparsed (for a reader that wants a part).
    pub fn read_bytes(&self, span: Span) -> Result<Vec<u8>, StoreError> {
        use std::os::unix::fs::FileExt;
        let len = usize::try_from(span.len).map_err(|_| self.corrupt(span, "too long"))?;
        let mut buf = vec![0u8; len];
        self.file
            .read_exact_at(&mut buf, span.start)
            .map_err(|e| StoreError::io(&self.path, e))?;
        if buf.last() != Some(&b'\n') {
            return Err(self.corrupt(span, "the span does not end a line"));
        }
        Ok(buf)
    }

    pub fn corrupt(&self, span: Span, why: &str) -> StoreError {
        StoreError::Corrupt {
            what: format!(
                "{} bytes {}..{}",
                self.path.display(),
                span.start,
                span.end()
            ),
            why: why.to_string(),
        }
    }
}

/// fsync of a directory, so that a file created or renamed in it stays.
pub fn sync_dir(dir: &Path) -> std::io::Result<()> {
    File::open(dir)?.sync_all()
}

impl Journal {
    /// Opens (or creates) the journal in `dir`, cutting off a torn last
    /// entry. Every entry is read and checked, not only the tail the index
    /// has yet to apply: the journal is what a rebuild starts from, so
    /// damage anywhere in it is refused now, while the index still holds
    /// what the damaged lines said, rather than at the rebuild that needs
    /// them. `known` is the index's applied position (byte offset after
    /// an entry, that entry's sequence number), which must fall at the end
    /// of that very entry.
    pub fn open(dir: &Path, known: Option<(u64, u64)>) -> Result<Self, StoreError> {
        let io = |e| StoreError::io(dir, e);
        std::fs::create_dir_all(dir).map_err(io)?;
        let path = dir.join(JOURNAL_FILE);
        let created = !path.exists();
        let file = OpenOptions::new()
            .create(true)
            .read(true)
            .append(true)
            .open(&path)
            .map_err(|e| StoreError::io(&path, e))?;
        if created {
            sync_dir(dir).map_err(io)?;
        }
        let mut journal = Self {
            path,
            file,
            length: 0,
            last_seq: 0,
        };
        journal.recover(known)?;
        Ok(journal)
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    pub fn last_seq(&self) -> u64 {
        self.last_seq
    }

    pub fn length(&self) -> u64 {
        self.length
    }

    /// Reads the whole journal to find the last good entry, checking that
    /// the index's applied position (`known`) ends an entry; cuts a torn
    /// tail off.
    fn recover(&mut self, known: Option<(u64, u64)>) -> Result<(), StoreError> {
        let size = self
            .file
            .metadata()
            .map_err(|e| StoreError::io(&self.path, e))?
            .len();
        let mut good_end = 0;
        let mut last_seq = 0;
        let mut torn = false;
        {
            let entries = self.read_from(0)?;
            for item in entries {
                match item {
                    Ok(e) => {
                        if e.line.seq != last_seq + 1 {
                            return Err(StoreError::Corrupt {
                                what: self.path.display().to_string(),
                                why: format!(
                                    "entry {} follows entry {last_seq} at byte {good_end}",
                                    e.line.seq
                                ),
                            });
                        }
                        if let Some((offset, seq)) = known {
                            if e.line.seq == seq && e.end_offset() != offset {
                                return Err(StoreError::Corrupt {
                                    what: self.path.display().to_string(),
                                    why: format!(
                                        "the index has applied entry {seq} as ending at byte \
                                         {offset}, but here it ends at byte {}",
                                        e.end_offset()
                                    ),
                                });
                            }
                        }
                        last_seq = e.line.seq;
                        good_end = e.end_offset();
                    }
                    Err(ReadProblem::Torn) => {
                        torn = true;
                        break;
                    }
                    Err(ReadProblem::Damaged { line, why }) => {
                        return Err(StoreError::Corrupt {
                            what: self.path.display().to_string(),
                            why: format!("line {line} (after byte {good_end}): {why}"),
                        })
                    }
                    Err(ReadProblem::Io(e)) => return Err(StoreError::io(&self.path, e)),
                }
            }
        }
        if let Some((offset, seq)) = known {
            if seq > last_seq {
                return Err(StoreError::Corrupt {
                    what: self.path.display().to_string(),
                    why: format!(
                        "the index has applied it up to entry {seq} (byte {offset}), but it \
                         holds only {last_seq} entries ({good_end} bytes)"
                    ),
                });
            }
        }
        if torn || good_end < size {
            tracing::warn!(
                journal = %self.path.display(),
                cut_bytes = size - good_end,
                "cutting off a torn last entry (an append that never completed)"
            );
            self.file
                .set_len(good_end)
                .and_then(|_| self.file.sync_all())
                .map_err(|e| StoreError::io(&self.path, e))?;
        }
        self.length = good_end;
        self.last_seq = last_seq;
        Ok(())
    }

    /// Appends entries, numbering them, and fsyncs before returning them
    /// with their sequence numbers and places in the file.
    pub fn append(&mut self, entries: Vec<JournalEntry>) -> Result<Vec<ReadEntry>, StoreError> {
        let mut text = Vec::new();
        let mut written = Vec::with_capacity(entries.len());
        for (i, entry) in entries.into_iter().enumerate() {
            let line = JournalLine {
                seq: self.last_seq + 1 + i as u64,
                entry,
            };
            let start = text.len();
            serde_json::to_writer(&mut text, &line)
                .map_err(|e| StoreError::Encode { why: e.to_string() })?;
            text.push(b'\n');
            let span = Span {
                start: self.length + start as u64,
                len: (text.len() - start) as u64,
            };
            written.push(ReadEntry { line, span });
        }
        let result = self
            .file
            .write_all(&text)
            .and_then(|_| self.file.sync_data());
        if let Err(e) = result {
            // A partial write must not stay in front of the next append:
            // cut back to the last good entry (and if even that fails, the
            // torn tail is cut at the next open).
            let _ = self.file.set_len(self.length);
            return Err(StoreError::io(&self.path, e));
        }
        self.length += text.len() as u64;
        self.last_seq += written.len() as u64;
        Ok(written)
    }

    /// The entries from byte `start` on, in order.
    pub fn read_from(
        &self,
        start: u64,
    ) -> Result<impl Iterator<Item = Result<ReadEntry, ReadProblem>>, StoreError> {
        let mut file = File::open(&self.path).map_err(|e| StoreError::io(&self.path, e))?;
        file.seek(SeekFrom::Start(start))
            .map_err(|e| StoreError::io(&self.path, e))?;
        Ok(Entries {
            reader: BufReader::with_capacity(1 << 16, file),
            offset: start,
            number: 0,
            buf: Vec::new(),
            done: false,
        })
    }
}

/// Why an entry could not be read.
#[derive(Debug)]
pub enum ReadProblem {
    /// The last line has no newline or is cut short: an append that never
    /// completed.
    Torn,
    /// A complete line that is not an entry.
    Damaged {
        line: u64,
        why: String,
    },
    Io(std::io::Error),
}

struct Entries {
    reader: BufReader<File>,
    offset: u64,
    /// Lines read by this iterator (for messages).
    number: u64,
    buf: Vec<u8>,
    done: bool,
}

impl Iterator for Entries {
    type Item = Result<ReadEntry, ReadProblem>;

    fn next(&mut self) -> Option<Self::Item> {
        if self.done {
            return None;
        }
        self.buf.clear();
        let n = match self.reader.read_until(b'\n', &mut self.buf) {
            Ok(n) => n,
            Err(e) => {
                self.done = true;
                return Some(Err(ReadProblem::Io(e)));
            }
        };
        if n == 0 {
            self.done = true;
            return None;
        }
        self.number += 1;
        if self.buf.last() != Some(&b'\n') {
            self.done = true;
            return Some(Err(ReadProblem::Torn));
        }
        let span = Span {
            start: self.offset,
            len: n as u64,
        };
        self.offset += n as u64;
        match serde_json::from_slice::<JournalLine>(&self.buf) {
            Ok(line) => Some(Ok(ReadEntry { line, span })),
            Err(e) => {
                self.done = true;
                // Only the very last line can be torn; is there more?
                let more = self
                    .reader
                    .fill_buf()
                    .map(|b| !b.is_empty())
                    .unwrap_or(true);
                if more {
                    Some(Err(ReadProblem::Damaged {
                        line: self.number,
                        why: e.to_string(),
                    }))
                } else {
                    Some(Err(ReadProblem::Torn))
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::store::records::{ObservationEntry, Origin, StoredObservation};

    fn entry(name: &str) -> JournalEntry {
        JournalEntry::Observations {
            origin: Origin {
                name: name.into(),
                archived_as: format!("2026-12-03/{name}"),
                received_utc: "2026-12-03T10:00:00Z".into(),
            },
            observations: vec![ObservationEntry {
                content_key: "00".repeat(32),
                designations: vec!["provID:2026 ZA1".into()],
                obs_time_utc: "2026-12-01T00:00:00.000000000Z".into(),
                station: "ZQA".into(),
                record: StoredObservation {
                    fields: [("stn".to_string(), "ZQA".to_string())].into(),
                    file: name.into(),
                    line: 2,
                    submitter: None,
                    observatory_code: None,
                },
            }],
        }
    }

    #[test]
    fn entries_are_numbered_and_read_back() {
        let dir = tempfile::tempdir().unwrap();
        let mut j = Journal::open(dir.path(), None).unwrap();
        let mut written = j.append(vec![entry("a.psv"), entry("b.psv")]).unwrap();
        assert_eq!(
            written.iter().map(|l| l.line.seq).collect::<Vec<_>>(),
            [1, 2]
        );
        written.extend(j.append(vec![entry("c.psv")]).unwrap());
        drop(j);
        let j = Journal::open(dir.path(), None).unwrap();
        assert_eq!(j.last_seq(), 3);
        let read: Vec<(u64, Span)> = j
            .read_from(0)
            .unwrap()
            .map(|e| e.map(|e| (e.line.seq, e.span)).unwrap())
            .collect();
        assert_eq!(read.iter().map(|r| r.0).collect::<Vec<_>>(), [1, 2, 3]);
        // The places the appender gave are the places a reader finds, and
        // a positioned read at each gives its entry back.
        let reader = JournalReader::open(dir.path()).unwrap();
        for (w, (seq, span)) in written.iter().zip(&read) {
            assert_eq!(w.span, *span);
            assert_eq!(reader.read(*span).unwrap(), w.line);
            assert_eq!(w.line.seq, *seq);
            assert_eq!(Span::from_bytes(&span.to_bytes()), Some(*span));
        }
        // A span that does not hold one whole entry is refused.
        let wrong = Span {
            start: read[1].1.start + 1,
            len: read[1].1.len - 1,
        };
        assert!(matches!(
            reader.read(wrong),
            Err(StoreError::Corrupt { .. })
        ));
    }

    #[test]
    fn a_torn_last_entry_is_cut_and_numbering_goes_on() {
        let dir = tempfile::tempdir().unwrap();
        let mut j = Journal::open(dir.path(), None).unwrap();
        j.append(vec![entry("a.psv")]).unwrap();
        let good = j.length();
        drop(j);
        // Half an entry, as a crash in the middle of a write leaves it.
        let path = dir.path().join(JOURNAL_FILE);
        let mut f = OpenOptions::new().append(true).open(&path).unwrap();
        f.write_all(br#"{"seq":2,"kind":"observ"#).unwrap();
        drop(f);
        let mut j = Journal::open(dir.path(), None).unwrap();
        assert_eq!(j.length(), good);
        assert_eq!(j.last_seq(), 1);
        let lines = j.append(vec![entry("b.psv")]).unwrap();
        assert_eq!(lines[0].line.seq, 2);
    }

    #[test]
    fn damage_before_the_applied_position_is_refused_too() {
        let dir = tempfile::tempdir().unwrap();
        let mut j = Journal::open(dir.path(), None).unwrap();
        j.append(vec![entry("a.psv"), entry("b.psv"), entry("c.psv")])
            .unwrap();
        // The index has applied all three.
        let applied = (j.length(), j.last_seq());
        drop(j);
        assert_eq!(
            Journal::open(dir.path(), Some(applied)).unwrap().last_seq(),
            3
        );
        let path = dir.path().join(JOURNAL_FILE);
        let good = std::fs::read(&path).unwrap();
        // Line 2 damaged inside its JSON, its length and newline kept.
        let text = String::from_utf8(good.clone()).unwrap();
        let mut lines: Vec<String> = text.lines().map(String::from).collect();
        lines[1].replace_range(10..18, "########");
        std::fs::write(&path, lines.join("\n") + "\n").unwrap();
        match Journal::open(dir.path(), Some(applied)) {
            Err(StoreError::Corrupt { why, .. }) => assert!(why.contains("line 2"), "{why}"),
            other => panic!("expected corruption, got {:?}", other.map(|j| j.last_seq())),
        }
        // An applied position that is not where its entry ends, or beyond
        // the journal's last entry: the two do not belong together.
        std::fs::write(&path, &good).unwrap();
        for known in [(applied.0 - 1, 3), (applied.0 + 10, 4)] {
            match Journal::open(dir.path(), Some(known)) {
                Err(StoreError::Corrupt { why, .. }) => assert!(why.contains("the index"), "{why}"),
                other => panic!("expected a mismatch, got {:?}", other.map(|j| j.last_seq())),
            }
        }
    }

    #[test]
    fn damage_before_the_end_is_refused_with_its_line() {
        let dir = tempfile::tempdir().unwrap();
        let mut j = Journal::open(dir.path(), None).unwrap();
        j.append(vec![entry("a.psv")]).unwrap();
        drop(j);
        let path = dir.path().join(JOURNAL_FILE);
        let mut f = OpenOptions::new().append(true).open(&path).unwrap();
        f.write_all(b"not json\n").unwrap();
        drop(f);
        let mut j = Journal::open(dir.path(), None).unwrap();
        // The damaged line was the last one: cut as torn. Now add a good
        // entry after a damaged one, which is corruption.
        j.append(vec![entry("b.psv")]).unwrap();
        drop(j);
        let text = std::fs::read_to_string(&path).unwrap();
        let mut lines: Vec<&str> = text.lines().collect();
        lines.insert(1, "{\"broken\": true}");
        std::fs::write(&path, lines.join("\n") + "\n").unwrap();
        match Journal::open(dir.path(), None) {
            Err(StoreError::Corrupt { why, .. }) => assert!(why.contains("line 2"), "{why}"),
            other => panic!("expected corruption, got {:?}", other.map(|j| j.last_seq())),
        }
    }
}
