//! The rules: each reads one number off a solution's facts, and fires when
//! it crosses its threshold. One mechanism for all of them: every rule's
//! value is put on a common scale where 1 is the threshold ("level"); a
//! rule is raised when its level reaches 1 while it is clear, and cleared
//! when its level falls below 1 - clear_fraction while it is raised. So a
//! value hovering at the line raises one alert, however many refits see
//! it there. A rule whose value cannot be computed for a solution (no new
//! observations, no converged fit to predict from) keeps its state.

use crate::config::AlertSettings;

use super::event::{Edge, RuleKind, RuleState, RuleStates};
use super::facts::SolutionFacts;

/// One rule's reading of one solution.
#[derive(Debug, Clone, PartialEq)]
pub struct Measure {
    pub rule: RuleKind,
    pub key: String,
    /// In the rule's own unit, as the message quotes it.
    pub value: f64,
    /// On the common scale: 1 at the threshold.
    pub level: f64,
    pub threshold: Option<f64>,
    pub unit: &'static str,
    /// Where it clears, in its own unit (for the words; the rule itself
    /// clears on the level).
    pub clears_at: Option<f64>,
    /// Fires at every occurrence (a change), not once per crossing.
    pub pulse: bool,
    /// Whether coming back inside is news worth a message.
    pub announce_clear: bool,
}

/// A rule that changed state at this solution.
#[derive(Debug, Clone, PartialEq)]
pub struct Crossing {
    pub measure: Measure,
    pub edge: Edge,
    /// The rule's value at the solution before, when it had one.
    pub before: Option<f64>,
}

/// The key of a prediction-shift rule for `days` ahead.
pub fn shift_key(days: f64) -> String {
    format!(
        "{}_{}d",
        RuleKind::PredictionShift.name(),
        format_days(days)
    )
}

fn format_days(days: f64) -> String {
    if days.fract() == 0.0 {
        format!("{days:.0}")
    } else {
        format!("{days}").replace('.', "_")
    }
}

/// Every rule's reading of `f` (rules that cannot read it are absent).
pub fn measures(s: &AlertSettings, f: &SolutionFacts) -> Vec<Measure> {
    let mut shifts = Vec::new();
    let mut out = Vec::new();
    let mut push = |rule: RuleKind, value: f64, level: f64, threshold: Option<f64>, unit| {
        out.extend(measure(
            rule,
            rule.name().to_string(),
            value,
            level,
            threshold,
            unit,
        ));
    };
    if let Some(a) = f.one_over_a_original_per_au.filter(|a| a.sigma > 0.0) {
        let below = -a.value / a.sigma;
        push(
            RuleKind::Unbound,
            below,
            below / s.unbound_sigma,
            Some(s.unbound_sigma),
            "sigma below zero",
        );
    }
    if let Some(x) = f.ng_significance_sigma {
        push(
            RuleKind::NgNeeded,
            x,
            x / s.ng_significance_sigma,
            Some(s.ng_significance_sigma),
            "sigma",
        );
    }
    if let Some(rms) = f.gravity_normalized_rms {
        let trend = f
            .gravity_trend_p_value
            .filter(|p| *p > 0.0)
            .map_or(0.0, |p| p.log10() / s.batch_p_value_below.log10());
        push(
            RuleKind::GravityFails,
            rms,
            (rms / s.gravity_normalized_rms_above).max(trend),
            Some(s.gravity_normalized_rms_above),
            "normalised RMS",
        );
    }
    if let (Some(before), Some(now)) = (&f.previous_recommended, &f.recommended) {
        // Terms that came or went are a change; a law alone is one only
        // when the data choose it (else the recommendation flips between
        // laws the data cannot tell apart, and that is not news).
        let terms_changed = f.previous_terms.as_ref().is_none_or(|t| *t != f.terms);
        let changed = before != now && (terms_changed || f.law_determined);
        push(
            RuleKind::ModelChanged,
            f64::from(u8::from(changed)),
            f64::from(u8::from(changed)),
            None,
            "",
        );
    }
    if let Some(b) = &f.batch {
        let log10_p = b
            .log10_p_value
            .or_else(|| b.p_value.filter(|p| *p > 0.0).map(f64::log10));
        if let (Some(p), Some(l)) = (b.p_value, log10_p) {
            push(
                RuleKind::BatchDisagrees,
                p,
                l / s.batch_p_value_below.log10(),
                Some(s.batch_p_value_below),
                "p-value",
            );
        }
    }
    for place in &f.places {
        if let (Some(arcsec), Some(sigmas)) = (place.shift_arcsec, place.shift_sigma) {
            let level = (arcsec / s.prediction_shift_arcsec).min(sigmas / s.prediction_shift_sigma);
            shifts.extend(measure(
                RuleKind::PredictionShift,
                shift_key(place.days),
                arcsec,
                level,
                Some(s.prediction_shift_arcsec),
                "arcsec",
            ));
        }
    }
    if f.converged {
        let strongest = f
            .departures
            .iter()
            .map(|d| d.significance_sigma)
            .fold(0.0, f64::max);
        push(
            RuleKind::Outburst,
            strongest,
            f64::from(u8::from(!f.departures.is_empty())),
            None,
            "sigma",
        );
    }
    push(
        RuleKind::FitFailed,
        f64::from(u8::from(!f.converged)),
        f64::from(u8::from(!f.converged)),
        None,
        "",
    );
    let hours = f.hours_without_solution.unwrap_or(0.0);
    push(
        RuleKind::NoSolution,
        hours,
        hours / s.no_solution_hours,
        Some(s.no_solution_hours),
        "hours",
    );
    out.extend(shifts);
    for m in &mut out {
        let keep = 1.0 - s.clear_fraction;
        m.clears_at = match (m.rule, m.threshold) {
            (RuleKind::BatchDisagrees, Some(p)) => Some(10f64.powf(p.log10() * keep)),
            (_, Some(t)) => Some(t * keep),
            (_, None) => None,
        };
    }
    out
}

