//! `perihelix import`: an export into an empty store.
//!
//! Every line is checked before the store is touched: the header (format
//! and version), each entry (it parses as a journal entry, it is numbered
//! next, its observations have content keys and designations the index can
//! use, each object's solutions follow each other from 1, references to
//! journal entries point backwards), and the end line (the count of
//! entries, the counts by kind and the digest of everything before it).
//! The entries are written, byte for byte as the export has them, to a
//! hidden file beside the journal (`journal.jsonl.importing`), which is
//! synced and renamed to `journal.jsonl` only when the whole file has
//! passed; a refused import removes it, and the directories it made, so
//! the store is left as empty as it was. Only then is the index built
//! from the new journal, as `perihelix rebuild` would build it.
//!
//! The store is locked for the whole import by opening its index first
//! (the lock a daemon holds), so a daemon can neither be running on it
//! nor start on it half-way.

use std::collections::HashMap;
use std::fs::File;
use std::io::{BufRead, Write};
use std::path::{Path, PathBuf};

use serde::de::IgnoredAny;
use serde::Deserialize;
use sha2::{Digest, Sha256};

use crate::store::index::Index;
use crate::store::journal::{sync_dir, Journal, JOURNAL_FILE};
use crate::store::records::JournalLine;
use crate::store::{index_dir, journal_dir, JournalEntry, OverrideAction, StoreError};

use super::{
    hex, read_line, Counts, End, Header, Line, TransferError, FORMAT, FORMAT_VERSION,
    SOFTWARE_VERSION,
};

/// The longest line an import reads: far above any solution the daemon
/// writes, but a file that is not an export (one without newlines) is
/// refused before it fills the memory.
pub const MAX_LINE_BYTES: u64 = 1 << 30;

/// The name the journal is written under until the whole import passed.
pub const IMPORTING: &str = "journal.jsonl.importing";

/// An export that passed every check.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Checked {
    pub header: Header,
    /// Journal entries in it.
    pub entries: u64,
    pub counts: Counts,
}

/// What an import did.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ImportSummary {
    pub checked: Checked,
    /// The journal written.
    pub journal: PathBuf,
    /// What the index holds after it: objects, observations, solutions.
    pub objects: usize,
    pub observations: usize,
    pub solutions: usize,
}

/// Checks an export without a store: every line, as an import would.
pub fn check(input: &mut dyn BufRead, source: &str) -> Result<Checked, TransferError> {
    read_export(input, source, &mut std::io::sink(), "nothing")
}

/// Imports the export read from `input` (named `source` in messages) into
/// the empty store under `database`, and builds its index.
pub fn import(
    database: &Path,
    input: &mut dyn BufRead,
    source: &str,
) -> Result<ImportSummary, TransferError> {
    let fresh = Fresh::note(database);
    let (index, checked) = match place_journal(database, input, source) {
        Ok(placed) => placed,
        Err(e) => {
            fresh.undo(database);
            return Err(e);
        }
    };
    // The journal is in place: an error from here on leaves a store whose
    // index the next daemon start (or a rebuild) completes.
    let journal = journal_dir(database).join(JOURNAL_FILE);
    index_journal(database, &index).map_err(|source| TransferError::Indexing {
        journal: journal.clone(),
        source,
    })?;
    let (objects, observations, solutions) = index.counts();
    Ok(ImportSummary {
        checked,
        journal,
        objects,
        observations,
        solutions,
    })
}

/// Which of the store's directories did not exist before the import (and
/// are removed again when it is refused).
struct Fresh {
    database: bool,
    journal: bool,
    index: bool,
}

impl Fresh {
    fn note(database: &Path) -> Self {
        Self {
            database: !database.exists(),
            journal: !journal_dir(database).exists(),
            index: !index_dir(database).exists(),
        }
    }

    /// Best effort: what is left is an empty store all the same.
    fn undo(&self, database: &Path) {
        if self.index {
            let _ = std::fs::remove_dir_all(index_dir(database));
        }
        if self.journal {
            let _ = std::fs::remove_dir(journal_dir(database));
        }
        if self.database {
            let _ = std::fs::remove_dir(database);
        }
    }
}

