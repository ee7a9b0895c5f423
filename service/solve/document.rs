//! A solution as one JSON document: what `perihelix fit --json` prints and
//! the API serves. Units are in the field names, every estimate is
//! `{ "value": x, "sigma": s }`, elements are heliocentric ecliptic J2000
//! and osculating at `elements_epoch_tdb_jd`.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use crate::fit::ladder::{law_name, ModelFit, ModelTest, TestForm};
use crate::fit::lsq::OrbitFit;
use crate::fit::observe::AstrometricObservation;
use crate::fit::solution::{DistantInverseA, ElementEstimates, Estimate, TrendTest};

use super::brightness::BrightnessDocument;
use super::catalog_bias::BiasSummary;
use super::{ModelDerived, RecordsSolved, Solution};

/// Days from JD 0 to J2000 (JD 2451545.0 TDB).
const J2000_JD: f64 = 2_451_545.0;

#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ValueSigma {
    pub value: f64,
    pub sigma: f64,
}

impl From<Estimate> for ValueSigma {
    fn from(e: Estimate) -> Self {
        Self {
            value: e.value,
            sigma: e.sigma,
        }
    }
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SolutionDocument {
    pub object: String,
    pub n_obs: usize,
    /// Observations in the common set the models were compared on.
    pub n_used: usize,
    pub arc_days: f64,
    pub first_obs_utc: String,
    pub last_obs_utc: String,
    /// The epoch of the fitted state.
    pub epoch_tdb_jd: f64,
    /// The epoch of the reported elements.
    pub elements_epoch_tdb_jd: f64,
    /// The epoch of each model's `reference_elements` (the daemon's fixed
    /// per-object epoch), when there is one.
    pub reference_epoch_tdb_jd: Option<f64>,
    /// The largest Bonferroni-corrected significance of any
    /// non-gravitational model against gravity alone, Gaussian sigma; null
    /// when the comparison could not be made (never 0 for unknown).
    pub ng_significance_sigma: Option<f64>,
    /// Why `ng_significance_sigma` is null.
    pub ng_significance_unknown: Option<String>,
    /// Name of the recommended model.
    pub recommended: Option<String>,
    /// Non-gravitational models tried (the Bonferroni factor).
    pub alternatives: usize,
    /// A model an analyst pinned (recommended whenever it converges).
    pub pinned_model: Option<String>,
    /// Whether the recommendation is the analyst's pin rather than the
    /// tests'.
    pub recommended_by_pin: bool,
    pub initial_orbit: InitialDocument,
    pub ephemeris: String,
    /// What the configured star-catalogue bias table corrected (absent
    /// when none is configured).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub catalog_bias: Option<BiasSummary>,
    /// The brightness laws at the recommended orbit, when magnitudes came
    /// with the astrometry.
    pub photometry: Option<BrightnessDocument>,
    pub models: Vec<ModelDocument>,
    /// Whether the data choose the recommended terms' radial law (absent
    /// without terms, or without a rival law that converged).
    pub law: Option<super::verdicts::LawVerdict>,
    /// Came in bound or not, on the original barycentric 1/a.
    pub bound: Option<super::verdicts::BoundVerdict>,
    /// Which non-gravitational terms are justified and which are not
    /// determined (absent when the ladder tried none).
    pub terms: Option<super::verdicts::TermsVerdict>,
    /// The place a month after the arc under each model and averaged.
    pub outlook: Option<super::outlook::Outlook>,
    /// What the recommended terms cost in uncertainty against gravity
    /// alone (absent when gravity alone is recommended).
    pub cost_of_honesty: Option<super::verdicts::CostOfHonesty>,
    /// Where the verdict holds back (nothing fits, many rejected, an arc
    /// too short for non-gravitational terms).
    pub refusals: super::verdicts::Refusals,
    /// Each station's share of the observations, and the astrometric
    /// sigma it typically stated (what a plan assumes for it).
    pub stations: Vec<StationUse>,
    /// Every observation's residual under the recommended model, in the
    /// order the fit saw them (empty when no model is recommended).
    pub residuals: Vec<ResidualDocument>,
    /// The same under gravity alone, when another model is recommended
    /// and gravity alone converged: side by side with `residuals` they
    /// show the trend the extra terms absorb. Empty otherwise.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub gravity_residuals: Vec<ResidualDocument>,
}

/// One station's observations in the fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StationUse {
    pub station: String,
    pub observations: usize,
    /// The median of the larger of each observation's stated RA and Dec
    /// sigmas; None when none stated one.
    pub median_sigma_arcsec: Option<f64>,
}

