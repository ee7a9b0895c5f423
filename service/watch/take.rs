//! Taking one file from the incoming directory: read and validate it in
//! chunks, journal and index each chunk's new observations, write the
//! reasons for its bad lines, and only then move it to the archive (or,
//! with nothing usable, to the rejected directory). Nothing is ever
//! deleted.
//!
//! The order is what makes a crash harmless: a file is still in the
//! incoming directory until all its observations are in the fsync'd
//! journal and the index is flushed, so a crash before that loses nothing
//! (the file is taken again at restart) and a crash after it, or half-way
//! through a big file, re-reads observations that are stored already (so
//! none is stored twice).
//!
//! Memory does not grow with the file: it is read a chunk at a time
//! ([`crate::ingest::stream`]), each chunk's new observations go to the
//! journal as an entry of their own, and the rejection report lists the
//! first [`REPORT_LISTED`] bad lines in full and counts the rest by reason.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

use serde::Serialize;

use crate::config::{Config, Directories};
use crate::ingest::stream::{self, ChunkedFile, Limits, Refused};
use crate::ingest::{ContentKey, DesignationKey, Observation, Rejection};
use crate::store::journal::sync_dir;
use crate::store::{ObservationEntry, Origin, Store, StoreError};

use super::clock::now_utc;

/// What became of a file.
#[derive(Debug, Clone, PartialEq)]
pub enum Taken {
    /// Observations stored (those not stored already); the file is in the
    /// archive.
    Archived {
        to: PathBuf,
        /// New observations per object id. An object whose observations
        /// were all stored already but which still waits for a refit is
        /// listed with 0, so that it is refitted: an earlier try at this
        /// file may have stored them and then failed before the move.
        added: BTreeMap<String, usize>,
        duplicates: usize,
        lines_rejected: usize,
        /// The reasons for the rejected lines, when there were any.
        errors: Option<PathBuf>,
    },
    /// Nothing usable; the file is in the rejected directory with its
    /// reasons beside it.
    Rejected {
        to: PathBuf,
        errors: PathBuf,
        reason: String,
    },
    /// The file disappeared before it could be read.
    Gone,
}

#[derive(Debug, thiserror::Error)]
pub enum TakeError {
    /// The file stays in the incoming directory; taking it again later
    /// may succeed (the disk full, say).
    #[error("{file}: kept in the incoming directory: {source}")]
    Store { file: PathBuf, source: StoreError },
    #[error("{file}: kept in the incoming directory: {why}")]
    Io { file: PathBuf, why: String },
    /// Stopped between chunks (the daemon is stopping); what was stored
    /// so far is found stored when the file is taken again.
    #[error("{file}: kept in the incoming directory: stopped after {chunks} of its chunks")]
    Stopped { file: PathBuf, chunks: usize },
}

impl TakeError {
    pub fn is_disk_full(&self) -> bool {
        match self {
            // sled reports its own I/O failures as text.
            Self::Store { source, .. } => {
                source.is_disk_full() || source.to_string().contains("No space left")
            }
            Self::Io { why, .. } => why.contains("No space left"),
            Self::Stopped { .. } => false,
        }
    }
}

/// How far a file has come, told after each chunk.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Progress {
    /// Chunks read so far.
    pub chunks: usize,
    pub bytes_read: u64,
    pub bytes_total: u64,
    pub observations_accepted: usize,
    pub lines_rejected: usize,
}

/// What a caller hears while a file is taken, and how it stops a long one.
#[derive(Clone, Copy)]
pub struct Hooks<'a> {
    /// Called after each chunk is stored (the daemon feeds its watchdog
    /// from it: a big file is progress, not a stuck loop).
    pub progress: &'a (dyn Fn(&Progress) + Sync),
    /// Asked before each chunk; `true` leaves the file in the incoming
    /// directory ([`TakeError::Stopped`]).
    pub stop: &'a (dyn Fn() -> bool + Sync),
}

fn no_progress(_: &Progress) {}

fn never() -> bool {
    false
}

impl Default for Hooks<'static> {
    fn default() -> Self {
        Self {
            progress: &no_progress,
            stop: &never,
        }
    }
}

/// A name in the incoming directory worth taking: not hidden, not a
/// partial or temporary file.
pub fn is_candidate(path: &Path) -> bool {
    let Some(name) = path.file_name().and_then(|n| n.to_str()) else {
        return false;
    };
    !(name.starts_with('.') || name.ends_with(".part") || name.ends_with(".tmp"))
}

