//! Time scales. Inside the science code every instant is an [`Epoch`] in
//! TDB; UTC appears only at the edges (observation input, reports).

use std::path::Path;
use std::sync::OnceLock;

use hifitime::leap_seconds::LatestLeapSeconds;
use hifitime::{Duration as HifiDuration, Epoch as HifiEpoch, TimeScale};
use thiserror::Error;

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

// ---------------------------------------------------------------------------
// UTC, TAI, TT, UT1 and the way into TDB.
//
// The pivot is TAI held as integer nanoseconds since 1900-01-01T00:00:00 TAI
// (hifitime's reference instant), so UTC -> TAI -> TT is exact integer
// arithmetic and only the TT -> TDB step (hifitime's one-term series) and the
// final conversion to days since J2000 touch floating point.
// ---------------------------------------------------------------------------

const NS_PER_SECOND: i128 = 1_000_000_000;
const NS_PER_DAY: i128 = 86_400 * NS_PER_SECOND;
/// Modified Julian Date of 1900-01-01, the zero of hifitime's TAI count and
/// of the NTP second count used by leap-seconds.list files.
const MJD_1900: i64 = 15_020;
/// Julian date of MJD 0.
const MJD_ZERO_JD: f64 = 2_400_000.5;
/// TT - TAI, exact by definition (IAU 1991 Resolution A4), in nanoseconds.
const TT_MINUS_TAI_NS: i128 = 32_184_000_000;
/// J2000.0 (2000-01-01T12:00:00 in its own scale) counted from 1900-01-01T00:00
/// of the same scale: 36 524 days and 12 hours.
const J2000_FROM_1900_NS: i128 = (36_524 * 86_400 + 43_200) * NS_PER_SECOND;

/// Everything that can go wrong turning clock readings into TDB.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum TimeError {
    #[error("{path}: cannot read the leap-second file: {reason}")]
    LeapFileUnreadable { path: String, reason: String },
    #[error("{path}, line {line}: {reason}")]
    LeapFileLine {
        path: String,
        line: usize,
        reason: String,
    },
    #[error("{path}: the leap-second file holds no entries")]
    LeapFileEmpty { path: String },
    #[error(
        "UTC {date} is before the leap-second table starts ({first}); \
         UTC before 1972 (rubber seconds) is not supported"
    )]
    BeforeLeapSecondTable { date: String, first: String },
    #[error("{text:?} is not an ISO 8601 UTC time (YYYY-MM-DDTHH:MM:SS[.f][Z]): {reason}")]
    InvalidIso8601 { text: String, reason: String },
    #[error("invalid UTC calendar date or time: {reason}")]
    InvalidCalendar { reason: String },
    #[error("UTC day {date} does not end with a leap second, so second 60 does not exist")]
    NoLeapSecond { date: String },
    #[error("a UT1-UTC of {dut1_s} s is outside the +-0.9 s that UTC is kept within")]
    Dut1OutOfRange { dut1_s: f64 },
}

/// One step of TAI - UTC: from the UTC midnight `starts_ntp_s` on, TAI - UTC
/// is `tai_minus_utc_s`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct LeapStep {
    /// UTC midnight as seconds since 1900-01-01T00:00 UTC, leap seconds not
    /// counted (the NTP count used by leap-seconds.list).
    pub starts_ntp_s: i64,
    pub tai_minus_utc_s: i32,
}

impl LeapStep {
    fn starts_mjd(self) -> i64 {
        MJD_1900 + self.starts_ntp_s.div_euclid(86_400)
    }
}

/// The table of TAI - UTC since 1972, replaceable from a file.
///
/// Only the integer-second era (1972 on) is held: the drifting offsets of
/// 1961-1971 are not needed for observations of newly found bodies, and a
/// UTC before the first entry is rejected rather than guessed. After the last
/// entry the last offset is assumed to hold, so predictions into the future
/// carry whatever leap seconds are announced later as a known error.
#[derive(Debug, Clone, PartialEq)]
pub struct LeapSecondTable {
    steps: Vec<LeapStep>,
    /// "#@" line of a leap-seconds.list file: NTP second after which the
    /// file should not be trusted.
    expires_ntp_s: Option<i64>,
    source: String,
}

impl Default for LeapSecondTable {
    fn default() -> Self {
        Self::builtin()
    }
}

impl LeapSecondTable {
    /// The table compiled into hifitime (its IERS-announced entries).
    pub fn builtin() -> Self {
        let steps = LatestLeapSeconds::default()
            .filter(|l| l.announced_by_iers)
            .map(|l| LeapStep {
                // hifitime keeps these as f64 whole seconds.
                starts_ntp_s: l.timestamp_tai_s.round() as i64,
                tai_minus_utc_s: l.delta_at.round() as i32,
            })
            .collect();
        Self {
            steps,
            expires_ntp_s: None,
            source: "hifitime built-in table".to_string(),
        }
    }

    /// Reads an IETF/IERS `leap-seconds.list` file: lines of "NTP-seconds
    /// TAI-UTC", `#` starting a comment, `#@` the expiry date.
    pub fn from_file(path: &Path) -> Result<Self, TimeError> {
        let name = path.display().to_string();
        let text = std::fs::read_to_string(path).map_err(|e| TimeError::LeapFileUnreadable {
            path: name.clone(),
            reason: e.to_string(),
        })?;
        Self::parse(&text, &name)
    }

