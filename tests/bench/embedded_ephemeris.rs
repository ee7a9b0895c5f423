use std::hint::black_box;

use criterion::{criterion_group, criterion_main, Criterion};
use perihelix::astro::embedded::{AnalyticTheories, EmbeddedEphemeris};
use perihelix::astro::ephemeris::{Body, Ephemeris};
use perihelix::astro::time::Epoch;

fn benches(c: &mut Criterion) {
    let start = Epoch::from_tdb_days_since_j2000(8765.5);
    let end = Epoch::from_tdb_days_since_j2000(9131.5);
    let mut g = c.benchmark_group("embedded");
    g.sample_size(10);
    // Segments are fitted on first use: filling a year means asking every
    // body once per day of it.
    g.bench_function("fill_1_year", |b| {
        b.iter(|| {
            let eph = EmbeddedEphemeris::new(black_box(start), black_box(end)).unwrap();
            for day in 0..365 {
                for body in Body::ALL {
                    black_box(eph.state(body, start.plus_days(day as f64)).unwrap());
                }
            }
            eph
        })
    });
    let eph = EmbeddedEphemeris::new(start, end).unwrap();
    let mut day = 0.0;
    g.sample_size(50);
    g.bench_function("state_one_body", |b| {
        b.iter(|| {
            day = (day + 0.731) % 365.0;
            eph.state(black_box(Body::Jupiter), start.plus_days(day))
                .unwrap()
        })
    });
    g.bench_function("state_all_ten_bodies", |b| {
        b.iter(|| {
            day = (day + 0.731) % 365.0;
            let t = start.plus_days(day);
            for body in Body::ALL {
                black_box(eph.state(body, t).unwrap());
            }
        })
    });
    let th = AnalyticTheories::new();
    for body in [
        Body::Moon,
        Body::Earth,
        Body::Mercury,
        Body::Neptune,
        Body::Uranus,
    ] {
        g.bench_function(format!("series_{body:?}"), |b| {
            b.iter(|| th.position_au(black_box(body), start.plus_days(3.3)))
        });
    }
    g.finish();
}

criterion_group!(group, benches);
criterion_main!(group);
