//! The multirule engine on sequences built from the published rule definitions
//! (Westgard JO, Barry PL, Hunt MR, Groth T. Clin Chem 1981;27:493–501, and the
//! three-level rules of the same family). Each case is written in z-scores, turned into
//! values around an arbitrary target so the z computation is exercised too.
//! "Exceeds 2 SD" is read strictly: a result at exactly +2 SD does not exceed it.

mod common;

use cuvette::engine::qc::{
    evaluate, Action, Decision, LevelTarget, Rule, RuleSetting, Scope, Violation,
};

const TARGETS: [LevelTarget; 3] = [
    LevelTarget {
        mean: 100.0,
        sd: 5.0,
    },
    LevelTarget {
        mean: 250.0,
        sd: 10.0,
    },
    LevelTarget {
        mean: 40.0,
        sd: 2.0,
    },
];

fn rules(codes: &[&str]) -> Vec<RuleSetting> {
    codes
        .iter()
        .map(|c| RuleSetting::default_for(c.parse().expect("rule")))
        .collect()
}

/// Runs written as z-scores (NaN = level not run) → values.
fn runs(z: &[&[f64]]) -> (Vec<LevelTarget>, Vec<Vec<Option<f64>>>) {
    let n = z[0].len();
    let targets = TARGETS[..n].to_vec();
    let values = z
        .iter()
        .map(|run| {
            run.iter()
                .zip(&targets)
                .map(|(&z, t)| (!z.is_nan()).then_some(t.mean + z * t.sd))
                .collect()
        })
        .collect();
    (targets, values)
}

type Expect<'a> = (&'a str, Scope, &'a [usize], &'a [usize]);

/// Evaluate and compare the verdict of the LAST run: decision and the exact violations.
fn check(rule_codes: &[&str], z: &[&[f64]], decision: Decision, expected: &[Expect]) {
    let (targets, values) = runs(z);
    let verdicts = evaluate(&targets, &values, &rules(rule_codes)).expect("evaluate");
    let last = verdicts.last().expect("a run");
    let got: Vec<(String, Scope, Vec<usize>, Vec<usize>)> = last
        .violations
        .iter()
        .map(|v: &Violation| {
            (
                v.rule.code().to_string(),
                v.scope,
                v.levels.clone(),
                v.runs.clone(),
            )
        })
        .collect();
    let want: Vec<(String, Scope, Vec<usize>, Vec<usize>)> = expected
        .iter()
        .map(|(r, s, l, n)| (r.to_string(), *s, l.to_vec(), n.to_vec()))
        .collect();
    assert_eq!(got, want, "rules {rule_codes:?}, z {z:?}");
    assert_eq!(last.decision, decision, "rules {rule_codes:?}, z {z:?}");
}

const WESTGARD: &[&str] = &["1-2s", "1-3s", "2-2s", "R-4s", "4-1s", "10-x"];
use Scope::{AcrossRuns, AcrossRunsAndLevels, WithinRun};

#[test]
fn one_result_rules() {
    check(WESTGARD, &[&[0.0, 0.0]], Decision::Accept, &[]);
    // Exactly 2 SD does not exceed the limit.
    check(WESTGARD, &[&[2.0, 0.0]], Decision::Accept, &[]);
    check(
        WESTGARD,
        &[&[2.1, 0.0]],
        Decision::Warning,
        &[("1-2s", WithinRun, &[0], &[0])],
    );
    check(
        WESTGARD,
        &[&[0.3, -3.2]],
        Decision::Reject,
        &[
            ("1-2s", WithinRun, &[1], &[0]),
            ("1-3s", WithinRun, &[1], &[0]),
        ],
    );
    check(
        &["1-2.5s"],
        &[&[2.6, 0.0]],
        Decision::Reject,
        &[("1-2.5s", WithinRun, &[0], &[0])],
    );
    check(
        &["1-3.5s"],
        &[&[3.4, -3.6]],
        Decision::Reject,
        &[("1-3.5s", WithinRun, &[1], &[0])],
    );
}

#[test]
fn two_two_s_within_run_across_runs_and_not_on_opposite_sides() {
    check(
        WESTGARD,
        &[&[2.2, 2.4]],
        Decision::Reject,
        &[
            ("1-2s", WithinRun, &[0, 1], &[0]),
            ("2-2s", WithinRun, &[0, 1], &[0]),
        ],
    );
    check(
        &["2-2s"],
        &[&[2.2, 0.1], &[2.3, -0.4]],
        Decision::Reject,
        &[("2-2s", AcrossRuns, &[0], &[0, 1])],
    );
    // Level 1 of run 0 then level 0 of run 1: consecutive across runs and levels.
    check(
        &["2-2s"],
        &[&[0.0, 2.5], &[2.1, 0.0]],
        Decision::Reject,
        &[("2-2s", AcrossRunsAndLevels, &[0, 1], &[0, 1])],
    );
    // +2.2 and −2.2: not the same limit, so no 2-2s; R-4s instead.
    check(&["2-2s"], &[&[2.2, -2.2]], Decision::Accept, &[]);
}