    /// Parses the text of a `leap-seconds.list` file; `source` names it in
    /// errors.
    pub fn parse(text: &str, source: &str) -> Result<Self, TimeError> {
        let line_error = |line: usize, reason: String| TimeError::LeapFileLine {
            path: source.to_string(),
            line,
            reason,
        };
        let mut steps: Vec<LeapStep> = Vec::new();
        let mut expires_ntp_s = None;
        for (index, raw) in text.lines().enumerate() {
            let line = index + 1;
            if let Some(rest) = raw.strip_prefix("#@") {
                let value = rest.trim();
                let seconds = value.parse::<i64>().map_err(|_| {
                    line_error(line, format!("expiry {value:?} is not a whole number"))
                })?;
                expires_ntp_s = Some(seconds);
                continue;
            }
            let data = raw.split('#').next().unwrap_or("").trim();
            if data.is_empty() {
                continue;
            }
            let mut fields = data.split_whitespace();
            let (Some(first), Some(second), None) = (fields.next(), fields.next(), fields.next())
            else {
                return Err(line_error(
                    line,
                    format!("expected two numbers (NTP seconds, TAI-UTC), found {data:?}"),
                ));
            };
            let starts_ntp_s = first.parse::<i64>().map_err(|_| {
                line_error(line, format!("NTP seconds {first:?} is not a whole number"))
            })?;
            let tai_minus_utc_s = second.parse::<i32>().map_err(|_| {
                line_error(line, format!("TAI-UTC {second:?} is not a whole number"))
            })?;
            if starts_ntp_s.rem_euclid(86_400) != 0 {
                return Err(line_error(
                    line,
                    format!("{starts_ntp_s} is not a UTC midnight (not a multiple of 86400)"),
                ));
            }
            if let Some(previous) = steps.last() {
                if starts_ntp_s <= previous.starts_ntp_s {
                    return Err(line_error(
                        line,
                        format!(
                            "entries must increase in time: {starts_ntp_s} follows {}",
                            previous.starts_ntp_s
                        ),
                    ));
                }
                if (tai_minus_utc_s - previous.tai_minus_utc_s).abs() != 1 {
                    return Err(line_error(
                        line,
                        format!(
                            "TAI-UTC jumps from {} to {tai_minus_utc_s}: a leap second is one second",
                            previous.tai_minus_utc_s
                        ),
                    ));
                }
            }
            steps.push(LeapStep {
                starts_ntp_s,
                tai_minus_utc_s,
            });
        }
        if steps.is_empty() {
            return Err(TimeError::LeapFileEmpty {
                path: source.to_string(),
            });
        }
        Ok(Self {
            steps,
            expires_ntp_s,
            source: source.to_string(),
        })
    }

    pub fn steps(&self) -> &[LeapStep] {
        &self.steps
    }

    /// Where the table came from (a path, or the built-in table).
    pub fn source(&self) -> &str {
        &self.source
    }

    /// The expiry the file declares, as a UTC day (MJD), if it declares one.
    pub fn expires_mjd(&self) -> Option<i64> {
        self.expires_ntp_s.map(|s| MJD_1900 + s.div_euclid(86_400))
    }

    /// TAI - UTC in seconds in force at 0h UTC of the day `mjd`.
    pub fn tai_minus_utc_on(&self, mjd: i64) -> Result<i32, TimeError> {
        let index = self.steps.partition_point(|s| s.starts_mjd() <= mjd);
        if index == 0 {
            return Err(self.before_table(mjd));
        }
        Ok(self.steps[index - 1].tai_minus_utc_s)
    }

    /// Length in SI seconds of the UTC day `mjd`: 86 400, or 86 401 (86 399)
    /// when a positive (negative) leap second ends it.
    pub fn day_length_s(&self, mjd: i64) -> Result<i64, TimeError> {
        let today = self.tai_minus_utc_on(mjd)?;
        let tomorrow = self.tai_minus_utc_on(mjd + 1)?;
        Ok(86_400 + i64::from(tomorrow - today))
    }

    fn before_table(&self, mjd: i64) -> TimeError {
        TimeError::BeforeLeapSecondTable {
            date: format_date(mjd),
            first: self
                .steps
                .first()
                .map(|s| format_date(s.starts_mjd()))
                .unwrap_or_default(),
        }
    }

    /// TAI (ns since 1900-01-01T00:00 TAI) of a UTC reading.
    fn tai_ns(&self, utc: &UtcTime) -> Result<i128, TimeError> {
        let offset_s = self.tai_minus_utc_on(utc.mjd)?;
        if utc.seconds_of_day >= 86_400.0 && self.day_length_s(utc.mjd)? <= 86_400 {
            return Err(TimeError::NoLeapSecond {
                date: format_date(utc.mjd),
            });
        }
        Ok(i128::from(utc.mjd - MJD_1900) * NS_PER_DAY
            + seconds_to_ns(utc.seconds_of_day)
            + i128::from(offset_s) * NS_PER_SECOND)
    }

    /// The UTC reading of a TAI instant; an instant inside an inserted leap
    /// second reads 23:59:60.x of the day before the step.
    fn utc_of_tai_ns(&self, tai_ns: i128) -> Result<UtcTime, TimeError> {
        // TAI at which each step takes effect.
        let step_tai_ns = |s: &LeapStep| {
            i128::from(s.starts_ntp_s) * NS_PER_SECOND
                + i128::from(s.tai_minus_utc_s) * NS_PER_SECOND
        };
        let index = self.steps.partition_point(|s| step_tai_ns(s) <= tai_ns);
        if index == 0 {
            let approx_mjd = MJD_1900 + tai_ns.div_euclid(NS_PER_DAY) as i64;
            return Err(self.before_table(approx_mjd));
        }
        let current = self.steps[index - 1];
        let utc_ns = tai_ns - i128::from(current.tai_minus_utc_s) * NS_PER_SECOND;
        if let Some(next) = self.steps.get(index) {
            let next_start_ns = i128::from(next.starts_ntp_s) * NS_PER_SECOND;
            if utc_ns >= next_start_ns {
                // Inside the inserted second: the clock reads 23:59:60.
                return Ok(UtcTime {
                    mjd: next.starts_mjd() - 1,
                    seconds_of_day: 86_400.0 + ns_to_seconds(utc_ns - next_start_ns),
                });
            }
        }
        Ok(UtcTime {
            mjd: MJD_1900 + utc_ns.div_euclid(NS_PER_DAY) as i64,
            seconds_of_day: ns_to_seconds(utc_ns.rem_euclid(NS_PER_DAY)),
        })
    }
}

fn seconds_to_ns(seconds: f64) -> i128 {
    (seconds * 1e9).round() as i128
}

fn ns_to_seconds(ns: i128) -> f64 {
    let whole = ns.div_euclid(NS_PER_SECOND);
    let rest = ns.rem_euclid(NS_PER_SECOND);
    whole as f64 + rest as f64 * 1e-9
}

