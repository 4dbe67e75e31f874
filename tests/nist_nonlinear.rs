//! The Levenberg–Marquardt core on NIST StRD nonlinear regression sets, from both of
//! NIST's starting values. Source: NIST Statistical Reference Datasets, nonlinear
//! least squares ("nls"), files in `tests/reference/nist/`. Requirement: certified
//! RSS to ≥ 9 correct digits, parameters to ≥ 6 (Bennett5 ≥ 5).

mod common;

use common::{correct_digits, nist};
use cuvette::engine::lm::{self, CurveModel, CurveProblem, Settings};

/// A NIST model written as value + analytic gradient.
struct Model {
    n: usize,
    f: fn(f64, &[f64]) -> f64,
    g: fn(f64, &[f64], &mut [f64]),
}

impl CurveModel for Model {
    fn n_params(&self) -> usize {
        self.n
    }
    fn value(&self, x: f64, p: &[f64]) -> Option<f64> {
        let v = (self.f)(x, p);
        v.is_finite().then_some(v)
    }
    fn gradient(&self, x: f64, p: &[f64], g: &mut [f64]) -> Option<()> {
        (self.g)(x, p, g);
        g.iter().all(|v| v.is_finite()).then_some(())
    }
}

fn rat42() -> Model {
    Model {
        n: 3,
        f: |x, b| b[0] / (1.0 + (b[1] - b[2] * x).exp()),
        g: |x, b, g| {
            let e = (b[1] - b[2] * x).exp();
            let d = 1.0 + e;
            g[0] = 1.0 / d;
            g[1] = -b[0] * e / (d * d);
            g[2] = b[0] * e * x / (d * d);
        },
    }
}

fn rat43() -> Model {
    Model {
        n: 4,
        f: |x, b| b[0] / (1.0 + (b[1] - b[2] * x).exp()).powf(1.0 / b[3]),
        g: |x, b, g| {
            let e = (b[1] - b[2] * x).exp();
            let d = 1.0 + e;
            let p = d.powf(-1.0 / b[3]);
            g[0] = p;
            g[1] = -b[0] * p * e / (b[3] * d);
            g[2] = b[0] * p * e * x / (b[3] * d);
            g[3] = b[0] * p * d.ln() / (b[3] * b[3]);
        },
    }
}

fn misra1a() -> Model {
    Model {
        n: 2,
        f: |x, b| b[0] * (1.0 - (-b[1] * x).exp()),
        g: |x, b, g| {
            let e = (-b[1] * x).exp();
            g[0] = 1.0 - e;
            g[1] = b[0] * x * e;
        },
    }
}

fn mgh09() -> Model {
    Model {
        n: 4,
        f: |x, b| b[0] * (x * x + x * b[1]) / (x * x + x * b[2] + b[3]),
        g: |x, b, g| {
            let num = x * x + x * b[1];
            let den = x * x + x * b[2] + b[3];
            g[0] = num / den;
            g[1] = b[0] * x / den;
            g[2] = -b[0] * num * x / (den * den);
            g[3] = -b[0] * num / (den * den);
        },
    }
}

fn thurber() -> Model {
    Model {
        n: 7,
        f: |x, b| {
            (b[0] + b[1] * x + b[2] * x * x + b[3] * x.powi(3))
                / (1.0 + b[4] * x + b[5] * x * x + b[6] * x.powi(3))
        },
        g: |x, b, g| {
            let num = b[0] + b[1] * x + b[2] * x * x + b[3] * x.powi(3);
            let den = 1.0 + b[4] * x + b[5] * x * x + b[6] * x.powi(3);
            g[0] = 1.0 / den;
            g[1] = x / den;
            g[2] = x * x / den;
            g[3] = x.powi(3) / den;
            let q = -num / (den * den);
            g[4] = q * x;
            g[5] = q * x * x;
            g[6] = q * x.powi(3);
        },
    }
}

fn eckerle4() -> Model {
    Model {
        n: 3,
        f: |x, b| (b[0] / b[1]) * (-0.5 * ((x - b[2]) / b[1]).powi(2)).exp(),
        g: |x, b, g| {
            let u = (x - b[2]) / b[1];
            let e = (-0.5 * u * u).exp();
            g[0] = e / b[1];
            g[1] = b[0] * e * (u * u - 1.0) / (b[1] * b[1]);
            g[2] = b[0] * e * u / (b[1] * b[1]);
        },
    }
}

