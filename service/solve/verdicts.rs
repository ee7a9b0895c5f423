//! What the data decide and what they do not, read off a ladder's models:
//! whether the radial law of the non-gravitational terms is determined,
//! and whether the body came in bound or unbound. Pure functions of the
//! document's models, so the report, the JSON and the alerts say the same.

use serde::Serialize;

use super::document::{ModelDocument, ValueSigma};

/// A BIC difference below this is not strong evidence for one model over
/// another (Kass & Raftery 1995, J. Am. Stat. Assoc. 90, 773, sec. 3.2).
pub const BIC_MARGIN: f64 = 6.0;

/// A value this many sigma from zero is taken as decided (common
/// practice; the alert threshold is configured separately).
pub const DECIDED_SIGMA: f64 = 3.0;

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
                    .map(|(k, v)| format!("{k} = {:.3e} +/- {:.1e}", v.value, v.sigma))
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
    let points: Vec<(f64, ValueSigma)> = models
        .iter()
        .filter(|m| m.converged)
        .filter_map(|m| Some((m.bic?, value(m)?)))
        .filter(|(b, v)| b.is_finite() && v.value.is_finite() && v.sigma.is_finite())
        .collect();
    let best = points.iter().map(|(b, _)| *b).fold(f64::INFINITY, f64::min);
    let weights: Vec<f64> = points
        .iter()
        .map(|(b, _)| (-(b - best) / 2.0).exp())
        .collect();
    let total: f64 = weights.iter().sum();
    if points.is_empty() || total <= 0.0 {
        return None;
    }
    let mean = points
        .iter()
        .zip(&weights)
        .map(|((_, v), w)| w * v.value)
        .sum::<f64>()
        / total;
    let variance = points
        .iter()
        .zip(&weights)
        .map(|((_, v), w)| w * (v.sigma * v.sigma + (v.value - mean).powi(2)))
        .sum::<f64>()
        / total;
    Some(ValueSigma {
        value: mean,
        sigma: variance.sqrt(),
    })
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

/// A value and its sigma, both to two significant figures of the sigma;
/// small numbers in a shared power of ten.
pub fn value_with_sigma(v: ValueSigma) -> String {
    if !(v.sigma.is_finite() && v.sigma > 0.0) {
        return format!("{:.6}", v.value);
    }
    let exponent = v.sigma.log10().floor() as i32;
    if exponent < -3 && v.value.abs() < 1e-2 {
        let scale = 10f64.powi(exponent);
        format!(
            "({:.1} +/- {:.1})e{exponent}",
            v.value / scale,
            v.sigma / scale
        )
    } else {
        let decimals = (1 - exponent).max(0) as usize;
        format!("{:.*} +/- {:.*}", decimals, v.value, decimals, v.sigma)
    }
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
