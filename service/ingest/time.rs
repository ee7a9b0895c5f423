//! ISO 8601 UTC times as ADES writes them: `2026-03-14T05:12:33.25Z`.
//!
//! Parsed by hand rather than through a general date parser so that a bad
//! time says exactly what is wrong with it, and so that the hot path of the
//! PSV reader stays a few dozen byte comparisons.

use std::cell::Cell;

use hifitime::{Duration, Epoch};

thread_local! {
    /// The last calendar day seen and its UTC midnight: observations come in
    /// runs from one night, and building an epoch from a full date is the
    /// costliest step of reading a line.
    static LAST_DAY: Cell<Option<(i32, u32, u32, Epoch)>> = const { Cell::new(None) };
}

/// UTC midnight of a day, from hifitime (which knows the leap seconds).
fn midnight(year: i32, month: u32, day: u32) -> Option<Epoch> {
    if let Some((y, m, d, e)) = LAST_DAY.get() {
        if (y, m, d) == (year, month, day) {
            return Some(e);
        }
    }
    let e = Epoch::maybe_from_gregorian_utc(year, month as u8, day as u8, 0, 0, 0, 0).ok()?;
    LAST_DAY.set(Some((year, month, day, e)));
    Some(e)
}

/// A UTC instant as read: the hifitime epoch (UTC scale, built from the
/// calendar components) with its nanoseconds exact.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct UtcTime {
    pub epoch: Epoch,
    pub year: i32,
    pub month: u8,
    pub day: u8,
    pub hour: u8,
    pub minute: u8,
    /// 60 for a leap second.
    pub second: u8,
    /// Fractional second in nanoseconds, exactly as written (up to 9 digits).
    pub nanos: u32,
}

impl UtcTime {
    /// The time in one normal form, `YYYY-MM-DDThh:mm:ss.nnnnnnnnnZ`, so
    /// that equal instants written differently compare equal as text.
    pub fn normalized(&self) -> String {
        format!(
            "{:04}-{:02}-{:02}T{:02}:{:02}:{:02}.{:09}Z",
            self.year, self.month, self.day, self.hour, self.minute, self.second, self.nanos
        )
    }

    /// Orders times, leap seconds included (the calendar components order
    /// correctly even where the epoch of a leap second is ambiguous).
    pub fn sort_key(&self) -> (i32, u8, u8, u8, u8, u8, u32) {
        (
            self.year,
            self.month,
            self.day,
            self.hour,
            self.minute,
            self.second,
            self.nanos,
        )
    }
}

const LAYOUT: &str = "expected YYYY-MM-DDThh:mm:ss[.fff]Z";

fn digits(b: &[u8], range: std::ops::Range<usize>) -> Option<u32> {
    let mut v = 0u32;
    for &c in b.get(range)? {
        if !c.is_ascii_digit() {
            return None;
        }
        v = v * 10 + u32::from(c - b'0');
    }
    Some(v)
}

fn days_in_month(year: i32, month: u32) -> u32 {
    match month {
        4 | 6 | 9 | 11 => 30,
        2 if (year % 4 == 0 && year % 100 != 0) || year % 400 == 0 => 29,
        2 => 28,
        _ => 31,
    }
}

