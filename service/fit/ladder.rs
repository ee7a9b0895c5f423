//! The model ladder: gravity alone, then each configured set of A_i under
//! each distance law, all on the same observations, and the decision which
//! model the data justify.
//!
//! 1. Every model is fitted with outlier rejection, warm-started from the
//!    richest model below it (its state, its A_i, its used set).
//! 2. The rejections of the richest model that converged (most parameters,
//!    then lowest chi^2) are imposed on all the others, which are refitted
//!    with rejection off: delta chi^2 and BIC then compare the same data.
//! 3. Each non-gravitational model is tested against its parent, the
//!    richest model whose terms are a strict subset of its own (gravity for
//!    one-term models): delta chi^2 ~ chi^2(delta k) when the weights are
//!    right, the F form (delta chi^2 / delta k) / (chi^2 / dof) when the
//!    richer model's normalised RMS exceeds [`LadderSettings::f_test_above_nrms`].
//!    The p-value is multiplied by the number of non-gravitational models
//!    tried (Bonferroni) and turned into an equivalent Gaussian sigma.
//! 4. A model's terms are significant when each |A_i| / sigma(A_i) reaches
//!    the threshold and its corrected test against its parent does too; the
//!    recommended model is the lowest BIC = chi^2 + k ln N among gravity and
//!    the models whose terms are all significant.
//! 5. A model that did not converge on the common set is refitted once
//!    more from the states of the converged models nearest to it (fewest
//!    terms differing, then lowest chi^2), with the A_i it shares with
//!    them: gravity from the best one-term fits with their A_i set to
//!    zero. No test is ever computed against a model that did not
//!    converge.
//! 6. The headline "non-gravitational significance" is the largest
//!    corrected significance of any non-gravitational model against gravity
//!    alone: how strongly the data refuse gravity alone. When gravity alone
//!    or every non-gravitational model failed, it is unknown, with the
//!    reason, never zero.

use crate::astro::ephemeris::{Ephemeris, StateVector};
use crate::astro::forces::{DistanceLaw, ForceModel, FreeParameters, NonGravModel};
use crate::astro::time::Epoch;

use super::lsq::{
    fit_orbit_observed, observer_places, FitError, FitProblem, FitSettings, OrbitFit, Termination,
};
use super::observe::{AstrometricObservation, ObserverAt};
use super::stats::{bonferroni_ln_p, chi2_ln_sf, f_ln_sf, sigma_of_ln_p};

/// Term names in component order.
pub const TERM_NAMES: [&str; 3] = ["A1", "A2", "A3"];

#[derive(Debug, Clone, PartialEq)]
pub struct LadderSettings {
    /// Non-gravitational rungs above gravity (gravity is always fitted).
    pub rungs: Vec<FreeParameters>,
    pub laws: Vec<DistanceLaw>,
    /// Sigma a term and its test must reach to count as significant.
    pub significance_sigma: f64,
    /// Above this normalised RMS the F form of the test is used.
    pub f_test_above_nrms: f64,
    pub fit: FitSettings,
    /// Models (by name, e.g. "A1+A2+A3 water-ice") an analyst has taken
    /// off the ladder. Gravity alone, the reference of every test, cannot
    /// be.
    pub excluded: Vec<String>,
    /// A model an analyst has pinned: recommended whenever it converges,
    /// whatever the tests say (the tests are still reported).
    pub pinned: Option<String>,
}

impl Default for LadderSettings {
    fn default() -> Self {
        Self {
            rungs: vec![
                FreeParameters::new(false, true, false),
                FreeParameters::new(true, false, false),
                FreeParameters::new(true, true, false),
                FreeParameters::new(true, true, true),
            ],
            laws: vec![DistanceLaw::WaterIce, DistanceLaw::InverseSquare],
            significance_sigma: 3.0,
            f_test_above_nrms: 1.2,
            fit: FitSettings::default(),
            excluded: Vec::new(),
            pinned: None,
        }
    }
}