#[test]
fn range_rule_is_within_run_only() {
    check(
        &["R-4s"],
        &[&[2.1, -2.1]],
        Decision::Reject,
        &[("R-4s", WithinRun, &[0, 1], &[0])],
    );
    // The same spread across two runs is not R-4s.
    check(
        &["R-4s"],
        &[&[2.1, 0.0], &[-2.1, 0.0]],
        Decision::Accept,
        &[],
    );
    // A range above 4 SD with both on one side is not R-4s as defined (+ above, − below).
    check(&["R-4s"], &[&[4.5, 0.2]], Decision::Accept, &[]);
}

#[test]
fn four_one_s_within_level_and_across_levels() {
    let level0 = [&[1.2, 0.0][..], &[1.5, 0.0], &[1.1, 0.0], &[1.3, 0.0]];
    check(
        &["4-1s"],
        &level0,
        Decision::Reject,
        &[("4-1s", AcrossRuns, &[0], &[0, 1, 2, 3])],
    );
    check(&["4-1s"], &level0[..3], Decision::Accept, &[]);
    check(
        &["4-1s"],
        &[&[1.5, 1.2], &[1.1, 1.9]],
        Decision::Reject,
        &[("4-1s", AcrossRunsAndLevels, &[0, 1], &[0, 1])],
    );
    // One below −1 SD breaks the run of four.
    check(
        &["4-1s"],
        &[&[1.5, 1.2], &[-1.1, 1.9]],
        Decision::Accept,
        &[],
    );
}

#[test]
fn ten_x_within_level_and_across_levels() {
    let z: Vec<Vec<f64>> = (0..10)
        .map(|i| vec![0.4, if i % 2 == 0 { 0.5 } else { -0.5 }])
        .collect();
    let refs: Vec<&[f64]> = z.iter().map(|r| r.as_slice()).collect();
    check(
        &["10-x"],
        &refs,
        Decision::Reject,
        &[("10-x", AcrossRuns, &[0], &(0..10).collect::<Vec<_>>())],
    );
    check(&["10-x"], &refs[..9], Decision::Accept, &[]);
    // Five runs of both levels above the mean: ten results across runs and levels.
    let refs: Vec<&[f64]> = (0..5).map(|_| &[0.4, 0.7][..]).collect();
    check(
        &["10-x"],
        &refs,
        Decision::Reject,
        &[("10-x", AcrossRunsAndLevels, &[0, 1], &[0, 1, 2, 3, 4])],
    );
    check(&["10-x"], &refs[..4], Decision::Accept, &[]);
    // 8-x on one level.
    let eight: Vec<&[f64]> = (0..8).map(|_| &[-0.2, 0.0][..]).collect();
    check(
        &["8-x"],
        &eight,
        Decision::Reject,
        &[("8-x", AcrossRuns, &[0], &[0, 1, 2, 3, 4, 5, 6, 7])],
    );
}

#[test]
fn a_missing_level_is_skipped_not_counted() {
    let nan = f64::NAN;
    check(
        &["2-2s"],
        &[&[0.0, 2.2], &[0.1, nan], &[0.2, 2.6]],
        Decision::Reject,
        &[("2-2s", AcrossRuns, &[1], &[0, 2])],
    );
    // A run with no results at all gets no verdict of its own beyond accept.
    let (t, v) = runs(&[&[nan, nan]]);
    let verdicts = evaluate(&t, &v, &rules(WESTGARD)).unwrap();
    assert_eq!(verdicts[0].decision, Decision::Accept);
}

