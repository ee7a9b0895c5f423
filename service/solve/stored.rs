//! A stored solution document read back: a model's fit rebuilt from its
//! state and covariance (so predictions and consistency checks need no
//! refit), and the brightness law it preferred.
//!
//! The stored document is the JSON the `fit` command prints; only the
//! fields needed here are read, so the document may grow without breaking
//! this.

use nalgebra::{DMatrix, DVector, Vector3};
use serde::Deserialize;
use serde_json::Value;

use crate::astro::ephemeris::StateVector;
use crate::astro::forces::{DistanceLaw, ForceModel, FreeParameters, NonGravModel};
use crate::astro::time::Epoch;
use crate::fit::ladder::law_name;
use crate::fit::lsq::{OrbitFit, Termination};
use crate::fit::photometry::MagnitudeLaw;

use super::document::{StateDocument, ValueSigma};

#[derive(Debug, thiserror::Error, PartialEq)]
pub enum StoredError {
    #[error("the solution has no document (its fit failed)")]
    NoDocument,
    #[error("the solution recommends no model")]
    NoRecommendation,
    #[error("no model '{wanted}' in the solution; it has: {have}")]
    UnknownModel { wanted: String, have: String },
    #[error("model '{0}' did not converge, so it has no orbit to predict from")]
    NotConverged(String),
    #[error("model '{model}': {why}")]
    Malformed { model: String, why: String },
}

#[derive(Deserialize)]
struct StoredModel {
    name: String,
    terms: Vec<String>,
    law: Option<String>,
    converged: bool,
    state: Option<StateDocument>,
    chi2: Option<f64>,
    dof: Option<usize>,
    rms_arcsec: Option<f64>,
    normalized_rms: Option<f64>,
}

/// The names of a document's models.
fn model_names(doc: &Value) -> Vec<String> {
    doc["models"]
        .as_array()
        .map(|a| {
            a.iter()
                .filter_map(|m| m["name"].as_str().map(str::to_string))
                .collect()
        })
        .unwrap_or_default()
}

/// The fit of `model` (the recommended one when None) of a stored
/// document, under `gravity` and with the configured laws (which carry a
/// scaled law's r0).
pub fn model_fit(
    document: Option<&Value>,
    model: Option<&str>,
    gravity: &ForceModel,
    laws: &[DistanceLaw],
) -> Result<(String, OrbitFit), StoredError> {
    let doc = document.ok_or(StoredError::NoDocument)?;
    let wanted = match model {
        Some(m) => m.to_string(),
        None => doc["recommended"]
            .as_str()
            .ok_or(StoredError::NoRecommendation)?
            .to_string(),
    };
    let raw = doc["models"]
        .as_array()
        .and_then(|a| {
            a.iter()
                .find(|m| m["name"].as_str() == Some(wanted.as_str()))
        })
        .ok_or_else(|| StoredError::UnknownModel {
            wanted: wanted.clone(),
            have: model_names(doc).join(", "),
        })?;
    let malformed = |why: String| StoredError::Malformed {
        model: wanted.clone(),
        why,
    };
    let m: StoredModel =
        serde_json::from_value(raw.clone()).map_err(|e| malformed(e.to_string()))?;
    if !m.converged {
        return Err(StoredError::NotConverged(m.name));
    }
    let state = m
        .state
        .ok_or_else(|| malformed("no state was stored".into()))?;
    let free = FreeParameters::new(
        m.terms.iter().any(|t| t == "A1"),
        m.terms.iter().any(|t| t == "A2"),
        m.terms.iter().any(|t| t == "A3"),
    );
    let n = 6 + free.count();
    if state.values.len() != n {
        return Err(malformed(format!(
            "{} parameter values for {n} parameters",
            state.values.len()
        )));
    }
    let v = &state.values;
    let mut a = [0.0; 3];
    let mut nongrav = Vec::new();
    for (j, c) in free.indices().enumerate() {
        a[c] = v[6 + j];
        nongrav.push((c, v[6 + j]));
    }
    let force = match &m.law {
        None => gravity.without_nongrav(),
        Some(name) => {
            let law = laws
                .iter()
                .copied()
                .find(|l| law_name(*l) == name)
                .or(match name.as_str() {
                    "water-ice" => Some(DistanceLaw::WaterIce),
                    "inverse-square" => Some(DistanceLaw::InverseSquare),
                    _ => None,
                })
                .ok_or_else(|| malformed(format!("law '{name}' is not configured")))?;
            gravity
                .without_nongrav()
                .with_nongrav(NonGravModel::new(law, a, free))
                .map_err(|e| malformed(e.to_string()))?
        }
    };
    let covariance = match &state.covariance {
        None => None,
        Some(rows) => {
            if rows.len() != n || rows.iter().any(|r| r.len() != n) {
                return Err(malformed(format!("the covariance is not {n} x {n}")));
            }
            Some(DMatrix::from_fn(n, n, |i, j| rows[i][j]))
        }
    };
    let fit = OrbitFit {
        epoch: Epoch::from_tdb_days_since_j2000(state.epoch_tdb_days_j2000),
        state: StateVector::new(
            Vector3::new(v[0], v[1], v[2]),
            Vector3::new(v[3], v[4], v[5]),
        ),
        nongrav_au_per_day2: nongrav,
        model: force,
        parameters: DVector::from_column_slice(v),
        covariance,
        chi2: m.chi2.unwrap_or(f64::NAN),
        dof: m.dof.unwrap_or(0),
        rms_arcsec: m.rms_arcsec.unwrap_or(f64::NAN),
        normalised_rms: m.normalized_rms.unwrap_or(f64::NAN),
        residuals: Vec::new(),
        iterations: 0,
        outlier_passes: 0,
        termination: Termination::Converged,
    };
    Ok((m.name, fit))
}