/// `dir/name`, or `dir/stem~N.ext` with the first N that is free: nothing
/// in the archive is ever overwritten.
pub fn unique_path(dir: &Path, name: &str) -> PathBuf {
    let first = dir.join(name);
    if !first.exists() {
        return first;
    }
    let (stem, ext) = match name.rsplit_once('.') {
        Some((s, e)) if !s.is_empty() => (s, format!(".{e}")),
        _ => (name, String::new()),
    };
    (2u64..)
        .map(|n| dir.join(format!("{stem}~{n}{ext}")))
        .find(|p| !p.exists())
        .unwrap_or(first)
}

/// Bad lines listed in full in a rejection report; the rest are counted
/// by reason only, so a report stays small whatever the file.
pub const REPORT_LISTED: usize = 1000;

/// ...and no more of them than this much text (a reason may quote a field,
/// and a field may be as long as a line).
const REPORT_LISTED_BYTES: usize = 1 << 20;

/// Distinct (reason, field) pairs a report counts apart; further pairs
/// (field names come from the input) are counted together as "other".
const REPORT_REASONS: usize = 200;

/// Designations of already-stored observations remembered per file, to
/// find the objects still waiting for a refit (see [`Taken::Archived`]).
const STORED_DESIGNATIONS: usize = 64;

/// Lines rejected for one reason (and field).
#[derive(Debug, Clone, Serialize)]
struct ReasonCount {
    reason: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    field: Option<String>,
    lines: usize,
    first_line: u32,
}

/// The rejection report of one file, bounded in size.
#[derive(Debug, Default)]
struct Report {
    listed: Vec<Rejection>,
    /// The text of the listed rejections, roughly.
    listed_bytes: usize,
    counts: BTreeMap<(&'static str, Option<String>), ReasonCount>,
    lines_rejected: usize,
    observations_accepted: usize,
}

impl Report {
    fn note(&mut self, rejections: Vec<Rejection>) {
        for r in rejections {
            self.lines_rejected += 1;
            self.count(&r);
            if self.listed.len() < REPORT_LISTED && self.listed_bytes < REPORT_LISTED_BYTES {
                self.listed_bytes += r.to_string().len();
                self.listed.push(r);
            }
        }
    }

    fn count(&mut self, r: &Rejection) {
        let mut key = (r.problem.reason(), r.field.clone());
        if !self.counts.contains_key(&key) && self.counts.len() >= REPORT_REASONS {
            key = ("other", None);
        }
        let (reason, field) = (key.0, key.1.clone());
        self.counts
            .entry(key)
            .or_insert(ReasonCount {
                reason,
                field,
                lines: 0,
                first_line: r.line,
            })
            .lines += 1;
    }

    /// Why a file with nothing usable was refused, in one sentence.
    fn reason(&self) -> String {
        match self.listed.first() {
            Some(r) if self.lines_rejected == 1 => r.to_string(),
            Some(r) => format!("{} lines rejected; the first: {r}", self.lines_rejected),
            None => "no observations in the file".into(),
        }
    }

    fn document(&self, file: &str, received_utc: &str) -> Vec<u8> {
        let mut by_reason: Vec<&ReasonCount> = self.counts.values().collect();
        by_reason.sort_by_key(|c| (std::cmp::Reverse(c.lines), c.first_line));
        let doc = ErrorsDocument {
            file,
            received_utc,
            observations_accepted: self.observations_accepted,
            lines_rejected: self.lines_rejected,
            rejections: &self.listed,
            rejections_not_listed: self.lines_rejected - self.listed.len(),
            by_reason,
        };
        serde_json::to_vec_pretty(&doc).unwrap_or_default()
    }
}

#[derive(Serialize)]
struct ErrorsDocument<'a> {
    file: &'a str,
    received_utc: &'a str,
    observations_accepted: usize,
    lines_rejected: usize,
    /// The first [`REPORT_LISTED`] rejected lines (fewer when their
    /// text is long), in file order.
    rejections: &'a [Rejection],
    rejections_not_listed: usize,
    /// Every rejected line counted by reason and field, most frequent
    /// first, with the first line of each.
    by_reason: Vec<&'a ReasonCount>,
}

fn io_error(file: &Path, what: &str, e: std::io::Error) -> TakeError {
    TakeError::Io {
        file: file.to_path_buf(),
        why: format!("{what}: {e}"),
    }
}

