//! Mars started from a de421 state and propagated one year under the force
//! model, with the other planets from de421, must stay with de421's Mars.
//!
//! Outside reference: JPL DE421 (the de421.bsp file carried by the PyPI
//! package skyfield-data 7.0.0, read by our SPK reader, which the tests in
//! service/astro/spk.rs check against jplephem 2.24 to 1 ulp).

use std::path::Path;

use perihelix::astro::constants::{gm, AU_KM};
use perihelix::astro::ephemeris::{Body, Ephemeris};
use perihelix::astro::forces::ForceModel;
use perihelix::astro::propagation::{PropagationSettings, Trajectory};
use perihelix::astro::spk::SpkEphemeris;
use perihelix::astro::time::Epoch;

/// Acceptance bound of the astro-core work: within 20 km after one year.
const MAX_ERROR_KM: f64 = 20.0;

fn de421() -> SpkEphemeris {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/data/de421.bsp");
    assert!(
        path.is_file(),
        "{} is missing: run bash tests/reference/fetch-de421.sh",
        path.display()
    );
    SpkEphemeris::open(&path).unwrap()
}

#[test]
fn mars_stays_with_de421_for_a_year() {
    let eph = de421();
    // 2020-01-01 TDB, an arbitrary epoch inside de421's span.
    let epoch = Epoch::from_tdb_jd(2_458_849.5, 0.0);
    let end = epoch.plus_days(365.25);
    let start_state = eph.heliocentric_state(Body::Mars, epoch).unwrap();
    let others: Vec<Body> = Body::PERTURBERS
        .iter()
        .copied()
        .filter(|b| *b != Body::Mars)
        .collect();
    // Mars' own GM joins the central term: the heliocentric two-body
    // problem of Sun and Mars has mu = GM_sun + GM_mars.
    let model = ForceModel::new(&others, true, None)
        .unwrap()
        .with_central_gm(gm::SUN + gm::MARS_SYSTEM)
        .unwrap();
    let settings = PropagationSettings {
        partials: false,
        ..PropagationSettings::default()
    };
    let traj =
        Trajectory::integrate(&eph, &model, epoch, &start_state, epoch, end, &settings).unwrap();
    let mut worst_km: f64 = 0.0;
    for k in 0..=73 {
        let t = epoch.plus_days(365.25 * f64::from(k) / 73.0);
        let ours = traj.state(t).unwrap();
        let truth = eph.heliocentric_state(Body::Mars, t).unwrap();
        let err_km = (ours.position_au - truth.position_au).norm() * AU_KM;
        worst_km = worst_km.max(err_km);
    }
    println!("Mars vs de421 over one year: worst {worst_km:.3} km");
    assert!(worst_km < MAX_ERROR_KM, "worst {worst_km} km");
}
