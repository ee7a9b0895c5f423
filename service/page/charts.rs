//! The object page's plots, built from what the store keeps: the solution
//! history (one point per solution, from the summaries) and the latest
//! solution's residuals (from its document). Pure: data in, charts out.
//!
//! The history's x axis is the date of each solution's newest
//! observation (the first observation plus the arc), with the arc length
//! along the top: what moved the picture is the data, not the moment
//! the daemon happened to refit.

use serde_json::Value;

use crate::astro::time::UtcTime;
use crate::store::SolutionSummary;

use super::svg::{Axis, Chart, Point, SecondaryAxis, Series, Style, YScale};

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
/// significance with the alert threshold, the normalised RMS of the
/// recommended model and of gravity alone, each measured A_i (when any
/// was), and the move of the predicted places (from the second solution).
/// `summaries` oldest first.
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
        "Normalised RMS: the recommended model and gravity alone",
        "normalised RMS (residual / stated sigma)",
        first_obs_mjd,
    );
    rms.series
        .push(series_of("recommended model", summaries, 3, |s| {
            s.normalized_rms.map(|v| (v, None))
        }));
    rms.series
        .push(series_of("gravity alone", summaries, 4, |s| {
            s.gravity_normalized_rms.map(|v| (v, None))
        }));
    rms.hlines.push((1.0, "residuals as stated".into()));

    let mut charts = vec![
        ("plot-inverse-a", inverse_a),
        ("plot-e", e),
        ("plot-ng", ng),
        ("plot-rms", rms),
    ];
    if let Some(terms) = terms_chart(summaries, first_obs_mjd) {
        charts.push(("plot-terms", terms));
    }
    if let Some(shifts) = shift_chart(summaries, first_obs_mjd) {
        charts.push(("plot-shift", shifts));
    }
    charts
}

/// A_i are of order 1e-8 au/d^2: plotted in that unit so the ticks read
/// as short numbers.
const TERM_UNIT: f64 = 1e-8;

/// A term measured with a sigma above this (au/d^2) says nothing yet
/// (cometary A1 are of order 1e-8, rule of thumb): a first fit of a
/// few nights can give 1e-5 +- 1e-5, which would flatten every later
/// point to a line. Such points are left out and counted in the title.
const UNCONSTRAINED_SIGMA: f64 = 1e-6;

/// Each non-gravitational term the ladder measured, one series per term:
/// filled where the recommended model has it, hollow where it was only
/// measured in a model the data did not choose. None when no solution
/// measured any.
fn terms_chart(summaries: &[SolutionSummary], first_obs_mjd: f64) -> Option<Chart> {
    let names: std::collections::BTreeSet<&str> = summaries
        .iter()
        .filter(|s| s.converged)
        .flat_map(|s| s.terms.iter().map(|t| t.term.as_str()))
        .collect();
    if names.is_empty() {
        return None;
    }
    let mut left_out = 0;
    let mut series = Vec::new();
    for (i, name) in names.iter().enumerate() {
        let points = summaries
            .iter()
            .filter(|s| s.converged)
            .filter_map(|s| {
                let x = s.arc_days?;
                let t = s.terms.iter().find(|t| t.term == *name)?;
                if t.value.sigma.is_nan() || t.value.sigma > UNCONSTRAINED_SIGMA {
                    left_out += 1;
                    return None;
                }
                let p =
                    Point::new(x, t.value.value / TERM_UNIT).with_err(t.value.sigma / TERM_UNIT);
                Some(if t.justified { p } else { p.hollow() })
            })
            .collect();
        series.push(Series {
            label: format!("{name}, 1 sigma"),
            points,
            style: Style::nth(i, true),
        });
    }
    let title = match left_out {
        0 => "Non-gravitational terms (hollow: measured, not justified)".to_string(),
        n => format!(
            "Non-gravitational terms (hollow: not justified; {n} left out, sigma > 1e-6 au/d^2)"
        ),
    };
    let mut chart = history_chart(&title, "A_i (1e-8 au/d^2 at 1 au)", first_obs_mjd);
    chart.series = series;
    chart.hlines.push((0.0, "no push".into()));
    Some(chart)
}

