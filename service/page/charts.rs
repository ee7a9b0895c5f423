//! The object page's plots, built from what the store keeps: the solution
//! history (one point per solution, from the summaries) and the latest
//! solution's residuals (from its document). Pure: data in, charts out.
//!
//! The history's x axis is the date of each solution's newest
//! observation (the first observation plus the arc), with the arc length
//! along the top: what moved the picture is the data, not the moment
//! the daemon happened to refit.

use std::collections::BTreeMap;

use serde_json::Value;

use crate::astro::time::UtcTime;
use crate::store::SolutionSummary;

use super::svg::{Axis, Chart, Point, SecondaryAxis, Series, Style};

/// Seconds in a day.
const DAY_S: f64 = 86_400.0;

/// An ISO 8601 UTC time as a fractional MJD.
pub fn mjd_of(utc: &str) -> Option<f64> {
    let t = UtcTime::parse_iso8601(utc).ok()?;
    Some(t.mjd() as f64 + t.seconds_of_day() / DAY_S)
}

/// A history chart: x the date of the solution's newest observation.
fn history_chart(title: &str, y_label: &str, first_obs_mjd: f64) -> Chart {
    let mut chart = Chart::new(title, "date of the newest observation (UTC)", y_label);
    chart.x_axis = Axis::Time {
        epoch_mjd: first_obs_mjd,
    };
    chart.secondary_x = Some(SecondaryAxis {
        label: "arc (days)".into(),
        origin: 0.0,
    });
    chart
}

/// One series of a history: `pick` reads a (value, sigma) from a
/// converged solution's summary.
fn series_of(
    label: &str,
    summaries: &[SolutionSummary],
    index: usize,
    pick: impl Fn(&SolutionSummary) -> Option<(f64, Option<f64>)>,
) -> Series {
    let points = summaries
        .iter()
        .filter(|s| s.converged)
        .filter_map(|s| {
            let x = s.arc_days?;
            let (y, err) = pick(s)?;
            let p = Point::new(x, y);
            Some(match err {
                Some(e) => p.with_err(e),
                None => p,
            })
        })
        .collect();
    Series {
        label: label.into(),
        points,
        style: Style::nth(index, true),
    }
}

/// The history plots, in page order, each with its element id: original
/// 1/a with the zero line, eccentricity, the non-gravitational
/// significance with the alert threshold, and the normalised RMS of the
/// recommended model. `summaries` oldest first.
pub fn history_charts(
    summaries: &[SolutionSummary],
    first_obs_mjd: f64,
    ng_threshold_sigma: f64,
) -> Vec<(&'static str, Chart)> {
    let mut inverse_a = history_chart(
        "Original barycentric 1/a, one point per solution",
        "1/a (1/au)",
        first_obs_mjd,
    );
    inverse_a
        .series
        .push(series_of("original 1/a, 1 sigma", summaries, 0, |s| {
            s.one_over_a_original_per_au
                .map(|v| (v.value, Some(v.sigma)))
        }));
    inverse_a
        .hlines
        .push((0.0, "bound above, unbound below".into()));

    let mut e = history_chart(
        "Eccentricity at the reference epoch",
        "e (dimensionless)",
        first_obs_mjd,
    );
    e.series.push(series_of("e, 1 sigma", summaries, 1, |s| {
        s.e.map(|v| (v.value, Some(v.sigma)))
    }));
    e.hlines.push((1.0, "parabolic (e = 1)".into()));

    let mut ng = history_chart(
        "Non-gravitational significance against gravity alone",
        "significance (Gaussian sigma)",
        first_obs_mjd,
    );
    ng.series.push(series_of("significance", summaries, 2, |s| {
        s.ng_significance_sigma.map(|v| (v, None))
    }));
    ng.hlines.push((
        ng_threshold_sigma,
        format!("alert threshold ({ng_threshold_sigma} sigma)"),
    ));

    let mut rms = history_chart(
        "Normalised RMS of the recommended model",
        "normalised RMS (residual / stated sigma)",
        first_obs_mjd,
    );
    rms.series
        .push(series_of("normalised RMS", summaries, 3, |s| {
            s.normalized_rms.map(|v| (v, None))
        }));
    rms.hlines.push((1.0, "residuals as stated".into()));

    vec![
        ("plot-inverse-a", inverse_a),
        ("plot-e", e),
        ("plot-ng", ng),
        ("plot-rms", rms),
    ]
}

