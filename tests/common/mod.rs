//! Shared pieces of the whole-path tests: the DE421 file and the synthetic
//! astrometry fixtures of tests/reference/fixtures/synthetic/ (made by
//! tests/reference/make_synthetic_astrometry.py with rebound 5.2.2,
//! jplephem 2.24 and pyerfa 2.0.1.5; see tests/reference/README.md), and
//! the real loopback servers alerts are delivered to (smtp, webhook).
//! The browser module drives a headless Chromium over the DevTools protocol.
#![allow(dead_code)]

pub mod browser;
pub mod comet;
pub mod daemon;
pub mod prediction;
pub mod smtp;
pub mod stress;
pub mod webhook;

use std::path::{Path, PathBuf};

use nalgebra::{DMatrix, DVector, Vector3};
use serde_json::Value;

use perihelix::astro::ephemeris::{Body, Ephemeris, StateVector};
use perihelix::astro::forces::{DistanceLaw, ForceModel, FreeParameters, NonGravModel};
use perihelix::astro::propagation::{PropagationSettings, Trajectory};
use perihelix::astro::spk::SpkEphemeris;
use perihelix::astro::time::{Epoch, TimeScales};
use perihelix::config::{load_stations, StationList};
use perihelix::fit::lsq::{fit_orbit, FitProblem, FitSettings, OrbitFit, Termination};
use perihelix::fit::observe::AstrometricObservation;
use perihelix::fit::sampling::Gaussian;
use perihelix::ingest::read_file;
use perihelix::solve::input::astrometric_all;

pub fn repo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// DE421 as fetched by tests/reference/fetch-de421.sh.
pub fn de421() -> SpkEphemeris {
    let path = repo().join("tests/reference/data/de421.bsp");
    assert!(
        path.is_file(),
        "{} is missing: run bash tests/reference/fetch-de421.sh",
        path.display()
    );
    SpkEphemeris::open(&path).expect("de421.bsp opens")
}

pub fn stations() -> StationList {
    load_stations(&repo().join("config/stations.toml")).expect("config/stations.toml loads")
}

/// One invented body of the synthetic set.
pub struct Synthetic {
    pub name: String,
    pub truth: Value,
    pub epoch: Epoch,
    pub state: StateVector,
    /// The true A1..A3, au/day^2, and the law.
    pub a_au_per_day2: [f64; 3],
    pub law: DistanceLaw,
    /// The noisy file's observations (noise and gross outliers as made).
    pub noisy: Vec<AstrometricObservation>,
    /// The same rows without noise.
    pub clean: Vec<AstrometricObservation>,
    /// Rows (0-based) that carry a gross outlier.
    pub outliers: Vec<usize>,
}

fn dir(name: &str) -> PathBuf {
    repo().join("tests/reference/fixtures/synthetic").join(name)
}

fn vec3(v: &Value) -> Vector3<f64> {
    let a = v.as_array().expect("three numbers");
    Vector3::new(
        a[0].as_f64().unwrap(),
        a[1].as_f64().unwrap(),
        a[2].as_f64().unwrap(),
    )
}

pub fn load(name: &str) -> Synthetic {
    let d = dir(name);
    let truth: Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("truth.json")).unwrap()).unwrap();
    let epoch =
        Epoch::from_tdb_days_since_j2000(truth["epoch"]["tdb_days_j2000"].as_f64().unwrap());
    let state = StateVector::new(
        vec3(&truth["state"]["position_au"]),
        vec3(&truth["state"]["velocity_au_per_day"]),
    );
    let ng = &truth["nongrav"];
    let a_au_per_day2 = [
        ng["A1_au_per_day2"].as_f64().unwrap(),
        ng["A2_au_per_day2"].as_f64().unwrap(),
        ng["A3_au_per_day2"].as_f64().unwrap(),
    ];
    let law = match ng["law"].as_str().unwrap() {
        "inverse_square" => DistanceLaw::InverseSquare,
        "water_ice" => DistanceLaw::WaterIce,
        other => panic!("unknown law {other}"),
    };
    let stations = stations();
    let noisy = read_observations(&d.join("noisy.psv"), &stations);
    let clean = clean_rows(&d.join("clean.csv"), &noisy);
    let outliers = truth["observations"]["outliers"]
        .as_array()
        .unwrap()
        .iter()
        .map(|o| o["index"].as_u64().unwrap() as usize)
        .collect();
    Synthetic {
        name: name.to_string(),
        truth,
        epoch,
        state,
        a_au_per_day2,
        law,
        noisy,
        clean,
        outliers,
    }
}

