//! Numbers as a person reads them: a value rounded to its sigma, a
//! fixed number of decimals that never shows a negative zero, counts of
//! sigmas grouped by thousands. One set of rules for the report, the
//! verdicts' sentences and the alerts, so they never round differently.

/// Values whose larger magnitude (value or sigma) is below this or at or
/// above [`SCIENTIFIC_ABOVE`] print with a shared power of ten: fixed
/// notation would need a row of zeros before the first digit that means
/// anything, or after the last one.
const SCIENTIFIC_BELOW: f64 = 1e-3;
const SCIENTIFIC_ABOVE: f64 = 1e7;

/// The power of ten of the leading digit of `x > 0`, corrected for the
/// rounding of `log10` at exact powers.
fn decade(x: f64) -> i32 {
    let mut e = x.log10().floor() as i32;
    if 10f64.powi(e + 1) <= x {
        e += 1;
    } else if 10f64.powi(e) > x {
        e -= 1;
    }
    e
}

/// Drops the sign of a number's text when every digit is zero: "-0.00"
/// is a rounding artefact, not a measurement below zero.
fn unsigned_zero(text: String) -> String {
    match text.strip_prefix('-') {
        Some(rest) if rest.chars().all(|c| c == '0' || c == '.') => rest.to_string(),
        _ => text,
    }
}

/// `x` with `decimals` digits after the point, never a negative zero.
pub fn fixed(x: f64, decimals: usize) -> String {
    unsigned_zero(format!("{x:.decimals$}"))
}

/// `x` with a sign always shown, never "-0.0" nor "+-0.0".
pub fn signed(x: f64, decimals: usize) -> String {
    let text = fixed(x, decimals);
    if text.starts_with('-') {
        text
    } else {
        format!("+{text}")
    }
}

/// `x` to `figures` significant figures, in fixed notation.
pub fn significant(x: f64, figures: i32) -> String {
    if !x.is_finite() {
        return "-".into();
    }
    if x == 0.0 {
        return "0".into();
    }
    let last = decade(x.abs()) - (figures - 1);
    if last > 0 {
        // Whole digits beyond the figures asked for are zeros: 2111 to
        // two figures is 2100.
        let step = 10f64.powi(last);
        return fixed((x / step).round() * step, 0);
    }
    fixed(x, (-last) as usize)
}

/// A count of sigmas: one decimal while it is small enough for the
/// decimal to matter, then whole numbers with thousands grouped.
pub fn sigmas(x: f64) -> String {
    if !x.is_finite() {
        return "-".into();
    }
    if x.abs() < 100.0 {
        return fixed(x, 1);
    }
    let whole = fixed(x.abs(), 0);
    let mut grouped = String::new();
    for (k, c) in whole.chars().enumerate() {
        if k > 0 && (whole.len() - k).is_multiple_of(3) {
            grouped.push(',');
        }
        grouped.push(c);
    }
    if x < 0.0 {
        format!("-{grouped}")
    } else {
        grouped
    }
}

/// A value and its sigma, both rounded at the sigma's second significant
/// figure: two significant figures of the uncertainty and the value to
/// the same decimal place, the common practice in reporting measurements
/// (ISO GUM, JCGM 100:2008 sec. 7.2.6; NIST Technical Note 1297; both
/// from memory). Very small or very large numbers share one power of
/// ten, "(1.058 +/- 0.021)e-8". A sigma of zero (a fixed parameter) gives
/// the value alone; one that is not a positive number says so.
pub fn rounded(value: f64, sigma: f64) -> String {
    if !value.is_finite() {
        return "not computed".into();
    }
    if sigma == 0.0 {
        return significant(value, 6);
    }
    if !(sigma.is_finite() && sigma > 0.0) {
        return format!("{} (sigma unknown)", significant(value, 6));
    }
    // The sigma's leading decade, moved up when rounding to two figures
    // carries (0.0996 -> 0.10, not 0.100).
    let mut e = decade(sigma);
    if (sigma / 10f64.powi(e - 1)).round() >= 100.0 {
        e += 1;
    }
    // The place of the last digit kept.
    let last = e - 1;
    let step = 10f64.powi(last);
    let value_r = (value / step).round() * step;
    let sigma_r = (sigma / step).round() * step;
    let largest = value_r.abs().max(sigma_r);
    if !(SCIENTIFIC_BELOW..SCIENTIFIC_ABOVE).contains(&largest) {
        let power = decade(largest);
        let scale = 10f64.powi(power);
        let decimals = (power - last).max(0) as usize;
        return format!(
            "({} +/- {})e{power}",
            fixed(value_r / scale, decimals),
            fixed(sigma_r / scale, decimals)
        );
    }
    let decimals = (-last).max(0) as usize;
    format!(
        "{} +/- {}",
        fixed(value_r, decimals),
        fixed(sigma_r, decimals)
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Two significant figures of the sigma, the value to the same place:
    /// the common practice of the ISO GUM (JCGM 100:2008, 7.2.6) and NIST
    /// TN 1297 (memory). The cases are worked by hand from that rule.
    #[test]
    fn values_are_rounded_to_their_sigma() {
        assert_eq!(rounded(1.23456, 0.0123), "1.235 +/- 0.012");
        // The sigma rounds up into the next decade: two figures, not three.
        assert_eq!(rounded(2.61803, 0.0996), "2.62 +/- 0.10");
        // A sigma above 10: the value to the same (tens) place.
        assert_eq!(rounded(45678.0, 1234.0), "45700 +/- 1200");
        // Small numbers share a power of ten, taken from the larger.
        assert_eq!(rounded(1.0575e-8, 2.06e-10), "(1.058 +/- 0.021)e-8");
        assert_eq!(rounded(-1.766e-10, 3.48e-10), "(-1.8 +/- 3.5)e-10");
        // A value that rounds to zero has no sign.
        assert_eq!(rounded(-0.00004, 0.012), "0.000 +/- 0.012");
        assert_eq!(rounded(-4e-12, 3.0e-10), "(0.0 +/- 3.0)e-10");
        // Fixed (sigma 0) and unknown sigmas.
        assert_eq!(rounded(0.15, 0.0), "0.150000");
        assert_eq!(rounded(0.15, f64::NAN), "0.150000 (sigma unknown)");
        assert_eq!(rounded(f64::NAN, 0.1), "not computed");
    }

    #[test]
    fn no_negative_zero_is_printed() {
        assert_eq!(fixed(-0.0, 1), "0.0");
        assert_eq!(fixed(-0.04, 1), "0.0");
        assert_eq!(fixed(-0.05001, 1), "-0.1");
        assert_eq!(signed(-0.01, 1), "+0.0");
        assert_eq!(signed(0.26, 1), "+0.3");
        assert_eq!(sigmas(47_101.66), "47,102");
        assert_eq!(sigmas(-1_234_567.0), "-1,234,567");
        assert_eq!(sigmas(51.35), "51.4");
        assert_eq!(significant(2_111.0, 2), "2100");
        assert_eq!(significant(0.072247, 2), "0.072");
        assert_eq!(significant(-0.0001, 1), "-0.0001");
    }
}