/// Days since J2000 from a nanosecond count since J2000, without passing
/// the whole count through one f64 of seconds.
fn ns_to_days(ns: i128) -> f64 {
    let days = ns.div_euclid(NS_PER_DAY);
    let rest = ns.rem_euclid(NS_PER_DAY);
    days as f64 + rest as f64 / NS_PER_DAY as f64
}

/// Days since 1970-01-01 of a proleptic Gregorian date (the civil-day count
/// of H. Hinnant's "chrono-Compatible Low-Level Date Algorithms").
fn days_from_civil(year: i64, month: u32, day: u32) -> i64 {
    let y = if month <= 2 { year - 1 } else { year };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let m = i64::from(month);
    let doy = (153 * (if m > 2 { m - 3 } else { m + 9 }) + 2) / 5 + i64::from(day) - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// Inverse of [`days_from_civil`].
fn civil_from_days(days: i64) -> (i64, u32, u32) {
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let month = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    let year = yoe + era * 400 + i64::from(month <= 2);
    (year, month, day)
}

/// MJD of 1970-01-01.
const MJD_1970: i64 = 40_587;

fn days_in_month(year: i64, month: u32) -> u32 {
    let leap = (year % 4 == 0 && year % 100 != 0) || year % 400 == 0;
    match month {
        1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
        4 | 6 | 9 | 11 => 30,
        _ if leap => 29,
        _ => 28,
    }
}

fn format_date(mjd: i64) -> String {
    let (y, m, d) = civil_from_days(mjd - MJD_1970);
    format!("{y:04}-{m:02}-{d:02}")
}

/// A UTC clock reading: a calendar day and the SI seconds into it.
///
/// Unlike a `hifitime::Epoch` in UTC, this can hold the leap second itself
/// (`seconds_of_day` in 86 400..86 401 on a day that ends with one): hifitime
/// folds 23:59:60.x onto 23:59:59.x, one second early. Whether second 60
/// exists on a given day is checked against the leap-second table when the
/// reading is converted.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct UtcTime {
    mjd: i64,
    seconds_of_day: f64,
}

impl UtcTime {
    /// From calendar fields; `second` may reach 60.999... for a leap second.
    pub fn from_calendar(
        year: i64,
        month: u32,
        day: u32,
        hour: u32,
        minute: u32,
        second: f64,
    ) -> Result<Self, TimeError> {
        let invalid = |reason: String| TimeError::InvalidCalendar { reason };
        if !(1..=12).contains(&month) {
            return Err(invalid(format!("month {month} is not 1..12")));
        }
        if day == 0 || day > days_in_month(year, month) {
            return Err(invalid(format!(
                "day {day} does not exist in {year:04}-{month:02}"
            )));
        }
        if hour > 23 || minute > 59 {
            return Err(invalid(format!(
                "time {hour:02}:{minute:02} is not a clock time"
            )));
        }
        let is_last_minute = hour == 23 && minute == 59;
        let limit = if is_last_minute { 61.0 } else { 60.0 };
        if !(second.is_finite() && (0.0..limit).contains(&second)) {
            return Err(invalid(format!(
                "second {second} is outside 0..{limit} at {hour:02}:{minute:02}"
            )));
        }
        Ok(Self {
            mjd: days_from_civil(year, month, day) + MJD_1970,
            seconds_of_day: f64::from(hour * 3600 + minute * 60) + second,
        })
    }

    /// From calendar fields with whole seconds (60 for a leap second) and
    /// nanoseconds, the way ADES readers hold a time.
    pub fn from_calendar_nanos(
        year: i64,
        month: u32,
        day: u32,
        hour: u32,
        minute: u32,
        second: u32,
        nanos: u32,
    ) -> Result<Self, TimeError> {
        if nanos >= 1_000_000_000 {
            return Err(TimeError::InvalidCalendar {
                reason: format!("{nanos} ns is not below one second"),
            });
        }
        Self::from_calendar(
            year,
            month,
            day,
            hour,
            minute,
            f64::from(second) + f64::from(nanos) * 1e-9,
        )
    }

    /// From a UTC day (MJD) and the seconds into it (below 86 401).
    pub fn from_mjd_seconds(mjd: i64, seconds_of_day: f64) -> Result<Self, TimeError> {
        if !(seconds_of_day.is_finite() && (0.0..86_401.0).contains(&seconds_of_day)) {
            return Err(TimeError::InvalidCalendar {
                reason: format!("{seconds_of_day} s is not within a UTC day"),
            });
        }
        Ok(Self {
            mjd,
            seconds_of_day,
        })
    }

    /// Parses `YYYY-MM-DDTHH:MM:SS[.fff...][Z]` (the ISO 8601 form ADES
    /// uses), second 60 allowed.
    pub fn parse_iso8601(text: &str) -> Result<Self, TimeError> {
        let bad = |reason: &str| TimeError::InvalidIso8601 {
            text: text.to_string(),
            reason: reason.to_string(),
        };
        let body = text.trim();
        let body = body.strip_suffix('Z').unwrap_or(body);
        let (date, time) = body
            .split_once(['T', ' '])
            .ok_or_else(|| bad("no 'T' between date and time"))?;
        let date_parts: Vec<&str> = date.split('-').collect();
        let [y, mo, d] = date_parts.as_slice() else {
            return Err(bad("date is not YYYY-MM-DD"));
        };
        let time_parts: Vec<&str> = time.split(':').collect();
        let [h, mi, s] = time_parts.as_slice() else {
            return Err(bad("time is not HH:MM:SS"));
        };
        let digits = |field: &str, width: usize, what: &str| -> Result<u32, TimeError> {
            if field.len() != width || !field.bytes().all(|b| b.is_ascii_digit()) {
                return Err(bad(&format!("{what} {field:?} is not {width} digits")));
            }
            field.parse::<u32>().map_err(|_| bad(what))
        };
        let year = digits(y, 4, "year")?;
        let month = digits(mo, 2, "month")?;
        let day = digits(d, 2, "day")?;
        let hour = digits(h, 2, "hour")?;
        let minute = digits(mi, 2, "minute")?;
        let (whole, fraction) = match s.split_once('.') {
            Some((w, f)) => (w, f),
            None => (*s, ""),
        };
        let second_whole = digits(whole, 2, "second")?;
        if !fraction.bytes().all(|b| b.is_ascii_digit()) || (s.contains('.') && fraction.is_empty())
        {
            return Err(bad("fraction of a second is not digits"));
        }
        let second_fraction = if fraction.is_empty() {
            0.0
        } else {
            format!("0.{fraction}")
                .parse::<f64>()
                .map_err(|_| bad("fraction of a second"))?
        };
        Self::from_calendar(
            i64::from(year),
            month,
            day,
            hour,
            minute,
            f64::from(second_whole) + second_fraction,
        )
        .map_err(|e| bad(&e.to_string()))
    }

