//! A solution as text for a person: the ladder as a table, the verdict in
//! one sentence, then the recommended model's elements and what was
//! rejected.

use std::fmt::Write;

use super::brightness::BrightnessDocument;
use super::document::{ModelDocument, SolutionDocument, ValueSigma};

/// Rejected observations listed in full up to this many.
const REJECTED_LISTED: usize = 20;

fn estimate(v: &ValueSigma, decimals: usize) -> String {
    format!("{:.*} +/- {:.*}", decimals, v.value, decimals, v.sigma)
}

fn sci(v: &ValueSigma) -> String {
    format!("{:+.4e} +/- {:.2e}", v.value, v.sigma)
}

fn or_dash<T>(v: Option<T>, f: impl Fn(T) -> String) -> String {
    v.map_or_else(|| "-".to_string(), f)
}

/// The one-sentence answer to "does gravity alone still explain the data?"
pub fn verdict(doc: &SolutionDocument) -> String {
    let significance = match (doc.ng_significance_sigma, &doc.ng_significance_unknown) {
        (Some(s), _) => Ok(s),
        (None, Some(reason)) => Err(reason.as_str()),
        (None, None) => Err("no figure was computed"),
    };
    let recommended = doc.models.iter().find(|m| m.recommended);
    if doc.recommended_by_pin {
        let name = doc.recommended.as_deref().unwrap_or_default();
        let tests = match significance {
            Ok(s) => format!("the largest non-gravitational significance is {s:.1} sigma"),
            Err(reason) => {
                format!("the comparison with gravity alone could not be made ({reason})")
            }
        };
        return format!(
            "{name} is recommended because an analyst pinned it; by the tests, {tests}."
        );
    }
    // Refusals come before any claim: never "gravity alone explains the
    // data" when nothing does, or when the arc cannot tell.
    if let Some(why) = &doc.refusals.no_model_explains {
        return why.clone();
    }
    if let (Some(why), Some(r)) = (&doc.refusals.arc_too_short, recommended) {
        if r.terms.is_empty() {
            return format!("Gravity alone fits. {why}");
        }
    }
    match (recommended, significance) {
        (None, Err(reason)) if doc.models.iter().any(|m| m.converged) => format!(
            "No model can be recommended: the comparison with gravity alone could not be made \
             ({reason})."
        ),
        (None, _) => "No model converged: the data do not determine an orbit yet.".into(),
        (Some(r), Ok(sigma)) if r.terms.is_empty() => format!(
            "Gravity alone explains the data (largest non-gravitational significance {sigma:.1} \
             sigma over {} alternatives).",
            doc.alternatives
        ),
        (Some(r), Err(reason)) if r.terms.is_empty() => format!(
            "Gravity alone fits, but the comparison with non-gravitational models could not be \
             made ({reason})."
        ),
        (Some(r), Ok(sigma)) => match &doc.law {
            Some(law) if !law.determined => format!(
                "Gravity alone does not explain the data: {} {} justified at {sigma:.1} sigma \
                 (Bonferroni over {} alternatives), but which radial law is not determined.",
                r.terms.join("+"),
                if r.terms.len() == 1 { "is" } else { "are" },
                doc.alternatives
            ),
            _ => format!(
                "Gravity alone does not explain the data: {} is justified at {sigma:.1} sigma \
                 (Bonferroni over {} alternatives).",
                r.name, doc.alternatives
            ),
        },
        (Some(r), Err(reason)) => format!(
            "{} fits best, but the comparison with gravity alone could not be made ({reason}).",
            r.name
        ),
    }
}

fn ladder_table(out: &mut String, doc: &SolutionDocument) {
    let _ = writeln!(
        out,
        "  {:<28} {:>10} {:>5} {:>8} {:>6} {:>10} {:>8} {:>8}",
        "model", "chi2", "dof", "rms\"", "nrms", "BIC", "test", "vs grav"
    );
    for m in &doc.models {
        let mark = if m.recommended { '*' } else { ' ' };
        let sigma = |t: &Option<super::document::TestDocument>| {
            or_dash(t.as_ref(), |t| format!("{:.1}s", t.sigma))
        };
        if m.converged {
            let _ = writeln!(
                out,
                "{mark} {:<28} {:>10.2} {:>5} {:>8.3} {:>6.3} {:>10.2} {:>8} {:>8}",
                m.name,
                m.chi2.unwrap_or(f64::NAN),
                or_dash(m.dof, |d| d.to_string()),
                m.rms_arcsec.unwrap_or(f64::NAN),
                m.normalized_rms.unwrap_or(f64::NAN),
                m.bic.unwrap_or(f64::NAN),
                sigma(&m.test),
                sigma(&m.test_against_gravity),
            );
        } else {
            let _ = writeln!(
                out,
                "{mark} {:<28} not converged: {}",
                m.name, m.termination
            );
        }
    }
    for m in &doc.models {
        if !m.restarted_from.is_empty() {
            let outcome = if m.converged {
                "converged"
            } else {
                "failed again"
            };
            let _ = writeln!(
                out,
                "  ({} failed from its own start; restarted from the {} fits, it {outcome})",
                m.name,
                m.restarted_from.join(", ")
            );
        }
    }
}

