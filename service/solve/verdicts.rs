//! What the data decide and what they do not, read off a ladder's models:
//! whether the radial law of the non-gravitational terms is determined,
//! and whether the body came in bound or unbound. Pure functions of the
//! document's models, so the report, the JSON and the alerts say the same.

use serde::Serialize;

use crate::fit::mixture::{average_scalar, bic_weights};

use super::document::{ModelDocument, ValueSigma};

/// A BIC difference below this is not strong evidence for one model over
/// another (Kass & Raftery 1995, J. Am. Stat. Assoc. 90, 773, sec. 3.2).
pub const BIC_MARGIN: f64 = 6.0;

/// A value this many sigma from zero is taken as decided (common
/// practice; the alert threshold is configured separately).
pub const DECIDED_SIGMA: f64 = 3.0;

/// No model explains the data when every converged model's normalised
/// RMS is above this...
pub const NO_MODEL_NORMALIZED_RMS: f64 = 1.5;
/// ...or the best fit's chi^2 tail probability is below this.
pub const NO_MODEL_P_VALUE: f64 = 1e-6;
/// More than this share of the observations rejected is worth a warning.
pub const REJECTED_SHARE_WARNING: f64 = 0.10;
/// More than this share rejected and the fit no longer speaks for the
/// data: the kept observations are a minority, past the 50% breakdown
/// point no estimator can exceed (Rousseeuw 1984, J. Am. Stat. Assoc.
/// 79, 871).
pub const REJECTED_SHARE_NO_MODEL: f64 = 0.5;
/// Fewer nights than this cannot decide on non-gravitational terms.
pub const MIN_NIGHTS_FOR_NG: usize = 3;

/// Where the verdict must hold back, in words: nothing fits, too much was
/// thrown away, or the arc cannot decide on non-gravitational terms.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct Refusals {
    /// No model of the ladder explains the data.
    pub no_model_explains: Option<String>,
    /// More than a tenth of the observations rejected.
    pub many_rejected: Option<String>,
    /// Too few nights, or no non-gravitational fit converged.
    pub arc_too_short: Option<String>,
}

impl Refusals {
    pub fn is_empty(&self) -> bool {
        self.no_model_explains.is_none()
            && self.many_rejected.is_none()
            && self.arc_too_short.is_none()
    }
}

/// The refusals a ladder's models call for; `nights` is how many nights
/// (UTC dates) the observations span, `observations` how many there are.
pub fn refusals(models: &[ModelDocument], observations: usize, nights: usize) -> Refusals {
    let converged: Vec<&ModelDocument> = models.iter().filter(|m| m.converged).collect();
    let mut out = Refusals::default();
    let best = converged.iter().filter(|m| m.bic.is_some()).min_by(|a, b| {
        a.bic
            .unwrap_or(f64::INFINITY)
            .total_cmp(&b.bic.unwrap_or(f64::INFINITY))
    });
    let best_p = best.and_then(|m| {
        let (chi2, dof) = (m.chi2?, m.dof?);
        (dof > 0).then(|| crate::fit::stats::chi2_ln_sf(chi2, dof as f64).exp())
    });
    let all_high = !converged.is_empty()
        && converged.iter().all(|m| {
            m.normalized_rms
                .is_some_and(|r| r > NO_MODEL_NORMALIZED_RMS)
        });
    if all_high || best_p.is_some_and(|p| p < NO_MODEL_P_VALUE) {
        let rms = converged
            .iter()
            .filter_map(|m| m.normalized_rms)
            .fold(f64::INFINITY, f64::min);
        out.no_model_explains = Some(format!(
            "No model of the ladder explains the data: the smallest normalised RMS is {rms:.2} \
             (above {NO_MODEL_NORMALIZED_RMS} means the residuals are larger than the stated \
             uncertainties){}.",
            best_p.map_or(String::new(), |p| format!(
                ", and the best fit's chi-square tail probability is {p:.1e}"
            ))
        ));
    }
    if let Some(r) = models.iter().find(|m| m.recommended && m.converged) {
        let share = r.rejected.len() as f64 / observations.max(1) as f64;
        if share > REJECTED_SHARE_NO_MODEL && out.no_model_explains.is_none() {
            out.no_model_explains = Some(format!(
                "No model of the ladder explains the data: the fits keep only {} of {observations} \
                 observations ({:.0}% rejected), a minority that cannot speak for the rest.",
                observations - r.rejected.len().min(observations),
                100.0 * share
            ));
        }
        if share > REJECTED_SHARE_WARNING {
            out.many_rejected = Some(format!(
                "Warning: {} of {observations} observations ({:.0}%) were rejected as outliers; \
                 check them before trusting the fit.",
                r.rejected.len(),
                100.0 * share
            ));
        }
    }
    let ng_converged = converged.iter().any(|m| !m.terms.is_empty());
    if nights < MIN_NIGHTS_FOR_NG {
        out.arc_too_short = Some(format!(
            "The arc ({nights} night{}) is too short for a verdict on non-gravitational terms \
             (at least {MIN_NIGHTS_FOR_NG} nights are needed).",
            if nights == 1 { "" } else { "s" }
        ));
    } else if !ng_converged && !converged.is_empty() {
        out.arc_too_short = Some(
            "No non-gravitational model converged: the data cannot yet say whether such terms \
             are needed."
                .into(),
        );
    }
    out
}