fn read_observations(path: &Path, stations: &StationList) -> Vec<AstrometricObservation> {
    let outcome = read_file(path, stations, &[]);
    assert!(
        outcome.summary.rejected.is_empty(),
        "{:?}",
        outcome.summary.rejected
    );
    assert_eq!(outcome.objects.len(), 1);
    let (kept, refused) = astrometric_all(
        &outcome.objects[0].observations,
        stations,
        TimeScales::builtin(),
    );
    assert!(refused.is_empty(), "{refused:?}");
    kept.into_iter().map(|(_, o)| o).collect()
}

/// clean.csv's RA/Dec on the noisy rows' times and observers (the rows are
/// in the same order in both files).
fn clean_rows(path: &Path, noisy: &[AstrometricObservation]) -> Vec<AstrometricObservation> {
    let text = std::fs::read_to_string(path).unwrap();
    let rows: Vec<&str> = text.lines().skip(1).filter(|l| !l.is_empty()).collect();
    assert_eq!(
        rows.len(),
        noisy.len(),
        "clean and noisy rows differ in number"
    );
    rows.iter()
        .zip(noisy)
        .map(|(row, n)| {
            let f: Vec<&str> = row.split(',').collect();
            assert_eq!(f[1], n.station);
            let mut o = n.clone();
            o.ra_rad = f[2].parse::<f64>().unwrap().to_radians();
            o.dec_rad = f[3].parse::<f64>().unwrap().to_radians();
            o
        })
        .collect()
}

impl Synthetic {
    /// The truth's force model with the named A_i free (and their true
    /// values as the start).
    pub fn model(&self, free: FreeParameters) -> ForceModel {
        let gravity = ForceModel::new(&Body::PERTURBERS, true, None).unwrap();
        if free.count() == 0 {
            return gravity;
        }
        let mut a = [0.0; 3];
        for i in free.indices() {
            a[i] = self.a_au_per_day2[i];
        }
        gravity
            .with_nongrav(NonGravModel::new(self.law, a, free))
            .unwrap()
    }

    /// The A_i the truth carries (its non-zero ones): the model structure
    /// the data were made with.
    pub fn truth_free(&self) -> FreeParameters {
        let a = self.a_au_per_day2;
        FreeParameters::new(a[0] != 0.0, a[1] != 0.0, a[2] != 0.0)
    }

    /// The true state at `epoch`: the truth state itself at the truth
    /// epoch, else carried there under the truth's full force model.
    pub fn truth_state_at(&self, ephemeris: &dyn Ephemeris, epoch: Epoch) -> StateVector {
        if epoch == self.epoch {
            return self.state;
        }
        let model = self.model(self.truth_free());
        // Tighter than the fits' 1e-9, so the truth is not the limit; not
        // 1e-12: there the step control stalls on the way back from the
        // truth epoch of the hyperbolic bodies (at TDB J2000 + 9617.14).
        let settings = PropagationSettings {
            partials: false,
            tolerance: 1e-11,
            ..PropagationSettings::default()
        };
        let (start, end) = if epoch < self.epoch {
            (epoch, self.epoch)
        } else {
            (self.epoch, epoch)
        };
        Trajectory::integrate(
            ephemeris,
            &model,
            self.epoch,
            &self.state,
            start,
            end,
            &settings,
        )
        .and_then(|t| t.state(epoch))
        .expect("the truth state propagates")
    }

    /// The true fitted-parameter vector of a fit at `epoch` with `free`
    /// A_i: (x, y, z au, vx, vy, vz au/day, the free A_i au/day^2), in the
    /// order of [`OrbitFit::parameters`].
    pub fn truth_vector(
        &self,
        ephemeris: &dyn Ephemeris,
        free: FreeParameters,
        epoch: Epoch,
    ) -> DVector<f64> {
        let state = self.truth_state_at(ephemeris, epoch);
        let mut v: Vec<f64> = state
            .position_au
            .iter()
            .chain(state.velocity_au_per_day.iter())
            .copied()
            .collect();
        v.extend(free.indices().map(|i| self.a_au_per_day2[i]));
        DVector::from_vec(v)
    }