fn bennett5() -> Model {
    Model {
        n: 3,
        f: |x, b| b[0] * (b[1] + x).powf(-1.0 / b[2]),
        g: |x, b, g| {
            let s = b[1] + x;
            let p = s.powf(-1.0 / b[2]);
            g[0] = p;
            g[1] = -b[0] * p / (b[2] * s);
            g[2] = b[0] * p * s.ln() / (b[2] * b[2]);
        },
    }
}

struct Outcome {
    rss_digits: f64,
    min_param_digits: f64,
}

fn run(name: &str, model: &Model, start: usize) -> Outcome {
    let set = nist(name);
    let prob = CurveProblem {
        model,
        x: &set.x,
        y: &set.y,
        weights: None,
    };
    let rep = lm::solve(&prob, &set.starts[start], &Settings::default());
    assert!(
        rep.termination.converged(),
        "{name} start {}: {:?} after {} evaluations",
        start + 1,
        rep.termination,
        rep.evaluations
    );
    let rss_digits = correct_digits(rep.rss, set.certified_rss);
    let min_param_digits = rep
        .params
        .iter()
        .zip(&set.certified)
        .map(|(&g, &w)| correct_digits(g, w))
        .fold(f64::INFINITY, f64::min);
    // Certified standard deviations of the parameters, to ≥ 4 digits.
    let se = lm::standard_errors(&rep.jacobian, rep.rss).expect("standard errors");
    let se_digits = se
        .iter()
        .zip(&set.certified_sd)
        .map(|(&g, &w)| correct_digits(g, w))
        .fold(f64::INFINITY, f64::min);
    println!(
        "{name} start {}: RSS {rss_digits:.1} digits, parameters >= {min_param_digits:.1} digits, \
         standard errors >= {se_digits:.1} digits, {} evaluations ({:?})",
        start + 1,
        rep.evaluations,
        rep.termination
    );
    assert!(
        se_digits >= 4.0,
        "{name}: standard errors only {se_digits:.1} digits"
    );
    Outcome {
        rss_digits,
        min_param_digits,
    }
}

fn check(name: &str, model: Model, param_digits: f64) {
    for start in 0..2 {
        let o = run(name, &model, start);
        assert!(
            o.rss_digits >= 9.0,
            "{name} start {}: RSS {:.1} digits",
            start + 1,
            o.rss_digits
        );
        assert!(
            o.min_param_digits >= param_digits,
            "{name} start {}: parameters {:.1} digits",
            start + 1,
            o.min_param_digits
        );
    }
}

#[test]
fn rat42_both_starts() {
    check("Rat42", rat42(), 6.0);
}

#[test]
fn rat43_both_starts() {
    check("Rat43", rat43(), 6.0);
}

#[test]
fn misra1a_both_starts() {
    check("Misra1a", misra1a(), 6.0);
}

#[test]
fn mgh09_both_starts() {
    check("MGH09", mgh09(), 6.0);
}

#[test]
fn thurber_both_starts() {
    check("Thurber", thurber(), 6.0);
}

#[test]
fn eckerle4_both_starts() {
    check("Eckerle4", eckerle4(), 6.0);
}

#[test]
fn bennett5_both_starts() {
    check("Bennett5", bennett5(), 5.0);
}

/// Every analytic gradient above agrees with central finite differences at both
/// starting points (a wrong Jacobian slows or misleads the solver).
#[test]
fn analytic_gradients_match_finite_differences() {
    let cases: Vec<(&str, Model)> = vec![
        ("Rat42", rat42()),
        ("Rat43", rat43()),
        ("Misra1a", misra1a()),
        ("MGH09", mgh09()),
        ("Thurber", thurber()),
        ("Eckerle4", eckerle4()),
        ("Bennett5", bennett5()),
    ];
    for (name, model) in cases {
        let set = nist(name);
        for start in &set.starts {
            for &x in set.x.iter().step_by(3) {
                let mut g = vec![0.0; model.n];
                model.gradient(x, start, &mut g).expect("gradient");
                for j in 0..model.n {
                    let h = 1e-6 * start[j].abs().max(1e-3);
                    let mut p1 = start.clone();
                    let mut p2 = start.clone();
                    p1[j] += h;
                    p2[j] -= h;
                    let fd = ((model.f)(x, &p1) - (model.f)(x, &p2)) / (2.0 * h);
                    let tol = 1e-5 * fd.abs().max(g[j].abs()).max(1e-8);
                    assert!(
                        (fd - g[j]).abs() <= tol,
                        "{name} x={x} p{j}: {} vs {fd}",
                        g[j]
                    );
                }
            }
        }
    }
}