/// Every converged model of a stored document with its BIC and fit, in
/// the document's order: the candidates of a model average.
pub fn converged_fits(
    document: Option<&Value>,
    gravity: &ForceModel,
    laws: &[DistanceLaw],
) -> Result<Vec<(String, Option<f64>, OrbitFit)>, StoredError> {
    let doc = document.ok_or(StoredError::NoDocument)?;
    let mut out = Vec::new();
    for m in doc["models"].as_array().into_iter().flatten() {
        if m["converged"].as_bool() != Some(true) {
            continue;
        }
        let Some(name) = m["name"].as_str() else {
            continue;
        };
        let (name, fit) = model_fit(Some(doc), Some(name), gravity, laws)?;
        out.push((name, m["bic"].as_f64(), fit));
    }
    Ok(out)
}

/// The brightness law the stored solution preferred, if any.
pub fn magnitude_law(document: &Value) -> Option<MagnitudeLaw> {
    let p = &document["photometry"];
    let get = |law: &str, key: &str| -> Option<f64> {
        serde_json::from_value::<ValueSigma>(p[law][key].clone())
            .ok()
            .map(|v| v.value)
    };
    match p["preferred"].as_str()? {
        "total" => Some(MagnitudeLaw::Total {
            m1: get("total", "m1")?,
            k1: get("total", "k1")?,
        }),
        "hg" => Some(MagnitudeLaw::Hg {
            h: get("hg", "h")?,
            g: get("hg", "g")?,
        }),
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::astro::ephemeris::Body;
    use crate::fit::predict::{predict_places, PredictSettings, PredictionPoint};
    use crate::fit::test_support::{outgassing_ladder, shell, WobblingSun};
    use crate::solve::document::SolutionDocument;
    use crate::solve::test_support::solution_of;

    /// A stored document gives back the recommended fit exactly (JSON
    /// numbers round-trip f64 exactly), and the same predictions.
    #[test]
    fn a_stored_model_predicts_as_the_fit_did() {
        let (observations, ladder) = outgassing_ladder(0);
        let solution = solution_of(observations, ladder);
        let doc = SolutionDocument::of_solution(&solution, "test".into(), None, None);
        let value = serde_json::to_value(&doc).unwrap();
        let gravity = ForceModel::new(&[Body::Jupiter], false, None).unwrap();
        let (name, stored) = model_fit(Some(&value), None, &gravity, &[]).unwrap();
        let original = solution.recommended_fit().unwrap();
        assert_eq!(Some(name), doc.recommended);
        assert_eq!(stored.parameters, original.parameters);
        assert_eq!(stored.covariance, original.covariance);
        assert_eq!(stored.epoch, original.epoch);
        let points: Vec<PredictionPoint> = (0..3)
            .map(|i| {
                let o = shell(
                    original.epoch.plus_days(150.0 + 10.0 * i as f64),
                    "ZQA",
                    17.0,
                );
                PredictionPoint {
                    time: o.time,
                    observer: o.observer,
                }
            })
            .collect();
        let settings = PredictSettings::default();
        let a = predict_places(&WobblingSun, original, &points, &settings).unwrap();
        let b = predict_places(&WobblingSun, &stored, &points, &settings).unwrap();
        assert_eq!(a, b);
    }

    #[test]
    fn what_cannot_be_predicted_from_says_why() {
        let gravity = ForceModel::gravity();
        assert_eq!(
            model_fit(None, None, &gravity, &[]).unwrap_err(),
            StoredError::NoDocument
        );
        let doc = serde_json::json!({"recommended": null, "models": []});
        assert_eq!(
            model_fit(Some(&doc), None, &gravity, &[]).unwrap_err(),
            StoredError::NoRecommendation
        );
        let e = model_fit(Some(&doc), Some("A9"), &gravity, &[]).unwrap_err();
        assert!(matches!(e, StoredError::UnknownModel { .. }), "{e}");
    }
}
