//! The words of an alert: a subject naming the object and the condition,
//! and a plain-text body that says what happened, how sure it is, what it
//! costs, the ladder in a few lines and where the solution is. Pure: the
//! text is made once, when the alert is raised, and kept with it, so every
//! delivery and every repeat says the same.

use std::fmt::Write;

use crate::config::AlertSettings;

use super::event::{Edge, RuleKind};
use super::facts::SolutionFacts;
use super::rules::Crossing;

/// The caution every message ends with.
pub const CAUTION: &str = "Predictions are for planning observations. This service computes no \
impact probabilities and does not replace the official orbit-computing services or review by \
a qualified analyst.";

/// A value with its sigma, as the report prints it.
pub use crate::solve::verdicts::value_with_sigma as value_sigma;

/// A p-value readably: fixed above 0.001, else as a power of ten.
pub fn p_value(p: f64) -> String {
    if p >= 1e-3 {
        format!("{p:.4}")
    } else if p > 0.0 {
        format!("{:.1e}", p)
    } else {
        "below 1e-300".into()
    }
}

fn ratio(before: f64, after: f64) -> String {
    if before > 0.0 {
        format!("x{:.2}", after / before)
    } else {
        "-".into()
    }
}

/// What happened, in one line, for the subject.
pub fn condition(c: &Crossing, f: &SolutionFacts) -> String {
    let m = &c.measure;
    let raised = c.edge == Edge::Raised;
    match (m.rule, raised) {
        (RuleKind::Unbound, true) => format!("came in unbound ({:.1} sigma)", m.value),
        (RuleKind::Unbound, false) => "no longer certainly unbound".into(),
        (RuleKind::NgNeeded, true) => {
            format!("non-gravitational terms needed ({:.1} sigma)", m.value)
        }
        (RuleKind::NgNeeded, false) => "non-gravitational terms no longer needed".into(),
        (RuleKind::GravityFails, true) => "gravity alone no longer explains the data".into(),
        (RuleKind::GravityFails, false) => "gravity alone explains the data again".into(),
        (RuleKind::ModelChanged, _) => format!(
            "recommended model changed to {}",
            f.recommended.as_deref().unwrap_or("none")
        ),
        (RuleKind::BatchDisagrees, true) => {
            "new observations disagree with the previous prediction".into()
        }
        (RuleKind::BatchDisagrees, false) => {
            "new observations agree with the prediction again".into()
        }
        (RuleKind::PredictionShift, true) => format!(
            "predicted place moved {:.1} arcsec ({})",
            m.value,
            m.key.trim_start_matches("prediction_shift_")
        ),
        (RuleKind::PredictionShift, false) => format!(
            "predicted place steady again ({})",
            m.key.trim_start_matches("prediction_shift_")
        ),
        (RuleKind::Outburst, true) => "brighter than its brightness law (outburst?)".into(),
        (RuleKind::Outburst, false) => "brightness follows its law again".into(),
        (RuleKind::FitFailed, true) => "the fit failed".into(),
        (RuleKind::FitFailed, false) => "the fit converges again".into(),
        (RuleKind::NoSolution, true) => {
            format!("no converged solution for {:.0} hours", m.value)
        }
        (RuleKind::NoSolution, false) => "a converged solution again".into(),
    }
}

pub fn subject(c: &Crossing, f: &SolutionFacts) -> String {
    format!("{}: {}", f.designation, condition(c, f))
}

/// The plain-text body.
pub fn body(c: &Crossing, f: &SolutionFacts, s: &AlertSettings, solution_url: &str) -> String {
    let mut t = String::new();
    let arc = f
        .arc_days
        .map_or(String::new(), |a| format!(" over {a:.1} days"));
    let _ = writeln!(
        t,
        "{} (object {}): {}.\nSolution {} of {}, from {} observations{}.\n",
        f.designation,
        f.object_id,
        condition(c, f),
        f.seq,
        f.created_utc,
        f.observations,
        arc
    );
    let _ = writeln!(t, "{}", what_happened(c, f, s));
    let m = &c.measure;
    let before = match (c.before, f.previous_seq) {
        (Some(b), Some(p)) => format!("{} at solution {p}", number(b, m.unit)),
        _ => "none before".into(),
    };
    // Gravity alone is judged on two figures at once (its normalised RMS
    // and its trend test), which its own paragraph states with their
    // limits; one "value" line would quote only one of them.
    if !m.unit.is_empty() && m.rule != RuleKind::GravityFails {
        let threshold = m.threshold.map_or(String::new(), |x| {
            format!("; threshold {}", number(x, m.unit))
        });
        let clears = m.clears_at.map_or(String::new(), |x| {
            let side = if m.unit == "p-value" {
                "above"
            } else {
                "below"
            };
            format!("; it clears {side} {}", number(x, m.unit))
        });
        let _ = writeln!(
            t,
            "Value: {} now, {before}{threshold}{clears}.\n",
            number(m.value, m.unit)
        );
    }
    if !f.ladder.is_empty() {
        let _ = writeln!(t, "The ladder (normalised RMS, BIC above the best):");
        for l in &f.ladder {
            let mark = if l.recommended { "*" } else { " " };
            let state = match (l.converged, l.normalized_rms, l.delta_bic) {
                (true, Some(r), Some(b)) => format!("RMS {r:.2}  dBIC {b:+.1}"),
                (true, Some(r), None) => format!("RMS {r:.2}"),
                _ => "did not converge".into(),
            };
            let _ = writeln!(t, " {mark} {:<28} {state}", l.name);
        }
        let _ = writeln!(t);
    }
    let _ = writeln!(t, "Solution: {solution_url}\n\n{CAUTION}");
    t
}