fn model_details(out: &mut String, doc: &SolutionDocument, m: &ModelDocument) {
    let _ = writeln!(
        out,
        "\nModel {}: elements (heliocentric osculating, ecliptic J2000, at JD {:.1} TDB)",
        m.name, doc.elements_epoch_tdb_jd
    );
    // v_inf is a property of an orbit that came in unbound; for one that
    // came in bound, a heliocentric e above 1 near the Sun is the planets'
    // doing and a speed "at infinity" would mislead.
    let unbound = doc.bound.as_ref().is_some_and(|b| b.verdict == "unbound");
    if let Some(e) = &m.elements {
        let _ = writeln!(out, "  q     {} au", estimate(&e.q_au, 8));
        let _ = writeln!(
            out,
            "  e     {}   ((e - 1)/sigma = {:+.1})",
            estimate(&e.e, 8),
            e.e_minus_one_sigmas
        );
        let _ = writeln!(out, "  i     {} deg", estimate(&e.i_deg, 6));
        let _ = writeln!(out, "  node  {} deg", estimate(&e.node_deg, 6));
        let _ = writeln!(out, "  peri  {} deg", estimate(&e.peri_deg, 6));
        let _ = writeln!(out, "  Tp    JD {} TDB", estimate(&e.tp_tdb_jd, 6));
        let _ = writeln!(out, "  1/a   {} 1/au", estimate(&e.one_over_a_per_au, 8));
        if let (Some(v), true) = (&e.v_inf_km_s, unbound) {
            let _ = writeln!(out, "  v_inf {} km/s", estimate(v, 4));
        }
    }
    for (name, v) in &m.nongrav {
        let snr = m.nongrav_snr.get(name).copied().unwrap_or(f64::NAN);
        let _ = writeln!(out, "  {name}    {} au/d^2  ({snr:.1} sigma)", sci(v));
    }
    for (label, a) in [
        ("original", &m.one_over_a_original),
        ("future", &m.one_over_a_future),
    ] {
        if let Some(a) = a {
            let _ = writeln!(
                out,
                "  {label} barycentric 1/a {:.8} +/- {:.8} 1/au (at {:.0} au, JD {:.1} TDB)",
                a.value, a.sigma, a.distance_au, a.tdb_jd
            );
        }
    }
    if let Some(t) = &m.trend {
        let _ = writeln!(
            out,
            "  residual trend over {} nights: {:+.4} / {:+.4} arcsec/day (RA, Dec), p = {:.3}",
            t.nights, t.slope_ra_arcsec_per_day.value, t.slope_dec_arcsec_per_day.value, t.p_value
        );
    }
    for p in &m.problems {
        let _ = writeln!(out, "  note: {p}");
    }
    let _ = writeln!(out, "  rejected: {}", m.rejected.len());
    for r in m.rejected.iter().take(REJECTED_LISTED) {
        let _ = writeln!(
            out,
            "    {}  {:<5} chi2 {:.1}",
            r.obs_time, r.station, r.chi2
        );
    }
    if m.rejected.len() > REJECTED_LISTED {
        let _ = writeln!(
            out,
            "    ... and {} more (see --json)",
            m.rejected.len() - REJECTED_LISTED
        );
    }
}