/// Each station's count and median stated sigma, by code.
pub fn station_use(observations: &[AstrometricObservation]) -> Vec<StationUse> {
    let mut by: BTreeMap<&str, (usize, Vec<f64>)> = BTreeMap::new();
    for o in observations {
        let entry = by.entry(o.station.as_str()).or_default();
        entry.0 += 1;
        if let (Some(a), Some(d)) = (o.sigma_ra_arcsec, o.sigma_dec_arcsec) {
            let s = a.max(d);
            if s.is_finite() && s > 0.0 {
                entry.1.push(s);
            }
        }
    }
    by.into_iter()
        .map(|(station, (observations, mut sigmas))| {
            sigmas.sort_by(f64::total_cmp);
            StationUse {
                station: station.to_string(),
                observations,
                median_sigma_arcsec: sigmas.get(sigmas.len() / 2).copied(),
            }
        })
        .collect()
}

/// One observation's place in the recommended fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ResidualDocument {
    pub obs_time: String,
    pub station: String,
    /// O - C in RA cos Dec and in Dec, arcsec.
    pub ra_cos_dec_arcsec: f64,
    pub dec_arcsec: f64,
    /// The observation's chi^2 against the fit (see the fit's outlier
    /// rules): used ones with their own weight removed, rejected ones
    /// with the orbit's uncertainty added.
    pub chi2: f64,
    pub used: bool,
}