fn number(x: f64, unit: &str) -> String {
    match unit {
        "p-value" => format!("p = {}", p_value(x)),
        "" => format!("{x}"),
        u => format!("{x:.2} {u}"),
    }
}

fn what_happened(c: &Crossing, f: &SolutionFacts, s: &AlertSettings) -> String {
    let m = &c.measure;
    let raised = c.edge == Edge::Raised;
    let mut t = String::new();
    match m.rule {
        RuleKind::Unbound => {
            if let Some(a) = f.one_over_a_original_per_au {
                let _ = write!(
                    t,
                    "Original barycentric 1/a = {} 1/au: {:.1} sigma {} zero (the rule: {} sigma below).",
                    value_sigma(a),
                    m.value.abs(),
                    if m.value >= 0.0 { "below" } else { "above" },
                    s.unbound_sigma
                );
            }
            if let (Some(e), Some(x)) = (f.e, f.e_minus_one_sigmas) {
                let _ = write!(
                    t,
                    "\nHeliocentric osculating e = {} ((e - 1)/sigma = {x:.1})",
                    value_sigma(e)
                );
                if raised {
                    if let Some(v) = f.v_inf_km_s {
                        let _ = write!(t, ", v_inf = {} km/s", value_sigma(v));
                    }
                }
                t.push('.');
            }
        }
        RuleKind::NgNeeded => {
            let _ = write!(
                t,
                "Gravity alone against the best model with non-gravitational terms: {:.1} sigma (the rule: {} sigma).",
                m.value, s.ng_significance_sigma
            );
            if raised && !f.terms.is_empty() {
                let law = f.law.as_deref().unwrap_or("no");
                // A law the data do not choose is not named as if known.
                let which = if f.law_determined {
                    format!("with the {law} law")
                } else {
                    format!(
                        "(the radial law is not determined: BIC differences below {}; \
                         figures under the {law} law)",
                        crate::solve::verdicts::BIC_MARGIN
                    )
                };
                let _ = write!(t, "\nThe ladder recommends {} {which}:", f.terms.join(", "));
                for (name, v) in &f.nongrav {
                    let _ = write!(t, " {name} = {} au/d^2;", value_sigma(*v));
                }
                t.pop();
                t.push('.');
            }
            let _ = write!(t, "{}", cost(f));
        }
        RuleKind::GravityFails => {
            let _ = write!(
                t,
                "Gravity alone: normalised RMS {} (the rule: above {})",
                f.gravity_normalized_rms
                    .map_or("unknown".into(), |x| format!("{x:.2}")),
                s.gravity_normalized_rms_above
            );
            if let Some(p) = f.gravity_trend_p_value {
                let _ = write!(
                    t,
                    "; residual trend test p = {} (fails below {})",
                    p_value(p),
                    p_value(s.batch_p_value_below)
                );
            }
            let keep = 1.0 - s.clear_fraction;
            let _ = write!(
                t,
                ".\nIt clears once the normalised RMS is below {:.2} and the trend test's p above {}.",
                s.gravity_normalized_rms_above * keep,
                p_value(10f64.powf(s.batch_p_value_below.log10() * keep))
            );
        }
        RuleKind::ModelChanged => {
            let _ = write!(
                t,
                "The recommended model was {} at solution {} and is {} now.",
                f.previous_recommended.as_deref().unwrap_or("none"),
                f.previous_seq.map_or("-".into(), |s| s.to_string()),
                f.recommended.as_deref().unwrap_or("none")
            );
            let _ = write!(t, "{}", cost(f));
        }
        RuleKind::BatchDisagrees => {
            if let Some(b) = &f.batch {
                let _ = write!(
                    t,
                    "{} new observations against the prediction of solution {}: chi^2 = {} for {} degrees of freedom, p = {} (the rule: below {}).\nFiles: {}. Stations: {}.",
                    b.observations,
                    b.against_seq,
                    b.chi2.map_or("-".into(), |c| format!("{c:.1}")),
                    b.dof.map_or("-".into(), |d| d.to_string()),
                    b.p_value.map_or("-".into(), p_value),
                    p_value(s.batch_p_value_below),
                    b.files.join(", "),
                    b.stations.join(", ")
                );
                if b.outliers_left_out > 0 {
                    let _ = write!(
                        t,
                        "\n{} new observations were rejected as outliers by the new fit and are left out of the test.",
                        b.outliers_left_out
                    );
                }
            }
        }
        RuleKind::PredictionShift => {
            let place = f
                .places
                .iter()
                .find(|p| super::rules::shift_key(p.days) == m.key);
            if let Some(p) = place {
                let _ = write!(
                    t,
                    "The place predicted for {} ({} days after this fit) from station {}, averaged over the models the data allow, moved {:.1} arcsec since solution {}: {:.1} sigma of that solution's averaged ellipse (the rule: more than {} arcsec and {} sigma). Now RA {:.5} deg, Dec {:.5} deg, 1-sigma ellipse {:.2} arcsec.{}",
                    p.utc,
                    p.days,
                    p.station,
                    p.shift_arcsec.unwrap_or(0.0),
                    f.previous_seq.map_or("-".into(), |s| s.to_string()),
                    p.shift_sigma.unwrap_or(0.0),
                    s.prediction_shift_arcsec,
                    s.prediction_shift_sigma,
                    p.ra_deg,
                    p.dec_deg,
                    p.sigma_arcsec,
                    if raised { " Follow-up pointing may need updating." } else { "" }
                );
            }
        }
        RuleKind::Outburst => {
            let _ = write!(
                t,
                "Measured magnitudes brighter than the fitted brightness law:"
            );
            for d in &f.departures {
                let _ = write!(
                    t,
                    "\n  {} station {}: {:.2} mag brighter, {:.1} sigma",
                    d.obs_time, d.station, d.brighter_by_mag, d.significance_sigma
                );
            }
        }
        RuleKind::FitFailed => {
            let _ = write!(
                t,
                "{}",
                f.failure
                    .as_deref()
                    .map_or("The fit converged.".to_string(), |w| format!(
                        "The fit failed: {w}."
                    ))
            );
        }
        RuleKind::NoSolution => {
            let _ = write!(
                t,
                "No converged solution for {:.1} hours while observations keep arriving (the rule: {} hours).",
                m.value, s.no_solution_hours
            );
        }
    }
    t.push('\n');
    t
}