fn measure(
    rule: RuleKind,
    key: String,
    value: f64,
    level: f64,
    threshold: Option<f64>,
    unit: &'static str,
) -> Option<Measure> {
    (value.is_finite() && level.is_finite()).then(|| Measure {
        rule,
        key,
        value,
        level,
        threshold,
        unit,
        clears_at: None,
        pulse: rule == RuleKind::ModelChanged,
        announce_clear: rule != RuleKind::ModelChanged,
    })
}

/// The rules' crossings at a solution, and every rule's state after it.
pub fn evaluate(
    s: &AlertSettings,
    facts: &SolutionFacts,
    states: &RuleStates,
) -> (Vec<Crossing>, RuleStates) {
    let mut next = states.clone();
    let mut crossings = Vec::new();
    let clear_below = 1.0 - s.clear_fraction;
    for m in measures(s, facts) {
        let old = states.get(&m.key);
        let active = old.is_some_and(|o| o.active);
        let before = old.and_then(|o| o.value);
        let edge = if m.level >= 1.0 && (!active || m.pulse) {
            Some(Edge::Raised)
        } else if active && m.level < clear_below {
            Some(Edge::Cleared)
        } else {
            None
        };
        let since_seq = match (edge, old) {
            (Some(_), _) | (None, None) => facts.seq,
            (None, Some(o)) => o.since_seq,
        };
        next.insert(
            m.key.clone(),
            RuleState {
                active: match edge {
                    Some(Edge::Raised) => true,
                    Some(Edge::Cleared) => false,
                    None => active,
                },
                value: Some(m.value),
                since_seq,
            },
        );
        match edge {
            Some(Edge::Cleared) if !m.announce_clear => {}
            Some(edge) => crossings.push(Crossing {
                measure: m,
                edge,
                before,
            }),
            None => {}
        }
    }
    (crossings, next)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::solve::document::ValueSigma;
    use std::path::PathBuf;

    fn settings() -> AlertSettings {
        AlertSettings::defaults(PathBuf::from("mail"))
    }

    fn facts(seq: u64) -> SolutionFacts {
        SolutionFacts {
            object_id: "obj-1".into(),
            designation: "2026 ZB1".into(),
            seq,
            created_utc: "2026-12-03T12:00:00Z".into(),
            observations: 100,
            arc_days: Some(30.0),
            converged: true,
            failure: None,
            recommended: Some("gravity".into()),
            previous_seq: seq.checked_sub(1).filter(|s| *s > 0),
            previous_recommended: (seq > 1).then(|| "gravity".to_string()),
            previous_terms: (seq > 1).then(Vec::new),
            terms: Vec::new(),
            law: None,
            law_determined: true,
            nongrav: Default::default(),
            one_over_a_original_per_au: None,
            e: None,
            e_minus_one_sigmas: None,
            v_inf_km_s: None,
            q_au: None,
            gravity_e: None,
            gravity_q_au: None,
            gravity_normalized_rms: Some(1.0),
            gravity_trend_p_value: None,
            ng_significance_sigma: Some(0.5),
            ng_significance_unknown: None,
            ladder: Vec::new(),
            batch: None,
            places: Vec::new(),
            departures: Vec::new(),
            hours_without_solution: None,
        }
    }

    /// Runs `values` of the non-gravitational significance through the
    /// rules, one solution each; the crossings of that rule.
    fn ng_run(values: &[f64]) -> Vec<Edge> {
        let s = settings();
        let mut states = RuleStates::new();
        let mut edges = Vec::new();
        for (k, v) in values.iter().enumerate() {
            let mut f = facts(k as u64 + 1);
            f.ng_significance_sigma = Some(*v);
            let (crossings, next) = evaluate(&s, &f, &states);
            edges.extend(
                crossings
                    .iter()
                    .filter(|c| c.measure.rule == RuleKind::NgNeeded)
                    .map(|c| c.edge),
            );
            states = next;
        }
        edges
    }

    /// The threshold is 3 sigma and the clear level 2.4 (the defaults:
    /// clear_fraction 0.2): ten crossings of 3 that never go below 2.4
    /// make one alert.
    #[test]
    fn ten_crossings_inside_the_clear_band_raise_one_alert() {
        let mut values = Vec::new();
        for _ in 0..10 {
            values.extend([2.9, 3.1]);
        }
        assert_eq!(ng_run(&values), [Edge::Raised]);
        // Below the clear level it clears, and a new crossing raises again.
        values.extend([2.3, 3.2]);
        assert_eq!(ng_run(&values), [Edge::Raised, Edge::Cleared, Edge::Raised]);
        // A value at exactly the threshold raises.
        assert_eq!(ng_run(&[3.0]), [Edge::Raised]);
    }

    #[test]
    fn an_unknown_value_keeps_the_state() {
        let s = settings();
        let mut f = facts(1);
        f.ng_significance_sigma = Some(4.0);
        let (c, states) = evaluate(&s, &f, &RuleStates::new());
        assert_eq!(c.len(), 1);
        let mut g = facts(2);
        g.ng_significance_sigma = None;
        let (c, after) = evaluate(&s, &g, &states);
        assert!(c.is_empty());
        assert_eq!(after["ng_needed"], states["ng_needed"]);
    }

    #[test]
    fn unbound_is_read_in_sigmas_below_zero() {
        let s = settings();
        let mut f = facts(1);
        f.one_over_a_original_per_au = Some(ValueSigma {
            value: -3.5e-4,
            sigma: 1.0e-4,
        });
        let (c, _) = evaluate(&s, &f, &RuleStates::new());
        let unbound: Vec<_> = c
            .iter()
            .filter(|c| c.measure.rule == RuleKind::Unbound)
            .collect();
        assert_eq!(unbound.len(), 1);
        assert!((unbound[0].measure.value - 3.5).abs() < 1e-12);
        // Bound at 60 sigma: nothing.
        f.one_over_a_original_per_au = Some(ValueSigma {
            value: 3.0e-5,
            sigma: 5.0e-7,
        });
        let (c, _) = evaluate(&s, &f, &RuleStates::new());
        assert!(c.iter().all(|c| c.measure.rule != RuleKind::Unbound));
    }

    /// A change of the recommended model's terms is news each time; a
    /// change of law alone only when the data choose the new law.
    #[test]
    fn a_model_change_fires_when_terms_change_or_a_law_is_chosen() {
        let s = settings();
        let terms = |name: &str| -> Vec<String> {
            match name.split(' ').next() {
                Some("gravity") | None => Vec::new(),
                Some(t) => t.split('+').map(str::to_string).collect(),
            }
        };
        // (model, law determined, fires)
        let steps = [
            ("gravity", true, false),
            ("A1 water-ice", false, true),
            ("A1 inverse-square", false, false),
            ("A1 water-ice", true, true),
            ("A1 water-ice", true, false),
            ("A1+A2 water-ice", false, true),
        ];
        let mut states = RuleStates::new();
        for (k, (model, determined, fires)) in steps.iter().enumerate() {
            let mut f = facts(k as u64 + 1);
            f.previous_recommended = (k > 0).then(|| steps[k - 1].0.to_string());
            f.previous_terms = (k > 0).then(|| terms(steps[k - 1].0));
            f.recommended = Some(model.to_string());
            f.terms = terms(model);
            f.law_determined = *determined;
            let (c, next) = evaluate(&s, &f, &states);
            let fired: Vec<_> = c
                .iter()
                .filter(|c| c.measure.rule == RuleKind::ModelChanged)
                .collect();
            assert_eq!(fired.len(), usize::from(*fires), "step {k}: {model}");
            assert!(fired.iter().all(|c| c.edge == Edge::Raised));
            states = next;
        }
    }

    /// The batch p-value is judged on a log scale: p = 1e-4 against a
    /// limit of 1e-3 is level 4/3; it clears above p = 10^(-2.4).
    #[test]
    fn the_batch_rule_reads_log_p() {
        let s = settings();
        let batch = |p: f64| super::super::facts::BatchFacts {
            against_seq: 1,
            observations: 12,
            chi2: Some(40.0),
            dof: Some(24),
            p_value: Some(p),
            log10_p_value: Some(p.log10()),
            outliers_left_out: 0,
            files: vec!["night.psv".into()],
            stations: vec!["ZQA".into()],
        };
        let run = |ps: &[f64]| {
            let mut states = RuleStates::new();
            let mut edges = Vec::new();
            for (k, p) in ps.iter().enumerate() {
                let mut f = facts(k as u64 + 2);
                f.batch = Some(batch(*p));
                let (c, next) = evaluate(&s, &f, &states);
                edges.extend(
                    c.iter()
                        .filter(|c| c.measure.rule == RuleKind::BatchDisagrees)
                        .map(|c| c.edge),
                );
                states = next;
            }
            edges
        };
        assert_eq!(run(&[1e-4, 3e-3, 1e-4]), [Edge::Raised]);
        assert_eq!(run(&[1e-4, 5e-3]), [Edge::Raised, Edge::Cleared]);
        assert!(run(&[0.2, 0.01]).is_empty());
    }
}