    /// [`UtcTime::parse_iso8601`], or a calendar date alone (`YYYY-MM-DD`),
    /// which means 00:00 UTC that day. For times a person types (command
    /// options, API queries); observation records keep the strict form,
    /// since ADES requires obsTime to carry the time of day.
    pub fn parse_iso8601_or_date(text: &str) -> Result<Self, TimeError> {
        let body = text.trim();
        // A date has no time separator and no clock colons; anything else
        // is read (and its errors explained) as a full time.
        if body.is_empty() || body.contains(['T', ' ', ':']) {
            return Self::parse_iso8601(text);
        }
        Self::parse_iso8601(&format!("{body}T00:00:00Z")).map_err(|e| match e {
            TimeError::InvalidIso8601 { reason, .. } => TimeError::InvalidIso8601 {
                text: text.to_string(),
                reason: format!("{reason} (a date alone is YYYY-MM-DD)"),
            },
            other => other,
        })
    }

    /// From a hifitime epoch in any time scale. A UTC epoch is read as its
    /// calendar day and time of day (so the configured leap-second table,
    /// not hifitime's, decides TAI - UTC); other scales go through TAI.
    pub fn from_hifitime(epoch: &HifiEpoch, table: &LeapSecondTable) -> Result<Self, TimeError> {
        if epoch.time_scale == TimeScale::UTC {
            // A UTC epoch's duration counts UTC seconds since 1900-01-01,
            // leap seconds not counted.
            let ns = epoch.duration.total_nanoseconds();
            Ok(Self {
                mjd: MJD_1900 + ns.div_euclid(NS_PER_DAY) as i64,
                seconds_of_day: ns_to_seconds(ns.rem_euclid(NS_PER_DAY)),
            })
        } else {
            table.utc_of_tai_ns(epoch.to_tai_duration().total_nanoseconds())
        }
    }

    /// The UTC day as a Modified Julian Date.
    pub fn mjd(&self) -> i64 {
        self.mjd
    }

    /// SI seconds since 0h UTC of the day (86 400 and above inside a leap
    /// second).
    pub fn seconds_of_day(&self) -> f64 {
        self.seconds_of_day
    }

    /// (year, month, day) of the UTC day.
    pub fn calendar_date(&self) -> (i64, u32, u32) {
        civil_from_days(self.mjd - MJD_1970)
    }

    /// ISO 8601 text with `decimals` digits of the second (at most 9) and a
    /// trailing `Z`; a leap second prints as 23:59:60.
    pub fn to_iso8601(&self, decimals: usize) -> String {
        let decimals = decimals.min(9);
        let scale = 10_i64.pow(decimals as u32);
        let mut mjd = self.mjd;
        let mut units = (self.seconds_of_day * scale as f64).round() as i64;
        let day_units = 86_400 * scale;
        let in_leap_second = self.seconds_of_day >= 86_400.0;
        // Rounding can carry into the next day.
        if (!in_leap_second && units >= day_units) || units >= day_units + scale {
            mjd += 1;
            units = 0;
        }
        let (y, mo, d) = civil_from_days(mjd - MJD_1970);
        let (hour, minute, second_units) = if units >= day_units {
            (23, 59, units - day_units + 59 * scale + scale)
        } else {
            let whole = units / scale;
            (
                whole / 3600,
                (whole % 3600) / 60,
                units - (whole / 60) * 60 * scale,
            )
        };
        let whole_second = second_units / scale;
        let mut text = format!("{y:04}-{mo:02}-{d:02}T{hour:02}:{minute:02}:{whole_second:02}");
        if decimals > 0 {
            let fraction = second_units % scale;
            text.push_str(&format!(".{fraction:0width$}", width = decimals));
        }
        text.push('Z');
        text
    }
}

impl std::fmt::Display for UtcTime {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.to_iso8601(3))
    }
}

/// A two-part Julian date, `jd1 + jd2`, split so that neither part loses the
/// other's digits (the form ERFA functions take).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct JulianDate {
    pub jd1: f64,
    pub jd2: f64,
}

impl JulianDate {
    pub fn days_since_j2000(self) -> f64 {
        (self.jd1 - J2000_JD) + self.jd2
    }

    /// The sum in one f64: about 40 us resolution, for display only.
    pub fn approximate(self) -> f64 {
        self.jd1 + self.jd2
    }
}

/// One instant in the scales the science needs: TDB for dynamics, TT for
/// precession-nutation, UT1 for the Earth's rotation, and the UTC reading.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ScaledInstant {
    utc: UtcTime,
    tdb: Epoch,
    tt: JulianDate,
    ut1: JulianDate,
    dut1_s: f64,
}

impl ScaledInstant {
    /// The UTC reading.
    pub fn utc(&self) -> UtcTime {
        self.utc
    }

    pub fn tdb(&self) -> Epoch {
        self.tdb
    }

    /// TT as (J2000, days since J2000 TT).
    pub fn tt(&self) -> JulianDate {
        self.tt
    }

    /// UT1 as (0h of the UTC day, fraction of a day), ERFA's best split for
    /// the Earth rotation angle.
    pub fn ut1(&self) -> JulianDate {
        self.ut1
    }

    /// The UT1 - UTC that went into `ut1`, in seconds (0 when none given).
    pub fn dut1_s(&self) -> f64 {
        self.dut1_s
    }
}

/// Converts between UTC, TAI, TT, UT1 and TDB with one leap-second table.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct TimeScales {
    leap_seconds: LeapSecondTable,
}

