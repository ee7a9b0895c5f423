//! The ephemeris the configuration names, opened for a job.
//!
//! A JPL file covers what it covers; the embedded theories cover their
//! validated 1900-2100, filled on demand (a job pays for the days it
//! touches). The original and future 1/a stop where either ends and say
//! how far they got.

use std::path::PathBuf;

use thiserror::Error;

use crate::astro::embedded::EmbeddedEphemeris;
use crate::astro::ephemeris::{Body, Ephemeris, EphemerisError, StateVector};
use crate::astro::spk::{SpkEphemeris, SpkError};
use crate::astro::time::Epoch;
use crate::config::EphemerisChoice;

#[derive(Debug, Error)]
pub enum SourceError {
    #[error("ephemeris file {path}: {source}")]
    Spk { path: PathBuf, source: SpkError },
}

/// Either source behind the one trait.
pub enum EphemerisSource {
    Embedded(EmbeddedEphemeris),
    Spk {
        path: PathBuf,
        file: Box<SpkEphemeris>,
    },
}

impl EphemerisSource {
    /// A short description for reports.
    pub fn describe(&self) -> String {
        match self {
            Self::Embedded(e) => format!(
                "embedded analytic theories (epv00, VSOP87A, truncated ELP-2000/82; {} to {})",
                e.start(),
                e.end()
            ),
            Self::Spk { path, .. } => format!("file {}", path.display()),
        }
    }
}

impl Ephemeris for EphemerisSource {
    fn state(&self, body: Body, t: Epoch) -> Result<StateVector, EphemerisError> {
        match self {
            Self::Embedded(e) => e.state(body, t),
            Self::Spk { file, .. } => file.state(body, t),
        }
    }
}

/// Opens `choice`.
pub fn open(choice: &EphemerisChoice) -> Result<EphemerisSource, SourceError> {
    match choice {
        EphemerisChoice::Spk { path } => Ok(EphemerisSource::Spk {
            file: Box::new(SpkEphemeris::open(path).map_err(|source| SourceError::Spk {
                path: path.clone(),
                source,
            })?),
            path: path.clone(),
        }),
        EphemerisChoice::Embedded => Ok(EphemerisSource::Embedded(EmbeddedEphemeris::full_span())),
    }
}