#[test]
fn three_level_rules() {
    let three = &["2of3-2s", "3-1s", "6-x", "9-x"];
    check(
        three,
        &[&[2.1, 0.0, 2.4]],
        Decision::Reject,
        &[("2of3-2s", WithinRun, &[0, 2], &[0])],
    );
    check(
        three,
        &[&[1.2, 1.1, 1.5]],
        Decision::Reject,
        &[("3-1s", WithinRun, &[0, 1, 2], &[0])],
    );
    check(
        &["6-x"],
        &[&[0.2, 0.3, 0.1], &[0.5, 0.9, 0.2]],
        Decision::Reject,
        &[("6-x", AcrossRunsAndLevels, &[0, 1, 2], &[0, 1])],
    );
    // 2 of 3 across runs within a level: the newest result must be one of the two.
    check(
        &["2of3-2s"],
        &[&[2.1, 0.0, 0.0], &[0.5, 0.0, 0.0], &[2.2, 0.0, 0.0]],
        Decision::Reject,
        &[("2of3-2s", AcrossRuns, &[0], &[0, 2])],
    );
    check(
        &["2of3-2s"],
        &[&[2.1, 0.0, 0.0], &[2.2, 0.0, 0.0], &[0.5, 0.0, 0.0]],
        Decision::Accept,
        &[],
    );
    // 12-x over four runs of three levels.
    let twelve: Vec<&[f64]> = (0..4).map(|_| &[-0.3, -0.1, -0.8][..]).collect();
    check(
        &["12-x"],
        &twelve,
        Decision::Reject,
        &[("12-x", AcrossRunsAndLevels, &[0, 1, 2], &[0, 1, 2, 3])],
    );
}

#[test]
fn actions_are_the_labs_choice() {
    let (t, v) = runs(&[&[2.2, 2.4]]);
    let set = [
        RuleSetting {
            rule: Rule::OneTwoS,
            action: Action::Reject,
        },
        RuleSetting {
            rule: Rule::TwoTwoS,
            action: Action::Warning,
        },
    ];
    let verdict = &evaluate(&t, &v, &set).unwrap()[0];
    assert_eq!(verdict.decision, Decision::Reject);
    let set = [RuleSetting {
        rule: Rule::TwoTwoS,
        action: Action::Warning,
    }];
    assert_eq!(
        evaluate(&t, &v, &set).unwrap()[0].decision,
        Decision::Warning
    );
    assert_eq!(Rule::OneTwoS.default_action(), Action::Warning);
    assert_eq!(Rule::OneThreeS.default_action(), Action::Reject);
}

/// Every run gets its own verdict from the runs up to it (later runs change nothing
/// earlier).
#[test]
fn each_run_is_judged_on_its_history() {
    let (t, v) = runs(&[&[2.2, 0.0], &[2.3, 0.0], &[0.0, 0.0]]);
    let verdicts = evaluate(&t, &v, &rules(WESTGARD)).unwrap();
    let decisions: Vec<Decision> = verdicts.iter().map(|v| v.decision).collect();
    assert_eq!(
        decisions,
        vec![Decision::Warning, Decision::Reject, Decision::Accept]
    );
}

/// QC statistics against numpy (mean, std with ddof=1) on seeded random results.
#[test]
fn statistics_agree_with_numpy() {
    use cuvette::engine::qcstats::summarize;
    use rand::{rngs::StdRng, Rng, SeedableRng};
    let mut rng = StdRng::seed_from_u64(7);
    let sets: Vec<Vec<f64>> = (0..20)
        .map(|_| {
            let n = rng.gen_range(2..60);
            let mean = rng.gen_range(1.0..500.0);
            (0..n)
                .map(|_| mean * (1.0 + rng.gen_range(-0.05..0.05)))
                .collect()
        })
        .collect();
    let numpy = common::python_json(
        "import json,sys,numpy as np\nd=json.load(sys.stdin)\n\
         print(json.dumps([[float(np.mean(v)), float(np.std(v, ddof=1))] for v in d]))",
        &serde_json::json!(sets),
    );
    for (v, r) in sets.iter().zip(numpy.as_array().unwrap()) {
        let s = summarize(v).unwrap();
        let (m, sd) = (r[0].as_f64().unwrap(), r[1].as_f64().unwrap());
        assert!((s.mean - m).abs() <= 1e-12 * m.abs());
        assert!((s.sd.unwrap() - sd).abs() <= 1e-9 * sd);
    }
}

/// With restart-after-reject, the runs after a rejection are judged on their own:
/// +2.2 SD in the run after a 2-2s rejection is only a 1-2s warning, not another 2-2s.
#[test]
fn restart_after_reject_starts_the_windows_afresh() {
    use cuvette::engine::qc::{evaluate_with, Options};
    let (t, v) = runs(&[&[2.2, 0.0], &[2.3, 0.0], &[2.4, 0.0]]);
    let keep = evaluate_with(&t, &v, &rules(WESTGARD), Options::default()).unwrap();
    assert_eq!(keep[2].decision, Decision::Reject);
    let restart = evaluate_with(
        &t,
        &v,
        &rules(WESTGARD),
        Options {
            restart_after_reject: true,
        },
    )
    .unwrap();
    assert_eq!(restart[1].decision, Decision::Reject);
    assert_eq!(restart[2].decision, Decision::Warning);
}
