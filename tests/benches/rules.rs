//! Rule evaluation at scale: 30 tests × 2 control levels, two runs a day for three
//! years (131,400 results at size 1), in control (z from a standard normal), re-evaluated
//! through the usual two-level multirule set (1-2s warning; 1-3s, 2-2s, R-4s, 4-1s, 10-x
//! rejecting) and through every rule the engine knows. Prints the time per result at sizes 1, 2 and 4 and
//! the ratios of those times to size 1 (linear evaluation: ≈ 2 and ≈ 4), and the cost
//! of judging one new run from the stored windows against re-evaluating one test's
//! whole history, measured in one run. `BENCH_SCALE` divides the sizes (a smoke run).
//! Invented data for measuring only.

use std::hint::black_box;
use std::time::{Duration, Instant};

use cuvette::engine::qc::{evaluate, Judge, LevelTarget, Options, Rule, RuleSetting};
use rand::{Rng, SeedableRng};
use rand_distr::StandardNormal;

const TESTS: usize = 30;

fn history(runs_per_test: usize, seed: u64) -> Vec<Vec<Vec<Option<f64>>>> {
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    (0..TESTS)
        .map(|_| {
            (0..runs_per_test)
                .map(|_| {
                    let z1: f64 = rng.sample(StandardNormal);
                    let z2: f64 = rng.sample(StandardNormal);
                    vec![Some(100.0 + 2.0 * z1), Some(250.0 + 5.0 * z2)]
                })
                .collect()
        })
        .collect()
}

/// The fastest of `repeats` timings of `f` (the least disturbed by the machine).
fn fastest(repeats: usize, mut f: impl FnMut()) -> Duration {
    (0..repeats)
        .map(|_| {
            let t = Instant::now();
            f();
            t.elapsed()
        })
        .min()
        .expect("at least one repeat")
}

fn sizes(name: &str, targets: &[LevelTarget], rules: &[RuleSetting], base_runs: usize) {
    let mut per_result = Vec::new();
    for size in [1usize, 2, 4] {
        let labs = history(base_runs * size, 20261203);
        let results = TESTS * base_runs * size * 2;
        let t = fastest(5, || {
            for runs in &labs {
                black_box(evaluate(targets, black_box(runs), rules).expect("qc"));
            }
        });
        let ns = t.as_secs_f64() * 1e9 / results as f64;
        per_result.push(t.as_secs_f64());
        println!(
            "{name}, size {size}: {TESTS} tests x 2 levels x {} runs = {results} results: {t:?} ({ns:.0} ns a result)",
            base_runs * size
        );
    }
    println!(
        "{name}: time ratios to size 1 (linear: 2 and 4): size 2 {:.2}, size 4 {:.2}",
        per_result[1] / per_result[0],
        per_result[2] / per_result[0]
    );
}

fn main() {
    let scale: usize = std::env::var("BENCH_SCALE")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(1)
        .max(1);
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
    let usual: Vec<RuleSetting> = ["1-2s", "1-3s", "2-2s", "R-4s", "4-1s", "10-x"]
        .iter()
        .map(|r| RuleSetting::default_for(r.parse::<Rule>().expect("rule")))
        .collect();
    let every: Vec<RuleSetting> = Rule::ALL.map(RuleSetting::default_for).to_vec();
    let base_runs = 2 * 1095 / scale;
    for (name, rules) in [("usual six rules", &usual), ("all 14 rules", &every)] {
        sizes(name, &targets, rules, base_runs);
    }
    let rules = &usual;
    // One new run: judged from the stored windows, against replaying the test's history.
    let one = &history(base_runs * 4, 7)[0];
    let mut judge = Judge::new(&targets, rules, Options::default()).expect("judge");
    for run in one {
        judge.judge(run).expect("run");
    }
    let next = vec![Some(103.0), Some(262.0)];
    let from_state = fastest(200, || {
        black_box(judge.clone().judge(black_box(&next)).expect("run"));
    });
    let mut all = one.clone();
    all.push(next.clone());
    let replay = fastest(5, || {
        black_box(evaluate(&targets, black_box(&all), rules).expect("qc"));
    });
    println!(
        "one new run after {} runs: from the stored windows {from_state:?}, replaying the history {replay:?}; replay/state = {:.0}",
        one.len(),
        replay.as_secs_f64() / from_state.as_secs_f64()
    );
}