fn store_error(file: &Path) -> impl Fn(StoreError) -> TakeError + '_ {
    move |source| TakeError::Store {
        file: file.to_path_buf(),
        source,
    }
}

/// Writes `bytes` to `path` durably (file and directory fsync'd).
fn write_durably(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    use std::io::Write;
    // Under a hidden name first, renamed when whole: a crash mid-write
    // never leaves a truncated file under the final name.
    let part = hidden_sibling(path);
    let mut f = std::fs::File::create(&part)?;
    f.write_all(bytes)?;
    f.sync_all()?;
    std::fs::rename(&part, path)?;
    if let Some(dir) = path.parent() {
        sync_dir(dir)?;
    }
    Ok(())
}

/// `dir/.NAME.part` for `dir/NAME`.
fn hidden_sibling(path: &Path) -> std::path::PathBuf {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    path.with_file_name(format!(".{name}.part"))
}

/// Moves `from` to `to` (a rename within one file system, else a durable
/// copy and a removal) and makes both directories durable.
fn move_durably(from: &Path, to: &Path) -> std::io::Result<()> {
    if std::fs::rename(from, to).is_err() {
        // Copied, not read whole: the file may be of any size; under a
        // hidden name until it is whole.
        let part = hidden_sibling(to);
        std::fs::copy(from, &part)?;
        std::fs::File::open(&part)?.sync_all()?;
        std::fs::rename(&part, to)?;
        std::fs::remove_file(from)?;
    }
    for dir in [to.parent(), from.parent()].into_iter().flatten() {
        sync_dir(dir)?;
    }
    Ok(())
}

fn file_name(path: &Path) -> String {
    path.file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "unnamed".into())
}

/// Writes a report `NAME.errors.json` for the file that is (or will be)
/// at `to` into the rejected directory.
fn write_report(
    path: &Path,
    dirs: &Directories,
    to: &Path,
    document: &[u8],
) -> Result<PathBuf, TakeError> {
    std::fs::create_dir_all(&dirs.rejected)
        .map_err(|e| io_error(path, "creating the rejected directory", e))?;
    let errors = unique_path(&dirs.rejected, &format!("{}.errors.json", file_name(to)));
    write_durably(&errors, document)
        .map_err(|e| io_error(path, "writing the rejection report", e))?;
    Ok(errors)
}

/// Unreadable, empty or wholly bad: the file goes to rejected/ whole, with
/// its reasons beside it.
fn reject_whole(
    path: &Path,
    dirs: &Directories,
    report: &Report,
    received_utc: &str,
) -> Result<Taken, TakeError> {
    std::fs::create_dir_all(&dirs.rejected)
        .map_err(|e| io_error(path, "creating the rejected directory", e))?;
    let to = unique_path(&dirs.rejected, &file_name(path));
    let errors = write_report(
        path,
        dirs,
        &to,
        &report.document(&file_name(path), received_utc),
    )?;
    move_durably(path, &to).map_err(|e| io_error(path, "moving to rejected", e))?;
    Ok(Taken::Rejected {
        to,
        errors,
        reason: report.reason(),
    })
}

/// What storing the chunks of one file did.
#[derive(Debug, Default)]
struct Stored {
    added: BTreeMap<String, usize>,
    duplicates: usize,
    chunks: usize,
    /// The first designation of some observations that were stored
    /// already (at most [`STORED_DESIGNATIONS`]).
    found_stored: BTreeSet<String>,
}

/// Journals one chunk's observations that are not stored already, as one
/// journal entry (none when all are).
fn store_chunk(
    path: &Path,
    store: &dyn Store,
    origin: &Origin,
    observations: Vec<Observation>,
    stored: &mut Stored,
) -> Result<(), TakeError> {
    let mut entries = Vec::with_capacity(observations.len());
    // Each observation is dropped as its entry is made, so the chunk is
    // never held twice; one stored already makes no entry at all.
    for o in observations {
        if !store
            .has_observation(&ContentKey::of(&o).0)
            .map_err(store_error(path))?
        {
            entries.push(ObservationEntry::of(&o));
            continue;
        }
        stored.duplicates += 1;
        if stored.found_stored.len() < STORED_DESIGNATIONS {
            if let Some(d) = DesignationKey::of(&o).first() {
                stored.found_stored.insert(d.to_string());
            }
        }
    }
    if entries.is_empty() {
        return Ok(());
    }
    let applied = store
        .add_observations(origin.clone(), entries)
        .map_err(store_error(path))?;
    stored.duplicates += applied.duplicates;
    for (object, n) in applied.added {
        *stored.added.entry(object).or_default() += n;
    }
    Ok(())
}

