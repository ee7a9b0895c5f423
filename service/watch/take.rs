//! Taking one file from the incoming directory: read and validate it,
//! journal and index its new observations, write the reasons for its bad
//! lines, and only then move it to the archive (or, with nothing usable,
//! to the rejected directory). Nothing is ever deleted.
//!
//! The order is what makes a crash harmless: a file is still in the
//! incoming directory until its observations are in the fsync'd journal,
//! so a crash before that loses nothing (the file is taken again at
//! restart) and a crash after it re-reads a file whose observations are
//! all stored already (so none is stored twice).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use serde::Serialize;

use crate::config::Config;
use crate::ingest::{read_path, Rejection};
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
        /// New observations per object id.
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
}

impl TakeError {
    pub fn is_disk_full(&self) -> bool {
        match self {
            Self::Store { source, .. } => source.is_disk_full(),
            Self::Io { why, .. } => why.contains("No space left"),
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

#[derive(Serialize)]
struct ErrorsDocument<'a> {
    file: &'a str,
    received_utc: &'a str,
    observations_accepted: usize,
    lines_rejected: usize,
    rejections: &'a [Rejection],
}

fn io_error(file: &Path, what: &str, e: std::io::Error) -> TakeError {
    TakeError::Io {
        file: file.to_path_buf(),
        why: format!("{what}: {e}"),
    }
}

/// Writes `bytes` to `path` durably (file and directory fsync'd).
fn write_durably(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    use std::io::Write;
    let mut f = std::fs::File::create(path)?;
    f.write_all(bytes)?;
    f.sync_all()?;
    if let Some(dir) = path.parent() {
        sync_dir(dir)?;
    }
    Ok(())
}

/// Moves `from` to `to` (a rename within one file system, else a durable
/// copy and a removal) and makes both directories durable.
fn move_durably(from: &Path, to: &Path) -> std::io::Result<()> {
    if std::fs::rename(from, to).is_err() {
        let bytes = std::fs::read(from)?;
        write_durably(to, &bytes)?;
        std::fs::remove_file(from)?;
    }
    for dir in [to.parent(), from.parent()].into_iter().flatten() {
        sync_dir(dir)?;
    }
    Ok(())
}

/// Takes one file (blocking I/O: call it off the async executor).
pub fn take_file(path: &Path, config: &Config, store: &dyn Store) -> Result<Taken, TakeError> {
    if !path.exists() {
        return Ok(Taken::Gone);
    }
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "unnamed".into());
    let (received_utc, day) = now_utc();
    let read = read_path(path, &config.stations);
    let dirs = &config.directories;
    let errors_doc = |accepted: usize| {
        serde_json::to_vec_pretty(&ErrorsDocument {
            file: &name,
            received_utc: &received_utc,
            observations_accepted: accepted,
            lines_rejected: read.rejected.len(),
            rejections: &read.rejected,
        })
        .unwrap_or_default()
    };

    if read.observations.is_empty() {
        // Unreadable, empty or wholly bad: the file goes to rejected/
        // whole, with its reasons beside it.
        std::fs::create_dir_all(&dirs.rejected)
            .map_err(|e| io_error(path, "creating the rejected directory", e))?;
        let to = unique_path(&dirs.rejected, &name);
        let to_name = to
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        let errors = unique_path(&dirs.rejected, &format!("{to_name}.errors.json"));
        let reason = match read.rejected.first() {
            Some(r) if read.rejected.len() == 1 => r.to_string(),
            Some(r) => format!("{} lines rejected; the first: {r}", read.rejected.len()),
            None => "no observations in the file".into(),
        };
        write_durably(&errors, &errors_doc(0))
            .map_err(|e| io_error(path, "writing the rejection report", e))?;
        move_durably(path, &to).map_err(|e| io_error(path, "moving to rejected", e))?;
        return Ok(Taken::Rejected { to, errors, reason });
    }

    let archive_dir = dirs.archive.join(&day);
    std::fs::create_dir_all(&archive_dir)
        .map_err(|e| io_error(path, "creating the archive directory", e))?;
    let to = unique_path(&archive_dir, &name);
    let archived_as = to
        .strip_prefix(&dirs.archive)
        .unwrap_or(&to)
        .display()
        .to_string();

    // Only observations not stored already go to the journal, so a file
    // taken twice (a crash before its move) adds nothing the second time.
    let mut entries = Vec::with_capacity(read.observations.len());
    let mut duplicates = 0;
    for o in &read.observations {
        let entry = ObservationEntry::of(o);
        let stored = entry
            .content_bytes()
            .map_err(|why| TakeError::Io {
                file: path.to_path_buf(),
                why,
            })
            .and_then(|c| {
                store
                    .has_observation(&c)
                    .map_err(|source| TakeError::Store {
                        file: path.to_path_buf(),
                        source,
                    })
            })?;
        if stored {
            duplicates += 1;
        } else {
            entries.push(entry);
        }
    }
    let mut added = BTreeMap::new();
    if !entries.is_empty() {
        let origin = Origin {
            name: name.clone(),
            archived_as,
            received_utc: received_utc.clone(),
        };
        let applied =
            store
                .add_observations(origin, entries)
                .map_err(|source| TakeError::Store {
                    file: path.to_path_buf(),
                    source,
                })?;
        duplicates += applied.duplicates;
        added = applied.added;
        store.flush().map_err(|source| TakeError::Store {
            file: path.to_path_buf(),
            source,
        })?;
    }

    let errors = if read.rejected.is_empty() {
        None
    } else {
        std::fs::create_dir_all(&dirs.rejected)
            .map_err(|e| io_error(path, "creating the rejected directory", e))?;
        let to_name = to
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        let errors = unique_path(&dirs.rejected, &format!("{to_name}.errors.json"));
        write_durably(&errors, &errors_doc(read.observations.len()))
            .map_err(|e| io_error(path, "writing the rejection report", e))?;
        Some(errors)
    };
    move_durably(path, &to).map_err(|e| io_error(path, "moving to the archive", e))?;
    Ok(Taken::Archived {
        to,
        added,
        duplicates,
        lines_rejected: read.rejected.len(),
        errors,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

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
}
