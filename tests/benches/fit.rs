//! Timing of the engine's hot paths: a 4PL and a 5PL fit of the ryegrass dose–response
//! set (24 points, the same curve `tools/bench-4pl.sh` times with scipy), linear and
//! quadratic fits of NIST StRD Norris (36 points) and Pontius (40 points), the sets the
//! same script times with numpy.polyfit, and a year of two-level QC runs through the
//! multirule set.

use criterion::{black_box, criterion_group, criterion_main, Criterion};
use cuvette::engine::calibration::{fit, CalPoint, ModelKind, ReplicateUse, Weighting};
use cuvette::engine::qc::{evaluate, LevelTarget, Rule, RuleSetting};

fn ryegrass() -> Vec<CalPoint> {
    let dir = std::env::var("CUVETTE_REFERENCE")
        .unwrap_or_else(|_| concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference").to_string());
    let text =
        std::fs::read_to_string(format!("{dir}/dose-response/ryegrass.csv")).expect("ryegrass.csv");
    text.lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| {
            let (r, c) = l.split_once(',').expect("two columns");
            CalPoint {
                conc: c.trim().parse().expect("conc"),
                signal: r.trim().parse().expect("rootl"),
            }
        })
        .collect()
}

/// A NIST StRD set's (x, y) as calibration points (x = concentration).
fn nist(name: &str) -> Vec<CalPoint> {
    let dir = std::env::var("CUVETTE_REFERENCE")
        .unwrap_or_else(|_| concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference").to_string());
    let text = std::fs::read_to_string(format!("{dir}/nist/{name}.dat")).expect("NIST set");
    let set = cuvette::verification::parse_strd(&text).expect("StRD");
    set.x
        .iter()
        .zip(&set.y)
        .map(|(&conc, &signal)| CalPoint { conc, signal })
        .collect()
}

fn bench(c: &mut Criterion) {
    for (name, model, set) in [
        ("fit_linear_norris", ModelKind::Linear, "Norris"),
        ("fit_quadratic_pontius", ModelKind::Quadratic, "Pontius"),
    ] {
        let pts = nist(set);
        c.bench_function(name, |b| {
            b.iter(|| {
                fit(
                    model,
                    Weighting::None,
                    ReplicateUse::Individual,
                    black_box(&pts),
                )
                .expect("fit")
            })
        });
    }
    let pts = ryegrass();
    c.bench_function("fit_4pl_ryegrass", |b| {
        b.iter(|| {
            fit(
                ModelKind::FourPl,
                Weighting::None,
                ReplicateUse::Individual,
                black_box(&pts),
            )
            .expect("fit")
        })
    });
    c.bench_function("fit_5pl_ryegrass", |b| {
        b.iter(|| {
            fit(
                ModelKind::FivePl,
                Weighting::None,
                ReplicateUse::Individual,
                black_box(&pts),
            )
            .expect("fit")
        })
    });
    // 365 runs of two levels, deterministic pseudo-random z in [-2.5, 2.5].
    let targets = [
        LevelTarget {
            mean: 100.0,
            sd: 2.0,
        },
        LevelTarget {
            mean: 250.0,
            sd: 5.0,
        },
    ];
    let mut state = 12345u64;
    let mut z = || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((state >> 33) as f64 / (1u64 << 31) as f64) * 5.0 - 2.5
    };
    let runs: Vec<Vec<Option<f64>>> = (0..365)
        .map(|_| vec![Some(100.0 + 2.0 * z()), Some(250.0 + 5.0 * z())])
        .collect();
    let rules: Vec<RuleSetting> = ["1-2s", "1-3s", "2-2s", "R-4s", "4-1s", "10-x"]
        .iter()
        .map(|r| RuleSetting::default_for(r.parse::<Rule>().expect("rule")))
        .collect();
    c.bench_function("qc_year_of_runs", |b| {
        b.iter(|| evaluate(&targets, black_box(&runs), &rules).expect("qc"))
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