/// The name a law goes by in configuration and reports.
pub fn law_name(law: DistanceLaw) -> &'static str {
    match law {
        DistanceLaw::WaterIce => "water-ice",
        DistanceLaw::WaterIceScaled { .. } => "water-ice-scaled",
        DistanceLaw::InverseSquare => "inverse-square",
    }
}

/// "gravity", "A2", "A1+A2", ...
pub fn terms_name(free: FreeParameters) -> String {
    if free.count() == 0 {
        return "gravity".to_string();
    }
    free.indices()
        .map(|i| TERM_NAMES[i])
        .collect::<Vec<_>>()
        .join("+")
}

/// "gravity", "A1 water-ice", "A1+A2 inverse-square", ...: a model's name
/// in reports, the configuration and analysts' overrides.
pub fn model_name(free: FreeParameters, law: Option<DistanceLaw>) -> String {
    match law {
        None => terms_name(free),
        Some(law) => format!("{} {}", terms_name(free), law_name(law)),
    }
}

/// Which form the likelihood-ratio test took.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TestForm {
    ChiSquare,
    F,
}

/// A model tested against a simpler one.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelTest {
    /// Index of the simpler model in [`Ladder::models`].
    pub against: usize,
    pub delta_chi2: f64,
    pub delta_k: usize,
    pub form: TestForm,
    /// ln p before and after the Bonferroni correction.
    pub ln_p: f64,
    pub ln_p_corrected: f64,
    /// Equivalent two-sided Gaussian sigma of the corrected p.
    pub sigma: f64,
}

/// One model of the ladder.
#[derive(Debug, Clone)]
pub struct ModelFit {
    pub free: FreeParameters,
    /// None for gravity alone.
    pub law: Option<DistanceLaw>,
    /// The fit on the common observation set; Err with the reason when it
    /// could not be made.
    pub fit: Result<OrbitFit, String>,
    /// Against the parent model.
    pub test: Option<ModelTest>,
    /// Against gravity alone.
    pub test_against_gravity: Option<ModelTest>,
    /// Indices of the converged models whose states the fit was restarted
    /// from, in order, after it failed from its own start (see the module
    /// notes); empty when it was not restarted.
    pub restarted_from: Vec<usize>,
    /// |A_i| / sigma(A_i) per free term, in component order.
    pub term_sigmas: Vec<(usize, f64)>,
    /// Every term and the parent test reach the threshold.
    pub significant: bool,
    /// chi^2 + k ln N.
    pub bic: Option<f64>,
    pub recommended: bool,
}

impl ModelFit {
    pub fn name(&self) -> String {
        model_name(self.free, self.law)
    }

    pub fn parameter_count(&self) -> usize {
        6 + self.free.count()
    }

    pub fn converged(&self) -> bool {
        matches!(&self.fit, Ok(f) if f.termination == Termination::Converged)
    }

    /// The fit when it converged.
    pub fn converged_fit(&self) -> Option<&OrbitFit> {
        self.fit
            .as_ref()
            .ok()
            .filter(|f| f.termination == Termination::Converged)
    }

    /// Why the fit stopped: "converged" or the reason it failed.
    pub fn termination_text(&self) -> String {
        match &self.fit {
            Ok(f) => f.termination.to_string(),
            Err(reason) => reason.clone(),
        }
    }
}

/// How strongly the data refuse gravity alone, or why that cannot be said.
#[derive(Debug, Clone, PartialEq)]
pub enum Significance {
    /// The largest Bonferroni-corrected significance of any
    /// non-gravitational model against gravity alone, Gaussian sigma.
    Sigma(f64),
    /// The comparison could not be made.
    Unknown { reason: String },
}

impl Significance {
    /// The figure, when there is one: unknown is never read as zero.
    pub fn sigma(&self) -> Option<f64> {
        match self {
            Self::Sigma(s) => Some(*s),
            Self::Unknown { .. } => None,
        }
    }

    pub fn unknown_reason(&self) -> Option<&str> {
        match self {
            Self::Sigma(_) => None,
            Self::Unknown { reason } => Some(reason),
        }
    }
}

