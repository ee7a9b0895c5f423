//! Solutions built around a ladder, for unit tests of the documents.

use crate::astro::time::Epoch;
use crate::fit::initial::{InitialOrbit, Method, ScoreModel};
use crate::fit::ladder::Ladder;
use crate::fit::observe::AstrometricObservation;
use crate::fit::test_support::belt_state;

use super::Solution;

/// A solution of `ladder` on `observations` (no derived quantities), as
/// the solve job would wrap it.
pub(crate) fn solution_of(observations: Vec<AstrometricObservation>, ladder: Ladder) -> Solution {
    let times: Vec<Epoch> = observations.iter().map(|o| o.time.tdb()).collect();
    let first = times
        .iter()
        .copied()
        .fold(times[0], |a, b| if b < a { b } else { a });
    let last = times
        .iter()
        .copied()
        .fold(times[0], |a, b| if b > a { b } else { a });
    let (epoch, state) = belt_state();
    let n = ladder.models.len();
    Solution {
        object: "2026 ZA1".into(),
        observations,
        first,
        last,
        epoch,
        elements_epoch: epoch,
        reference_epoch: None,
        pinned_model: None,
        initial: InitialOrbit {
            epoch,
            state,
            rms_arcsec: 0.0,
            scored_with: ScoreModel::TwoBody,
            scored_observations: 0,
            method: Method::Gauss {
                observations: [0, 1, 2],
                root_r2_au: 2.4,
                iterations: 0,
            },
        },
        ladder,
        derived: vec![None; n],
    }
}
