//! The configuration's `[fit]` section and station list as the fitter's
//! settings.

use crate::astro::ephemeris::Body;
use crate::astro::forces::{DistanceLaw, ForceModel, ForceModelError, FreeParameters};
use crate::config::{FitSettings as FitConfig, NonGravLaw, NonGravTerm, StationList};
use crate::fit::ladder::LadderSettings;
use crate::fit::lsq::FitSettings;
use crate::fit::weights::WeightSettings;

use super::SolveSettings;

pub fn distance_law(law: NonGravLaw) -> DistanceLaw {
    match law {
        NonGravLaw::WaterIce => DistanceLaw::WaterIce,
        NonGravLaw::InverseSquare => DistanceLaw::InverseSquare,
        NonGravLaw::WaterIceScaled { r0_au } => DistanceLaw::WaterIceScaled { r0_au },
    }
}

pub fn free_parameters(terms: &[NonGravTerm]) -> FreeParameters {
    FreeParameters::new(
        terms.contains(&NonGravTerm::A1),
        terms.contains(&NonGravTerm::A2),
        terms.contains(&NonGravTerm::A3),
    )
}

/// Weights: the floor and default from the configuration, each station's
/// own default sigma where the station list gives one.
pub fn weight_settings(config: &FitConfig, stations: &StationList) -> WeightSettings {
    WeightSettings {
        floor_arcsec: config.sigma_floor_arcsec,
        fallback_sigma_arcsec: config.default_sigma_arcsec,
        station_sigma_arcsec: stations
            .iter()
            .filter_map(|s| s.sigma_arcsec.map(|sigma| (s.code.clone(), sigma)))
            .collect(),
        night_inflation: config.per_night_inflation,
        ..WeightSettings::default()
    }
}

/// The non-gravitational rungs of the configured ladder (gravity, always
/// fitted first, left out).
fn rungs(config: &FitConfig) -> Vec<FreeParameters> {
    config
        .ladder
        .iter()
        .map(|terms| free_parameters(terms))
        .filter(|f| f.count() > 0)
        .collect()
}

/// The names of the models the configured ladder fits ("gravity",
/// "A1 water-ice", ...), in its order, so a request naming a model can be
/// checked before the fit, which takes seconds.
pub fn ladder_model_names(config: &FitConfig) -> Vec<String> {
    crate::fit::ladder::model_names(&LadderSettings {
        rungs: rungs(config),
        laws: config.laws.iter().copied().map(distance_law).collect(),
        ..LadderSettings::default()
    })
}

/// Everything [`super::solve`] needs, from the configuration.
pub fn solve_settings(
    config: &FitConfig,
    stations: &StationList,
) -> Result<SolveSettings, ForceModelError> {
    let fit = FitSettings {
        max_iterations: config.max_iterations as usize,
        reject_chi2: config.reject_chi2,
        recover_chi2: config.recover_chi2,
        weights: weight_settings(config, stations),
        ..FitSettings::default()
    };
    let ladder = LadderSettings {
        // Gravity is always the first rung; the configuration may list it.
        rungs: rungs(config),
        laws: config.laws.iter().copied().map(distance_law).collect(),
        significance_sigma: config.significance_sigma,
        fit,
        ..LadderSettings::default()
    };
    Ok(SolveSettings {
        ladder,
        gravity: ForceModel::new(&Body::PERTURBERS, config.relativity, None)?,
        ..SolveSettings::default()
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::Station;

    #[test]
    fn the_default_configuration_gives_the_default_ladder() {
        let s = solve_settings(&FitConfig::default(), &StationList::default()).unwrap();
        let d = LadderSettings::default();
        assert_eq!(s.ladder.rungs, d.rungs);
        assert_eq!(s.ladder.laws, d.laws);
        assert_eq!(s.ladder.significance_sigma, d.significance_sigma);
        assert_eq!(s.ladder.fit.reject_chi2, 8.0);
        assert!(s.ladder.fit.weights.night_inflation);
    }

    #[test]
    fn model_names_are_known_before_the_fit() {
        // The default ladder (FitSettings::default, which
        // config/example.toml's `ladder` and `laws` repeat): gravity, then
        // the rungs A2, A1, A1+A2, A1+A2+A3 under each law, named as the
        // fit report names them (fit::ladder::model_name).
        let names = ladder_model_names(&FitConfig::default());
        assert_eq!(
            names,
            [
                "gravity",
                "A2 water-ice",
                "A1 water-ice",
                "A1+A2 water-ice",
                "A1+A2+A3 water-ice",
                "A2 inverse-square",
                "A1 inverse-square",
                "A1+A2 inverse-square",
                "A1+A2+A3 inverse-square",
            ]
        );
        let config = FitConfig {
            ladder: vec![vec![], vec![NonGravTerm::A1]],
            laws: vec![NonGravLaw::WaterIceScaled { r0_au: 5.0 }],
            ..FitConfig::default()
        };
        assert_eq!(
            ladder_model_names(&config),
            ["gravity", "A1 water-ice-scaled"]
        );
    }

    #[test]
    fn station_sigmas_and_switches_carry_over() {
        let stations = StationList::new([Station {
            code: "ZQA".into(),
            name: "invented".into(),
            longitude_deg: 17.32,
            latitude_deg: -23.11,
            height_m: 1820.0,
            sigma_arcsec: Some(0.7),
        }]);
        let config = FitConfig {
            per_night_inflation: false,
            ladder: vec![vec![], vec![NonGravTerm::A1]],
            laws: vec![NonGravLaw::WaterIceScaled { r0_au: 5.0 }],
            relativity: false,
            ..FitConfig::default()
        };
        let s = solve_settings(&config, &stations).unwrap();
        assert_eq!(
            s.ladder.rungs,
            vec![FreeParameters::new(true, false, false)]
        );
        assert_eq!(
            s.ladder.laws,
            vec![DistanceLaw::WaterIceScaled { r0_au: 5.0 }]
        );
        assert_eq!(
            s.ladder.fit.weights.station_sigma_arcsec.get("ZQA"),
            Some(&0.7)
        );
        assert!(!s.ladder.fit.weights.night_inflation);
    }
}