#[derive(Debug, Clone)]
pub struct Ladder {
    /// Gravity first, then each law's rungs in the configured order.
    pub models: Vec<ModelFit>,
    /// Index of the recommended model (gravity when nothing else is
    /// justified); None when not even gravity converged.
    pub recommended: Option<usize>,
    /// The headline significance (see the module notes).
    pub ng_significance: Significance,
    /// Non-gravitational models tried (the Bonferroni factor).
    pub alternatives: usize,
    /// The common used set, one flag per observation.
    pub used: Vec<bool>,
    /// Index of the model whose rejections were imposed.
    pub reference_model: Option<usize>,
}

impl Ladder {
    pub fn recommended_model(&self) -> Option<&ModelFit> {
        self.recommended.map(|i| &self.models[i])
    }

    /// Every converged model as (name, BIC, fit): what a model average or
    /// a plan weighs.
    pub fn converged_models(&self) -> Vec<(String, Option<f64>, &OrbitFit)> {
        self.models
            .iter()
            .filter_map(|m| Some((m.name(), m.bic, m.converged_fit()?)))
            .collect()
    }
}

fn is_subset(a: FreeParameters, b: FreeParameters) -> bool {
    (0..3).all(|i| !a.is_free(i) || b.is_free(i))
}

/// The richest model with a strict subset of `free` among `candidates`
/// (gravity, index 0, qualifies for all); ties go to the lower chi^2.
fn parent_of(models: &[ModelFit], index: usize) -> usize {
    let me = &models[index];
    let mut best: Option<(usize, usize, f64)> = None;
    for (j, m) in models.iter().enumerate() {
        let same_family = m.law.is_none() || m.law == me.law;
        if j == index || !same_family || m.free.count() >= me.free.count() {
            continue;
        }
        if !is_subset(m.free, me.free) {
            continue;
        }
        let chi2 = m.fit.as_ref().map_or(f64::INFINITY, |f| f.chi2);
        let better = match best {
            None => true,
            Some((_, k, c)) => m.free.count() > k || (m.free.count() == k && chi2 < c),
        };
        if better {
            best = Some((j, m.free.count(), chi2));
        }
    }
    best.map_or(0, |(j, _, _)| j)
}

/// Where a model's fit starts: a state at the fit epoch and the A_i.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Start {
    pub state: StateVector,
    pub a: [f64; 3],
}

impl Start {
    fn of(f: &OrbitFit) -> Self {
        Self {
            state: f.state,
            a: nongrav_values(f),
        }
    }
}

/// Fits one model of the ladder from a start on a used set.
pub(crate) type ModelFitter<'a> =
    dyn Fn(&ModelFit, &Start, &[bool], &FitSettings) -> Result<OrbitFit, FitError> + 'a;

/// Restarts tried for a model that failed on the common set.
const RESTARTS: usize = 2;

/// Fits the whole ladder from a starting state at `epoch`.
pub fn fit_ladder(
    ephemeris: &dyn Ephemeris,
    gravity: &ForceModel,
    observations: &[AstrometricObservation],
    epoch: Epoch,
    start: &StateVector,
    settings: &LadderSettings,
) -> Result<Ladder, FitError> {
    let gravity = gravity.without_nongrav();
    // The observer places are the same for every model: computed once
    // (the Earth's orientation at each observation is costly).
    let observers = observer_places(&FitProblem {
        ephemeris,
        model: &gravity,
        observations,
    })?;
    let data = Data {
        ephemeris,
        observations,
        observers: &observers,
    };
    let fit_one = |model: &ModelFit, from: &Start, used: &[bool], fit: &FitSettings| {
        fit_model(&data, &gravity, model, epoch, from, used, fit)
    };
    run_ladder(&fit_one, start, observations.len(), settings)
}