/// A fitted model's parameters and their full covariance at the fit
/// epoch: enough to predict from the model again without refitting.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StateDocument {
    /// The fit epoch, TDB days since J2000 (JD 2451545.0 TDB); a whole day
    /// is exact in one number, unlike a Julian date.
    pub epoch_tdb_days_j2000: f64,
    /// Parameter names in the order of `values` and `covariance`:
    /// x_au, y_au, z_au, vx_au_per_day, vy_au_per_day, vz_au_per_day
    /// (heliocentric, ICRF axes), then the free A_i in au/day^2.
    pub parameters: Vec<String>,
    pub values: Vec<f64>,
    /// Row-major; null when the normal matrix was singular.
    pub covariance: Option<Vec<Vec<f64>>>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct InitialDocument {
    pub method: String,
    pub rms_arcsec: f64,
    pub scored_observations: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModelDocument {
    pub name: String,
    pub terms: Vec<String>,
    pub law: Option<String>,
    pub recommended: bool,
    pub converged: bool,
    /// Why the fit stopped ("converged", or the failure reason).
    pub termination: String,
    /// The models whose states this one was refitted from, in order,
    /// after failing from its own start (empty when it was not).
    pub restarted_from: Vec<String>,
    pub chi2: Option<f64>,
    pub dof: Option<usize>,
    pub rms_arcsec: Option<f64>,
    pub normalized_rms: Option<f64>,
    pub bic: Option<f64>,
    /// Every term and the test against the parent reach the threshold.
    pub significant: bool,
    pub test: Option<TestDocument>,
    pub test_against_gravity: Option<TestDocument>,
    pub elements: Option<ElementsDocument>,
    /// The same elements at the reference epoch, when there is one.
    pub reference_elements: Option<ElementsDocument>,
    pub nongrav: BTreeMap<String, ValueSigma>,
    /// |A_i| / sigma(A_i).
    pub nongrav_snr: BTreeMap<String, f64>,
    pub one_over_a_original: Option<InverseADocument>,
    pub one_over_a_future: Option<InverseADocument>,
    /// Why a derived quantity is missing, when it failed.
    pub problems: Vec<String>,
    pub rejected: Vec<RejectedDocument>,
    pub trend: Option<TrendDocument>,
    /// The fitted parameters and covariance (converged models only).
    pub state: Option<StateDocument>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TestDocument {
    /// The simpler model's name.
    pub against: String,
    pub form: &'static str,
    pub delta_chi2: f64,
    pub delta_k: usize,
    /// log10 of the Bonferroni-corrected p-value.
    pub log10_p_corrected: f64,
    pub sigma: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ElementsDocument {
    pub q_au: ValueSigma,
    pub e: ValueSigma,
    pub i_deg: ValueSigma,
    pub node_deg: ValueSigma,
    pub peri_deg: ValueSigma,
    pub tp_tdb_jd: ValueSigma,
    /// Heliocentric osculating 1/a (negative for hyperbolas).
    pub one_over_a_per_au: ValueSigma,
    /// (e - 1) / sigma(e).
    pub e_minus_one_sigmas: f64,
    /// Null for bound orbits.
    pub v_inf_km_s: Option<ValueSigma>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct InverseADocument {
    pub value: f64,
    pub sigma: f64,
    /// Barycentric distance where it was taken (below 250 au when the
    /// ephemeris ended first).
    pub distance_au: f64,
    pub tdb_jd: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RejectedDocument {
    pub obs_time: String,
    pub station: String,
    pub chi2: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TrendDocument {
    pub nights: usize,
    pub slope_ra_arcsec_per_day: ValueSigma,
    pub slope_dec_arcsec_per_day: ValueSigma,
    pub chi2: f64,
    pub p_value: f64,
}

pub fn term_name(component: usize) -> String {
    format!("A{}", component + 1)
}

fn test_document(t: &ModelTest, models: &[ModelFit]) -> TestDocument {
    TestDocument {
        against: models[t.against].name(),
        form: match t.form {
            TestForm::ChiSquare => "chi-square",
            TestForm::F => "F",
        },
        delta_chi2: t.delta_chi2,
        delta_k: t.delta_k,
        log10_p_corrected: t.ln_p_corrected / std::f64::consts::LN_10,
        sigma: t.sigma,
    }
}

fn elements_document(e: &ElementEstimates) -> ElementsDocument {
    ElementsDocument {
        q_au: e.q_au.into(),
        e: e.e.into(),
        i_deg: e.i_deg.into(),
        node_deg: e.node_deg.into(),
        peri_deg: e.peri_deg.into(),
        tp_tdb_jd: ValueSigma {
            value: e.tp_tdb_days.value + J2000_JD,
            sigma: e.tp_tdb_days.sigma,
        },
        one_over_a_per_au: e.inverse_a_per_au.into(),
        e_minus_one_sigmas: e.e_minus_one_sigmas,
        v_inf_km_s: e.v_inf_km_s.map(Into::into),
    }
}

fn inverse_a_document(d: &DistantInverseA) -> InverseADocument {
    InverseADocument {
        value: d.inverse_a_per_au.value,
        sigma: d.inverse_a_per_au.sigma,
        distance_au: d.distance_au,
        tdb_jd: d.at.tdb_jd(),
    }
}

fn trend_document(t: &TrendTest) -> TrendDocument {
    TrendDocument {
        nights: t.nights,
        slope_ra_arcsec_per_day: t.slope_arcsec_per_day[0].into(),
        slope_dec_arcsec_per_day: t.slope_arcsec_per_day[1].into(),
        chi2: t.chi2,
        p_value: t.p_value,
    }
}

/// The fitted A_i with sigmas from the covariance (rows 6.. in order).
pub fn nongrav_estimates(fit: &OrbitFit) -> Vec<(usize, ValueSigma)> {
    fit.nongrav_au_per_day2
        .iter()
        .enumerate()
        .map(|(j, (component, value))| {
            let sigma = fit
                .covariance
                .as_ref()
                .map_or(f64::NAN, |c| c[(6 + j, 6 + j)].max(0.0).sqrt());
            (
                *component,
                ValueSigma {
                    value: *value,
                    sigma,
                },
            )
        })
        .collect()
}

/// Names of a fit's parameters, in its order.
fn parameter_names(fit: &OrbitFit) -> Vec<String> {
    let mut names: Vec<String> = [
        "x_au",
        "y_au",
        "z_au",
        "vx_au_per_day",
        "vy_au_per_day",
        "vz_au_per_day",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    names.extend(
        fit.nongrav_au_per_day2
            .iter()
            .map(|(c, _)| format!("{}_au_per_day2", term_name(*c))),
    );
    names
}

pub fn state_document(fit: &OrbitFit) -> StateDocument {
    StateDocument {
        epoch_tdb_days_j2000: fit.epoch.tdb_days_since_j2000(),
        parameters: parameter_names(fit),
        values: fit.parameters.iter().copied().collect(),
        covariance: fit.covariance.as_ref().map(|c| {
            (0..c.nrows())
                .map(|i| (0..c.ncols()).map(|j| c[(i, j)]).collect())
                .collect()
        }),
    }
}

pub fn residuals(fit: &OrbitFit, observations: &[AstrometricObservation]) -> Vec<ResidualDocument> {
    fit.residuals
        .iter()
        .zip(observations)
        .map(|(r, o)| ResidualDocument {
            obs_time: o.time.utc().to_iso8601(3),
            station: o.station.clone(),
            ra_cos_dec_arcsec: r.residual_arcsec[0],
            dec_arcsec: r.residual_arcsec[1],
            chi2: r.chi2,
            used: r.used,
        })
        .collect()
}

pub fn rejected(fit: &OrbitFit, observations: &[AstrometricObservation]) -> Vec<RejectedDocument> {
    fit.residuals
        .iter()
        .zip(observations)
        .filter(|(r, _)| !r.used)
        .map(|(r, o)| RejectedDocument {
            obs_time: o.time.utc().to_iso8601(3),
            station: o.station.clone(),
            chi2: r.chi2,
        })
        .collect()
}

fn model_document(
    m: &ModelFit,
    derived: Option<&ModelDerived>,
    models: &[ModelFit],
    observations: &[AstrometricObservation],
) -> ModelDocument {
    let fit = m.fit.as_ref().ok();
    let mut problems = Vec::new();
    let mut take = |what: &str, r: &Result<Option<DistantInverseA>, String>| match r {
        Ok(v) => v.as_ref().map(inverse_a_document),
        Err(e) => {
            problems.push(format!("{what}: {e}"));
            None
        }
    };
    let (original, future) = match derived {
        Some(d) => (
            take("original 1/a", &d.original),
            take("future 1/a", &d.future),
        ),
        None => (None, None),
    };
    let elements = derived.and_then(|d| match &d.elements {
        Ok(e) => Some(elements_document(e)),
        Err(e) => {
            problems.push(format!("elements: {e}"));
            None
        }
    });
    let reference_elements = derived.and_then(|d| match d.reference_elements.as_ref()? {
        Ok(e) => Some(elements_document(e)),
        Err(e) => {
            problems.push(format!("elements at the reference epoch: {e}"));
            None
        }
    });
    let nongrav = fit.map(nongrav_estimates).unwrap_or_default();
    ModelDocument {
        name: m.name(),
        terms: m.free.indices().map(term_name).collect(),
        law: m.law.map(|l| law_name(l).to_string()),
        recommended: m.recommended,
        converged: m.converged(),
        termination: m.termination_text(),
        restarted_from: m.restarted_from.iter().map(|j| models[*j].name()).collect(),
        chi2: fit.map(|f| f.chi2),
        dof: fit.map(|f| f.dof),
        rms_arcsec: fit.map(|f| f.rms_arcsec),
        normalized_rms: fit.map(|f| f.normalised_rms),
        bic: m.bic,
        significant: m.significant,
        test: m.test.as_ref().map(|t| test_document(t, models)),
        test_against_gravity: m
            .test_against_gravity
            .as_ref()
            .map(|t| test_document(t, models)),
        elements,
        reference_elements,
        nongrav_snr: m
            .term_sigmas
            .iter()
            .map(|(c, s)| (term_name(*c), *s))
            .collect(),
        nongrav: nongrav
            .into_iter()
            .map(|(c, v)| (term_name(c), v))
            .collect(),
        one_over_a_original: original,
        one_over_a_future: future,
        problems,
        rejected: fit.map(|f| rejected(f, observations)).unwrap_or_default(),
        trend: derived.and_then(|d| d.trend.as_ref()).map(trend_document),
        state: m.converged_fit().map(state_document),
    }
}

impl SolutionDocument {
    pub fn new(solved: &RecordsSolved) -> Self {
        let mut doc = Self::of_solution(
            &solved.solution,
            solved.ephemeris.describe(),
            solved.catalog_bias.clone(),
            solved.brightness.clone(),
        );
        doc.cost_of_honesty =
            super::verdicts::cost_of_honesty(&doc.models, solved.outlook.as_ref());
        doc.outlook = solved.outlook.clone();
        doc
    }

    /// The document of a solution with what came with it: the ephemeris'
    /// description, the catalogue bias summary and the brightness laws.
    pub fn of_solution(
        solution: &Solution,
        ephemeris: String,
        catalog_bias: Option<BiasSummary>,
        photometry: Option<BrightnessDocument>,
    ) -> Self {
        let ladder = &solution.ladder;
        let method = match &solution.initial.method {
            crate::fit::initial::Method::Gauss { .. } => "gauss",
            crate::fit::initial::Method::Ranging { .. } => "ranging",
        };
        let utc = |t: &AstrometricObservation| t.time.utc().to_iso8601(3);
        let by_time = |pick_last: bool| {
            solution
                .observations
                .iter()
                .reduce(|a, b| {
                    let later = b.time.tdb() > a.time.tdb();
                    if later == pick_last {
                        b
                    } else {
                        a
                    }
                })
                .map(utc)
                .unwrap_or_default()
        };
        let models: Vec<ModelDocument> = ladder
            .models
            .iter()
            .zip(&solution.derived)
            .map(|(m, d)| model_document(m, d.as_ref(), &ladder.models, &solution.observations))
            .collect();
        let law = super::verdicts::law_verdict(&models);
        let bound = super::verdicts::bound_verdict(&models, law.as_ref());
        let terms = super::verdicts::terms_verdict(&models);
        let cost_of_honesty = super::verdicts::cost_of_honesty(&models, None);
        let nights = solution
            .observations
            .iter()
            .map(|o| o.time.utc().calendar_date())
            .collect::<std::collections::BTreeSet<_>>()
            .len();
        let refusals = super::verdicts::refusals(&models, solution.observations.len(), nights);
        Self {
            object: solution.object.clone(),
            n_obs: solution.observations.len(),
            n_used: ladder.used.iter().filter(|u| **u).count(),
            arc_days: solution.arc_days(),
            first_obs_utc: by_time(false),
            last_obs_utc: by_time(true),
            epoch_tdb_jd: solution.epoch.tdb_jd(),
            elements_epoch_tdb_jd: solution.elements_epoch.tdb_jd(),
            reference_epoch_tdb_jd: solution.reference_epoch.map(|e| e.tdb_jd()),
            ng_significance_sigma: ladder.ng_significance.sigma(),
            ng_significance_unknown: ladder.ng_significance.unknown_reason().map(str::to_string),
            recommended: ladder.recommended_model().map(ModelFit::name),
            alternatives: ladder.alternatives,
            pinned_model: solution.pinned_model.clone(),
            recommended_by_pin: solution.pinned_model.is_some()
                && ladder.recommended_model().map(ModelFit::name) == solution.pinned_model,
            initial_orbit: InitialDocument {
                method: method.into(),
                rms_arcsec: solution.initial.rms_arcsec,
                scored_observations: solution.initial.scored_observations,
            },
            ephemeris,
            catalog_bias,
            photometry,
            models,
            law,
            bound,
            terms,
            outlook: None,
            cost_of_honesty,
            refusals,
            stations: station_use(&solution.observations),
            residuals: solution
                .recommended_fit()
                .map(|f| residuals(f, &solution.observations))
                .unwrap_or_default(),
            gravity_residuals: solution
                .gravity_fit()
                .filter(|_| ladder.recommended.is_some_and(|r| r != 0))
                .map(|f| residuals(f, &solution.observations))
                .unwrap_or_default(),
        }
    }
}