    /// A fresh noise realisation of the clean rows with the stated sigmas,
    /// without outliers.
    pub fn realisation(&self, seed: u64) -> Vec<AstrometricObservation> {
        let mut rng = Gaussian::new(seed);
        self.clean
            .iter()
            .map(|o| {
                let mut o = o.clone();
                let sra = o.sigma_ra_arcsec.unwrap() / 206_264.806_247_096_36;
                let sdec = o.sigma_dec_arcsec.unwrap() / 206_264.806_247_096_36;
                o.ra_rad += rng.next_normal() * sra / o.dec_rad.cos();
                o.dec_rad += rng.next_normal() * sdec;
                o
            })
            .collect()
    }
}

/// d^2 = (p - p_true)^T C^-1 (p - p_true) with the fit's own covariance C.
///
/// C mixes au, au/day and au/day^2 (entries from ~1e-12 down to ~1e-20),
/// so it is solved in its correlation form: with s = sqrt(diag C),
/// d^2 = z^T R^-1 z for z = (p - p_true) / s and R = C / (s s^T), which a
/// Cholesky factorisation handles at full precision.
pub fn mahalanobis2(fit: &OrbitFit, truth: &DVector<f64>) -> f64 {
    let c = fit.covariance.as_ref().expect("a covariance");
    mahalanobis2_with(c, &(&fit.parameters - truth))
}

pub fn mahalanobis2_with(covariance: &DMatrix<f64>, difference: &DVector<f64>) -> f64 {
    let s = covariance.diagonal().map(f64::sqrt);
    assert!(
        s.iter().all(|x| x.is_finite() && *x > 0.0),
        "covariance with a non-positive variance: {s}"
    );
    let correlation = DMatrix::from_fn(covariance.nrows(), covariance.ncols(), |i, j| {
        covariance[(i, j)] / (s[i] * s[j])
    });
    let z = difference.component_div(&s);
    let cholesky = correlation
        .cholesky()
        .expect("positive definite covariance");
    z.dot(&cholesky.solve(&z))
}

/// chi^2_k 0.999 quantiles for k = 6..9 parameters: scipy 1.17.1
/// `scipy.stats.chi2.ppf(0.999, k)` (numpy 2.4.6); they agree to the
/// printed digits with Abramowitz & Stegun, Handbook of Mathematical
/// Functions, table 26.8 (22.458, 24.322, 26.124, 27.877).
pub fn chi2_999(k: usize) -> f64 {
    match k {
        6 => 22.457_744_484_825_323,
        7 => 24.321_886_347_856_854,
        8 => 26.124_481_558_376_14,
        9 => 27.877_164_871_256_568,
        _ => panic!("no chi^2 0.999 quantile for {k} degrees of freedom"),
    }
}

/// Settings of a calibration fit: the production ones with the per-night
/// inflation off, so the weights are the noise's own sigmas and d^2 of the
/// truth-structure model should follow chi^2_k.
pub fn calibration_settings() -> FitSettings {
    let mut s = FitSettings::default();
    s.weights.night_inflation = false;
    s
}

/// One noise realisation fitted at `epoch` with the truth's model
/// structure (the truth's law and its non-zero A_i free), starting from
/// the true state there (initial orbits are checked elsewhere).
pub fn calibration_fit(
    body: &Synthetic,
    ephemeris: &dyn Ephemeris,
    epoch: Epoch,
    seed: u64,
    settings: &FitSettings,
) -> CalibrationSample {
    let observations = body.realisation(seed);
    let free = body.truth_free();
    let model = body.model(free);
    let problem = FitProblem {
        ephemeris,
        model: &model,
        observations: &observations,
    };
    let start = body.truth_state_at(ephemeris, epoch);
    let fit = fit_orbit(&problem, epoch, &start, settings).expect("fit runs");
    let truth = body.truth_vector(ephemeris, free, fit.epoch);
    CalibrationSample {
        seed,
        d2: mahalanobis2(&fit, &truth),
        normalised_rms: fit.normalised_rms,
        converged: fit.termination == Termination::Converged,
        rejected: fit.residuals.iter().filter(|r| !r.used).count(),
        k: fit.parameters.len(),
    }
}

