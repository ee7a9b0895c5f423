//! The one observation record every reader returns.

use std::sync::Arc;

use super::field::{Field, RecordText};
use super::time::UtcTime;

/// Where a record came from.
#[derive(Debug, Clone, PartialEq)]
pub struct Source {
    pub file: Arc<str>,
    /// 1-based line of the record (of its `<optical>` element in XML).
    pub line: u32,
}

/// What an ADES block header says about its observations.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct BlockContext {
    /// The `# observatory` group's `mpcCode`.
    pub observatory_code: Option<String>,
    /// The `# submitter` group's `name`.
    pub submitter: Option<String>,
}

/// A NAIF SPICE body id, as ADES writes the `ctr` of an observer position.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct SpiceId(pub i32);

impl SpiceId {
    pub const EARTH: SpiceId = SpiceId(399);
}

/// An observer position given as inertial (ICRF-axes) coordinates.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum InertialPosition {
    /// ADES `sys` = `ICRF_KM`.
    Km { x_km: f64, y_km: f64, z_km: f64 },
    /// ADES `sys` = `ICRF_AU`.
    Au { x_au: f64, y_au: f64, z_au: f64 },
}

/// An observer position carried by the observation itself (ADES `sys`,
/// `ctr`, `pos1..3`), for roving and space-based observers. The Earth-fixed
/// forms have no centre field because their centre can only be the Earth.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ObserverLocation {
    /// `sys` = `WGS84`: east longitude, geodetic latitude, ellipsoidal height.
    Geodetic {
        longitude_deg: f64,
        latitude_deg: f64,
        height_m: f64,
    },
    /// `sys` = `ITRF`: Earth-fixed geocentric Cartesian coordinates.
    EarthFixed { x_m: f64, y_m: f64, z_m: f64 },
    /// `sys` = `ICRF_KM` or `ICRF_AU`, relative to the body `center`.
    Inertial {
        center: SpiceId,
        position: InertialPosition,
    },
}

/// One optical astrometric observation, validated, with its original text.
#[derive(Debug, Clone, PartialEq)]
pub struct Observation {
    pub time: UtcTime,
    pub ra_deg: f64,
    pub dec_deg: f64,
    /// Uncertainty of RA * cos(Dec).
    pub rms_ra_arcsec: Option<f64>,
    pub rms_dec_arcsec: Option<f64>,
    /// Correlation of the RA and Dec errors, in [-1, 1].
    pub rms_corr: Option<f64>,
    pub rms_time_s: Option<f64>,
    pub mag: Option<f64>,
    pub rms_mag: Option<f64>,
    pub location: Option<ObserverLocation>,
    /// Every kept field's text as read.
    pub text: RecordText,
    pub source: Source,
    pub context: Option<Arc<BlockContext>>,
}

impl Observation {
    pub fn perm_id(&self) -> Option<&str> {
        self.text.get(Field::PermId)
    }
    pub fn prov_id(&self) -> Option<&str> {
        self.text.get(Field::ProvId)
    }
    pub fn trk_sub(&self) -> Option<&str> {
        self.text.get(Field::TrkSub)
    }
    pub fn obs_sub_id(&self) -> Option<&str> {
        self.text.get(Field::ObsSubId)
    }
    /// The station code; validation guarantees one.
    pub fn station(&self) -> &str {
        self.text.get(Field::Stn).unwrap_or_default()
    }
    /// The observation time exactly as written.
    pub fn obs_time_text(&self) -> &str {
        self.text.get(Field::ObsTime).unwrap_or_default()
    }
    pub fn mode(&self) -> Option<&str> {
        self.text.get(Field::Mode)
    }
    pub fn ast_cat(&self) -> Option<&str> {
        self.text.get(Field::AstCat)
    }
    pub fn band(&self) -> Option<&str> {
        self.text.get(Field::Band)
    }
    pub fn phot_cat(&self) -> Option<&str> {
        self.text.get(Field::PhotCat)
    }
    pub fn notes(&self) -> Option<&str> {
        self.text.get(Field::Notes)
    }
    pub fn remarks(&self) -> Option<&str> {
        self.text.get(Field::Remarks)
    }
    /// The submitter named by the block header, if any.
    pub fn submitter(&self) -> Option<&str> {
        self.context.as_ref().and_then(|c| c.submitter.as_deref())
    }
}