/// The ladder's models in order, none fitted yet.
fn shells(settings: &LadderSettings) -> Vec<ModelFit> {
    let gravity = ModelFit {
        free: FreeParameters::new(false, false, false),
        law: None,
        fit: Err("not fitted".into()),
        test: None,
        test_against_gravity: None,
        restarted_from: Vec::new(),
        term_sigmas: Vec::new(),
        significant: true,
        bic: None,
        recommended: false,
    };
    let mut models = vec![gravity.clone()];
    for law in &settings.laws {
        for free in settings.rungs.iter().filter(|f| f.count() > 0) {
            if !settings.excluded.contains(&model_name(*free, Some(*law))) {
                models.push(ModelFit {
                    free: *free,
                    law: Some(*law),
                    ..gravity.clone()
                });
            }
        }
    }
    models
}

/// The names of the models a ladder with these settings fits, in its
/// order: what a request may name before any fit has run.
pub fn model_names(settings: &LadderSettings) -> Vec<String> {
    shells(settings).iter().map(ModelFit::name).collect()
}

/// The ladder with each model fitted by `fit_one` (the real fit, or in
/// tests one that fails on purpose).
pub(crate) fn run_ladder(
    fit_one: &ModelFitter,
    start: &StateVector,
    observation_count: usize,
    settings: &LadderSettings,
) -> Result<Ladder, FitError> {
    let mut models = shells(settings);
    let all = vec![true; observation_count];
    let origin = Start {
        state: *start,
        a: [0.0; 3],
    };

    // Pass 1: each model with rejection, warm-started from its parent.
    // Gravity failing outright (too few observations, a bad start) ends
    // the ladder: every other model starts from it.
    let first = fit_one(&models[0], &origin, &all, &settings.fit)?;
    models[0].fit = Ok(first);
    for i in 1..models.len() {
        let parent = parent_of(&models, i);
        let (from, used) = match &models[parent].fit {
            Ok(p) => (Start::of(p), used_of(p)),
            Err(_) => (origin, all.clone()),
        };
        models[i].fit = fit_one(&models[i], &from, &used, &settings.fit).map_err(|e| e.to_string());
    }

    // Pass 2: the richest converged model's used set for everyone.
    let reference = models
        .iter()
        .enumerate()
        .filter(|(_, m)| m.converged())
        .max_by(|(_, a), (_, b)| {
            a.parameter_count()
                .cmp(&b.parameter_count())
                .then(chi2_or_inf(b).total_cmp(&chi2_or_inf(a)))
        })
        .map(|(i, _)| i);
    let used = reference
        .and_then(|r| models[r].fit.as_ref().ok().map(used_of))
        .unwrap_or_else(|| all.clone());
    let fixed = FitSettings {
        outlier_rejection: false,
        ..settings.fit.clone()
    };
    for i in 0..models.len() {
        if Some(i) == reference {
            continue;
        }
        // A model that converged on exactly this set already has the fit a
        // refit would only repeat.
        if let Ok(f) = &models[i].fit {
            if f.termination == Termination::Converged && used_of(f) == used {
                continue;
            }
        }
        let from = match &models[i].fit {
            Ok(f) => Start::of(f),
            Err(_) => match &models[parent_of(&models, i)].fit {
                Ok(p) => Start::of(p),
                Err(_) => origin,
            },
        };
        models[i].fit = fit_one(&models[i], &from, &used, &fixed).map_err(|e| e.to_string());
    }

    // Pass 3: what failed starts again from its converged neighbours.
    for i in 0..models.len() {
        if models[i].converged() {
            continue;
        }
        for j in nearest_converged(&models, i).into_iter().take(RESTARTS) {
            let from = match &models[j].fit {
                Ok(f) => Start::of(f),
                Err(_) => continue,
            };
            let mut a = [0.0; 3];
            for c in models[i].free.indices() {
                a[c] = from.a[c];
            }
            let from = Start { a, ..from };
            models[i].fit = fit_one(&models[i], &from, &used, &fixed).map_err(|e| e.to_string());
            models[i].restarted_from.push(j);
            if models[i].converged() {
                break;
            }
        }
    }

    let alternatives = models.len() - 1;
    decide(&mut models, &used, alternatives, settings);
    if let Some(pinned) = &settings.pinned {
        if let Some(i) = models
            .iter()
            .position(|m| &m.name() == pinned && m.converged())
        {
            for (j, m) in models.iter_mut().enumerate() {
                m.recommended = j == i;
            }
        }
    }
    let recommended = models.iter().position(|m| m.recommended);
    let ng_significance = significance(&models);
    Ok(Ladder {
        models,
        recommended,
        ng_significance,
        alternatives,
        used,
        reference_model: reference,
    })
}

