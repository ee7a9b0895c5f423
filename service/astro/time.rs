//! Time scales. Inside the science code every instant is an [`Epoch`] in
//! TDB; UTC appears only at the edges (observation input, reports).

use super::constants::{J2000_JD, SECONDS_PER_DAY};

/// An instant in Barycentric Dynamical Time, held as days since J2000.0 TDB.
///
/// One f64 of days since J2000 resolves about 0.2 microseconds over the
/// next century, where a single-f64 Julian date would resolve only about
/// 40 microseconds.
#[derive(Debug, Clone, Copy, PartialEq, PartialOrd, Default)]
pub struct Epoch {
    tdb_days_since_j2000: f64,
}

impl Epoch {
    pub const J2000: Epoch = Epoch {
        tdb_days_since_j2000: 0.0,
    };

    pub const fn from_tdb_days_since_j2000(days: f64) -> Self {
        Self {
            tdb_days_since_j2000: days,
        }
    }

    pub fn from_tdb_seconds_since_j2000(seconds: f64) -> Self {
        Self::from_tdb_days_since_j2000(seconds / SECONDS_PER_DAY)
    }

    /// From a two-part TDB Julian date; the parts are differenced against
    /// J2000 before they are added, so no precision is lost.
    pub fn from_tdb_jd(jd1: f64, jd2: f64) -> Self {
        Self::from_tdb_days_since_j2000((jd1 - J2000_JD) + jd2)
    }

    pub fn tdb_days_since_j2000(self) -> f64 {
        self.tdb_days_since_j2000
    }

    pub fn tdb_seconds_since_j2000(self) -> f64 {
        self.tdb_days_since_j2000 * SECONDS_PER_DAY
    }

    /// Julian date in TDB, for reports only (one f64: about 40 us).
    pub fn tdb_jd(self) -> f64 {
        J2000_JD + self.tdb_days_since_j2000
    }

    /// Two-part TDB Julian date (J2000 JD, days since J2000), full precision.
    pub fn tdb_jd_two_part(self) -> (f64, f64) {
        (J2000_JD, self.tdb_days_since_j2000)
    }

    /// This epoch shifted by `days`.
    pub fn plus_days(self, days: f64) -> Self {
        Self::from_tdb_days_since_j2000(self.tdb_days_since_j2000 + days)
    }

    /// `self - other` in days.
    pub fn days_since(self, other: Epoch) -> f64 {
        self.tdb_days_since_j2000 - other.tdb_days_since_j2000
    }
}

impl std::fmt::Display for Epoch {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "JD {:.6} TDB", self.tdb_jd())
    }
}