/// One law's fit with the recommended terms.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LawFit {
    pub law: String,
    pub model: String,
    /// BIC above the recommended model's.
    pub delta_bic: f64,
    pub nongrav: std::collections::BTreeMap<String, ValueSigma>,
}

/// Whether the data choose the radial law of the recommended terms.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LawVerdict {
    pub determined: bool,
    pub terms: Vec<String>,
    /// The recommended law first, then its rivals with the same terms.
    pub fits: Vec<LawFit>,
    pub text: String,
}

/// Came in bound or not, on the original barycentric 1/a (Marsden,
/// Sekanina & Everhart 1978, AJ 83, 64): the heliocentric osculating e
/// near the Sun says little, since the planets pull the Sun about.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BoundVerdict {
    /// "bound", "unbound" or "not_determined".
    pub verdict: &'static str,
    pub one_over_a_original_per_au: ValueSigma,
    /// The value over its sigma (negative: below zero).
    pub sigmas_from_zero: f64,
    /// Whether the figure is averaged over the models the data cannot
    /// tell apart (weights exp(-dBIC/2), total variance).
    pub averaged: bool,
    pub text: String,
}

fn recommended(models: &[ModelDocument]) -> Option<&ModelDocument> {
    models.iter().find(|m| m.recommended && m.converged)
}

/// The law verdict, when the recommended model has terms and a law.
pub fn law_verdict(models: &[ModelDocument]) -> Option<LawVerdict> {
    let r = recommended(models)?;
    let law = r.law.clone()?;
    let r_bic = r.bic?;
    let fit = |m: &ModelDocument| {
        Some(LawFit {
            law: m.law.clone()?,
            model: m.name.clone(),
            delta_bic: m.bic? - r_bic,
            nongrav: m.nongrav.clone(),
        })
    };
    let rivals: Vec<LawFit> = models
        .iter()
        .filter(|m| m.converged && m.terms == r.terms && m.law.as_deref() != Some(law.as_str()))
        .filter_map(fit)
        .collect();
    if rivals.is_empty() {
        return None;
    }
    let determined = rivals.iter().all(|f| f.delta_bic >= BIC_MARGIN);
    let mut fits = vec![fit(r)?];
    fits.extend(rivals);
    let terms = r.terms.join("+");
    let text = if determined {
        format!(
            "The {law} law is determined for {terms}: every other law fits worse by BIC {:.1} or more.",
            fits[1..].iter().map(|f| f.delta_bic).fold(f64::INFINITY, f64::min)
        )
    } else {
        let each: Vec<String> = fits
            .iter()
            .map(|f| {
                let values: Vec<String> = f
                    .nongrav
                    .iter()
                    .map(|(k, v)| format!("{k} = {}", value_with_sigma(*v)))
                    .collect();
                format!(
                    "{} (dBIC {:+.1}): {}",
                    f.law,
                    f.delta_bic,
                    values.join(", ")
                )
            })
            .collect();
        format!(
            "The radial law of {terms} is not determined (BIC differences below {BIC_MARGIN}): {}.",
            each.join("; ")
        )
    };
    Some(LawVerdict {
        determined,
        terms: r.terms.clone(),
        fits,
        text,
    })
}