/// The latest solution's residuals against time, RA cos Dec and Dec, one
/// series (mark shape and colour) per station; rejected observations
/// hollow. From the document's `residuals` (the recommended model's).
pub fn residual_charts(document: &Value) -> Vec<(&'static str, Chart)> {
    let rows = document["residuals"]
        .as_array()
        .cloned()
        .unwrap_or_default();
    // Per station: the RA cos Dec and the Dec residuals.
    let mut by_station: BTreeMap<String, [Vec<Point>; 2]> = BTreeMap::new();
    let mut first: Option<f64> = None;
    let parsed: Vec<(String, f64, f64, f64, bool)> = rows
        .iter()
        .filter_map(|r| {
            let t = mjd_of(r["obs_time"].as_str()?)?;
            Some((
                r["station"].as_str()?.to_string(),
                t,
                r["ra_cos_dec_arcsec"].as_f64()?,
                r["dec_arcsec"].as_f64()?,
                r["used"].as_bool().unwrap_or(true),
            ))
        })
        .collect();
    for (_, t, _, _, _) in &parsed {
        first = Some(first.map_or(*t, |f: f64| f.min(*t)));
    }
    let epoch = first.unwrap_or(0.0).floor();
    for (station, t, ra, dec, used) in parsed {
        let entry = by_station.entry(station).or_default();
        let mark = |y: f64| {
            let p = Point::new(t - epoch, y);
            if used {
                p
            } else {
                p.hollow()
            }
        };
        entry[0].push(mark(ra));
        entry[1].push(mark(dec));
    }
    let recommended = document["recommended"]
        .as_str()
        .unwrap_or("the recommended model");
    let chart = |title: String, y_label: &str, coordinate: usize| {
        let mut c = Chart::new(&title, "observation date (UTC)", y_label);
        c.x_axis = Axis::Time { epoch_mjd: epoch };
        for (i, (station, points)) in by_station.iter().enumerate() {
            c.series.push(Series {
                label: format!("station {station}"),
                points: points[coordinate].clone(),
                style: Style::nth(i, false),
            });
        }
        c.hlines.push((0.0, "zero residual".into()));
        c
    };
    vec![
        (
            "plot-residuals-ra",
            chart(
                format!("Residuals in RA cos Dec under {recommended} (hollow: rejected)"),
                "observed - computed, RA cos Dec (arcsec)",
                0,
            ),
        ),
        (
            "plot-residuals-dec",
            chart(
                format!("Residuals in Dec under {recommended} (hollow: rejected)"),
                "observed - computed, Dec (arcsec)",
                1,
            ),
        ),
    ]
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::solve::document::ValueSigma;
    use crate::store::Trigger;

    fn summary(seq: u64, arc: f64, inverse_a: f64) -> SolutionSummary {
        let mut s = SolutionSummary::failed(
            seq,
            "2026-12-03T10:00:00Z",
            Trigger::NewObservations,
            10,
            String::new(),
        );
        s.converged = true;
        s.failure = None;
        s.arc_days = Some(arc);
        s.one_over_a_original_per_au = Some(ValueSigma {
            value: inverse_a,
            sigma: 1e-4,
        });
        s
    }

    /// One point per converged solution, at its arc; a failed fit leaves
    /// a gap, never a zero (the invented values are the test's own).
    #[test]
    fn the_history_has_a_point_per_converged_solution() {
        let mut failed = summary(3, 12.0, 0.0);
        failed.converged = false;
        let list = vec![summary(1, 2.0, 1e-3), summary(2, 7.0, -2e-4), failed];
        let charts = history_charts(&list, 61_000.0, 3.0);
        let (id, inverse_a) = &charts[0];
        assert_eq!(*id, "plot-inverse-a");
        let points = &inverse_a.series[0].points;
        assert_eq!(points.len(), 2);
        assert_eq!(
            (points[1].x, points[1].y, points[1].y_err),
            (7.0, -2e-4, Some(1e-4))
        );
        let svg = inverse_a.to_svg().expect("a valid chart");
        assert_eq!(svg.matches("class=\"point\"").count(), 2);
    }

    #[test]
    fn residuals_go_by_station_and_rejected_ones_are_hollow() {
        let doc = serde_json::json!({
            "recommended": "gravity",
            "residuals": [
                {"obs_time": "2026-09-01T01:00:00.000Z", "station": "ZQA",
                 "ra_cos_dec_arcsec": 0.1, "dec_arcsec": -0.2, "chi2": 0.2, "used": true},
                {"obs_time": "2026-09-02T01:00:00.000Z", "station": "ZQB",
                 "ra_cos_dec_arcsec": 3.0, "dec_arcsec": 2.0, "chi2": 40.0, "used": false},
            ]
        });
        let charts = residual_charts(&doc);
        let ra = &charts[0].1;
        assert_eq!(ra.series.len(), 2);
        assert!(!ra.series[0].points[0].hollow);
        assert!(ra.series[1].points[0].hollow);
        // The second observation is a day after the first: x = 1 day past
        // the first day's 01:00 (arithmetic).
        assert!((ra.series[1].points[0].x - (1.0 + 1.0 / 24.0)).abs() < 1e-9);
        assert!(ra.to_svg().is_ok());
    }
}