fn chi2_or_inf(m: &ModelFit) -> f64 {
    m.fit.as_ref().map_or(f64::INFINITY, |f| f.chi2)
}

/// The converged models other than `index`, nearest first: fewest terms
/// differing, then the same law, then the lowest chi^2.
fn nearest_converged(models: &[ModelFit], index: usize) -> Vec<usize> {
    let me = &models[index];
    let mut near: Vec<usize> = (0..models.len())
        .filter(|j| *j != index && models[*j].converged())
        .collect();
    let key = |j: usize| {
        let m = &models[j];
        let differing = (0..3)
            .filter(|c| m.free.is_free(*c) != me.free.is_free(*c))
            .count();
        let other_law = usize::from(me.law.is_some() && m.law.is_some() && m.law != me.law);
        (differing, other_law)
    };
    near.sort_by(|a, b| {
        key(*a)
            .cmp(&key(*b))
            .then(chi2_or_inf(&models[*a]).total_cmp(&chi2_or_inf(&models[*b])))
    });
    near
}

/// "A1 water-ice, A2 water-ice": the names of the models at `indices`.
pub fn names(models: &[ModelFit], indices: &[usize]) -> String {
    indices
        .iter()
        .map(|j| models[*j].name())
        .collect::<Vec<_>>()
        .join(", ")
}

/// The headline significance, or why there is none.
fn significance(models: &[ModelFit]) -> Significance {
    let gravity = &models[0];
    if !gravity.converged() {
        let restarted = if gravity.restarted_from.is_empty() {
            String::new()
        } else {
            format!(
                " (also when restarted from the {} fits)",
                names(models, &gravity.restarted_from)
            )
        };
        return Significance::Unknown {
            reason: format!(
                "gravity alone did not converge{restarted}: {}",
                gravity.termination_text()
            ),
        };
    }
    if models.len() == 1 {
        return Significance::Unknown {
            reason: "no non-gravitational model is configured".into(),
        };
    }
    models
        .iter()
        .filter_map(|m| m.test_against_gravity.as_ref())
        .map(|t| t.sigma)
        .reduce(f64::max)
        .map_or_else(
            || Significance::Unknown {
                reason: "no non-gravitational model converged".into(),
            },
            Significance::Sigma,
        )
}

fn used_of(f: &OrbitFit) -> Vec<bool> {
    f.residuals.iter().map(|r| r.used).collect()
}

fn nongrav_values(f: &OrbitFit) -> [f64; 3] {
    let mut a = [0.0; 3];
    for (i, v) in &f.nongrav_au_per_day2 {
        a[*i] = *v;
    }
    a
}

/// What every model of the ladder is fitted to.
struct Data<'a> {
    ephemeris: &'a dyn Ephemeris,
    observations: &'a [AstrometricObservation],
    observers: &'a [ObserverAt],
}

fn fit_model(
    data: &Data,
    gravity: &ForceModel,
    model: &ModelFit,
    epoch: Epoch,
    start: &Start,
    used: &[bool],
    settings: &FitSettings,
) -> Result<OrbitFit, FitError> {
    let force = match model.law {
        None => gravity.clone(),
        Some(law) => {
            let mut a = [0.0; 3];
            for i in model.free.indices() {
                a[i] = start.a[i];
            }
            gravity
                .clone()
                .with_nongrav(NonGravModel::new(law, a, model.free))?
        }
    };
    let problem = FitProblem {
        ephemeris: data.ephemeris,
        model: &force,
        observations: data.observations,
    };
    fit_orbit_observed(
        &problem,
        data.observers,
        epoch,
        &start.state,
        settings,
        used,
    )
}