/// Locks the store, checks that it is empty, and writes the journal from
/// the export; returns the index, still locked, with what was imported.
fn place_journal(
    database: &Path,
    input: &mut dyn BufRead,
    source: &str,
) -> Result<(Index, Checked), TransferError> {
    std::fs::create_dir_all(database).map_err(|e| TransferError::io(database.display(), e))?;
    let index_path = index_dir(database);
    let index = Index::open(&index_path)?;
    let not_empty = |why: String| TransferError::NotEmpty {
        database: database.to_path_buf(),
        why,
    };
    let dir = journal_dir(database);
    std::fs::create_dir_all(&dir).map_err(|e| TransferError::io(dir.display(), e))?;
    let journal = dir.join(JOURNAL_FILE);
    match std::fs::metadata(&journal) {
        Ok(m) if m.len() > 0 => {
            return Err(not_empty(format!(
                "it has a journal, {}, of {} bytes",
                journal.display(),
                m.len()
            )))
        }
        Ok(_) => {}
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
        Err(e) => return Err(TransferError::io(journal.display(), e)),
    }
    if let Some((_, seq)) = index.applied()? {
        return Err(not_empty(format!(
            "its index at {} has applied {seq} journal entries",
            index_path.display()
        )));
    }
    let (objects, observations, solutions) = index.counts();
    if objects + observations + solutions > 0 {
        return Err(not_empty(format!(
            "its index at {} holds {objects} objects, {observations} observations and \
             {solutions} solutions",
            index_path.display()
        )));
    }
    let partial = dir.join(IMPORTING);
    let written = (|| -> Result<Checked, TransferError> {
        let io = |e| TransferError::io(partial.display(), e);
        let file = File::create(&partial).map_err(io)?;
        let mut out = std::io::BufWriter::with_capacity(1 << 16, file);
        let checked = read_export(input, source, &mut out, &partial.display().to_string())?;
        let file = out.into_inner().map_err(|e| io(e.into_error()))?;
        file.sync_all().map_err(io)?;
        // Over an empty journal, if there was one: the lock held keeps
        // anyone from writing to it meanwhile.
        std::fs::rename(&partial, &journal).map_err(|e| TransferError::io(journal.display(), e))?;
        sync_dir(&dir).map_err(|e| TransferError::io(dir.display(), e))?;
        Ok(checked)
    })();
    if written.is_err() {
        let _ = std::fs::remove_file(&partial);
    }
    Ok((index, written?))
}

/// Applies the whole new journal to the index, as a rebuild does.
fn index_journal(database: &Path, index: &Index) -> Result<usize, StoreError> {
    let journal = Journal::open(&journal_dir(database), None)?;
    let mut n = 0;
    for item in journal.read_from(0)? {
        let e = item.map_err(|p| StoreError::Corrupt {
            what: journal.path().display().to_string(),
            why: format!("{p:?} while indexing the import"),
        })?;
        index.apply(&e.line, e.span)?;
        n += 1;
    }
    index.flush()?;
    Ok(n)
}

/// Which kind of line it is, read without keeping anything.
#[derive(Deserialize)]
struct Probe {
    #[serde(default)]
    seq: Option<IgnoredAny>,
    #[serde(default)]
    end: Option<IgnoredAny>,
}

/// Reads and checks the whole export, writing each entry's line to `sink`
/// as it passes.
fn read_export(
    input: &mut dyn BufRead,
    source: &str,
    sink: &mut dyn Write,
    sink_name: &str,
) -> Result<Checked, TransferError> {
    let bad = |line: u64, why: String| TransferError::Input {
        source_name: source.to_string(),
        line,
        why,
    };
    let mut buf = Vec::new();
    let mut number = 0u64;
    let mut next = |buf: &mut Vec<u8>, number: &mut u64| -> Result<bool, TransferError> {
        *number += 1;
        match read_line(input, buf, MAX_LINE_BYTES) {
            Ok(Line::Complete) => Ok(true),
            Ok(Line::End) => Ok(false),
            Ok(Line::Incomplete) => Err(bad(
                *number,
                "cut short: the file ends inside this line (an export that did not finish, \
                 or a partial copy)"
                    .into(),
            )),
            Err(e) if e.kind() == std::io::ErrorKind::InvalidData => {
                Err(bad(*number, e.to_string()))
            }
            Err(e) => Err(TransferError::io(source, e)),
        }
    };

    if !next(&mut buf, &mut number)? {
        return Err(bad(
            1,
            "empty: an export starts with its header line".into(),
        ));
    }
    let header = read_header(&buf).map_err(|why| bad(1, why))?;
    let mut hash = Sha256::new();
    hash.update(&buf);

    let mut entries = 0u64;
    let mut counts = Counts::default();
    let mut solutions: HashMap<String, u64> = HashMap::new();
    let mut end: Option<End> = None;
    while next(&mut buf, &mut number)? {
        if end.is_some() {
            return Err(bad(number, "a line after the end line".into()));
        }
        let probe: Probe =
            serde_json::from_slice(&buf).map_err(|e| bad(number, format!("not JSON: {e}")))?;
        if probe.seq.is_some() {
            let line: JournalLine = serde_json::from_slice(&buf)
                .map_err(|e| bad(number, format!("not a journal entry: {e}")))?;
            if line.seq != entries + 1 {
                return Err(bad(
                    number,
                    format!(
                        "entry {} where entry {} was expected (entries are numbered from 1 \
                         without gaps)",
                        line.seq,
                        entries + 1
                    ),
                ));
            }
            check_entry(&line, &mut solutions)
                .map_err(|why| bad(number, format!("entry {}: {why}", line.seq)))?;
            counts.add(&line.entry);
            entries += 1;
            hash.update(&buf);
            sink.write_all(&buf)
                .map_err(|e| TransferError::io(sink_name, e))?;
        } else if probe.end.is_some() {
            let e: End = serde_json::from_slice(&buf)
                .map_err(|e| bad(number, format!("not the end line: {e}")))?;
            let digest = hex(&hash.clone().finalize());
            let why = if e.end != FORMAT {
                Some(format!("the end line is of {:?}, not {FORMAT:?}", e.end))
            } else if e.entries != entries {
                Some(format!(
                    "the end line counts {} entries, the file has {entries}",
                    e.entries
                ))
            } else if e.counts != counts {
                Some(format!(
                    "the end line counts {}; the file has {counts}",
                    e.counts
                ))
            } else if e.sha256 != digest {
                Some(format!(
                    "the SHA-256 of lines 1 to {} is {digest}, the end line says {}: the \
                     file was changed after it was written",
                    number - 1,
                    e.sha256
                ))
            } else {
                None
            };
            if let Some(why) = why {
                return Err(bad(number, why));
            }
            end = Some(e);
        } else {
            return Err(bad(
                number,
                "neither a journal entry (with \"seq\") nor the end line (with \"end\")".into(),
            ));
        }
    }
    if end.is_none() {
        return Err(bad(
            number,
            format!(
                "the file ends after line {} without its end line: it is cut short (an export \
                 that did not finish, or a partial copy)",
                number - 1
            ),
        ));
    }
    Ok(Checked {
        header,
        entries,
        counts,
    })
}