/// Largest |UT1 - UTC| accepted: the IERS keeps it below 0.9 s.
pub const DUT1_LIMIT_S: f64 = 0.9;

impl TimeScales {
    pub fn new(leap_seconds: LeapSecondTable) -> Self {
        Self { leap_seconds }
    }

    /// Shared instance with hifitime's built-in leap-second table.
    pub fn builtin() -> &'static TimeScales {
        static BUILTIN: OnceLock<TimeScales> = OnceLock::new();
        BUILTIN.get_or_init(TimeScales::default)
    }

    pub fn leap_seconds(&self) -> &LeapSecondTable {
        &self.leap_seconds
    }

    /// TAI - UTC in seconds at a UTC reading.
    pub fn tai_minus_utc_s(&self, utc: &UtcTime) -> Result<i32, TimeError> {
        self.leap_seconds.tai_minus_utc_on(utc.mjd)
    }

    /// TAI of a UTC reading, as a hifitime epoch in TAI.
    pub fn utc_to_tai(&self, utc: &UtcTime) -> Result<HifiEpoch, TimeError> {
        let ns = self.leap_seconds.tai_ns(utc)?;
        Ok(HifiEpoch::from_tai_duration(
            HifiDuration::from_total_nanoseconds(ns),
        ))
    }

    /// TT as a two-part Julian date (J2000, days since J2000 TT).
    pub fn utc_to_tt(&self, utc: &UtcTime) -> Result<JulianDate, TimeError> {
        let tai_ns = self.leap_seconds.tai_ns(utc)?;
        Ok(tt_from_tai_ns(tai_ns))
    }

    /// TDB of a UTC reading.
    pub fn utc_to_tdb(&self, utc: &UtcTime) -> Result<Epoch, TimeError> {
        Ok(tdb_from_tai_ns(self.leap_seconds.tai_ns(utc)?))
    }

    /// TDB of a hifitime epoch in any scale (UTC through this table).
    pub fn epoch_to_tdb(&self, epoch: &HifiEpoch) -> Result<Epoch, TimeError> {
        self.utc_to_tdb(&UtcTime::from_hifitime(epoch, &self.leap_seconds)?)
    }

    /// The UTC reading of a TDB epoch, for reports.
    pub fn tdb_to_utc(&self, t: Epoch) -> Result<UtcTime, TimeError> {
        self.leap_seconds.utc_of_tai_ns(tai_ns_from_tdb(t))
    }

    /// ISO 8601 UTC text of a TDB epoch with millisecond digits.
    pub fn tdb_to_iso8601_utc(&self, t: Epoch) -> Result<String, TimeError> {
        Ok(self.tdb_to_utc(t)?.to_iso8601(3))
    }

    /// UT1 as (0h of the UTC day, fraction), given UT1 - UTC in seconds;
    /// `None` takes UT1 = UTC. As in ERFA's UTC -> UT1, TAI - UTC is taken
    /// at 0h of the UTC day, so inside a leap second UT1 runs on smoothly.
    pub fn utc_to_ut1(&self, utc: &UtcTime, dut1_s: Option<f64>) -> Result<JulianDate, TimeError> {
        let dut1_s = dut1_s.unwrap_or(0.0);
        if !(dut1_s.is_finite() && dut1_s.abs() <= DUT1_LIMIT_S) {
            return Err(TimeError::Dut1OutOfRange { dut1_s });
        }
        let tai_ns = self.leap_seconds.tai_ns(utc)?;
        let offset_s = self.leap_seconds.tai_minus_utc_on(utc.mjd)?;
        let ut1_ns = tai_ns - i128::from(offset_s) * NS_PER_SECOND + seconds_to_ns(dut1_s);
        let day = ut1_ns.div_euclid(NS_PER_DAY);
        let rest = ut1_ns.rem_euclid(NS_PER_DAY);
        Ok(JulianDate {
            jd1: MJD_ZERO_JD + (MJD_1900 as f64 + day as f64),
            jd2: rest as f64 / NS_PER_DAY as f64,
        })
    }

    /// All the scales of one UTC instant at once.
    pub fn resolve_utc(
        &self,
        utc: &UtcTime,
        dut1_s: Option<f64>,
    ) -> Result<ScaledInstant, TimeError> {
        let tai_ns = self.leap_seconds.tai_ns(utc)?;
        Ok(ScaledInstant {
            utc: *utc,
            tdb: tdb_from_tai_ns(tai_ns),
            tt: tt_from_tai_ns(tai_ns),
            ut1: self.utc_to_ut1(utc, dut1_s)?,
            dut1_s: dut1_s.unwrap_or(0.0),
        })
    }

    /// All the scales of the instant of a TDB epoch.
    pub fn resolve_tdb(&self, t: Epoch, dut1_s: Option<f64>) -> Result<ScaledInstant, TimeError> {
        self.resolve_utc(&self.tdb_to_utc(t)?, dut1_s)
    }
}

fn tt_from_tai_ns(tai_ns: i128) -> JulianDate {
    JulianDate {
        jd1: J2000_JD,
        jd2: ns_to_days(tai_ns + TT_MINUS_TAI_NS - J2000_FROM_1900_NS),
    }
}

/// TT -> TDB by hifitime's one-term series.
fn tdb_from_tai_ns(tai_ns: i128) -> Epoch {
    let tai = HifiEpoch::from_tai_duration(HifiDuration::from_total_nanoseconds(tai_ns));
    // A TDB epoch's duration counts TDB from J2000.
    let since_j2000 = tai
        .to_time_scale(TimeScale::TDB)
        .duration
        .total_nanoseconds();
    Epoch::from_tdb_days_since_j2000(ns_to_days(since_j2000))
}

fn tai_ns_from_tdb(t: Epoch) -> i128 {
    t.to_hifitime().to_tai_duration().total_nanoseconds()
}

impl Epoch {
    /// The same instant as a hifitime epoch in TDB (nanosecond resolution).
    pub fn to_hifitime(self) -> HifiEpoch {
        let days = self.tdb_days_since_j2000.floor();
        let fraction_ns = ((self.tdb_days_since_j2000 - days) * NS_PER_DAY as f64).round() as i128;
        let ns = days as i128 * NS_PER_DAY + fraction_ns;
        HifiEpoch::from_tdb_duration(HifiDuration::from_total_nanoseconds(ns))
    }
}