/// How far the averaged place some days ahead moved from the previous
/// solution's prediction, one series per horizon, on decades (early
/// moves are degrees, late ones arcsec). None before a second solution.
fn shift_chart(summaries: &[SolutionSummary], first_obs_mjd: f64) -> Option<Chart> {
    let horizons: Vec<f64> = {
        let mut days: Vec<f64> = summaries
            .iter()
            .flat_map(|s| s.place_shifts.iter().map(|p| p.days))
            .collect();
        days.sort_by(f64::total_cmp);
        days.dedup();
        days
    };
    if horizons.is_empty() {
        return None;
    }
    let mut chart = history_chart(
        "How far the predicted place moved since the previous solution",
        "shift (arcsec, log scale)",
        first_obs_mjd,
    );
    chart.y_scale = YScale::Log10;
    for (i, days) in horizons.iter().enumerate() {
        let points = summaries
            .iter()
            .filter(|s| s.converged)
            .filter_map(|s| {
                let x = s.arc_days?;
                let shift = s.place_shifts.iter().find(|p| p.days == *days)?;
                Some(Point::new(x, shift.shift_arcsec))
            })
            .collect();
        chart.series.push(Series {
            label: format!("{days} days ahead"),
            points,
            style: Style::nth(i, true),
        });
    }
    Some(chart)
}

/// One observation's residual as the page reads it from a document.
struct ResidualRow {
    station: String,
    mjd: f64,
    ra_cos_dec_arcsec: f64,
    dec_arcsec: f64,
    used: bool,
}

fn residual_rows(list: &Value) -> Vec<ResidualRow> {
    list.as_array()
        .map(|rows| {
            rows.iter()
                .filter_map(|r| {
                    Some(ResidualRow {
                        station: r["station"].as_str()?.to_string(),
                        mjd: mjd_of(r["obs_time"].as_str()?)?,
                        ra_cos_dec_arcsec: r["ra_cos_dec_arcsec"].as_f64()?,
                        dec_arcsec: r["dec_arcsec"].as_f64()?,
                        used: r["used"].as_bool().unwrap_or(true),
                    })
                })
                .collect()
        })
        .unwrap_or_default()
}

