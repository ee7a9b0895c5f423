//! Orbit determination: from astrometric observations to an orbit with
//! its uncertainty.
//!
//! - [`observe`]: the observation model (light time, RA/Dec, residuals and
//!   their partials with respect to the fitted parameters).
//! - [`weights`]: each observation's 2 x 2 covariance.
//! - [`lsq`]: differential correction with outlier rejection and covariance.
//! - [`ladder`]: the model ladder, its tests and the recommended model.
//! - [`solution`]: elements with sigmas at any epoch, original and future
//!   1/a, the residual trend test.
//! - [`consistency`]: the chi^2 of new observations against a solution.
//! - [`stats`]: tail probabilities and equivalent Gaussian sigmas.
//! - [`photometry`]: brightness laws (M1/K1, H/G), outburst and activity flags.
//! - [`predict`]: places, rates, geometry and the sky-plane uncertainty
//!   ellipse (linear or Monte Carlo) at times to come.
//! - [`discriminate`]: how well a night's tracklet would tell two models
//!   apart (D^2, nights to settle).
//! - [`mixture`]: model-averaged predictions (weights exp(-dBIC/2), total
//!   variance).
//! - [`sampling`]: seeded normal deviates and multivariate normal draws.
//! - [`extend`]: a fit grown from a few nights to the whole arc.
//! - [`initial`]: initial orbits from the observations alone (Gauss's
//!   method, systematic ranging), scored by their residual RMS.
//!
//! Nothing here reads files or knows about the store: the caller turns its
//! records into [`observe::AstrometricObservation`]s.
pub mod consistency;
pub mod discriminate;
pub mod extend;
pub mod initial;
pub mod ladder;
pub mod lsq;
pub mod mixture;
pub mod observe;
pub mod photometry;
pub mod predict;
pub mod sampling;
pub mod solution;
pub mod stats;
pub mod weights;

#[cfg(test)]
pub(crate) mod test_support;