fn read_header(line: &[u8]) -> Result<Header, String> {
    let header: Header = serde_json::from_slice(line).map_err(|e| {
        if serde_json::from_slice::<JournalLine>(line).is_ok() {
            "a journal entry, not an export's header: a journal file is not an export \
             (to restore one, copy it into place; see docs/backup.md)"
                .to_string()
        } else {
            format!("not the header of a perihelix export: {e}")
        }
    })?;
    if header.format != FORMAT {
        return Err(format!("the format is {:?}, not {FORMAT:?}", header.format));
    }
    if header.format_version == 0 || header.format_version > FORMAT_VERSION {
        return Err(format!(
            "format version {} (written by perihelix {}), which this perihelix \
             ({SOFTWARE_VERSION}) cannot read: it reads version {FORMAT_VERSION}; import with \
             the perihelix that wrote it, or a newer one",
            header.format_version, header.software_version
        ));
    }
    Ok(header)
}

/// What the index needs of an entry, beyond its shape: the checks that
/// would otherwise fail half-way through building it, or leave a store the
/// daemon cannot go on from.
fn check_entry(line: &JournalLine, solutions: &mut HashMap<String, u64>) -> Result<(), String> {
    let before = |what: &str, seq: u64| {
        if seq > line.seq {
            Err(format!(
                "{what} {seq} is after the entry itself ({}): references are to earlier entries",
                line.seq
            ))
        } else {
            Ok(())
        }
    };
    match &line.entry {
        JournalEntry::Observations { observations, .. } => {
            for (i, o) in observations.iter().enumerate() {
                o.content_bytes()
                    .map_err(|why| format!("observation {}: {why}", i + 1))?;
                let keys = o
                    .designation_keys()
                    .map_err(|why| format!("observation {}: {why}", i + 1))?;
                if keys.is_empty() {
                    return Err(format!("observation {}: no designation", i + 1));
                }
            }
        }
        JournalEntry::Solution { record } => {
            let last = solutions.entry(record.object_id.clone()).or_insert(0);
            if record.seq != *last + 1 {
                return Err(format!(
                    "solution {} of {} follows its solution {}: an object's solutions are \
                     numbered from 1 without gaps",
                    record.seq, record.object_id, *last
                ));
            }
            *last = record.seq;
            before("its inputs_journal_seq", record.inputs_journal_seq)?;
            for o in &record.overrides {
                before("the journal_seq of a decision it lists", o.journal_seq)?;
            }
        }
        JournalEntry::Override { record } => {
            before("its journal_seq", record.journal_seq)?;
            if let OverrideAction::Link { designations } = &record.action {
                for d in designations {
                    crate::ingest::DesignationKey::parse(d)?;
                }
            }
        }
        JournalEntry::Delivery { .. } | JournalEntry::Acknowledge { .. } => {}
    }
    Ok(())
}