/// TDB of a hifitime epoch with hifitime's built-in leap-second table.
pub fn utc_to_tdb(epoch: &HifiEpoch) -> Result<Epoch, TimeError> {
    TimeScales::builtin().epoch_to_tdb(epoch)
}

/// UTC reading of a TDB epoch with hifitime's built-in leap-second table.
pub fn tdb_to_utc(t: Epoch) -> Result<UtcTime, TimeError> {
    TimeScales::builtin().tdb_to_utc(t)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// TT - TAI and UTC - TAI are exact, so TT must match to rounding.
    const TT_TOLERANCE_S: f64 = 1e-6;
    /// hifitime's one-term TDB - TT series is good to some tens of
    /// microseconds (its own test tolerance, common practice).
    const TDB_TOLERANCE_S: f64 = 50e-6;
    /// Round trips through nanosecond integers and one f64 of days.
    const ROUND_TRIP_TOLERANCE_S: f64 = 1e-6;

    fn fixture(name: &str) -> String {
        let path = format!(
            "{}/tests/reference/fixtures/{name}",
            env!("CARGO_MANIFEST_DIR")
        );
        std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{path}: {e}"))
    }

    fn jd_days_since_j2000(jd1: f64, jd2: f64) -> f64 {
        (jd1 - J2000_JD) + jd2
    }

    /// TAI of a hifitime epoch in seconds since J2000 of the TAI scale.
    fn tai_seconds_since_j2000(tai: &HifiEpoch) -> f64 {
        let ns = tai.to_tai_duration().total_nanoseconds() - J2000_FROM_1900_NS;
        ns_to_seconds(ns)
    }

    #[test]
    fn cookbook_example_utc_2006_01_15() {
        // SOFA "Time Scale and Calendar Tools" cookbook, worked example
        // UTC 2006 January 15 21:24:37.5 (memory): TAI 21:25:10.5,
        // TT 21:25:42.684, TDB 21:25:42.684373 (cookbook, topocentric).
        // Cross-checked with pyerfa 2.0.1.5:
        //   u = erfa.dtf2d("UTC", 2006, 1, 15, 21, 24, 37.5); a = erfa.utctai(*u)
        //   t = erfa.taitt(*a); b = erfa.tttdb(*t, erfa.dtdb(*t, 0.0, 0.0, 0.0, 0.0))
        //   erfa.d2dtf("TDB", 6, *b) -> 21:25:42.684372 (geocentric form).
        let scales = TimeScales::default();
        let utc = UtcTime::from_calendar(2006, 1, 15, 21, 24, 37.5).unwrap();
        let day = JulianDate {
            jd1: 2_453_750.5,
            jd2: 0.0,
        };
        let at = |seconds: f64| jd_days_since_j2000(day.jd1, seconds / 86_400.0) * 86_400.0;

        assert_eq!(scales.tai_minus_utc_s(&utc).unwrap(), 33);
        let tai = scales.utc_to_tai(&utc).unwrap();
        assert!((tai_seconds_since_j2000(&tai) - at(77_110.5)).abs() < TT_TOLERANCE_S);

        let tt = scales.utc_to_tt(&utc).unwrap();
        assert!((tt.days_since_j2000() * 86_400.0 - at(77_142.684)).abs() < TT_TOLERANCE_S);

        let tdb = scales.utc_to_tdb(&utc).unwrap();
        assert!((tdb.tdb_seconds_since_j2000() - at(77_142.684_373)).abs() < TDB_TOLERANCE_S);

        // Same instant built the way ingest builds it.
        let from_hifi = utc_to_tdb(&HifiEpoch::from_gregorian_utc(
            2006,
            1,
            15,
            21,
            24,
            37,
            500_000_000,
        ))
        .unwrap();
        assert!((from_hifi.days_since(tdb) * 86_400.0).abs() < ROUND_TRIP_TOLERANCE_S);

        // Same cookbook (memory): with UT1 - UTC = +0.3341 s,
        // UT1 = 21:24:37.834100.
        let ut1 = scales.utc_to_ut1(&utc, Some(0.3341)).unwrap();
        assert_eq!(ut1.jd1, 2_453_750.5);
        assert!((ut1.jd2 * 86_400.0 - 77_077.834_1).abs() < TT_TOLERANCE_S);
    }

    #[test]
    fn utc_to_tt_and_tdb_match_pyerfa_fixture() {
        // tests/reference/fixtures/time_utc_tt_tdb.csv, made by
        // tests/reference/make_time_observer_fixtures.py with pyerfa 2.0.1.5
        // (dtf2d, utctai, taitt, dtdb geocentric, tttdb).
        let scales = TimeScales::default();
        let text = fixture("time_utc_tt_tdb.csv");
        let (mut worst_tai, mut worst_tt, mut worst_tdb, mut worst_back) = (0.0, 0.0, 0.0, 0.0_f64);
        let mut rows = 0;
        let mut leap_second_rows = 0;
        for line in text.lines().skip(1) {
            let f: Vec<&str> = line.split(',').collect();
            let v = |i: usize| f[i].parse::<f64>().unwrap();
            let utc = UtcTime::parse_iso8601(f[0]).unwrap();
            if f[0].contains(":60.") {
                leap_second_rows += 1;
            }
            let tai = scales.utc_to_tai(&utc).unwrap();
            let tai_err =
                tai_seconds_since_j2000(&tai) - jd_days_since_j2000(v(1), v(2)) * 86_400.0;
            let tt = scales.utc_to_tt(&utc).unwrap();
            let tt_err = (tt.days_since_j2000() - jd_days_since_j2000(v(3), v(4))) * 86_400.0;
            let tdb = scales.utc_to_tdb(&utc).unwrap();
            let tdb_err = (tdb.tdb_days_since_j2000() - jd_days_since_j2000(v(5), v(6))) * 86_400.0;
            let back = scales.tdb_to_utc(tdb).unwrap();
            let back_err = if back.mjd() == utc.mjd() {
                back.seconds_of_day() - utc.seconds_of_day()
            } else {
                f64::INFINITY
            };
            assert!(
                tai_err.abs() < TT_TOLERANCE_S,
                "{}: TAI off by {tai_err} s",
                f[0]
            );
            assert!(
                tt_err.abs() < TT_TOLERANCE_S,
                "{}: TT off by {tt_err} s",
                f[0]
            );
            assert!(
                tdb_err.abs() < TDB_TOLERANCE_S,
                "{}: TDB off by {tdb_err} s",
                f[0]
            );
            assert!(
                back_err.abs() < ROUND_TRIP_TOLERANCE_S,
                "{}: back {back}",
                f[0]
            );
            assert_eq!(back.to_iso8601(6), f[0]);
            worst_tai = f64::max(worst_tai, tai_err.abs());
            worst_tt = f64::max(worst_tt, tt_err.abs());
            worst_tdb = f64::max(worst_tdb, tdb_err.abs());
            worst_back = worst_back.max(back_err.abs());
            rows += 1;
        }
        assert!(rows >= 50 && leap_second_rows >= 5);
        println!(
            "{rows} instants: worst TAI {worst_tai:.2e} s, TT {worst_tt:.2e} s, \
             TDB {worst_tdb:.2e} s, TDB->UTC round trip {worst_back:.2e} s"
        );
    }

    #[test]
    fn leap_second_is_its_own_second() {
        // 2016-12-31 ended with a leap second (IERS Bulletin C 52, memory):
        // 23:59:60.5 UTC is 2017-01-01T00:00:36.5 TAI, one second after
        // 23:59:59.5 UTC and half a second before 2017-01-01T00:00:00 UTC.
        let scales = TimeScales::default();
        let inside = UtcTime::parse_iso8601("2016-12-31T23:59:60.5Z").unwrap();
        let before = UtcTime::parse_iso8601("2016-12-31T23:59:59.5Z").unwrap();
        let after = UtcTime::parse_iso8601("2017-01-01T00:00:00.0Z").unwrap();
        let tai = |u: &UtcTime| tai_seconds_since_j2000(&scales.utc_to_tai(u).unwrap());
        assert!((tai(&inside) - tai(&before) - 1.0).abs() < TT_TOLERANCE_S);
        assert!((tai(&after) - tai(&inside) - 0.5).abs() < TT_TOLERANCE_S);
        assert_eq!(
            scales.leap_seconds().day_length_s(inside.mjd()).unwrap(),
            86_401
        );
        let tdb = scales.utc_to_tdb(&inside).unwrap();
        assert_eq!(
            scales.tdb_to_iso8601_utc(tdb).unwrap(),
            "2016-12-31T23:59:60.500Z"
        );
        // UT1 runs on smoothly through the leap second (TAI - UTC of 0h of
        // the day, as ERFA's utcut1 takes it).
        let ut1_inside = scales.utc_to_ut1(&inside, None).unwrap();
        let ut1_after = scales.utc_to_ut1(&after, None).unwrap();
        let gap_s =
            ((ut1_after.jd1 - ut1_inside.jd1) + (ut1_after.jd2 - ut1_inside.jd2)) * 86_400.0;
        assert!((gap_s - (-0.5)).abs() < TT_TOLERANCE_S, "UT1 step {gap_s}");

        let no_leap = UtcTime::parse_iso8601("2016-12-30T23:59:60.5Z").unwrap();
        assert!(matches!(
            scales.utc_to_tdb(&no_leap),
            Err(TimeError::NoLeapSecond { .. })
        ));
    }

    #[test]
    fn utc_before_1972_is_rejected() {
        let scales = TimeScales::default();
        let utc = UtcTime::from_calendar(1971, 6, 1, 0, 0, 0.0).unwrap();
        let err = scales.utc_to_tdb(&utc).unwrap_err();
        assert!(err.to_string().contains("1971-06-01"), "{err}");
        assert!(err.to_string().contains("1972-01-01"), "{err}");
    }

    /// The IETF leap-seconds.list layout (data.iana.org/time-zones): its
    /// header comments and first four steps, whose TAI - UTC values are the
    /// published ones (IERS Bulletin C, memory).
    const LIST_EXCERPT: &str = "\
#	In the following text, the symbol '#' introduces
#	a comment, which continues from that symbol until
#	the end of the line.
#
#$	 3676924800
#@	 3960979200
#
2272060800	10	# 1 Jan 1972
2287785600	11	# 1 Jul 1972
2303683200	12	# 1 Jan 1973

2335219200	13	# 1 Jan 1974
";

    #[test]
    fn leap_second_list_is_read() {
        let table = LeapSecondTable::parse(LIST_EXCERPT, "excerpt.list").unwrap();
        assert_eq!(table.steps().len(), 4);
        let builtin = LeapSecondTable::builtin();
        for step in table.steps() {
            assert!(
                builtin.steps().contains(step),
                "{step:?} not in hifitime's table"
            );
        }
        // The "#@" expiry, as a UTC day.
        assert_eq!(table.expires_mjd(), Some(MJD_1900 + 3_960_979_200 / 86_400));
        // The table here stops in 1974; 2014 therefore reads 13 s.
        let utc = UtcTime::from_calendar(2014, 3, 1, 0, 0, 0.0).unwrap();
        let with_file = TimeScales::new(table);
        assert_eq!(with_file.tai_minus_utc_s(&utc).unwrap(), 13);
        assert_eq!(TimeScales::default().tai_minus_utc_s(&utc).unwrap(), 35);
    }

    #[test]
    fn leap_second_list_errors_name_file_and_line() {
        let cases = [
            ("2272060800\t10\n2287785600\n", 2, "expected two numbers"),
            ("2272060800\tten\n", 1, "TAI-UTC"),
            ("# c\n2272060801\t10\n", 2, "midnight"),
            ("2272060800\t10\n2272060800\t11\n", 2, "increase"),
            ("2272060800\t10\n2287785600\t12\n", 2, "one second"),
            ("#@ soon\n", 1, "expiry"),
        ];
        for (text, line, words) in cases {
            let err = LeapSecondTable::parse(text, "custom.list").unwrap_err();
            let shown = err.to_string();
            assert!(
                shown.starts_with(&format!("custom.list, line {line}: ")) && shown.contains(words),
                "{text:?} gave {shown}"
            );
        }
        assert!(matches!(
            LeapSecondTable::parse("# only comments\n", "empty.list"),
            Err(TimeError::LeapFileEmpty { .. })
        ));
        let missing = Path::new("/nonexistent/leap-seconds.list");
        let err = LeapSecondTable::from_file(missing).unwrap_err();
        assert!(
            err.to_string().contains("/nonexistent/leap-seconds.list"),
            "{err}"
        );
    }

    #[test]
    fn leap_second_file_on_disk() {
        let dir = std::env::temp_dir().join(format!("perihelix-leap-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("leap-seconds.list");
        std::fs::write(&path, LIST_EXCERPT).unwrap();
        let table = LeapSecondTable::from_file(&path).unwrap();
        assert_eq!(table.source(), path.display().to_string());
        assert_eq!(table.steps().last().map(|s| s.tai_minus_utc_s), Some(13));
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn iso8601_text_round_trips_and_rejects_junk() {
        let u = UtcTime::parse_iso8601("2031-02-28T07:08:09.123456Z").unwrap();
        assert_eq!(u.calendar_date(), (2031, 2, 28));
        assert_eq!(u.to_iso8601(6), "2031-02-28T07:08:09.123456Z");
        assert_eq!(u.to_iso8601(0), "2031-02-28T07:08:09Z");
        // Rounding carries into the next day (and year).
        let late = UtcTime::parse_iso8601("2030-12-31T23:59:59.9996").unwrap();
        assert_eq!(late.to_iso8601(3), "2031-01-01T00:00:00.000Z");
        let leap = UtcTime::parse_iso8601("2016-12-31T23:59:60.9996Z").unwrap();
        assert_eq!(leap.to_iso8601(3), "2017-01-01T00:00:00.000Z");
        assert_eq!(leap.to_iso8601(2), "2017-01-01T00:00:00.00Z");
        let leap_mid = UtcTime::parse_iso8601("2016-12-31T23:59:60.24Z").unwrap();
        assert_eq!(
            UtcTime::from_calendar_nanos(2016, 12, 31, 23, 59, 60, 240_000_000).unwrap(),
            leap_mid
        );
        assert!(UtcTime::from_calendar_nanos(2016, 12, 31, 23, 59, 59, 1_000_000_000).is_err());
        assert_eq!(leap_mid.to_iso8601(1), "2016-12-31T23:59:60.2Z");
        for junk in [
            "2031-02-29T00:00:00Z",
            "2031-02-28 07:08",
            "2031-2-28T07:08:09Z",
            "2031-02-28T24:00:00Z",
            "2031-02-28T12:30:60Z",
            "2031-02-28T07:08:09.Z",
            "2031-02-28T07:08:09.1e3Z",
            "yesterday",
        ] {
            assert!(UtcTime::parse_iso8601(junk).is_err(), "{junk} accepted");
        }
    }

    #[test]
    fn a_date_alone_is_midnight_utc_where_a_person_types_it() {
        // Issue 12, point 7: a date alone is accepted where a time is
        // asked and means 00:00 UTC; ISO 8601 calendar dates are YYYY-MM-DD.
        let day = UtcTime::parse_iso8601_or_date("2026-09-01").unwrap();
        assert_eq!(day, UtcTime::parse_iso8601("2026-09-01T00:00:00Z").unwrap());
        assert_eq!(UtcTime::parse_iso8601_or_date(" 2026-09-01 ").unwrap(), day);
        // Full times read as the strict parser reads them.
        assert_eq!(
            UtcTime::parse_iso8601_or_date("2026-09-01T06:30:00Z").unwrap(),
            UtcTime::parse_iso8601("2026-09-01T06:30:00Z").unwrap()
        );
        // ADES obsTime needs the time of day (ADES 2022 obsTime format):
        // the strict parser still refuses a date alone.
        assert!(UtcTime::parse_iso8601("2026-09-01").is_err());
        for junk in [
            "2026-09-31",
            "2026-9-01",
            "20260901",
            "",
            "yesterday",
            "2026-09-01T",
        ] {
            let e = UtcTime::parse_iso8601_or_date(junk);
            assert!(e.is_err(), "{junk} accepted");
        }
        let e = UtcTime::parse_iso8601_or_date("2026-09-31").unwrap_err();
        assert!(e.to_string().contains("\"2026-09-31\""), "{e}");
    }

    #[test]
    fn civil_day_count_matches_known_mjds() {
        // MJD 51544 is 2000-01-01 and MJD 15020 is 1900-01-01 (definition of
        // MJD = JD - 2400000.5; J2000 = JD 2451545.0 at noon).
        assert_eq!(days_from_civil(2000, 1, 1) + MJD_1970, 51_544);
        assert_eq!(days_from_civil(1900, 1, 1) + MJD_1970, MJD_1900);
        for mjd in (MJD_1900..MJD_1900 + 60_000).step_by(37) {
            let (y, m, d) = civil_from_days(mjd - MJD_1970);
            assert_eq!(days_from_civil(y, m, d) + MJD_1970, mjd);
        }
    }

    #[test]
    fn tdb_epoch_and_hifitime_agree() {
        // J2000 TDB is 2000-01-01T12:00:00 TDB in hifitime's own terms.
        let j2000 = Epoch::J2000.to_hifitime();
        assert_eq!(
            j2000,
            HifiEpoch::from_gregorian(2000, 1, 1, 12, 0, 0, 0, TimeScale::TDB)
        );
        let t = Epoch::from_tdb_days_since_j2000(9_000.123_456_789);
        let back = TimeScales::default()
            .epoch_to_tdb(&t.to_hifitime())
            .unwrap();
        assert!((back.days_since(t) * 86_400.0).abs() < ROUND_TRIP_TOLERANCE_S);
        assert!(matches!(
            TimeScales::default()
                .utc_to_ut1(&UtcTime::from_mjd_seconds(60_000, 0.0).unwrap(), Some(1.2)),
            Err(TimeError::Dut1OutOfRange { .. })
        ));
    }
}