/// Likelihood-ratio test of `rich` against `simple`.
fn lr_test(
    rich: &OrbitFit,
    simple: &OrbitFit,
    against: usize,
    delta_k: usize,
    tries: usize,
    settings: &LadderSettings,
) -> ModelTest {
    let delta_chi2 = (simple.chi2 - rich.chi2).max(0.0);
    let k = delta_k.max(1) as f64;
    let (form, ln_p) = if rich.normalised_rms > settings.f_test_above_nrms && rich.dof > 0 {
        let f = (delta_chi2 / k) / (rich.chi2 / rich.dof as f64);
        (TestForm::F, f_ln_sf(f, k, rich.dof as f64))
    } else {
        (TestForm::ChiSquare, chi2_ln_sf(delta_chi2, k))
    };
    let ln_p_corrected = bonferroni_ln_p(ln_p, tries);
    ModelTest {
        against,
        delta_chi2,
        delta_k,
        form,
        ln_p,
        ln_p_corrected,
        sigma: sigma_of_ln_p(ln_p_corrected),
    }
}

/// Tests, term significances, BIC and the recommendation.
fn decide(models: &mut [ModelFit], used: &[bool], tries: usize, settings: &LadderSettings) {
    let n_scalar = 2 * used.iter().filter(|u| **u).count();
    for i in 0..models.len() {
        let parent = parent_of(models, i);
        let (test, test_g, term_sigmas) = match models[i].converged_fit() {
            Some(f) if i > 0 => {
                let term_sigmas = term_sigmas(f);
                let test = models[parent].converged_fit().map(|p| {
                    let dk = models[i].free.count() - models[parent].free.count();
                    lr_test(f, p, parent, dk, tries, settings)
                });
                let test_g = models[0]
                    .converged_fit()
                    .map(|g| lr_test(f, g, 0, models[i].free.count(), tries, settings));
                (test, test_g, term_sigmas)
            }
            _ => (None, None, Vec::new()),
        };
        let m = &mut models[i];
        m.bic = m
            .converged_fit()
            .map(|f| f.chi2 + m.parameter_count() as f64 * (n_scalar as f64).ln());
        m.significant = i == 0
            || (m.converged()
                && term_sigmas
                    .iter()
                    .all(|(_, s)| *s >= settings.significance_sigma)
                && test
                    .as_ref()
                    .is_some_and(|t| t.sigma >= settings.significance_sigma));
        m.test = test;
        m.test_against_gravity = test_g;
        m.term_sigmas = term_sigmas;
    }
    let best = models
        .iter()
        .enumerate()
        .filter(|(_, m)| m.significant && m.bic.is_some())
        .min_by(|(_, a), (_, b)| {
            a.bic
                .unwrap_or(f64::INFINITY)
                .total_cmp(&b.bic.unwrap_or(f64::INFINITY))
        })
        .map(|(i, _)| i);
    if let Some(b) = best {
        models[b].recommended = true;
    }
}

