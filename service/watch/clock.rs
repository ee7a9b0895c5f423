//! Wall-clock times as the store and the archive write them.

/// Now in UTC as ISO 8601 with milliseconds ("2026-12-03T10:15:02.123Z"),
/// and the day ("2026-12-03") for the archive's folders.
pub fn now_utc() -> (String, String) {
    let d = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .unwrap_or_default();
    let secs = d.as_secs() as i64;
    let (days, rem) = (secs.div_euclid(86_400), secs.rem_euclid(86_400));
    let (y, m, dd) = civil_from_days(days);
    let day = format!("{y:04}-{m:02}-{dd:02}");
    let stamp = format!(
        "{day}T{:02}:{:02}:{:02}.{:03}Z",
        rem / 3600,
        (rem / 60) % 60,
        rem % 60,
        d.subsec_millis()
    );
    (stamp, day)
}

/// The proleptic Gregorian date of a count of days since 1970-01-01
/// (H. Hinnant, "chrono-Compatible Low-Level Date Algorithms",
/// days_from_civil's inverse; memory).
fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (if m <= 2 { y + 1 } else { y }, m, d)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn days_to_dates() {
        // 1970-01-01 is day 0 (the Unix epoch, POSIX); 2000-03-01 is day
        // 11017 and 2026-12-03 day 20790 (CPython 3.11 datetime:
        // (date(2000,3,1) - date(1970,1,1)).days).
        assert_eq!(civil_from_days(0), (1970, 1, 1));
        assert_eq!(civil_from_days(11_017), (2000, 3, 1));
        assert_eq!(civil_from_days(20_790), (2026, 12, 3));
        assert_eq!(civil_from_days(-1), (1969, 12, 31));
    }
}