/// What one calibration fit gave.
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationSample {
    pub seed: u64,
    pub d2: f64,
    pub normalised_rms: f64,
    pub converged: bool,
    /// Observations the outlier rejection left out.
    pub rejected: usize,
    /// Fitted parameters.
    pub k: usize,
}

/// d^2 over R realisations against what chi^2_k predicts.
///
/// A chi^2_k variable has mean k and variance 2k, so the mean of R
/// independent ones has standard deviation sqrt(2k / R) = k sqrt(2 / (kR));
/// the bound is that mean +- 3 such sigma, k (1 -+ 3 sqrt(2 / (kR))), as
/// the acceptance criterion states (mean k and variance 2k of chi^2_k:
/// any statistics text, e.g. Abramowitz & Stegun section 26.4; memory).
#[derive(Debug, Clone, PartialEq)]
pub struct Calibration {
    pub realisations: usize,
    pub k: usize,
    pub mean_d2: f64,
    pub bound_low: f64,
    pub bound_high: f64,
    /// Realisations with d^2 above the chi^2_k 0.999 quantile.
    pub above_999: usize,
    pub mean_normalised_rms: f64,
    /// Realisations whose fit did not converge.
    pub not_converged: usize,
    pub mean_rejected: f64,
}

impl Calibration {
    pub fn of(samples: &[CalibrationSample]) -> Self {
        assert!(!samples.is_empty(), "no realisations");
        let k = samples[0].k;
        assert!(samples.iter().all(|s| s.k == k), "mixed parameter counts");
        let r = samples.len();
        let mean =
            |f: &dyn Fn(&CalibrationSample) -> f64| samples.iter().map(f).sum::<f64>() / r as f64;
        let half_width = 3.0 * (2.0 / (k as f64 * r as f64)).sqrt();
        let q = chi2_999(k);
        Self {
            realisations: r,
            k,
            mean_d2: mean(&|s| s.d2),
            bound_low: k as f64 * (1.0 - half_width),
            bound_high: k as f64 * (1.0 + half_width),
            above_999: samples.iter().filter(|s| s.d2 > q).count(),
            mean_normalised_rms: mean(&|s| s.normalised_rms),
            not_converged: samples.iter().filter(|s| !s.converged).count(),
            mean_rejected: mean(&|s| s.rejected as f64),
        }
    }

    pub fn within_bound(&self) -> bool {
        (self.bound_low..=self.bound_high).contains(&self.mean_d2)
    }
}

/// Replaces the part of a generated document between
/// `<!-- begin NAME -->` and `<!-- end NAME -->` with `content`, keeping
/// the rest (several benches write one document); appends the section when
/// the markers are missing.
pub fn write_section(path: &Path, name: &str, content: &str) -> std::io::Result<()> {
    let begin = format!("<!-- begin {name} -->");
    let end = format!("<!-- end {name} -->");
    let old = match std::fs::read_to_string(path) {
        Ok(s) => s,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => String::new(),
        Err(e) => return Err(e),
    };
    let section = format!("{begin}\n{}\n{end}", content.trim_end());
    let new = match (old.find(&begin), old.find(&end)) {
        (Some(b), Some(e)) if e > b => format!("{}{section}{}", &old[..b], &old[e + end.len()..]),
        _ if old.is_empty() => format!("{section}\n"),
        _ => format!("{}\n\n{section}\n", old.trim_end()),
    };
    std::fs::write(path, new)
}

/// A positive count from the environment variable `name`, else `default`;
/// a value that is not one ends the bench with a message (exit 2).
pub fn count_from_env(name: &str, default: usize) -> usize {
    match std::env::var(name) {
        Ok(v) => match v.parse::<usize>() {
            Ok(n) if n > 0 => n,
            _ => {
                eprintln!("{name}={v} is not a positive count");
                std::process::exit(2);
            }
        },
        Err(_) => default,
    }
}