/// The mixture of a quantity over the converged models, weighted by
/// exp(-dBIC/2): its mean, and its variance as the weighted within-model
/// variances plus the spread of the means (law of total variance;
/// Burnham & Anderson 2002, sec. 4.2 and 6.4).
pub fn model_average(
    models: &[ModelDocument],
    value: impl Fn(&ModelDocument) -> Option<ValueSigma>,
) -> Option<ValueSigma> {
    let points: Vec<(Option<f64>, ValueSigma)> = models
        .iter()
        .filter(|m| m.converged)
        .filter_map(|m| Some((m.bic, value(m)?)))
        .filter(|(b, v)| {
            b.is_some_and(f64::is_finite) && v.value.is_finite() && v.sigma.is_finite()
        })
        .collect();
    let bics: Vec<Option<f64>> = points.iter().map(|(b, _)| *b).collect();
    let weighted: Vec<(f64, f64, f64)> = bic_weights(&bics)
        .into_iter()
        .zip(&points)
        .map(|(w, (_, v))| (w, v.value, v.sigma))
        .collect();
    average_scalar(&weighted).map(|(value, sigma)| ValueSigma { value, sigma })
}

/// Came in bound or not. The recommended model's original 1/a, or, when
/// its law is not determined, the figure averaged over the models.
pub fn bound_verdict(models: &[ModelDocument], law: Option<&LawVerdict>) -> Option<BoundVerdict> {
    let original = |m: &ModelDocument| {
        m.one_over_a_original.as_ref().map(|a| ValueSigma {
            value: a.value,
            sigma: a.sigma,
        })
    };
    let r = recommended(models)?;
    let averaged = law.is_some_and(|l| !l.determined);
    let figure = if averaged {
        model_average(models, original)?
    } else {
        original(r)?
    };
    if figure.sigma.is_nan() || figure.sigma <= 0.0 {
        return None;
    }
    let sigmas = figure.value / figure.sigma;
    let shown = format!(
        "original barycentric 1/a = {} 1/au{}",
        value_with_sigma(figure),
        if averaged {
            ", averaged over the models the data cannot tell apart"
        } else {
            ""
        }
    );
    let helio_e_above_one = r.elements.as_ref().is_some_and(|e| e.e.value > 1.0);
    let (verdict, text) = if sigmas <= -DECIDED_SIGMA {
        (
            "unbound",
            format!(
                "Came in unbound: {shown}, below zero at {:.1} sigma.",
                -sigmas
            ),
        )
    } else if sigmas >= DECIDED_SIGMA {
        let why = if helio_e_above_one {
            " (the heliocentric e above 1 near the Sun is the Sun's and planets' doing)"
        } else {
            ""
        };
        (
            "bound",
            format!("Came in bound: {shown}, above zero at {sigmas:.1} sigma{why}."),
        )
    } else {
        (
            "not_determined",
            format!(
                "Bound or unbound is not determined: {shown}, {:.1} sigma from zero.",
                sigmas.abs()
            ),
        )
    };
    Some(BoundVerdict {
        verdict,
        one_over_a_original_per_au: figure,
        sigmas_from_zero: sigmas,
        averaged,
        text,
    })
}

/// One term's standing: where it was measured and how far from zero.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TermStanding {
    pub term: String,
    /// The model the figure comes from; None when no model with the term
    /// converged.
    pub model: Option<String>,
    pub value: Option<ValueSigma>,
    pub sigmas_from_zero: Option<f64>,
    /// That model's BIC above the recommended one's.
    pub delta_bic: Option<f64>,
}

/// Which non-gravitational terms the data justify and which they leave
/// open.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TermsVerdict {
    /// The recommended model's terms.
    pub justified: Vec<TermStanding>,
    /// Every other term the ladder tried, as measured in the smallest
    /// richer model that has it.
    pub not_determined: Vec<TermStanding>,
    pub text: String,
}

fn standing(term: &str, m: &ModelDocument, r_bic: Option<f64>) -> TermStanding {
    let value = m.nongrav.get(term).copied();
    TermStanding {
        term: term.to_string(),
        model: Some(m.name.clone()),
        value,
        sigmas_from_zero: value
            .filter(|v| v.sigma > 0.0)
            .map(|v| v.value.abs() / v.sigma),
        delta_bic: m.bic.zip(r_bic).map(|(b, r)| b - r),
    }
}

fn standing_text(t: &TermStanding) -> String {
    match (&t.model, t.sigmas_from_zero) {
        (Some(model), Some(s)) => format!(
            "{} ({s:.1} sigma from zero in {model}{})",
            t.term,
            t.delta_bic
                .map_or(String::new(), |d| format!(", BIC {d:+.1}"))
        ),
        _ => format!("{} (no fit with it converged)", t.term),
    }
}

