//! Chebyshev series: fitting sampled functions and evaluating them with derivatives.
//!
//! A smooth function on an interval is replaced by `sum_k c_k T_k(x)`, with
//! `x` the time mapped onto [-1, 1]. The coefficients come from
//! interpolation at the Chebyshev nodes of the first kind, which is close to
//! the best uniform approximation of that degree and costs one discrete
//! cosine sum. The convention is numpy's (`numpy.polynomial.chebyshev`):
//! `c_0` is not halved, so the series is evaluated exactly as written.
//!
//! Evaluation walks the recurrences of `T_k` and `T'_k` together, so value
//! and derivative cost one pass and no allocation.

use std::f64::consts::PI;
use std::sync::OnceLock;

/// The `n` Chebyshev nodes of the first kind on [-1, 1], in decreasing order:
/// `x_j = cos(pi (j + 1/2) / n)`.
pub fn nodes(n: usize) -> impl Iterator<Item = f64> {
    let count = n as f64;
    (0..n).map(move |j| (PI * (j as f64 + 0.5) / count).cos())
}

/// Coefficients `c_0..c_degree` of the interpolant through `values`, which
/// must be the function sampled at `nodes(degree + 1)` in that order.
/// Exact (to rounding) when the function is itself a polynomial of at most
/// that degree.
pub fn coefficients_from_node_values(values: &[f64]) -> Vec<f64> {
    let n = values.len();
    let count = n as f64;
    (0..n)
        .map(|k| {
            let sum: f64 = values
                .iter()
                .enumerate()
                .map(|(j, v)| v * (PI * k as f64 * (j as f64 + 0.5) / count).cos())
                .sum();
            let weight = if k == 0 { 1.0 } else { 2.0 };
            weight * sum / count
        })
        .collect()
}

/// Value and derivative with respect to `x` of `sum_k c_k T_k(x)`.
///
/// `x` should lie in [-1, 1]; outside it the series still evaluates but
/// loses its accuracy guarantee quickly.
pub fn evaluate_with_derivative(coefficients: &[f64], x: f64) -> (f64, f64) {
    // T_0 = 1, T_1 = x, T_{k+1} = 2x T_k - T_{k-1};
    // T'_0 = 0, T'_1 = 1, T'_{k+1} = 2 T_k + 2x T'_k - T'_{k-1}.
    let mut value = 0.0;
    let mut derivative = 0.0;
    let (mut t_prev, mut t_curr) = (1.0, x);
    let (mut d_prev, mut d_curr) = (0.0, 1.0);
    for (k, c) in coefficients.iter().enumerate() {
        match k {
            0 => value += c,
            1 => {
                value += c * x;
                derivative += c;
            }
            _ => {
                let t_next = 2.0 * x * t_curr - t_prev;
                let d_next = 2.0 * t_curr + 2.0 * x * d_curr - d_prev;
                t_prev = t_curr;
                t_curr = t_next;
                d_prev = d_curr;
                d_curr = d_next;
                value += c * t_curr;
                derivative += c * d_curr;
            }
        }
    }
    (value, derivative)
}

/// A three-component function of time (days) replaced by Chebyshev series on
/// consecutive segments of equal length: the layout of an ephemeris table.
///
/// Segments are fitted on first use from the sampler the caller passes,
/// so a table over two centuries costs only what is evaluated: the fit of
/// a one-year arc fills a year of segments, and an integration that leaves
/// the planets in a few long steps fills a few segments per decade.
#[derive(Debug, Clone)]
pub struct SegmentedSeries3 {
    start_day: f64,
    segment_days: f64,
    degree: usize,
    /// Per segment, once fitted: per component, `degree + 1` coefficients.
    segments: Vec<OnceLock<Box<[f64]>>>,
}

impl SegmentedSeries3 {
    /// A table of `segment_count` segments of `segment_days` starting at
    /// `start_day`, each to be fitted with series of `degree`.
    pub fn new(start_day: f64, segment_days: f64, segment_count: usize, degree: usize) -> Self {
        Self {
            start_day,
            segment_days,
            degree,
            segments: (0..segment_count).map(|_| OnceLock::new()).collect(),
        }
    }

    pub fn start_day(&self) -> f64 {
        self.start_day
    }

    pub fn end_day(&self) -> f64 {
        self.start_day + self.segment_days * self.segments.len() as f64
    }

    pub fn degree(&self) -> usize {
        self.degree
    }

    /// How many segments have been fitted so far.
    pub fn fitted_segments(&self) -> usize {
        self.segments.iter().filter(|s| s.get().is_some()).count()
    }

    /// Whether `day` lies within the table's span (ends included).
    pub fn covers(&self, day: f64) -> bool {
        day >= self.start_day && day <= self.end_day()
    }

    /// Value and time derivative (per day) at `day`, or `None` outside the
    /// span. `sample` is the function itself (time in days); it is called
    /// at the Chebyshev nodes of the segment holding `day` the first time
    /// that segment is needed, and must be the same function every call.
    pub fn evaluate(
        &self,
        day: f64,
        sample: impl Fn(f64) -> [f64; 3],
    ) -> Option<([f64; 3], [f64; 3])> {
        if !self.covers(day) {
            return None;
        }
        let offset = (day - self.start_day) / self.segment_days;
        // The end of the span belongs to the last segment.
        let segment = (offset.floor() as usize).min(self.segments.len().saturating_sub(1));
        let coefficients = self.segments[segment].get_or_init(|| {
            let mid = self.start_day + (segment as f64 + 0.5) * self.segment_days;
            fit_segment(mid, 0.5 * self.segment_days, self.degree, &sample)
        });
        let x = 2.0 * (offset - segment as f64) - 1.0;
        let per_segment = self.degree + 1;
        let dx_dday = 2.0 / self.segment_days;
        let mut value = [0.0; 3];
        let mut rate = [0.0; 3];
        for (axis, series) in coefficients.chunks_exact(per_segment).enumerate() {
            let (v, d) = evaluate_with_derivative(series, x);
            value[axis] = v;
            rate[axis] = d * dx_dday;
        }
        Some((value, rate))
    }
}

