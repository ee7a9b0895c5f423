//! `perihelix export` and `perihelix import`: the store as one stream of
//! JSON lines, for backups and for moving a store to another machine.
//!
//! # The format
//!
//! An export is JSON lines, each ending in a newline:
//!
//! 1. A header ([`Header`]): the format's name (`perihelix-export`), its
//!    version ([`FORMAT_VERSION`]), the version of the perihelix that
//!    wrote it, and what was exported: the whole store
//!    (`"scope":"store"`) or one object (`"scope":"object"`, with its id
//!    and designations). An import refuses a file whose format it does not
//!    know or whose version is newer than its own.
//! 2. The journal's entries, one a line, exactly as the journal holds them
//!    (`{"seq":N,"kind":...}`): `observations` (one batch with its
//!    `origin`: the file it came from, where it was archived, when it was
//!    received), `solution` (one fit, successful or not, carrying the
//!    alerts it raised and the rule states after it), `override` (an
//!    analyst's decision, refit requests and designation links included),
//!    `delivery` (one attempt to deliver an alert) and `acknowledge` (an
//!    analyst's acknowledgement of an alert). Everything the index holds is
//!    rebuilt from these, so nothing else is needed.
//! 3. An end line ([`End`]): the number of entries, their counts by kind,
//!    and the SHA-256 of every byte before the end line. A file without it
//!    was cut short (an export that did not finish, a partial copy) and an
//!    import refuses it; a changed byte anywhere is refused by the digest.
//!
//! There is no export time in the file: exporting the same store twice
//! gives the same bytes, which is how a backup is checked (export the
//! restored store and compare). The time of a backup is its file's; the
//! time of its newest entry is in the entry.
//!
//! # Sequence numbers
//!
//! Journal entries are numbered from 1 without gaps, and some records name
//! an entry by its number: a solution's `inputs_journal_seq` (every
//! observation and decision journaled up to there was in the fit) and the
//! `journal_seq` of the decisions it lists (and of an `override` entry,
//! 0 as journaled). An export numbers the entries it writes 1, 2, 3, ...
//! and maps every such reference through the same numbering: an entry
//! number S becomes the count of exported entries numbered S or less.
//! The map keeps order (an exported entry is at or before S exactly when
//! its new number is at or before S's new number), so every "journaled up
//! to here" says after the export what it said before.
//!
//! - A whole-store export keeps every entry, so the map is the identity
//!   and every line is copied byte for byte from the journal. An import
//!   into an empty store writes the lines byte for byte as its journal,
//!   so the imported store's journal is the original's and its export is
//!   the same file.
//! - A one-object export keeps only that object's entries, renumbered;
//!   a line whose numbers or observations change is encoded again, the
//!   others are copied. Its import holds only those entries, already
//!   numbered 1, 2, 3, ..., so exporting the same object from it maps
//!   nothing and copies every line: the same file again.
//!
//! # One object
//!
//! Which entries are one object's is decided as the index decides it: the
//! designation links are replayed over the journal first (every batch's
//! designations, every `link` decision), giving the object the name leads
//! to now (an id, a merged id, or any designation, as the API resolves
//! them) and the ids merged into it. Then the object's entries are:
//! observation batches cut to the observations whose designations lead to
//! it (a batch with none is left out), the solutions and decisions of its
//! id and of every id merged into it, and the delivery attempts and
//! acknowledgements of the alerts those solutions raised. The one
//! simplification: an observation journaled twice (which the intake never
//! does) is linked by its designations each time, where the index skips
//! the repeat.
//!
//! # Memory and a running daemon
//!
//! The journal is read entry by entry, one line held at a time (so the
//! largest line, a solution with its residuals, sets the peak), and never
//! through the index: a running daemon holds the index's lock, and reads
//! of the journal need no lock because it is only ever appended to. An
//! export reads up to the journal's length when it started; a last line
//! without its newline there is an append in progress (or a torn one that
//! the next daemon start cuts off) and is left out, never an error. What
//! is appended later is in the next export. A whole-store export keeps
//! nothing else; a one-object export also keeps the designation links
//! (one entry per designation in the store), the object's alert ids and
//! the numbers of its exported entries (8 bytes each).
//!
//! An import holds one line at a time too, and a map of object id to its
//! last solution number (to check that solutions follow each other).

pub mod export;
pub mod import;

use std::path::PathBuf;

use serde::{Deserialize, Serialize};
use thiserror::Error;

use crate::store::StoreError;

pub use export::{export, export_to_file, ExportSummary};
pub use import::{check, import, Checked, ImportSummary};

/// The format's name, in the header and the end line.
pub const FORMAT: &str = "perihelix-export";

/// The format's version: raised whenever an older import could not read
/// what a newer export writes.
pub const FORMAT_VERSION: u32 = 1;

/// The version of this program, in the header.
pub const SOFTWARE_VERSION: &str = env!("CARGO_PKG_VERSION");

/// The first line of an export.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Header {
    /// Always [`FORMAT`].
    pub format: String,
    pub format_version: u32,
    /// The perihelix that wrote it (an import by another version works,
    /// but its re-export differs in this field).
    pub software_version: String,
    #[serde(flatten)]
    pub exported: Exported,
}

