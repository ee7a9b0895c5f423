//! Propagation cost: a hyperbolic orbit over a one-year arc with planets,
//! relativity, non-gravitational terms and the variational equations, read
//! at 1,000 epochs; and one force evaluation with its partials.
//!
//! The planets come from a small analytic stand-in (circular orbits) so
//! that the figure measures the integrator and the force model, not an
//! ephemeris file. Run: `cargo bench --bench propagate`.

use std::hint::black_box;

use criterion::{criterion_group, criterion_main, Criterion};
use nalgebra::{Rotation3, Vector3};
use perihelix::astro::constants::gm;
use perihelix::astro::ephemeris::{Body, Ephemeris, EphemerisError, StateVector};
use perihelix::astro::forces::{DistanceLaw, ForceModel, FreeParameters, NonGravModel};
use perihelix::astro::propagation::{PropagationSettings, Trajectory};
use perihelix::astro::time::Epoch;

/// Planets on circular orbits of their own sizes about a fixed Sun.
struct CircularPlanets;

impl Ephemeris for CircularPlanets {
    fn state(&self, body: Body, t: Epoch) -> Result<StateVector, EphemerisError> {
        let (a, inc, phase) = match body {
            Body::Sun => return Ok(StateVector::new(Vector3::zeros(), Vector3::zeros())),
            Body::Mercury => (0.387, 0.12, 0.3),
            Body::Venus => (0.723, 0.06, 1.1),
            Body::Earth => (1.0, 0.0, 1.75),
            Body::Moon => (1.00257, 0.0, 1.75),
            Body::Mars => (1.524, 0.03, 4.0),
            Body::Jupiter => (5.203, 0.02, 0.6),
            Body::Saturn => (9.537, 0.04, 0.9),
            Body::Uranus => (19.19, 0.013, 5.5),
            Body::Neptune => (30.07, 0.03, 5.3),
        };
        let n = (gm::SUN / (a * a * a)).sqrt();
        let (s, c) = (phase + n * t.tdb_days_since_j2000()).sin_cos();
        let (si, ci) = f64::sin_cos(inc);
        Ok(StateVector::new(
            Vector3::new(a * c, a * s * ci, a * s * si),
            Vector3::new(-a * n * s, a * n * c * ci, a * n * c * si),
        ))
    }
}

/// e = 3, q = 1.2 au, half a year before perihelion.
fn hyperbolic_state() -> StateVector {
    let (q, e, nu): (f64, f64, f64) = (1.2, 3.0, -1.2);
    let p = q * (1.0 + e);
    let (s, c) = nu.sin_cos();
    let radius = p / (1.0 + e * c);
    let h = (gm::SUN / p).sqrt();
    let rotation = Rotation3::from_euler_angles(0.5, 0.2, 1.0);
    StateVector::new(
        rotation * Vector3::new(radius * c, radius * s, 0.0),
        rotation * Vector3::new(-h * s, h * (e + c), 0.0),
    )
}

fn model() -> ForceModel {
    let ng = NonGravModel::new(
        DistanceLaw::WaterIce,
        [2e-8, -1e-8, 5e-9],
        FreeParameters::ALL,
    );
    ForceModel::gravity().with_nongrav(ng).expect("valid model")
}

fn propagate_year(c: &mut Criterion) {
    let ephemeris = CircularPlanets;
    let model = model();
    let state = hyperbolic_state();
    let epoch = Epoch::from_tdb_days_since_j2000(9000.0);
    let (start, end) = (epoch.plus_days(-182.625), epoch.plus_days(182.625));
    let settings = PropagationSettings::default();
    let run = || {
        let trajectory =
            Trajectory::integrate(&ephemeris, &model, epoch, &state, start, end, &settings)
                .expect("integrates");
        let mut sum = 0.0;
        for i in 0..1000 {
            let t = start.plus_days(365.25 * i as f64 / 999.0);
            let p = trajectory.state_with_partials(t).expect("inside the arc");
            sum += p.stm[(0, 0)] + p.sensitivity[(0, 1)];
        }
        (trajectory.stats(), sum)
    };
    let (stats, _) = run();
    println!(
        "one-year hyperbolic arc: {} steps ({} rejected), {} force evaluations, {} ephemeris epochs",
        stats.accepted_steps, stats.rejected_steps, stats.force_evaluations, stats.node_evaluations
    );
    c.bench_function(
        "propagate 1 yr, 9 perturbers, GR, NG, 6x6+6x3, 1000 epochs",
        |b| b.iter(|| black_box(run())),
    );
}

fn force_evaluation(c: &mut Criterion) {
    let ephemeris = CircularPlanets;
    let model = model();
    let state = hyperbolic_state();
    let t = Epoch::from_tdb_days_since_j2000(9000.0);
    let at = model
        .perturber_positions(&ephemeris, t)
        .expect("planets known");
    c.bench_function("force with partials (positions given)", |b| {
        b.iter(|| {
            black_box(model.acceleration_with_partials(
                black_box(&at),
                &state.position_au,
                &state.velocity_au_per_day,
            ))
        })
    });
    c.bench_function("planet positions at one epoch (9 bodies)", |b| {
        b.iter(|| black_box(model.perturber_positions(&ephemeris, black_box(t))))
    });
}

criterion_group!(benches, propagate_year, force_evaluation);
criterion_main!(benches);