/// Objects of already-stored observations that still wait for a refit,
/// listed with 0 new observations (see [`Taken::Archived`]).
fn still_due(store: &dyn Store, stored: &mut Stored) {
    for designation in &stored.found_stored {
        // A failed lookup only means no extra refit is asked for: the
        // worker also looks for objects due whenever it starts.
        if let Ok(Some(object)) = store.object(designation) {
            if object.needs_refit() {
                stored.added.entry(object.id).or_insert(0);
            }
        }
    }
}

/// Reads every chunk of `input` and stores its new observations, noting
/// its bad lines in `report`.
fn store_chunks(
    path: &Path,
    input: &mut ChunkedFile<'_>,
    store: &dyn Store,
    origin: &Origin,
    report: &mut Report,
    hooks: Hooks<'_>,
) -> Result<Stored, TakeError> {
    let mut stored = Stored::default();
    loop {
        if (hooks.stop)() {
            return Err(TakeError::Stopped {
                file: path.to_path_buf(),
                chunks: stored.chunks,
            });
        }
        let chunk = input.next_chunk().map_err(|e| TakeError::Io {
            file: path.to_path_buf(),
            why: e.to_string(),
        })?;
        let Some(chunk) = chunk else {
            return Ok(stored);
        };
        stored.chunks += 1;
        report.note(chunk.rejected);
        report.observations_accepted += chunk.observations.len();
        store_chunk(path, store, origin, chunk.observations, &mut stored)?;
        let progress = Progress {
            chunks: stored.chunks,
            bytes_read: input.bytes_read(),
            bytes_total: input.bytes_total(),
            observations_accepted: report.observations_accepted,
            lines_rejected: report.lines_rejected,
        };
        tracing::debug!(?progress, "chunk stored");
        (hooks.progress)(&progress);
    }
}

/// Takes one file (blocking I/O: call it off the async executor).
pub fn take_file(path: &Path, config: &Config, store: &dyn Store) -> Result<Taken, TakeError> {
    take_file_with(path, config, store, Hooks::default())
}

/// [`take_file`], telling `hooks` of each chunk and asking it whether to
/// stop before the next.
pub fn take_file_with(
    path: &Path,
    config: &Config,
    store: &dyn Store,
    hooks: Hooks<'_>,
) -> Result<Taken, TakeError> {
    let (received_utc, day) = now_utc();
    let dirs = &config.directories;
    let mut report = Report::default();
    let mut input = match stream::open(path, &config.stations, Limits::DAEMON) {
        Ok(input) => input,
        Err(Refused::Missing) => return Ok(Taken::Gone),
        Err(Refused::Rejected(r)) => {
            report.note(vec![r]);
            return reject_whole(path, dirs, &report, &received_utc);
        }
    };
    let name = file_name(path);
    // Where the file will go, named in every journal entry it makes.
    let archive_dir = dirs.archive.join(&day);
    let to = unique_path(&archive_dir, &name);
    let origin = Origin {
        name: name.clone(),
        archived_as: to
            .strip_prefix(&dirs.archive)
            .unwrap_or(&to)
            .display()
            .to_string(),
        received_utc: received_utc.clone(),
    };
    let mut stored = store_chunks(path, &mut input, store, &origin, &mut report, hooks)?;
    let bytes = input.bytes_total();
    drop(input);
    if report.observations_accepted == 0 {
        // Nothing was journaled: only chunks with observations are.
        return reject_whole(path, dirs, &report, &received_utc);
    }
    still_due(store, &mut stored);
    store.flush().map_err(store_error(path))?;
    let errors = match report.lines_rejected {
        0 => None,
        _ => Some(write_report(
            path,
            dirs,
            &to,
            &report.document(&name, &received_utc),
        )?),
    };
    std::fs::create_dir_all(&archive_dir)
        .map_err(|e| io_error(path, "creating the archive directory", e))?;
    move_durably(path, &to).map_err(|e| io_error(path, "moving to the archive", e))?;
    if stored.chunks > 1 {
        tracing::info!(chunks = stored.chunks, bytes, "a big file taken in chunks");
    }
    Ok(Taken::Archived {
        to,
        added: stored.added,
        duplicates: stored.duplicates,
        lines_rejected: report.lines_rejected,
        errors,
    })
}

#[cfg(test)]
mod tests;