/// |A_i| / sigma(A_i) of each free term.
fn term_sigmas(f: &OrbitFit) -> Vec<(usize, f64)> {
    let Some(c) = &f.covariance else {
        return Vec::new();
    };
    f.nongrav_au_per_day2
        .iter()
        .enumerate()
        .map(|(j, (component, value))| {
            let sigma = c[(6 + j, 6 + j)].sqrt();
            (*component, value.abs() / sigma)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names() {
        assert_eq!(
            terms_name(FreeParameters::new(false, false, false)),
            "gravity"
        );
        assert_eq!(terms_name(FreeParameters::new(true, true, false)), "A1+A2");
        assert_eq!(terms_name(FreeParameters::new(false, true, false)), "A2");
        assert_eq!(law_name(DistanceLaw::InverseSquare), "inverse-square");
    }

    fn shell(free: FreeParameters, law: Option<DistanceLaw>) -> ModelFit {
        ModelFit {
            free,
            law,
            fit: Err("not fitted".into()),
            test: None,
            test_against_gravity: None,
            restarted_from: Vec::new(),
            term_sigmas: Vec::new(),
            significant: false,
            bic: None,
            recommended: false,
        }
    }

    #[test]
    fn parents_are_the_richest_subsets_of_the_same_law() {
        let w = Some(DistanceLaw::WaterIce);
        let s = Some(DistanceLaw::InverseSquare);
        let f = FreeParameters::new;
        let models = vec![
            shell(f(false, false, false), None),
            shell(f(false, true, false), w),
            shell(f(true, false, false), w),
            shell(f(true, true, false), w),
            shell(f(true, true, true), w),
            shell(f(true, false, false), s),
            shell(f(true, true, true), s),
        ];
        assert_eq!(parent_of(&models, 1), 0);
        assert_eq!(parent_of(&models, 2), 0);
        // Both one-term models qualify; with no fits, the first found stays.
        assert!([1, 2].contains(&parent_of(&models, 3)));
        assert_eq!(parent_of(&models, 4), 3);
        // The other law's models never serve as parents.
        assert_eq!(parent_of(&models, 6), 5);
    }

    #[test]
    fn unknown_when_gravity_alone_never_converges() {
        let (_, l) = crate::fit::test_support::outgassing_ladder(usize::MAX);
        let gravity = &l.models[0];
        assert!(!gravity.converged());
        // It was restarted from its converged neighbours and failed again.
        assert_eq!(gravity.restarted_from.len(), RESTARTS);
        let reason = l.ng_significance.unknown_reason().expect("unknown");
        assert!(
            reason.contains("gravity alone did not converge"),
            "{reason}"
        );
        assert_eq!(l.ng_significance.sigma(), None);
        // Nothing was tested against the failed fit.
        for m in &l.models {
            assert!(m.test_against_gravity.is_none(), "{}", m.name());
            if let Some(t) = &m.test {
                assert!(l.models[t.against].converged());
            }
        }
        // The non-gravitational models themselves are fine.
        assert!(l.models[1..].iter().any(ModelFit::converged));
    }

    #[test]
    fn a_failed_gravity_fit_is_restarted_from_its_neighbour() {
        // Passes 1 and 2 fail; the restart from the nearest converged
        // model (A1 with A1 set to zero) converges.
        let (_, l) = crate::fit::test_support::outgassing_ladder(2);
        let gravity = &l.models[0];
        assert!(gravity.converged(), "{}", gravity.termination_text());
        // One restart sufficed, from the best one-term fit: A1, whose
        // chi^2 is the lowest of the two (the truth has A1 alone).
        let [from] = gravity.restarted_from[..] else {
            panic!("restarted {:?}", gravity.restarted_from)
        };
        assert_eq!(l.models[from].name(), "A1 inverse-square");
        let sigma = l.ng_significance.sigma().expect("a figure");
        // A1 = 3e-6 au/day^2 over 240 days is far beyond noise of 0.5".
        assert!(sigma > 5.0, "{sigma}");
        let rec = l.recommended_model().expect("recommended");
        assert!(rec.free.is_free(0), "{}", rec.name());
    }

    #[test]
    fn an_analyst_can_take_a_model_off_and_pin_another() {
        use crate::fit::test_support::outgassing_ladder_with;
        let settings = LadderSettings {
            excluded: vec!["A1+A2+A3 inverse-square".into()],
            pinned: Some("A1+A2 inverse-square".into()),
            ..LadderSettings::default()
        };
        let (_, l) = outgassing_ladder_with(0, settings);
        let names: Vec<String> = l.models.iter().map(ModelFit::name).collect();
        assert!(
            !names.contains(&"A1+A2+A3 inverse-square".to_string()),
            "{names:?}"
        );
        assert_eq!(l.alternatives, names.len() - 1);
        // The truth is A1 alone, so the tests would recommend A1; the pin
        // wins, and the tests are still reported.
        let rec = l.recommended_model().expect("recommended");
        assert_eq!(rec.name(), "A1+A2 inverse-square");
        assert!(l.ng_significance.sigma().is_some());
        assert_eq!(l.models.iter().filter(|m| m.recommended).count(), 1);
    }
}
