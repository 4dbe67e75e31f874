//! QC planning against outside references:
//! * closed-form probabilities of false rejection of 1-2s, 1-2.5s and 1-3s for N = 1, 2, 4,
//!   and of error detection of 1-3s with N = 2 for shifts of 2 and 3 SD, against the
//!   normal distribution of scipy.stats (PyPI); the familiar figures (Pfr of 1-2s ≈ 0.05
//!   for N = 1 and ≈ 0.09 for N = 2) are from memory and agree;
//! * the multirule Monte Carlo (through the bench's own rule engine) within 3 standard
//!   errors of an independent simulation written here in numpy, for 1-3s/2-2s/4-1s/10-x
//!   with one control per run (where "consecutive" has one reading);
//! * the sigma metric by worked arithmetic, and the calculator's two planning ops.

mod common;

use cuvette::engine::planning::{self, Error};
use cuvette::engine::qc::Rule;
use serde_json::{json, Value};

fn none() -> Error {
    Error {
        shift_sd: 0.0,
        random_factor: 1.0,
    }
}

#[test]
fn single_rules_in_closed_form_match_the_normal_distribution() {
    let script = r#"
import json, sys
from scipy.stats import norm
req = json.load(sys.stdin)
out = []
for k, n, d, f in req:
    inside = norm.cdf((k - d) / f) - norm.cdf((-k - d) / f)
    out.append(1 - inside ** n)
print(json.dumps(out))
"#;
    let mut cases = Vec::new();
    for (rule, k) in [
        (Rule::OneTwoS, 2.0),
        (Rule::OneTwoHalfS, 2.5),
        (Rule::OneThreeS, 3.0),
    ] {
        for n in [1usize, 2, 4] {
            cases.push((rule, k, n, 0.0, 1.0));
        }
    }
    cases.push((Rule::OneThreeS, 3.0, 2, 2.0, 1.0));
    cases.push((Rule::OneThreeS, 3.0, 2, 3.0, 1.0));
    cases.push((Rule::OneThreeS, 3.0, 2, 0.0, 2.0));
    let input: Vec<Value> = cases
        .iter()
        .map(|(_, k, n, d, f)| json!([k, n, d, f]))
        .collect();
    let want: Vec<f64> =
        serde_json::from_value(common::python_json(script, &json!(input))).unwrap();
    for ((rule, _, n, d, f), want) in cases.iter().zip(want) {
        let got = planning::rejection_probability(
            &[*rule],
            *n,
            Error {
                shift_sd: *d,
                random_factor: *f,
            },
            100_000,
            1,
        )
        .unwrap();
        assert_eq!(got.std_error, 0.0, "closed form");
        assert!(
            // statrs's erf and scipy's agree to about 1e-10 relative.
            ((got.p - want) / want).abs() < 1e-9,
            "{} N={n} shift {d}: {} vs scipy {want}",
            rule.code(),
            got.p
        );
    }
    // From memory (the usual planning tables): 1-2s rejects about 5 % of good runs with
    // one control and about 9 % with two.
    let one = planning::single_rule(2.0, 1, none()).unwrap().p;
    let two = planning::single_rule(2.0, 2, none()).unwrap().p;
    assert!((one - 0.046).abs() < 0.001 && (two - 0.089).abs() < 0.001);
}

