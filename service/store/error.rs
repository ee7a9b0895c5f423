use std::path::{Path, PathBuf};

use thiserror::Error;

/// What can go wrong with the store, each with what to do about it where
/// there is something to do.
#[derive(Debug, Error)]
pub enum StoreError {
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error(
        "the store at {path} is in use by another process (is a perihelix daemon already \
         running? stop it first, or point this command at another database directory)"
    )]
    Locked { path: PathBuf },
    #[error(
        "the index at {path} cannot be opened ({why}); it can be rebuilt from the journal \
         and the archive with `perihelix rebuild --config FILE`"
    )]
    Index { path: PathBuf, why: String },
    #[error(
        "the index at {path} has schema version {found}, this program knows {known} and \
         older; run the newer perihelix that wrote it, or rebuild with `perihelix rebuild`"
    )]
    Schema {
        path: PathBuf,
        found: u32,
        known: u32,
    },
    #[error("{what} is damaged: {why}")]
    Corrupt { what: String, why: String },
    #[error("cannot encode a record: {why}")]
    Encode { why: String },
    #[error("the index: {0}")]
    Sled(String),
}

impl StoreError {
    pub fn io(path: &Path, source: std::io::Error) -> Self {
        Self::Io {
            path: path.to_path_buf(),
            source,
        }
    }

    /// True when the disk is full (the caller keeps the file and retries).
    pub fn is_disk_full(&self) -> bool {
        matches!(self, Self::Io { source, .. } if source.raw_os_error() == Some(28))
    }
}

impl From<sled::Error> for StoreError {
    fn from(e: sled::Error) -> Self {
        Self::Sled(e.to_string())
    }
}