pub fn text(doc: &SolutionDocument) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "Object {}: {} observations, {} used, arc {:.2} days ({} to {})",
        doc.object, doc.n_obs, doc.n_used, doc.arc_days, doc.first_obs_utc, doc.last_obs_utc
    );
    let _ = writeln!(
        out,
        "Fit epoch JD {:.1} TDB; initial orbit by {} (rms {:.2}\"); ephemeris {}",
        doc.epoch_tdb_jd, doc.initial_orbit.method, doc.initial_orbit.rms_arcsec, doc.ephemeris
    );
    if let Some(b) = &doc.catalog_bias {
        let mut line = format!(
            "Catalogue bias: {} observations corrected from {}",
            b.corrected, b.table
        );
        if !b.not_covered.is_empty() {
            let gaps: Vec<String> = b
                .not_covered
                .iter()
                .map(|(c, n)| format!("{c} {n}"))
                .collect();
            line.push_str(&format!("; not covered: {}", gaps.join(", ")));
        }
        let _ = writeln!(out, "{line}");
    }
    let _ = writeln!(out, "\nVerdict:\n  {}", verdict(doc));
    let recommended_terms = doc
        .models
        .iter()
        .any(|m| m.recommended && !m.terms.is_empty());
    if let (Some(w), true) = (&doc.refusals.arc_too_short, recommended_terms) {
        let _ = writeln!(out, "  {w}");
    }
    if let Some(w) = &doc.refusals.many_rejected {
        let _ = writeln!(out, "  {w}");
    }
    if let Some(b) = &doc.bound {
        let _ = writeln!(out, "  {}", b.text);
    }
    if let Some(l) = &doc.law {
        let _ = writeln!(out, "  {}", l.text);
    }
    let _ = writeln!(
        out,
        "\nModel ladder (* recommended; tests in Gaussian sigma):"
    );
    ladder_table(&mut out, doc);
    if let Some(m) = doc.models.iter().find(|m| m.recommended) {
        model_details(&mut out, doc, m);
    }
    if let Some(p) = &doc.photometry {
        brightness_details(&mut out, p);
    }
    out
}

/// A law parameter: with its sigma when fitted, marked when held fixed.
fn free_or_fixed(v: &ValueSigma, fixed: bool) -> String {
    if fixed {
        format!("{:.2} (fixed)", v.value)
    } else {
        format!("{:.2} +/- {:.2}", v.value, v.sigma)
    }
}

fn brightness_details(out: &mut String, p: &BrightnessDocument) {
    let _ = writeln!(
        out,
        "
Brightness ({} magnitudes, at the recommended orbit's geometry):",
        p.measurements
    );
    let mark = |law: &str| if p.preferred == Some(law) { "*" } else { " " };
    use super::brightness::{range_flag, G_PLAUSIBLE, K1_PLAUSIBLE};
    // A parameter outside what small bodies show is named in words below,
    // not printed as a result.
    let flagged = "see below";
    if let Some(t) = &p.total {
        let k1 = match range_flag("K1", &t.k1, t.k1_fixed, K1_PLAUSIBLE) {
            Some(_) => flagged.to_string(),
            None => free_or_fixed(&t.k1, t.k1_fixed),
        };
        let _ = writeln!(
            out,
            "{} total law  M1 {:.2} +/- {:.2}  K1 {k1}  nrms {:.2}  {} used, {} rejected, {} brighter than the law{}",
            mark("total"),
            t.m1.value,
            t.m1.sigma,
            t.summary.normalized_rms,
            t.summary.used,
            t.summary.rejected,
            t.summary.departures.len(),
            t.activity_sigma
                .map_or(String::new(), |s| format!("; K1 far from 5 at {s:.1} sigma")),
        );
    }
    if let Some(h) = &p.hg {
        let g = match range_flag("G", &h.g, h.g_fixed, G_PLAUSIBLE) {
            Some(_) => flagged.to_string(),
            None => free_or_fixed(&h.g, h.g_fixed),
        };
        let _ = writeln!(
            out,
            "{} (H, G) law  H {:.2} +/- {:.2}  G {g}  nrms {:.2}  {} used, {} rejected, {} brighter than the law",
            mark("hg"),
            h.h.value,
            h.h.sigma,
            h.summary.normalized_rms,
            h.summary.used,
            h.summary.rejected,
            h.summary.departures.len(),
        );
    }
    for flag in &p.range_flags {
        let _ = writeln!(out, "  not a result: {flag}");
    }
    for problem in &p.problems {
        let _ = writeln!(out, "  note: {problem}");
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::test_support::outgassing_ladder;
    use crate::solve::test_support::solution_of;

    /// The document and report of a ladder whose gravity-only fit was made
    /// to fail on every attempt.
    fn document_of_forced_failure() -> SolutionDocument {
        let (observations, ladder) = outgassing_ladder(usize::MAX);
        let solution = solution_of(observations, ladder);
        SolutionDocument::of_solution(&solution, "test".into(), None, None)
    }

    #[test]
    fn an_unknown_significance_is_said_not_zeroed() {
        let doc = document_of_forced_failure();
        let json = serde_json::to_value(&doc).unwrap();
        assert!(json["ng_significance_sigma"].is_null(), "{json}");
        let reason = json["ng_significance_unknown"].as_str().unwrap();
        assert!(
            reason.contains("gravity alone did not converge"),
            "{reason}"
        );
        let v = verdict(&doc);
        assert!(v.contains("could not be made"), "{v}");
        assert!(!v.contains("0.0 sigma"), "{v}");
        let report = text(&doc);
        assert!(
            report.contains("restarted from the A1 inverse-square"),
            "{report}"
        );
        assert!(!report.contains("justified at"), "{report}");
    }
}