/// Which terms are justified (the recommended model's) and which are not
/// determined (the others the ladder tried: each measured in the smallest
/// converged model that adds it to the recommended terms, of the
/// recommended law, or of any law when gravity alone is recommended).
pub fn terms_verdict(models: &[ModelDocument]) -> Option<TermsVerdict> {
    let r = recommended(models)?;
    let tried: std::collections::BTreeSet<&String> =
        models.iter().flat_map(|m| m.terms.iter()).collect();
    if tried.is_empty() {
        return None;
    }
    let justified: Vec<TermStanding> = r.terms.iter().map(|t| standing(t, r, r.bic)).collect();
    let not_determined: Vec<TermStanding> = tried
        .iter()
        .filter(|t| !r.terms.contains(t))
        .map(|t| {
            models
                .iter()
                .filter(|m| m.converged && m.terms.contains(t))
                .filter(|m| r.terms.iter().all(|x| m.terms.contains(x)))
                .filter(|m| r.law.is_none() || m.law == r.law)
                .min_by(|a, b| {
                    a.terms.len().cmp(&b.terms.len()).then(
                        a.bic
                            .unwrap_or(f64::INFINITY)
                            .total_cmp(&b.bic.unwrap_or(f64::INFINITY)),
                    )
                })
                .map_or(
                    TermStanding {
                        term: t.to_string(),
                        model: None,
                        value: None,
                        sigmas_from_zero: None,
                        delta_bic: None,
                    },
                    |m| standing(t, m, r.bic),
                )
        })
        .collect();
    let list = |v: &[TermStanding]| v.iter().map(standing_text).collect::<Vec<_>>().join(", ");
    let text = match (justified.is_empty(), not_determined.is_empty()) {
        (true, _) => format!(
            "No non-gravitational term is justified; the data leave open {}.",
            list(&not_determined)
        ),
        (false, true) => format!("Justified: {}.", list(&justified)),
        (false, false) => format!(
            "Justified: {}. Not determined: {}.",
            list(&justified),
            list(&not_determined)
        ),
    };
    Some(TermsVerdict {
        justified,
        not_determined,
        text,
    })
}

/// How much one sigma grew from gravity alone to the recommended model.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Growth {
    pub gravity_sigma: f64,
    pub model_sigma: f64,
    /// model_sigma / gravity_sigma.
    pub factor: f64,
}

impl Growth {
    fn of(gravity_sigma: f64, model_sigma: f64) -> Option<Self> {
        (gravity_sigma > 0.0 && model_sigma.is_finite()).then(|| Self {
            gravity_sigma,
            model_sigma,
            factor: model_sigma / gravity_sigma,
        })
    }
}

/// The price of the recommended terms in uncertainty: the sigmas of q, e,
/// the original 1/a and the place a month ahead, against gravity alone.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CostOfHonesty {
    pub model: String,
    pub q_au: Option<Growth>,
    pub e: Option<Growth>,
    pub one_over_a_original_per_au: Option<Growth>,
    /// Semi-major axis of the 1-sigma ellipse [`super::outlook::OUTLOOK_DAYS`]
    /// after the arc, from the geocentre, arcsec.
    pub place_arcsec: Option<Growth>,
    pub place_days_after_arc: Option<f64>,
    /// The same ellipse averaged over the models.
    pub place_averaged_arcsec: Option<f64>,
    pub text: String,
}