/// The latest solution's residuals against time, RA cos Dec and Dec, one
/// series (mark shape and colour) per station; rejected observations
/// hollow. The recommended model's (the document's `residuals`), then,
/// when another model than gravity is recommended, gravity alone's
/// (`gravity_residuals`) in the order the page sets them side by side:
/// RA under both, then Dec under both. A station keeps its mark in all.
pub fn residual_charts(document: &Value) -> Vec<(&'static str, Chart)> {
    let recommended = residual_rows(&document["residuals"]);
    let gravity = residual_rows(&document["gravity_residuals"]);
    let stations: std::collections::BTreeSet<&str> = recommended
        .iter()
        .chain(&gravity)
        .map(|r| r.station.as_str())
        .collect();
    let epoch = recommended
        .iter()
        .chain(&gravity)
        .map(|r| r.mjd)
        .fold(f64::INFINITY, f64::min);
    let epoch = if epoch.is_finite() {
        epoch.floor()
    } else {
        0.0
    };
    let model = document["recommended"]
        .as_str()
        .unwrap_or("the recommended model");
    let chart = |rows: &[ResidualRow], under: &str, coordinate: usize| {
        let (title, y_label) = if coordinate == 0 {
            ("RA cos Dec", "observed - computed, RA cos Dec (arcsec)")
        } else {
            ("Dec", "observed - computed, Dec (arcsec)")
        };
        let mut c = Chart::new(
            &format!("Residuals in {title} under {under} (hollow: rejected)"),
            "observation date (UTC)",
            y_label,
        );
        c.x_axis = Axis::Time { epoch_mjd: epoch };
        for (i, station) in stations.iter().enumerate() {
            let points: Vec<Point> = rows
                .iter()
                .filter(|r| r.station == *station)
                .map(|r| {
                    let y = if coordinate == 0 {
                        r.ra_cos_dec_arcsec
                    } else {
                        r.dec_arcsec
                    };
                    let p = Point::new(r.mjd - epoch, y);
                    if r.used {
                        p
                    } else {
                        p.hollow()
                    }
                })
                .collect();
            if !points.is_empty() {
                c.series.push(Series {
                    label: format!("station {station}"),
                    points,
                    style: Style::nth(i, false),
                });
            }
        }
        c.hlines.push((0.0, "zero residual".into()));
        c
    };
    if gravity.is_empty() {
        return vec![
            ("plot-residuals-ra", chart(&recommended, model, 0)),
            ("plot-residuals-dec", chart(&recommended, model, 1)),
        ];
    }
    vec![
        ("plot-residuals-ra", chart(&recommended, model, 0)),
        (
            "plot-gravity-residuals-ra",
            chart(&gravity, "gravity alone", 0),
        ),
        ("plot-residuals-dec", chart(&recommended, model, 1)),
        (
            "plot-gravity-residuals-dec",
            chart(&gravity, "gravity alone", 1),
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

    #[test]
    fn terms_are_hollow_where_the_data_did_not_choose_them() {
        use crate::store::TermPoint;
        let term = |value: f64, justified: bool| TermPoint {
            term: "A1".into(),
            model: "A1 water-ice".into(),
            value: ValueSigma { value, sigma: 1e-9 },
            justified,
        };
        let mut a = summary(1, 3.0, 1e-3);
        a.terms = vec![term(2e-8, false)];
        let mut b = summary(2, 9.0, 1e-3);
        b.terms = vec![term(3e-8, true)];
        let none = summary(3, 1.0, 1e-3);
        let mut wild = summary(0, 1.0, 1e-3);
        wild.terms = vec![term(2e-5, false)];
        wild.terms[0].value.sigma = 3e-5;
        assert!(history_charts(std::slice::from_ref(&none), 61_000.0, 3.0)
            .iter()
            .all(|(id, _)| *id != "plot-terms"));
        let charts = history_charts(&[wild, a, b], 61_000.0, 3.0);
        let (_, terms) = charts
            .iter()
            .find(|(id, _)| *id == "plot-terms")
            .expect("a terms plot");
        let points = &terms.series[0].points;
        // In units of 1e-8 au/d^2: 2 and 3, sigma 0.1.
        assert!((points[0].y - 2.0).abs() < 1e-12 && points[0].hollow);
        assert!((points[1].y - 3.0).abs() < 1e-12 && !points[1].hollow);
        assert!((points[1].y_err.unwrap() - 0.1).abs() < 1e-12);
        // The first fit's unconstrained term is counted, not drawn.
        assert_eq!(points.len(), 2);
        assert!(terms.title.contains("1 left out"), "{}", terms.title);
        assert!(terms.to_svg().is_ok());
    }

    #[test]
    fn shifts_plot_one_series_per_horizon_on_decades() {
        use crate::store::PlaceShift;
        let shift = |days: f64, arcsec: f64| PlaceShift {
            days,
            shift_arcsec: arcsec,
            shift_sigma: None,
        };
        let first = summary(1, 3.0, 1e-3);
        let mut second = summary(2, 9.0, 1e-3);
        second.place_shifts = vec![shift(7.0, 4000.0), shift(30.0, 9000.0)];
        let mut third = summary(3, 12.0, 1e-3);
        third.place_shifts = vec![shift(7.0, 0.8), shift(30.0, 2.5)];
        assert!(history_charts(std::slice::from_ref(&first), 61_000.0, 3.0)
            .iter()
            .all(|(id, _)| *id != "plot-shift"));
        let charts = history_charts(&[first, second, third], 61_000.0, 3.0);
        let (_, chart) = charts
            .iter()
            .find(|(id, _)| *id == "plot-shift")
            .expect("a shift plot");
        assert_eq!(chart.y_scale, YScale::Log10);
        let labels: Vec<&str> = chart.series.iter().map(|s| s.label.as_str()).collect();
        assert_eq!(labels, ["7 days ahead", "30 days ahead"]);
        assert_eq!(chart.series[0].points.len(), 2);
        assert!(chart.to_svg().is_ok());
    }

    #[test]
    fn gravity_residuals_sit_beside_the_recommended_ones() {
        let row = |station: &str, ra: f64| {
            serde_json::json!({"obs_time": "2026-09-01T01:00:00.000Z", "station": station,
                "ra_cos_dec_arcsec": ra, "dec_arcsec": 0.0, "chi2": 0.1, "used": true})
        };
        let doc = serde_json::json!({
            "recommended": "A1 water-ice",
            "residuals": [row("ZQA", 0.1), row("ZQB", -0.1)],
            "gravity_residuals": [row("ZQA", 1.5), row("ZQB", -1.2)],
        });
        let charts = residual_charts(&doc);
        let ids: Vec<&str> = charts.iter().map(|(id, _)| *id).collect();
        assert_eq!(
            ids,
            [
                "plot-residuals-ra",
                "plot-gravity-residuals-ra",
                "plot-residuals-dec",
                "plot-gravity-residuals-dec"
            ]
        );
        // A station keeps its mark from one plot to the other.
        assert_eq!(charts[0].1.series[1].style, charts[1].1.series[1].style);
        assert_eq!(charts[1].1.series[0].points[0].y, 1.5);
    }
}