/// What the recommended model costs in uncertainty against gravity alone.
fn cost(f: &SolutionFacts) -> String {
    if f.terms.is_empty() {
        return String::new();
    }
    let mut t = String::from("\nCost in uncertainty, gravity alone -> recommended:");
    if let (Some(g), Some(r)) = (f.gravity_q_au, f.q_au) {
        let _ = write!(
            t,
            " sigma(q) {:.2e} -> {:.2e} au ({});",
            g.sigma,
            r.sigma,
            ratio(g.sigma, r.sigma)
        );
    }
    if let (Some(g), Some(r)) = (f.gravity_e, f.e) {
        let _ = write!(
            t,
            " sigma(e) {:.2e} -> {:.2e} ({});",
            g.sigma,
            r.sigma,
            ratio(g.sigma, r.sigma)
        );
    }
    if let Some(p) = f.places.iter().max_by(|a, b| a.days.total_cmp(&b.days)) {
        if let Some(g) = p.gravity_sigma_arcsec {
            let _ = write!(
                t,
                " {}-day place {:.2} -> {:.2} arcsec ({}), {:.2} arcsec averaged over the models;",
                p.days,
                g,
                p.recommended_sigma_arcsec,
                ratio(g, p.recommended_sigma_arcsec),
                p.sigma_arcsec
            );
        }
    }
    t.pop();
    t.push('.');
    t
}

/// The body as HTML (the same words, escaped, in a preformatted block so
/// the ladder's columns stay aligned).
pub fn html(subject: &str, body: &str) -> String {
    format!(
        "<!DOCTYPE html><html><head><meta charset=\"utf-8\"><title>{}</title></head><body><h3>{}</h3><pre style=\"font-family: monospace\">{}</pre></body></html>",
        escape(subject),
        escape(subject),
        escape(body)
    )
}

fn escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::solve::document::ValueSigma;

    /// The alerts round as the report does (`solve::numbers::rounded`):
    /// two significant figures of the sigma, the value to the same place,
    /// small numbers in a shared power of ten taken from the larger (the
    /// ISO GUM's common practice; the digits are worked by hand).
    #[test]
    fn values_carry_two_figures_of_their_sigma() {
        let vs = |value, sigma| value_sigma(ValueSigma { value, sigma });
        assert_eq!(vs(1.001_32, 0.000_012), "1.001320 +/- 0.000012");
        assert_eq!(vs(2.1e-8, 3.4e-9), "(2.10 +/- 0.34)e-8");
        assert_eq!(vs(-3.52e-4, 1.04e-4), "(-3.5 +/- 1.0)e-4");
        assert_eq!(vs(0.8013, 0.012), "0.801 +/- 0.012");
        assert_eq!(vs(12.345, 1.5), "12.3 +/- 1.5");
        assert_eq!(vs(1234.0, 56.0), "1234 +/- 56");
        assert_eq!(p_value(0.2), "0.2000");
        assert_eq!(p_value(2.5e-7), "2.5e-7");
    }
}