/// The cost of honesty, when the recommended model has terms and gravity
/// alone converged.
pub fn cost_of_honesty(
    models: &[ModelDocument],
    outlook: Option<&super::outlook::Outlook>,
) -> Option<CostOfHonesty> {
    let r = recommended(models)?;
    if r.terms.is_empty() {
        return None;
    }
    let g = models.iter().find(|m| m.terms.is_empty() && m.converged)?;
    let element = |m: &ModelDocument, pick: fn(&super::document::ElementsDocument) -> f64| {
        m.elements.as_ref().map(pick)
    };
    let growth = |pick: fn(&super::document::ElementsDocument) -> f64| {
        Growth::of(element(g, pick)?, element(r, pick)?)
    };
    let q_au = growth(|e| e.q_au.sigma);
    let e = growth(|e| e.e.sigma);
    let one_over_a_original_per_au = g
        .one_over_a_original
        .as_ref()
        .zip(r.one_over_a_original.as_ref())
        .and_then(|(a, b)| Growth::of(a.sigma, b.sigma));
    let place_arcsec = outlook.and_then(|o| {
        Growth::of(
            o.of(&g.name)?.semi_major_arcsec,
            o.of(&r.name)?.semi_major_arcsec,
        )
    });
    let mut parts = Vec::new();
    for (name, growth) in [
        ("q", q_au),
        ("e", e),
        ("original 1/a", one_over_a_original_per_au),
    ] {
        if let Some(x) = growth {
            parts.push(format!("sigma of {name} x{:.1}", x.factor));
        }
    }
    if let (Some(x), Some(o)) = (place_arcsec, outlook) {
        parts.push(format!(
            "the place {} days after the arc x{:.1} ({:.2} -> {:.2} arcsec; {:.2} averaged over the models)",
            o.days_after_arc,
            x.factor,
            x.gravity_sigma,
            x.model_sigma,
            o.averaged.semi_major_arcsec
        ));
    }
    let text = format!(
        "The cost of the terms: against gravity alone, {} widens {}.",
        r.name,
        if parts.is_empty() {
            "no uncertainty that could be compared".to_string()
        } else {
            parts.join(", ")
        }
    );
    Some(CostOfHonesty {
        model: r.name.clone(),
        q_au,
        e,
        one_over_a_original_per_au,
        place_arcsec,
        place_days_after_arc: outlook.map(|o| o.days_after_arc),
        place_averaged_arcsec: outlook.map(|o| o.averaged.semi_major_arcsec),
        text,
    })
}

