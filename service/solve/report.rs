//! A solution as text for a person, in the order an analyst asks: the
//! verdict first (does gravity alone explain the data, which terms, which
//! law, bound or not, what the terms cost, what to distrust), then the
//! ladder that decided it, the recommended model's elements, the place a
//! month ahead, the brightness, and last how the fit was set up.
//!
//! Every value with a sigma is rounded to the sigma ([`rounded`]), every
//! Julian date has its calendar date beside it ([`calendar_tdb`]), and no
//! number prints as a negative zero ([`fixed`]).

use std::fmt::Write;

use super::brightness::{BrightnessDocument, HG_PROBLEM};
use super::document::{ModelDocument, SolutionDocument, TestDocument, ValueSigma};
use super::numbers::{fixed, rounded, sigmas, signed, significant};
use super::verdicts::{TermStanding, BIC_MARGIN};

/// Rejected observations listed in full up to this many.
const REJECTED_LISTED: usize = 20;

fn estimate(v: &ValueSigma) -> String {
    rounded(v.value, v.sigma)
}

/// A proleptic Gregorian date and time of day.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CalendarTime {
    pub year: i64,
    pub month: u32,
    pub day: u32,
    pub hour: u32,
    pub minute: u32,
    pub second: u32,
}

/// The calendar date and time, to the nearest second, of a Julian date,
/// in the time scale of the date itself (a TDB Julian date gives a TDB
/// clock reading: no leap seconds, no UTC). The day number goes through
/// the integer algorithm of Fliegel & Van Flandern (1968, Commun. ACM 11,
/// 657; memory), valid for any positive Julian day number. None for a
/// date that is not a finite positive number of days.
pub fn calendar_of_jd(jd: f64) -> Option<CalendarTime> {
    // Julian dates start at noon; the civil day at midnight. Whole
    // seconds since the midnight that began JD 0 are exact in an i64.
    let seconds = ((jd + 0.5) * 86_400.0).round();
    if !(0.0..1e15).contains(&seconds) {
        return None;
    }
    let seconds = seconds as i64;
    let jdn = seconds.div_euclid(86_400);
    let of_day = seconds.rem_euclid(86_400);
    let l = jdn + 68_569;
    let n = 4 * l / 146_097;
    let l = l - (146_097 * n + 3) / 4;
    let i = 4_000 * (l + 1) / 1_461_001;
    let l = l - 1_461 * i / 4 + 31;
    let j = 80 * l / 2_447;
    let day = l - 2_447 * j / 80;
    let l = j / 11;
    let month = j + 2 - 12 * l;
    let year = 100 * (n - 49) + i + l;
    Some(CalendarTime {
        year,
        month: u32::try_from(month).ok()?,
        day: u32::try_from(day).ok()?,
        hour: (of_day / 3_600) as u32,
        minute: (of_day % 3_600 / 60) as u32,
        second: (of_day % 60) as u32,
    })
}

/// "2026-04-14 23:59:58 TDB" for a TDB Julian date: an ISO-style
/// reading of the TDB clock, which runs about a minute ahead of UTC.
pub fn calendar_tdb(jd: f64) -> String {
    calendar_tdb_within(jd, 0.0)
}

/// The calendar reading of a TDB Julian date known to `sigma_days`, with
/// no more digits than the sigma supports: seconds below a minute,
/// minutes below a day, then the date alone (the day that contains it).
pub fn calendar_tdb_within(jd: f64, sigma_days: f64) -> String {
    let sigma_s = sigma_days * 86_400.0;
    let text = if sigma_s < 60.0 {
        calendar_of_jd(jd).map(|c| {
            format!(
                "{:04}-{:02}-{:02} {:02}:{:02}:{:02}",
                c.year, c.month, c.day, c.hour, c.minute, c.second
            )
        })
    } else if sigma_s < 86_400.0 {
        // Rounded to the minute before it is split into fields, so that
        // 11:59:40 reads 12:00, and 23:59:40 the next day's 00:00.
        let minute = 1.0 / 1_440.0;
        calendar_of_jd(((jd + 0.5) / minute).round() * minute - 0.5).map(|c| {
            format!(
                "{:04}-{:02}-{:02} {:02}:{:02}",
                c.year, c.month, c.day, c.hour, c.minute
            )
        })
    } else {
        calendar_of_jd((jd + 0.5).floor() - 0.5)
            .map(|c| format!("{:04}-{:02}-{:02}", c.year, c.month, c.day))
    };
    text.map_or_else(|| "no calendar date".into(), |t| format!("{t} TDB"))
}

