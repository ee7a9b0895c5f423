//! Shared pieces of the whole-path tests: the DE421 file and the synthetic
//! astrometry fixtures of tests/reference/fixtures/synthetic/ (made by
//! tests/reference/make_synthetic_astrometry.py with rebound 5.2.2,
//! jplephem 2.24 and pyerfa 2.0.1.5; see tests/reference/README.md).
#![allow(dead_code)]

use std::path::{Path, PathBuf};

use nalgebra::Vector3;
use serde_json::Value;

use perihelix::astro::ephemeris::{Body, StateVector};
use perihelix::astro::forces::{DistanceLaw, ForceModel, FreeParameters, NonGravModel};
use perihelix::astro::spk::SpkEphemeris;
use perihelix::astro::time::{Epoch, TimeScales};
use perihelix::config::{load_stations, StationList};
use perihelix::fit::observe::AstrometricObservation;
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
                o.ra_rad += rng.next() * sra / o.dec_rad.cos();
                o.dec_rad += rng.next() * sdec;
                o
            })
            .collect()
    }
}

/// Standard normal deviates: splitmix64 (Steele, Lea & Flood 2014) feeding
/// the Box-Muller transform; enough for noise in tests, and reproducible
/// without a dependency.
pub struct Gaussian {
    state: u64,
    spare: Option<f64>,
}

impl Gaussian {
    pub fn new(seed: u64) -> Self {
        Self {
            state: seed,
            spare: None,
        }
    }

    fn uniform(&mut self) -> f64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        ((z >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    pub fn next(&mut self) -> f64 {
        if let Some(s) = self.spare.take() {
            return s;
        }
        let (u1, u2) = (self.uniform(), self.uniform());
        let r = (-2.0 * u1.ln()).sqrt();
        let (s, c) = (std::f64::consts::TAU * u2).sin_cos();
        self.spare = Some(r * s);
        r * c
    }
}