/// A value and its sigma as the report prints them
/// ([`super::numbers::rounded`]).
pub fn value_with_sigma(v: ValueSigma) -> String {
    super::numbers::rounded(v.value, v.sigma)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::solve::document::InverseADocument;

    fn model(
        name: &str,
        terms: &[&str],
        law: Option<&str>,
        bic: f64,
        a: (f64, f64),
    ) -> ModelDocument {
        ModelDocument {
            name: name.into(),
            terms: terms.iter().map(|t| t.to_string()).collect(),
            law: law.map(str::to_string),
            recommended: false,
            converged: true,
            termination: "converged".into(),
            restarted_from: Vec::new(),
            chi2: None,
            dof: None,
            rms_arcsec: None,
            normalized_rms: None,
            bic: Some(bic),
            significant: true,
            test: None,
            test_against_gravity: None,
            elements: None,
            reference_elements: None,
            nongrav: terms
                .iter()
                .map(|t| {
                    (
                        t.to_string(),
                        ValueSigma {
                            value: 1e-8,
                            sigma: 2e-10,
                        },
                    )
                })
                .collect(),
            nongrav_snr: Default::default(),
            one_over_a_original: Some(InverseADocument {
                value: a.0,
                sigma: a.1,
                distance_au: 250.0,
                tdb_jd: 2_451_545.0,
            }),
            one_over_a_future: None,
            problems: Vec::new(),
            rejected: Vec::new(),
            trend: None,
            state: None,
        }
    }

    /// Two laws 0.2 apart in BIC: not determined, and the 1/a figure is
    /// their mixture. The weights are exp(-dBIC/2): 1 and exp(-0.1); the
    /// numbers below are that arithmetic, not from a source.
    #[test]
    fn two_laws_close_in_bic_are_not_told_apart() {
        let mut a = model(
            "A1 water-ice",
            &["A1"],
            Some("water-ice"),
            100.0,
            (2.0e-5, 1.0e-6),
        );
        a.recommended = true;
        let b = model(
            "A1 inverse-square",
            &["A1"],
            Some("inverse-square"),
            100.2,
            (4.0e-5, 1.0e-6),
        );
        let g = model("gravity", &[], None, 160.0, (9.0e-5, 1.0e-6));
        let models = vec![g, a, b];
        let law = law_verdict(&models).unwrap();
        assert!(!law.determined);
        assert_eq!(law.fits.len(), 2);
        assert!(law.text.contains("not determined"), "{}", law.text);
        let w = (-0.1f64).exp();
        let mean = (2.0e-5 + w * 4.0e-5) / (1.0 + w);
        let bound = bound_verdict(&models, Some(&law)).unwrap();
        assert!(bound.averaged);
        assert!((bound.one_over_a_original_per_au.value - mean).abs() < 1e-12);
        // Law of total variance: within 1e-6, spread about 1e-5.
        let var =
            (1e-12 + (2.0e-5 - mean).powi(2) + w * (1e-12 + (4.0e-5 - mean).powi(2))) / (1.0 + w);
        assert!((bound.one_over_a_original_per_au.sigma - var.sqrt()).abs() < 1e-12);
        // Each law alone says bound at 20 sigma or more; their spread says
        // 2.9 sigma: the honest verdict is that it is not determined.
        assert_eq!(bound.verdict, "not_determined");
        // The same pair 7 apart: determined, and the recommended figure.
        let mut far = models.clone();
        far[2].bic = Some(107.0);
        let law = law_verdict(&far).unwrap();
        assert!(law.determined, "{}", law.text);
        let bound = bound_verdict(&far, Some(&law)).unwrap();
        assert!(!bound.averaged);
        assert_eq!(bound.one_over_a_original_per_au.value, 2.0e-5);
    }

    /// The limits are the (normalised RMS 1.5, a tenth rejected,
    /// three nights); the cases are made up around them.
    #[test]
    fn the_verdict_holds_back_when_it_must() {
        let with_rms = |name: &str, terms: &[&str], rms: f64| {
            let mut m = model(
                name,
                terms,
                Some("water-ice").filter(|_| !terms.is_empty()),
                100.0,
                (1e-5, 1e-6),
            );
            m.normalized_rms = Some(rms);
            m
        };
        let mut g = with_rms("gravity", &[], 6.8);
        g.recommended = true;
        g.rejected = (0..60)
            .map(|k| crate::solve::document::RejectedDocument {
                obs_time: format!("2026-01-01T00:{k:02}:00Z"),
                station: "ZQA".into(),
                chi2: 50.0,
            })
            .collect();
        let mut a1 = with_rms("A1 water-ice", &["A1"], 6.5);
        a1.converged = false;
        let r = refusals(&[g.clone(), a1.clone()], 120, 2);
        assert!(r.no_model_explains.is_some());
        assert!(r
            .many_rejected
            .as_deref()
            .is_some_and(|w| w.contains("60 of 120")));
        assert!(r
            .arc_too_short
            .as_deref()
            .is_some_and(|w| w.contains("2 nights")));
        // A good fit over enough nights, few rejected: nothing to hold back.
        g.normalized_rms = Some(0.9);
        g.rejected.truncate(5);
        a1.converged = true;
        a1.normalized_rms = Some(0.9);
        assert!(refusals(&[g.clone(), a1.clone()], 120, 12).is_empty());
        // No non-gravitational fit converged: it cannot say.
        a1.converged = false;
        assert!(refusals(&[g, a1], 120, 12).arc_too_short.is_some());
    }

    /// A fit that looks good only because it threw most of the data away
    /// (the 50% limit: Rousseeuw 1984's breakdown point; the case is made
    /// up around it).
    #[test]
    fn a_fit_of_a_kept_minority_explains_nothing() {
        let mut g = model("gravity", &[], None, 100.0, (1e-5, 1e-6));
        g.recommended = true;
        g.normalized_rms = Some(1.1);
        let reject = |n: usize| {
            (0..n)
                .map(|k| crate::solve::document::RejectedDocument {
                    obs_time: format!("2026-01-01T00:{k:02}:00Z"),
                    station: "ZQA".into(),
                    chi2: 80.0,
                })
                .collect()
        };
        g.rejected = reject(70);
        let r = refusals(std::slice::from_ref(&g), 120, 4);
        let why = r.no_model_explains.expect("a refusal");
        assert!(why.contains("keep only 50 of 120"), "{why}");
        // Half kept is still the data's majority: a warning only.
        g.rejected = reject(60);
        let r = refusals(&[g], 120, 4);
        assert!(r.no_model_explains.is_none());
        assert!(r.many_rejected.is_some());
    }

    #[test]
    fn the_bound_verdict_reads_sigmas_from_zero() {
        let verdict = |v: f64| {
            let mut g = model("gravity", &[], None, 10.0, (v, 1.0e-5));
            g.recommended = true;
            bound_verdict(&[g], None).unwrap()
        };
        assert_eq!(verdict(-5.0e-5).verdict, "unbound");
        assert!(verdict(-5.0e-5).text.starts_with("Came in unbound"));
        assert_eq!(verdict(4.0e-5).verdict, "bound");
        assert_eq!(verdict(2.0e-5).verdict, "not_determined");
        assert!((verdict(4.0e-5).sigmas_from_zero - 4.0).abs() < 1e-9);
    }
}