/// "JD 2461176.5 TDB = 2026-05-16 00:00 TDB": the calendar reading to
/// the same resolution as the Julian date's last decimal.
fn jd_and_date(jd: f64, decimals: usize) -> String {
    let resolution_days = 0.5 * 10f64.powi(-(decimals as i32));
    format!(
        "JD {} TDB = {}",
        fixed(jd, decimals),
        calendar_tdb_within(jd, resolution_days)
    )
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

/// The unit of a non-gravitational term's value.
const NONGRAV_UNIT: &str = "au/d^2";

/// "A2 = (-1.8 +/- 3.5)e-10 au/d^2, 0.5 sigma from zero in A1+A2
/// water-ice (BIC 6.8 above the recommended model)".
fn standing_words(t: &TermStanding, recommended: &str) -> String {
    let (Some(model), Some(v)) = (&t.model, &t.value) else {
        return format!("{} (no fit with it converged)", t.term);
    };
    let mut text = format!("{} = {} {NONGRAV_UNIT}", t.term, estimate(v));
    if let Some(s) = t.sigmas_from_zero {
        let _ = write!(text, ", {} sigma from zero", sigmas(s));
    }
    if model != recommended {
        let _ = write!(text, " in {model}");
        if let Some(d) = t.delta_bic {
            let _ = write!(text, " (BIC {} above the recommended model)", fixed(d, 1));
        }
    }
    text
}

fn terms_lines(out: &mut String, doc: &SolutionDocument, recommended: &ModelDocument) {
    let Some(t) = &doc.terms else {
        return;
    };
    let list = |v: &[TermStanding]| {
        v.iter()
            .map(|s| standing_words(s, &recommended.name))
            .collect::<Vec<_>>()
            .join("; ")
    };
    if t.justified.is_empty() {
        let _ = writeln!(out, "  Terms justified: none.");
    } else {
        let _ = writeln!(
            out,
            "  Terms justified: {} (in {}).",
            list(&t.justified),
            recommended.name
        );
    }
    if !t.not_determined.is_empty() {
        let _ = writeln!(
            out,
            "  Terms not determined by these data: {}.",
            list(&t.not_determined)
        );
    }
}

fn law_line(out: &mut String, doc: &SolutionDocument) {
    let Some(law) = &doc.law else {
        return;
    };
    let terms = law.terms.join("+");
    let Some(best) = law.fits.first() else {
        return;
    };
    if law.determined {
        let closest = law.fits[1..]
            .iter()
            .map(|f| f.delta_bic)
            .fold(f64::INFINITY, f64::min);
        let _ = writeln!(
            out,
            "  Radial law of {terms}: {}, determined (every other law is worse by BIC {} or more).",
            best.law,
            fixed(closest, 1)
        );
        return;
    }
    let each: Vec<String> = law
        .fits
        .iter()
        .map(|f| {
            let values: Vec<String> = f
                .nongrav
                .iter()
                .map(|(k, v)| format!("{k} = {} {NONGRAV_UNIT}", estimate(v)))
                .collect();
            format!(
                "{} gives {} (BIC {})",
                f.law,
                values.join(", "),
                signed(f.delta_bic, 1)
            )
        })
        .collect();
    let _ = writeln!(
        out,
        "  Radial law of {terms} not determined (BIC differences below {BIC_MARGIN}, not strong \
         evidence: Kass & Raftery 1995): {}.",
        each.join("; ")
    );
}

/// Bound or unbound, in words: the original barycentric 1/a in sigmas
/// from zero, and how far the osculating e near the Sun is from 1.
fn bound_line(out: &mut String, doc: &SolutionDocument, recommended: &ModelDocument) {
    let e_words = recommended.elements.as_ref().map(|e| {
        let s = e.e_minus_one_sigmas;
        let side = if s > 0.0 { "above" } else { "below" };
        format!(
            "the osculating eccentricity near the Sun, e = {}, is {side} 1 by {} sigma",
            estimate(&e.e),
            sigmas(s.abs())
        )
    });
    let Some(b) = &doc.bound else {
        if let Some(words) = e_words {
            let _ = writeln!(
                out,
                "  Bound or unbound on arrival was not assessed (no original 1/a was computed); \
                 {words}."
            );
        }
        return;
    };
    let a = &b.one_over_a_original_per_au;
    let figure = format!(
        "the original barycentric 1/a (before the planets acted{}) is {} 1/au",
        if b.averaged {
            "; averaged over the models the data cannot tell apart"
        } else {
            ""
        },
        estimate(a)
    );
    let from_zero = sigmas(b.sigmas_from_zero.abs());
    let e_unbound = recommended
        .elements
        .as_ref()
        .is_some_and(|e| e.e.value > 1.0);
    let text = match b.verdict {
        "unbound" => format!(
            "Came in unbound: {figure}, {from_zero} sigma below zero{}.",
            e_words.map_or(String::new(), |w| format!("; {w}"))
        ),
        "bound" => format!(
            "Came in bound: {figure}, {from_zero} sigma above zero{}.",
            match e_words {
                Some(w) if e_unbound => format!(
                    "; {w}, which is the pull of the planets and the Sun's motion about the \
                     barycentre, not the orbit it arrived on"
                ),
                Some(w) => format!("; {w}"),
                None => String::new(),
            }
        ),
        _ => format!(
            "Bound or unbound is not determined: {figure}, only {from_zero} sigma from zero{}.",
            e_words.map_or(String::new(), |w| format!("; {w}"))
        ),
    };
    let _ = writeln!(out, "  {text}");
}

fn cost_line(out: &mut String, doc: &SolutionDocument) {
    let Some(c) = &doc.cost_of_honesty else {
        return;
    };
    let factor = |x: f64| significant(x, 3);
    let mut parts = Vec::new();
    for (name, growth) in [
        ("q", c.q_au),
        ("e", c.e),
        ("the original 1/a", c.one_over_a_original_per_au),
    ] {
        if let Some(g) = growth {
            parts.push(format!("{name} {} times", factor(g.factor)));
        }
    }
    if let (Some(g), Some(days)) = (c.place_arcsec, c.place_days_after_arc) {
        parts.push(format!(
            "the place {} days after the arc {} times ({} -> {} arcsec)",
            fixed(days, 0),
            factor(g.factor),
            significant(g.gravity_sigma, 2),
            significant(g.model_sigma, 2)
        ));
    }
    let widened = if parts.is_empty() {
        "no uncertainty that could be compared".to_string()
    } else {
        format!("the sigma of {}", parts.join(", of "))
    };
    let _ = writeln!(
        out,
        "  What the terms cost: against gravity alone, {} widens {widened}.",
        c.model
    );
}

/// The verdict block: the one sentence, then what qualifies it (the
/// warnings, which come before any further claim, as in [`verdict`]),
/// then what it rests on.
fn verdict_block(out: &mut String, doc: &SolutionDocument) {
    let _ = writeln!(out, "Verdict: {}", verdict(doc));
    let recommended = doc.models.iter().find(|m| m.recommended);
    // With gravity recommended, `verdict` has already said the arc is too
    // short; with terms recommended it is a warning on them.
    let recommended_terms = recommended.is_some_and(|m| !m.terms.is_empty());
    if let (Some(w), true) = (&doc.refusals.arc_too_short, recommended_terms) {
        let _ = writeln!(out, "  {w}");
    }
    if let Some(w) = &doc.refusals.many_rejected {
        let _ = writeln!(out, "  {w}");
    }
    if let Some(r) = recommended {
        terms_lines(out, doc, r);
        bound_line(out, doc, r);
    }
    law_line(out, doc);
    cost_line(out, doc);
}

/// The terms of the model named `name` ("gravity" for none), to say
/// compactly what a row was tested against.
fn terms_of(doc: &SolutionDocument, name: &str) -> String {
    doc.models
        .iter()
        .find(|m| m.name == name)
        .filter(|m| !m.terms.is_empty())
        .map_or_else(|| name.to_string(), |m| m.terms.join("+"))
}

fn test_cell(t: Option<&TestDocument>) -> String {
    t.map_or_else(
        || "-".into(),
        |t| {
            let mark = if t.form == "F" { " F" } else { "" };
            format!("{}{mark}", sigmas(t.sigma))
        },
    )
}

fn ladder_table(out: &mut String, doc: &SolutionDocument) {
    let best_bic = doc
        .models
        .iter()
        .filter(|m| m.converged)
        .filter_map(|m| m.bic)
        .fold(f64::INFINITY, f64::min);
    let _ = writeln!(
        out,
        "  {:<24} {:>9} {:>5} {:>6} {:>6} {:>9} {:>7} {:>7} {:>17} {:>18}",
        "model",
        "chi2",
        "dof",
        "rms\"",
        "nrms",
        "BIC",
        "dBIC",
        "parent",
        "vs parent (sigma)",
        "vs gravity (sigma)"
    );
    for m in &doc.models {
        let mark = if m.recommended { '*' } else { ' ' };
        if !m.converged {
            let _ = writeln!(
                out,
                "{mark} {:<24} not converged: {}",
                m.name, m.termination
            );
            continue;
        }
        let or_dash =
            |x: Option<f64>, decimals: usize| x.map_or("-".into(), |v| fixed(v, decimals));
        let parent = m
            .test
            .as_ref()
            .map_or_else(|| "-".into(), |t| terms_of(doc, &t.against));
        let _ = writeln!(
            out,
            "{mark} {:<24} {:>9} {:>5} {:>6} {:>6} {:>9} {:>7} {:>7} {:>17} {:>18}",
            m.name,
            or_dash(m.chi2, 2),
            m.dof.map_or("-".into(), |d| d.to_string()),
            or_dash(m.rms_arcsec, 3),
            or_dash(m.normalized_rms, 3),
            or_dash(m.bic, 2),
            or_dash(m.bic.map(|b| b - best_bic), 1),
            parent,
            test_cell(m.test.as_ref()),
            test_cell(m.test_against_gravity.as_ref()),
        );
    }
    let _ = writeln!(
        out,
        "  * recommended. dBIC: BIC above the best converged model (below {BIC_MARGIN} is not \
         strong evidence either way)."
    );
    let _ = writeln!(
        out,
        "  parent: the row's nearest simpler model, the richest one of the same law whose terms \
         are a subset of the row's (gravity for a single term)."
    );
    let _ = writeln!(
        out,
        "  Tests: likelihood-ratio chi-square (F where marked, used when the residuals exceed \
         their stated sigmas), Bonferroni-corrected over the {} alternatives, shown as the \
         equivalent Gaussian sigma.",
        doc.alternatives
    );
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

/// Names of the non-gravitational components, spelled out.
fn term_words(term: &str) -> &'static str {
    match term {
        "A1" => "radial acceleration",
        "A2" => "transverse acceleration",
        "A3" => "normal acceleration",
        _ => "non-gravitational term",
    }
}

/// One row of the elements: a short symbol, the name in words, the value.
fn element_row(out: &mut String, symbol: &str, name: &str, value: &str) {
    let _ = writeln!(out, "  {symbol:<9} {name:<33} {value}");
}

fn model_details(out: &mut String, doc: &SolutionDocument, m: &ModelDocument) {
    let _ = writeln!(
        out,
        "\nElements of {} (heliocentric, osculating, ecliptic and equinox J2000) at {}:",
        m.name,
        jd_and_date(doc.elements_epoch_tdb_jd, 1)
    );
    // v_inf is a property of an orbit that came in unbound; for one that
    // came in bound, a heliocentric e above 1 near the Sun is the planets'
    // doing and a speed "at infinity" would mislead.
    let unbound = doc.bound.as_ref().is_some_and(|b| b.verdict == "unbound");
    if let Some(e) = &m.elements {
        let rows = [
            (
                "q",
                "perihelion distance",
                format!("{} au", estimate(&e.q_au)),
            ),
            ("e", "eccentricity", estimate(&e.e)),
            ("i", "inclination", format!("{} deg", estimate(&e.i_deg))),
            (
                "node",
                "longitude of the ascending node",
                format!("{} deg", estimate(&e.node_deg)),
            ),
            (
                "peri",
                "argument of perihelion",
                format!("{} deg", estimate(&e.peri_deg)),
            ),
            (
                "Tp",
                "time of perihelion passage",
                format!(
                    "JD {} TDB = {}",
                    estimate(&e.tp_tdb_jd),
                    calendar_tdb_within(e.tp_tdb_jd.value, e.tp_tdb_jd.sigma)
                ),
            ),
            (
                "1/a",
                "inverse semi-major axis",
                format!("{} 1/au", estimate(&e.one_over_a_per_au)),
            ),
        ];
        for (symbol, name, value) in &rows {
            element_row(out, symbol, name, value);
        }
        if let (Some(v), true) = (&e.v_inf_km_s, unbound) {
            element_row(
                out,
                "v_inf",
                "speed far from the Sun, inbound",
                &format!("{} km/s", estimate(v)),
            );
        }
    }
    for (name, v) in &m.nongrav {
        let snr = m
            .nongrav_snr
            .get(name)
            .map_or_else(|| "-".into(), |s| sigmas(*s));
        element_row(
            out,
            name,
            term_words(name),
            &format!("{} {NONGRAV_UNIT}, {snr} sigma from zero", estimate(v)),
        );
    }
    for (symbol, label, a) in [
        (
            "1/a orig",
            "original barycentric 1/a",
            &m.one_over_a_original,
        ),
        ("1/a fut", "future barycentric 1/a", &m.one_over_a_future),
    ] {
        if let Some(a) = a {
            element_row(
                out,
                symbol,
                label,
                &format!(
                    "{} 1/au at {} au, {}",
                    rounded(a.value, a.sigma),
                    fixed(a.distance_au, 0),
                    jd_and_date(a.tdb_jd, 1)
                ),
            );
        }
    }
    if let Some(t) = &m.trend {
        let _ = writeln!(
            out,
            "  Residual trend over {} nights: {} arcsec/day in RA cos Dec, {} in Dec; p = {}",
            t.nights,
            estimate(&t.slope_ra_arcsec_per_day),
            estimate(&t.slope_dec_arcsec_per_day),
            significant(t.p_value, 2)
        );
    }
    for p in &m.problems {
        let _ = writeln!(out, "  note: {p}");
    }
    let _ = writeln!(out, "  Rejected observations: {}", m.rejected.len());
    for r in m.rejected.iter().take(REJECTED_LISTED) {
        let _ = writeln!(
            out,
            "    {}  {:<5} chi2 {}",
            r.obs_time,
            r.station,
            fixed(r.chi2, 1)
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

/// The place a month ahead: how large each model's 1-sigma ellipse is,
/// and the model average's, which includes the models' disagreement.
fn outlook_block(out: &mut String, doc: &SolutionDocument) {
    let Some(o) = &doc.outlook else {
        return;
    };
    let _ = writeln!(
        out,
        "\nPointing {} days after the arc ({}, from the geocentre): 1-sigma semi-major axis of the \
         uncertainty ellipse",
        fixed(o.days_after_arc, 0),
        o.utc
    );
    for m in &o.models {
        let mark = if doc.recommended.as_deref() == Some(m.model.as_str()) {
            '*'
        } else {
            ' '
        };
        let _ = writeln!(
            out,
            "{mark} {:<33} {} arcsec",
            m.model,
            significant(m.semi_major_arcsec, 2)
        );
    }
    let _ = writeln!(
        out,
        "  {:<33} {} arcsec (weights exp(-dBIC/2); includes the models' disagreement)",
        "averaged over the models",
        significant(o.averaged.semi_major_arcsec, 2)
    );
}

/// A law parameter: with its sigma when fitted, marked when held fixed.
fn free_or_fixed(v: &ValueSigma, fixed_here: bool) -> String {
    if fixed_here {
        format!("{} (fixed)", significant(v.value, 3))
    } else {
        estimate(v)
    }
}

/// Activity in words, from the total law's K1 against the inert 5.
fn activity_words(k1: &ValueSigma, apart_sigma: f64) -> String {
    let measured = format!(
        "K1 = {} against 5 for an inactive body, {} sigma apart",
        estimate(k1),
        sigmas(apart_sigma)
    );
    if k1.value > 5.0 {
        format!(
            "Brightens faster than a bare nucleus as it nears the Sun ({measured}): a sign of \
             activity."
        )
    } else {
        format!(
            "Brightens more slowly than a bare nucleus as it nears the Sun ({measured}): not how \
             an inert body behaves, though not the usual sign of activity either."
        )
    }
}

fn brightness_details(out: &mut String, p: &BrightnessDocument) {
    let _ = writeln!(
        out,
        "\nBrightness ({} magnitudes, at the recommended orbit's geometry; * the law that fits \
         better):",
        p.measurements
    );
    let mark = |law: &str| if p.preferred == Some(law) { "*" } else { " " };
    use super::brightness::{range_flag, G_PLAUSIBLE, K1_PLAUSIBLE};
    // A parameter outside what small bodies show is named in words below,
    // not printed as a result.
    let flagged = |name: &str| format!("{name} not a result (see below)");
    let used = |s: &super::brightness::LawSummaryDocument| {
        format!(
            "normalised rms {}; {} used, {} rejected, {} brighter than the law",
            fixed(s.normalized_rms, 2),
            s.used,
            s.rejected,
            s.departures.len()
        )
    };
    if let Some(t) = &p.total {
        let k1 = match range_flag("K1", &t.k1, t.k1_fixed, K1_PLAUSIBLE) {
            Some(_) => flagged("K1"),
            None => format!("K1 = {}", free_or_fixed(&t.k1, t.k1_fixed)),
        };
        let _ = writeln!(
            out,
            "{} total-magnitude law (active body): M1 = {}, {k1}; {}",
            mark("total"),
            estimate(&t.m1),
            used(&t.summary)
        );
        // The flag is set only when the total law is the preferred one
        // (brightness.rs): otherwise phase darkening can fake it.
        if let Some(s) = t.activity_sigma {
            let _ = writeln!(out, "  {}", activity_words(&t.k1, s));
        }
    }
    if let Some(h) = &p.hg {
        let g = match range_flag("G", &h.g, h.g_fixed, G_PLAUSIBLE) {
            Some(_) => flagged("G"),
            None => format!("G = {}", free_or_fixed(&h.g, h.g_fixed)),
        };
        let _ = writeln!(
            out,
            "{} (H, G) law (inert body): H = {}, {g}; {}",
            mark("hg"),
            estimate(&h.h),
            used(&h.summary)
        );
    }
    for flag in &p.range_flags {
        let _ = writeln!(out, "  not a result: {flag}");
    }
    for problem in &p.problems {
        match problem.strip_prefix(HG_PROBLEM) {
            // An (H, G) failure is news only when that law might have
            // been the answer; on an active comet it is noise.
            Some(why) if p.hg_failure_matters => {
                let because = if p.total.is_some() {
                    "an (H, G) law with G held fixed fits as well as the total-magnitude law, so \
                     the body may be inert and its brightening a phase effect"
                } else {
                    "it was the only law left"
                };
                let _ = writeln!(
                    out,
                    "  note: the (H, G) law could not be fitted ({why}), and it matters: {because}."
                );
            }
            Some(_) => {}
            None => {
                let _ = writeln!(out, "  note: {problem}");
            }
        }
    }
}

/// How the fit was set up: the epoch, the start, the ephemeris, the bias.
fn setup_lines(out: &mut String, doc: &SolutionDocument) {
    let _ = writeln!(
        out,
        "\nFit epoch {}; initial orbit by {} (rms {} arcsec)",
        jd_and_date(doc.epoch_tdb_jd, 1),
        doc.initial_orbit.method,
        fixed(doc.initial_orbit.rms_arcsec, 2),
    );
    let _ = writeln!(out, "Ephemeris: {}", doc.ephemeris);
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
}

pub fn text(doc: &SolutionDocument) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "Object {}: {} observations ({} in the model comparison), arc {} days from {} to {}",
        doc.object,
        doc.n_obs,
        doc.n_used,
        fixed(doc.arc_days, 2),
        doc.first_obs_utc,
        doc.last_obs_utc
    );
    verdict_block(&mut out, doc);
    let _ = writeln!(out, "\nModel ladder:");
    ladder_table(&mut out, doc);
    if let Some(m) = doc.models.iter().find(|m| m.recommended) {
        model_details(&mut out, doc, m);
    }
    outlook_block(&mut out, doc);
    if let Some(p) = &doc.photometry {
        brightness_details(&mut out, p);
    }
    setup_lines(&mut out, doc);
    out
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

    /// The (H, G) failure is said only where that law might have been
    /// the answer (the flag is brightness.rs's decision; invented values).
    #[test]
    fn an_hg_failure_is_news_only_where_it_matters() {
        use super::super::brightness::{LawSummaryDocument, TotalLawDocument};
        let summary = LawSummaryDocument {
            used: 40,
            rejected: 0,
            normalized_rms: 0.9,
            band_assumed_v: 0,
            departures: Vec::new(),
        };
        let mut doc = BrightnessDocument {
            measurements: 40,
            total: Some(TotalLawDocument {
                m1: ValueSigma {
                    value: 12.5,
                    sigma: 0.02,
                },
                k1: ValueSigma {
                    value: 9.98,
                    sigma: 0.08,
                },
                k1_fixed: false,
                activity_sigma: Some(62.0),
                summary,
            }),
            hg: None,
            problems: vec![format!("{HG_PROBLEM}the (H, G) fit did not converge")],
            preferred: Some("total"),
            law: None,
            range_flags: Vec::new(),
            hg_failure_matters: false,
        };
        let said = |doc: &BrightnessDocument| {
            let mut out = String::new();
            brightness_details(&mut out, doc);
            out
        };
        let quiet = said(&doc);
        assert!(!quiet.contains("did not converge"), "{quiet}");
        assert!(quiet.contains("a sign of activity"), "{quiet}");
        doc.hg_failure_matters = true;
        if let Some(t) = doc.total.as_mut() {
            t.activity_sigma = None;
        }
        let loud = said(&doc);
        assert!(loud.contains("did not converge"), "{loud}");
        assert!(loud.contains("may be inert"), "{loud}");
        assert!(!loud.contains("activity."), "{loud}");
    }

    #[test]
    fn julian_dates_have_their_calendar_dates() {
        // J2000.0 is JD 2451545.0 = 2000 January 1, 12h (IAU 1976
        // definition of the epoch J2000.0; memory).
        assert_eq!(calendar_tdb(2_451_545.0), "2000-01-01 12:00:00 TDB");
        // Meeus, Astronomical Algorithms (2nd ed.), ch. 7, example 7.a:
        // 1957 October 4.81 = JD 2436116.31 (memory); 0.81 d is 19:26:24.
        assert_eq!(
            calendar_of_jd(2_436_116.31),
            Some(CalendarTime {
                year: 1957,
                month: 10,
                day: 4,
                hour: 19,
                minute: 26,
                second: 24
            })
        );
        // The Unix epoch, 1970-01-01 0h, is JD 2440587.5 (memory), and a
        // leap day: 2024-02-29 0h is JD 2460369.5 (memory; one day after
        // 2024-02-28, JD 2460368.5).
        assert_eq!(calendar_tdb(2_440_587.5), "1970-01-01 00:00:00 TDB");
        // The outgassing fixture's perihelion, JD 2461145.0 TDB: Python
        // 3.11 datetime, datetime(2000, 1, 1, 12) + timedelta(days=9600)
        // gives 2026-04-14 12:00:00.
        assert_eq!(calendar_tdb(2_461_145.0), "2026-04-14 12:00:00 TDB");
        assert_eq!(calendar_tdb(2_460_369.5), "2024-02-29 00:00:00 TDB");
        // A second short of midnight does not round into the wrong day.
        assert_eq!(
            calendar_tdb(2_451_545.5 - 1.0 / 86_400.0),
            "2000-01-01 23:59:59 TDB"
        );
        // No more digits than the sigma supports (the rule of `rounded`
        // carried over to clock readings; the dates as above).
        assert_eq!(
            calendar_tdb_within(2_436_116.31, 0.26),
            "1957-10-04 19:26 TDB"
        );
        assert_eq!(
            calendar_tdb_within(2_451_545.5 - 10.0 / 86_400.0, 0.01),
            "2000-01-02 00:00 TDB"
        );
        assert_eq!(calendar_tdb_within(2_436_116.31, 3.0), "1957-10-04 TDB");
        assert_eq!(calendar_of_jd(f64::NAN), None);
        assert_eq!(calendar_of_jd(-10.0), None);
    }
}