#[test]
fn the_multirule_monte_carlo_agrees_with_an_independent_simulation() {
    // numpy: one control per run, 12 runs in control then the run under test; the run
    // is rejected when a rule's window ending with its result is broken.
    let script = r#"
import json, sys
import numpy as np
req = json.load(sys.stdin)
rng = np.random.default_rng(20261202)
out = []
for shift in req["shifts"]:
    m = req["trials"]
    z = rng.standard_normal((m, 13))
    z[:, -1] += shift
    last = z[:, -1]
    r13 = np.abs(last) > 3
    r22 = ((z[:, -2:] > 2).all(1)) | ((z[:, -2:] < -2).all(1))
    r41 = ((z[:, -4:] > 1).all(1)) | ((z[:, -4:] < -1).all(1))
    r10 = ((z[:, -10:] > 0).all(1)) | ((z[:, -10:] < 0).all(1))
    p = float((r13 | r22 | r41 | r10).mean())
    out.append([p, (p * (1 - p) / m) ** 0.5])
print(json.dumps(out))
"#;
    let shifts = [0.0, 1.0, 2.0];
    let reference: Vec<(f64, f64)> = serde_json::from_value(common::python_json(
        script,
        &json!({"shifts": shifts, "trials": 400_000}),
    ))
    .unwrap();
    let rules = [Rule::OneThreeS, Rule::TwoTwoS, Rule::FourOneS, Rule::TenX];
    for (shift, (want, want_se)) in shifts.iter().zip(reference) {
        let got = planning::rejection_probability(
            &rules,
            1,
            Error {
                shift_sd: *shift,
                random_factor: 1.0,
            },
            100_000,
            7,
        )
        .unwrap();
        let se = (got.std_error.powi(2) + want_se.powi(2)).sqrt();
        assert!(
            (got.p - want).abs() <= 3.0 * se,
            "shift {shift}: {} ± {} vs numpy {want} ± {want_se}",
            got.p,
            got.std_error
        );
        assert!(got.std_error > 0.0);
    }
}

/// Sigma = (TEa − |bias|) / CV, worked arithmetic: (10 − 1) / 1.5 = 6; (8 − 2) / 2 = 3;
/// (20 − 5) / 3 = 5. (The published worked example is not in the repository yet; it is
/// the QC-planning issue's check.)
#[test]
fn the_sigma_metric_is_the_allowable_error_left_over_the_cv() {
    for (tea, bias, cv, sigma) in [
        (10.0, 1.0, 1.5, 6.0),
        (8.0, 2.0, 2.0, 3.0),
        (20.0, 5.0, 3.0, 5.0),
    ] {
        let got = planning::sigma(tea, bias, cv).unwrap();
        assert!((got - sigma).abs() < 1e-12, "{tea} {bias} {cv}: {got}");
        assert_eq!(planning::sigma(tea, -bias, cv).unwrap(), got, "|bias|");
    }
}

#[test]
fn the_calculator_answers_the_planning_ops() {
    let (code, out) = cuvette::calc::run(
        r#"{"op":"rejection-probability","rules":["1-3s"],"n_per_run":2,"systematic_shift_sd":2,"random_error_factor":1}"#,
    );
    assert_eq!(code, 0, "{out}");
    let v: Value = serde_json::from_str(&out).unwrap();
    let want = planning::single_rule(
        3.0,
        2,
        Error {
            shift_sd: 2.0,
            random_factor: 1.0,
        },
    )
    .unwrap();
    assert_eq!(v["probability"].as_f64().unwrap(), want.p);
    assert_eq!(v["std_error"].as_f64().unwrap(), 0.0);
    let (code, out) = cuvette::calc::run(
        r#"{"op":"rejection-probability","rules":["1-3s","2-2s","R-4s"],"n_per_run":2,"systematic_shift_sd":0,"random_error_factor":1,"trials":5000}"#,
    );
    assert_eq!(code, 0, "{out}");
    let v: Value = serde_json::from_str(&out).unwrap();
    assert!(v["std_error"].as_f64().unwrap() > 0.0);
    let (code, out) =
        cuvette::calc::run(r#"{"op":"sigma","tea_pct":10,"bias_pct":1,"cv_pct":1.5}"#);
    assert_eq!(code, 0);
    let v: Value = serde_json::from_str(&out).unwrap();
    assert!((v["sigma"].as_f64().unwrap() - 6.0).abs() < 1e-12);
    let (code, out) = cuvette::calc::run(r#"{"op":"sigma","tea_pct":10,"bias_pct":1,"cv_pct":0}"#);
    assert_eq!(code, 2);
    assert!(out.contains("cv_pct"));
}