/// Parses one ADES time. The error is a short English reason.
pub fn parse_utc(text: &str) -> Result<UtcTime, String> {
    let b = text.as_bytes();
    if b.len() < 20 {
        return Err(format!("too short, {LAYOUT}"));
    }
    let sep_ok = b[4] == b'-' && b[7] == b'-' && b[10] == b'T' && b[13] == b':' && b[16] == b':';
    let (Some(year), Some(month), Some(day), Some(hour), Some(minute), Some(second), true) = (
        digits(b, 0..4),
        digits(b, 5..7),
        digits(b, 8..10),
        digits(b, 11..13),
        digits(b, 14..16),
        digits(b, 17..19),
        sep_ok,
    ) else {
        return Err(LAYOUT.to_string());
    };
    let mut nanos = 0u32;
    let rest = &b[19..];
    let tail = match rest.first() {
        Some(b'.') => {
            let frac_len = rest[1..].iter().take_while(|c| c.is_ascii_digit()).count();
            if frac_len == 0 {
                return Err("no digits after the decimal point".into());
            }
            if frac_len > 9 {
                return Err("more than 9 fractional digits (finer than 1 ns)".into());
            }
            let frac = digits(rest, 1..1 + frac_len).unwrap_or(0);
            nanos = frac * 10u32.pow(9 - frac_len as u32);
            &rest[1 + frac_len..]
        }
        _ => rest,
    };
    match tail {
        b"Z" => {}
        [] => return Err("missing the 'Z' (UTC) suffix".into()),
        _ => return Err(format!("unexpected text after the seconds, {LAYOUT}")),
    }
    let year = year as i32;
    if !(1..=12).contains(&month) {
        return Err(format!("month {month} is outside 1-12"));
    }
    if day == 0 || day > days_in_month(year, month) {
        return Err(format!("day {day} does not exist in {year}-{month:02}"));
    }
    if hour > 23 {
        return Err(format!("hour {hour} is outside 0-23"));
    }
    if minute > 59 {
        return Err(format!("minute {minute} is outside 0-59"));
    }
    if second > 60 {
        return Err(format!("second {second} is outside 0-60"));
    }
    // Within a day without a leap second, the epoch is the day's midnight
    // plus the time of day; a leap second goes to hifitime itself, which
    // knows the leap-second days and refuses second 60 elsewhere.
    if second < 60 {
        if let Some(day_start) = midnight(year, month, day) {
            let ns =
                i128::from(hour * 3600 + minute * 60 + second) * 1_000_000_000 + i128::from(nanos);
            return Ok(UtcTime {
                epoch: day_start + Duration::from_total_nanoseconds(ns),
                year,
                month: month as u8,
                day: day as u8,
                hour: hour as u8,
                minute: minute as u8,
                second: second as u8,
                nanos,
            });
        }
    }
    let epoch = Epoch::maybe_from_gregorian_utc(
        year,
        month as u8,
        day as u8,
        hour as u8,
        minute as u8,
        second as u8,
        nanos,
    )
    .map_err(|_| {
        if second == 60 {
            format!("{year}-{month:02}-{day:02} has no leap second at its end")
        } else {
            "not a valid UTC date".to_string()
        }
    })?;
    Ok(UtcTime {
        epoch,
        year,
        month: month as u8,
        day: day as u8,
        hour: hour as u8,
        minute: minute as u8,
        second: second as u8,
        nanos,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use hifitime::TimeScale;

    #[test]
    fn parses_fraction_exactly() {
        let t = parse_utc("2026-03-14T05:12:33.25Z").unwrap();
        assert_eq!(t.nanos, 250_000_000);
        assert_eq!(t.epoch.time_scale, TimeScale::UTC);
        let (y, mo, d, h, mi, s, ns) = t.epoch.to_gregorian_utc();
        assert_eq!(
            (y, mo, d, h, mi, s, ns),
            (2026, 3, 14, 5, 12, 33, 250_000_000)
        );
        let t = parse_utc("2016-08-29T12:32:34.1234567Z").unwrap();
        assert_eq!(t.nanos, 123_456_700);
        let t = parse_utc("2016-02-29T12:38:34Z").unwrap();
        assert_eq!(t.nanos, 0);
    }

    #[test]
    fn day_cache_agrees_with_hifitime() {
        // The fast path (midnight + time of day) must give exactly the
        // epoch hifitime builds from all the components.
        for (text, c) in [
            (
                "2026-03-14T05:12:33.25Z",
                (2026, 3, 14, 5, 12, 33, 250_000_000),
            ),
            (
                "2026-03-14T23:59:59.999999999Z",
                (2026, 3, 14, 23, 59, 59, 999_999_999),
            ),
            (
                "2016-12-31T23:59:59.5Z",
                (2016, 12, 31, 23, 59, 59, 500_000_000),
            ),
            ("2017-01-01T00:00:00Z", (2017, 1, 1, 0, 0, 0, 0)),
            ("1972-07-01T12:00:00Z", (1972, 7, 1, 12, 0, 0, 0)),
        ] {
            let t = parse_utc(text).unwrap();
            let direct = Epoch::from_gregorian_utc(c.0, c.1, c.2, c.3, c.4, c.5, c.6);
            assert_eq!(t.epoch, direct, "{text}");
            assert_eq!(t.epoch.to_gregorian_utc(), c, "{text}");
        }
    }

    #[test]
    fn leap_second_only_on_leap_second_days() {
        // 2016-12-31 ended with a leap second (IERS Bulletin C 52; memory).
        let t = parse_utc("2016-12-31T23:59:60.5Z").unwrap();
        assert_eq!(t.second, 60);
        // 1972-06-30 had the first one (IERS; memory).
        assert!(parse_utc("1972-06-30T23:59:60.01Z").is_ok());
        let e = parse_utc("2019-12-31T23:59:60Z").unwrap_err();
        assert!(e.contains("no leap second"), "{e}");
        let e = parse_utc("2016-12-31T12:00:60Z").unwrap_err();
        assert!(e.contains("no leap second"), "{e}");
    }

    #[test]
    fn reasons_name_the_problem() {
        let cases = [
            ("2026-13-14T05:12:33Z", "month 13"),
            ("2026-02-29T05:12:33Z", "day 29"),
            ("2026-03-14T24:00:00Z", "hour 24"),
            ("2026-03-14T05:61:00Z", "minute 61"),
            ("2026-03-14T05:12:33", "too short"),
            ("2026-03-14T05:12:33.5", "missing the 'Z'"),
            ("2026-03-14 05:12:33Z", "expected"),
            ("2026-03-14T05:12:33.Z", "no digits"),
            ("2026-03-14T05:12:33.1234567891Z", "more than 9"),
            ("2026-03-14T05:12:33+01Z", "unexpected text"),
        ];
        for (text, want) in cases {
            let e = parse_utc(text).unwrap_err();
            assert!(e.contains(want), "{text}: {e}");
        }
    }
}