/// What an export holds.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "scope", rename_all = "snake_case")]
pub enum Exported {
    /// Every entry of the journal.
    Store,
    /// One object's entries (see the module's documentation).
    Object {
        /// The id the object has now.
        object: String,
        /// Its designations, in the order the store first saw them.
        designations: Vec<String>,
    },
}

impl Header {
    pub fn new(exported: Exported) -> Self {
        Self {
            format: FORMAT.to_string(),
            format_version: FORMAT_VERSION,
            software_version: SOFTWARE_VERSION.to_string(),
            exported,
        }
    }
}

/// The last line of an export.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct End {
    /// Always [`FORMAT`]: the key that marks the end line.
    pub end: String,
    /// Journal entries in the export.
    pub entries: u64,
    pub counts: Counts,
    /// SHA-256 of every byte before this line (header and entries), hex.
    pub sha256: String,
}

/// What an export holds, by kind.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Counts {
    /// `observations` entries, and the observations in them.
    pub observation_batches: u64,
    pub observations: u64,
    pub solutions: u64,
    /// Alerts raised by those solutions (journaled inside them).
    pub alerts: u64,
    pub overrides: u64,
    pub delivery_attempts: u64,
    pub acknowledgements: u64,
}

impl Counts {
    /// Counts one entry.
    pub fn add(&mut self, entry: &crate::store::JournalEntry) {
        use crate::store::JournalEntry as E;
        match entry {
            E::Observations { observations, .. } => {
                self.observation_batches += 1;
                self.observations += observations.len() as u64;
            }
            E::Solution { record } => {
                self.solutions += 1;
                self.alerts += record.alerts.len() as u64;
            }
            E::Override { .. } => self.overrides += 1,
            E::Delivery { .. } => self.delivery_attempts += 1,
            E::Acknowledge { .. } => self.acknowledgements += 1,
        }
    }
}

impl std::fmt::Display for Counts {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "{} observations in {} batches, {} solutions, {} alerts, {} overrides, {} delivery \
             attempts, {} acknowledgements",
            self.observations,
            self.observation_batches,
            self.solutions,
            self.alerts,
            self.overrides,
            self.delivery_attempts,
            self.acknowledgements
        )
    }
}

/// What can go wrong exporting or importing, each naming the file (and
/// line) concerned.
#[derive(Debug, Error)]
pub enum TransferError {
    #[error(transparent)]
    Store(#[from] StoreError),
    #[error("{what}: {source}")]
    Io {
        what: String,
        source: std::io::Error,
    },
    #[error("there is no journal at {path}: is [directories] database the store's directory?")]
    NoJournal { path: PathBuf },
    #[error("{path}, line {line}: {why}")]
    Journal {
        path: PathBuf,
        line: u64,
        why: String,
    },
    #[error("no object {name:?} in the journal at {path} (give an object id or a designation)")]
    NoObject { name: String, path: PathBuf },
    #[error("{source_name}, line {line}: {why}")]
    Input {
        source_name: String,
        line: u64,
        why: String,
    },
    #[error(
        "the store at {database} is not empty ({why}); import only goes into an empty store: \
         stop its daemon and move the directory aside, or point [directories] database at a \
         new directory, then import again"
    )]
    NotEmpty { database: PathBuf, why: String },
    #[error(
        "the journal at {journal} is imported, but building the index stopped: {source}; \
         `perihelix rebuild --config FILE` (or starting the daemon) finishes it"
    )]
    Indexing {
        journal: PathBuf,
        source: StoreError,
    },
}

impl TransferError {
    pub(crate) fn io(what: impl std::fmt::Display, source: std::io::Error) -> Self {
        Self::Io {
            what: what.to_string(),
            source,
        }
    }
}

/// How a line read ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Line {
    /// A whole line, its newline included, is in the buffer.
    Complete,
    /// The input ended inside a line (in the buffer, without a newline).
    Incomplete,
    /// The input ended; the buffer is empty.
    End,
}

/// Reads one line, at most `max` bytes with its newline, into `buf`
/// (cleared first). A longer line is an error of kind `InvalidData`.
pub(crate) fn read_line(
    reader: &mut dyn std::io::BufRead,
    buf: &mut Vec<u8>,
    max: u64,
) -> std::io::Result<Line> {
    use std::io::{BufRead, Read};
    buf.clear();
    let n = (&mut *reader).take(max).read_until(b'\n', buf)?;
    if n == 0 {
        Ok(Line::End)
    } else if buf.last() == Some(&b'\n') {
        Ok(Line::Complete)
    } else if n as u64 == max {
        Err(std::io::Error::new(
            std::io::ErrorKind::InvalidData,
            format!("a line longer than {max} bytes"),
        ))
    } else {
        Ok(Line::Incomplete)
    }
}

/// SHA-256 as lower-case hex.
pub(crate) fn hex(digest: &[u8]) -> String {
    digest.iter().map(|b| format!("{b:02x}")).collect()
}

#[cfg(test)]
mod tests;