/// The three series of degree `degree` through `sample` at the Chebyshev
/// nodes of `mid - half .. mid + half`, one component after the other.
fn fit_segment(mid: f64, half: f64, degree: usize, sample: impl Fn(f64) -> [f64; 3]) -> Box<[f64]> {
    let samples: Vec<[f64; 3]> = nodes(degree + 1).map(|x| sample(mid + half * x)).collect();
    let mut coefficients = Vec::with_capacity(3 * (degree + 1));
    for axis in 0..3 {
        let component: Vec<f64> = samples.iter().map(|s| s[axis]).collect();
        coefficients.extend(coefficients_from_node_values(&component));
    }
    coefficients.into_boxed_slice()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Interpolation of smooth functions on 13 nodes is good to rounding.
    const ROUNDING_TOLERANCE: f64 = 1e-14;

    fn fit_on_unit_interval(f: impl Fn(f64) -> f64, degree: usize) -> Vec<f64> {
        let values: Vec<f64> = nodes(degree + 1).map(f).collect();
        coefficients_from_node_values(&values)
    }

    #[test]
    fn cubic_is_recovered_exactly() {
        // x^3 = (3 T_1 + T_3) / 4: Abramowitz & Stegun, Handbook of
        // Mathematical Functions, Table 22.3 (powers of x in Chebyshev T).
        let c = fit_on_unit_interval(|x| x * x * x, 5);
        let expected = [0.0, 0.75, 0.0, 0.25, 0.0, 0.0];
        for (got, want) in c.iter().zip(expected) {
            assert!((got - want).abs() < ROUNDING_TOLERANCE, "{got} vs {want}");
        }
    }

    #[test]
    fn exponential_coefficients_match_numpy() {
        // numpy 2.4.6:
        // numpy.polynomial.chebyshev.chebinterpolate(numpy.exp, 12)[:5]
        let expected = [
            1.266_065_877_752_008_2,
            1.130_318_207_984_969_8,
            0.271_495_339_534_076_1,
            0.044_336_849_848_663_47,
            0.005_474_240_442_093_195,
        ];
        let c = fit_on_unit_interval(f64::exp, 12);
        for (got, want) in c.iter().zip(expected) {
            assert!((got - want).abs() < ROUNDING_TOLERANCE, "{got} vs {want}");
        }
    }

    #[test]
    fn value_and_derivative_of_exponential() {
        let c = fit_on_unit_interval(f64::exp, 16);
        for i in 0..=40 {
            let x = -1.0 + i as f64 / 20.0;
            let (v, d) = evaluate_with_derivative(&c, x);
            // d/dx exp(x) = exp(x).
            assert!((v - x.exp()).abs() < ROUNDING_TOLERANCE, "value at {x}");
            assert!((d - x.exp()).abs() < 1e-12, "derivative at {x}");
        }
    }

    #[test]
    fn segmented_series_follow_a_circular_orbit() {
        // A unit circle with a 30-day period, fitted on 8-day segments of
        // degree 12: position and velocity must match the closed form.
        const POSITION_TOLERANCE: f64 = 1e-13;
        const VELOCITY_TOLERANCE: f64 = 1e-12;
        let omega = 2.0 * PI / 30.0;
        let circle = |t: f64| [(omega * t).cos(), (omega * t).sin(), 0.1 * t];
        let series = SegmentedSeries3::new(-20.0, 8.0, 10, 12);
        assert_eq!(series.end_day(), 60.0);
        for i in 0..=800 {
            let t = -20.0 + i as f64 * 0.1;
            let (p, v) = series.evaluate(t, circle).unwrap();
            let want_p = [(omega * t).cos(), (omega * t).sin(), 0.1 * t];
            let want_v = [-omega * (omega * t).sin(), omega * (omega * t).cos(), 0.1];
            for axis in 0..3 {
                assert!((p[axis] - want_p[axis]).abs() < POSITION_TOLERANCE, "t={t}");
                assert!((v[axis] - want_v[axis]).abs() < VELOCITY_TOLERANCE, "t={t}");
            }
        }
        assert!(series.evaluate(-20.001, circle).is_none());
        assert!(series.evaluate(60.001, circle).is_none());
    }

    #[test]
    fn segments_are_fitted_when_first_needed() {
        let series = SegmentedSeries3::new(0.0, 10.0, 100, 6);
        let line = |t: f64| [t, 2.0 * t, -t];
        assert_eq!(series.fitted_segments(), 0);
        let (p, v) = series.evaluate(15.0, line).unwrap();
        // A line is a polynomial of degree 1: exact to rounding.
        assert!((p[1] - 30.0).abs() < 1e-12 && (v[2] + 1.0).abs() < 1e-12);
        series.evaluate(19.0, line).unwrap();
        assert_eq!(series.fitted_segments(), 1);
        series.evaluate(995.0, line).unwrap();
        assert_eq!(series.fitted_segments(), 2);
    }
}
