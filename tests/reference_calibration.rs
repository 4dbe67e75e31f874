//! Calibration fits against outside references:
//! * NIST StRD linear regression "lls" sets Norris (linear) and Pontius (quadratic),
//!   certified values in `tests/reference/nist/`;
//! * numpy.polyfit on seeded random linear, weighted and quadratic calibrations;
//! * scipy.optimize.curve_fit on the ryegrass dose–response data (Inderjit et al. 2002,
//!   as distributed with the R package drc), `tests/reference/dose-response/`.

mod common;

use common::{correct_digits, nist, python_json, reference_dir};
use cuvette::engine::calibration::{fit, CalPoint, Curve, ModelKind, ReplicateUse, Weighting};
use rand::{rngs::StdRng, Rng, SeedableRng};
use serde_json::json;

fn points(x: &[f64], y: &[f64]) -> Vec<CalPoint> {
    x.iter()
        .zip(y)
        .map(|(&conc, &signal)| CalPoint { conc, signal })
        .collect()
}

#[test]
fn norris_linear_to_12_digits() {
    let set = nist("Norris");
    let f = fit(
        ModelKind::Linear,
        Weighting::None,
        ReplicateUse::Individual,
        &points(&set.x, &set.y),
    )
    .expect("fit");
    let Curve::Linear { slope, intercept } = f.curve else {
        panic!("linear curve")
    };
    let d0 = correct_digits(intercept, set.certified[0]);
    let d1 = correct_digits(slope, set.certified[1]);
    let se0 = correct_digits(f.std_errors[1].unwrap(), set.certified_sd[0]);
    let se1 = correct_digits(f.std_errors[0].unwrap(), set.certified_sd[1]);
    println!("Norris: B0 {d0:.1} digits, B1 {d1:.1} digits, SE {se0:.1}/{se1:.1} digits");
    assert!(d0 >= 12.0 && d1 >= 12.0, "Norris: {d0:.1} / {d1:.1} digits");
    assert!(se0 >= 10.0 && se1 >= 10.0);
    // Certified residual sum of squares 26.6173985294224 and R² 0.999993745883712.
    assert!(correct_digits(f.rss, 26.6173985294224) >= 10.0);
    assert!(correct_digits(f.r_squared.unwrap(), 0.999993745883712) >= 12.0);
}

#[test]
fn pontius_quadratic_to_10_digits() {
    let set = nist("Pontius");
    let f = fit(
        ModelKind::Quadratic,
        Weighting::None,
        ReplicateUse::Individual,
        &points(&set.x, &set.y),
    )
    .expect("fit");
    let Curve::Quadratic { c0, c1, c2 } = f.curve else {
        panic!("quadratic curve")
    };
    let digits: Vec<f64> = [c0, c1, c2]
        .iter()
        .zip(&set.certified)
        .map(|(&g, &w)| correct_digits(g, w))
        .collect();
    println!(
        "Pontius: B0 {:.1}, B1 {:.1}, B2 {:.1} digits",
        digits[0], digits[1], digits[2]
    );
    assert!(
        digits.iter().all(|&d| d >= 10.0),
        "Pontius digits {digits:?}"
    );
    for k in 0..3 {
        let d = correct_digits(f.std_errors[k].unwrap(), set.certified_sd[k]);
        assert!(d >= 8.0, "Pontius SE of B{k}: {d:.1} digits");
    }
    assert!(correct_digits(f.rss, 0.155761768796992E-05) >= 9.0);
}

const POLYFIT: &str = r#"
import json, sys
import numpy as np
cases = json.load(sys.stdin)
out = []
for c in cases:
    x = np.array(c["x"]); y = np.array(c["y"])
    w = None if c["w"] is None else np.sqrt(np.array(c["w"]))
    out.append(list(np.polyfit(x, y, c["deg"], w=w))[::-1])
print(json.dumps(out))
"#;

/// numpy.polyfit (weights w multiply the residuals, so we pass √weight) on seeded random
/// calibrations: every model and weighting must agree to 1e-9 relative.
#[test]
fn random_fits_agree_with_numpy_polyfit() {
    let mut rng = StdRng::seed_from_u64(20261201);
    let mut cases = Vec::new();
    let mut ours = Vec::new();
    for i in 0..60 {
        let (model, deg) = if i % 3 == 2 {
            (ModelKind::Quadratic, 2)
        } else {
            (ModelKind::Linear, 1)
        };
        let weighting = [
            Weighting::None,
            Weighting::InvX,
            Weighting::InvX2,
            Weighting::InvY,
            Weighting::InvY2,
        ][i % 5];
        let n = rng.gen_range(4..12);
        let top: f64 = rng.gen_range(10.0..500.0);
        let x: Vec<f64> = (0..n).map(|k| top * (k as f64 + 1.0) / n as f64).collect();
        let slope = rng.gen_range(0.001..0.01);
        let curv = if deg == 2 {
            -slope / top * rng.gen_range(0.0..0.3)
        } else {
            0.0
        };
        let y: Vec<f64> = x
            .iter()
            .map(|&c| 0.05 + slope * c + curv * c * c + rng.gen_range(-0.01..0.01))
            .collect();
        let f = fit(model, weighting, ReplicateUse::Individual, &points(&x, &y)).expect("fit");
        let w: Option<Vec<f64>> = match weighting {
            Weighting::None => None,
            Weighting::InvX => Some(x.iter().map(|v| 1.0 / v).collect()),
            Weighting::InvX2 => Some(x.iter().map(|v| 1.0 / (v * v)).collect()),
            Weighting::InvY => Some(y.iter().map(|v| 1.0 / v).collect()),
            Weighting::InvY2 => Some(y.iter().map(|v| 1.0 / (v * v)).collect()),
        };
        let coef = match f.curve {
            Curve::Linear { slope, intercept } => vec![intercept, slope],
            Curve::Quadratic { c0, c1, c2 } => vec![c0, c1, c2],
            _ => unreachable!(),
        };
        ours.push(coef);
        cases.push(json!({"x": x, "y": y, "w": w, "deg": deg}));
    }
    let numpy = python_json(POLYFIT, &json!(cases));
    for (i, (mine, theirs)) in ours
        .iter()
        .zip(numpy.as_array().expect("array"))
        .enumerate()
    {
        for (k, (a, b)) in mine
            .iter()
            .zip(theirs.as_array().expect("coefs"))
            .enumerate()
        {
            let b = b.as_f64().expect("number");
            assert!(
                (a - b).abs() <= 1e-9 * b.abs().max(1e-6),
                "case {i} coefficient {k}: ours {a} numpy {b}"
            );
        }
    }
}

/// Linear through the origin against numpy's lstsq on x alone (no intercept column).
#[test]
fn through_origin_agrees_with_numpy_lstsq() {
    let x = [10.0, 20.0, 40.0, 80.0, 160.0];
    let y = [0.051, 0.099, 0.205, 0.398, 0.803];
    let f = fit(
        ModelKind::LinearThroughOrigin,
        Weighting::None,
        ReplicateUse::Individual,
        &points(&x, &y),
    )
    .expect("fit");
    let Curve::Linear { slope, intercept } = f.curve else {
        panic!()
    };
    let numpy = python_json(
        "import json,sys,numpy as np\nd=json.load(sys.stdin)\nx=np.array(d['x'])[:,None]\n\
         print(json.dumps(float(np.linalg.lstsq(x,np.array(d['y']),rcond=None)[0][0])))",
        &json!({"x": x, "y": y}),
    );
    assert_eq!(intercept, 0.0);
    assert!(correct_digits(slope, numpy.as_f64().unwrap()) >= 13.0);
}

fn ryegrass() -> (Vec<f64>, Vec<f64>) {
    let path = reference_dir().join("dose-response/ryegrass.csv");
    let text = std::fs::read_to_string(&path).expect("ryegrass.csv");
    let mut x = Vec::new();
    let mut y = Vec::new();
    for line in text.lines().skip(1).filter(|l| !l.trim().is_empty()) {
        let (rootl, conc) = line.split_once(',').expect("two columns");
        y.push(rootl.trim().parse::<f64>().expect("rootl"));
        x.push(conc.trim().parse::<f64>().expect("conc"));
    }
    (x, y)
}

/// scipy.optimize.curve_fit (MINPACK Levenberg–Marquardt) on the same data, with the
/// same model written out in numpy, from a sensible hand start.
pub const SCIPY_LOGISTIC: &str = r#"
import json, sys, warnings
import numpy as np
from scipy.optimize import curve_fit
d = json.load(sys.stdin)
x = np.array(d["x"]); y = np.array(d["y"])
def f4(x, a, b, c, dd):
    return dd + (a - dd) / (1 + (x / c) ** b)
def f5(x, a, b, c, dd, g):
    return dd + (a - dd) / (1 + (x / c) ** b) ** g
out = {}
with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    p4, c4 = curve_fit(f4, x, y, p0=[8, 2, 3, 0.5], maxfev=20000)
    out["4pl"] = {"params": list(p4), "rss": float(np.sum((y - f4(x, *p4)) ** 2)),
                  "se": list(np.sqrt(np.diag(c4)))}
    # Weighted 1/y: curve_fit's sigma scales residuals by 1/sigma, so sigma = sqrt(y).
    pw, cw = curve_fit(f4, x, y, p0=[8, 2, 3, 0.5], sigma=np.sqrt(y), maxfev=20000)
    out["4pl_1/y"] = {"params": list(pw), "rss": float(np.sum((y - f4(x, *pw)) ** 2 / y)),
                      "se": list(np.sqrt(np.diag(cw)))}
    p5, _ = curve_fit(f5, x, y, p0=list(p4) + [1.0], maxfev=20000)
    out["5pl"] = {"params": list(p5), "rss": float(np.sum((y - f5(x, *p5)) ** 2))}
print(json.dumps(out))
"#;

#[test]
fn ryegrass_logistic_no_worse_than_scipy() {
    let (x, y) = ryegrass();
    let scipy = python_json(SCIPY_LOGISTIC, &json!({"x": x, "y": y}));
    for (model, key) in [(ModelKind::FourPl, "4pl"), (ModelKind::FivePl, "5pl")] {
        let f = fit(
            model,
            Weighting::None,
            ReplicateUse::Individual,
            &points(&x, &y),
        )
        .expect("fit");
        let their_rss = scipy[key]["rss"].as_f64().expect("rss");
        println!(
            "ryegrass {key}: ours RSS {:.12}, scipy RSS {:.12}, params {:?}",
            f.rss, their_rss, f.curve
        );
        assert!(
            f.rss <= their_rss * (1.0 + 1e-9),
            "{key}: RSS {} > scipy {}",
            f.rss,
            their_rss
        );
        if model == ModelKind::FourPl {
            same_optimum(&f, &scipy[key], key);
        }
    }
    // Weighted 1/y: the weighted RSS no larger than scipy's, the same optimum.
    let f = fit(
        ModelKind::FourPl,
        Weighting::InvY,
        ReplicateUse::Individual,
        &points(&x, &y),
    )
    .expect("fit");
    let their_rss = scipy["4pl_1/y"]["rss"].as_f64().unwrap();
    println!(
        "ryegrass 4pl 1/y: ours weighted RSS {:.12}, scipy {:.12}",
        f.rss, their_rss
    );
    assert!(f.rss <= their_rss * (1.0 + 1e-9));
    same_optimum(&f, &scipy["4pl_1/y"], "4pl 1/y");
}

/// Parameters agree with scipy's to 1e-5 relative; standard errors (scipy's pcov scaled
/// by the residual variance, as ours are) to 1e-3.
fn same_optimum(f: &cuvette::engine::calibration::Fit, scipy: &serde_json::Value, key: &str) {
    for (a, b) in f
        .curve
        .param_values()
        .iter()
        .zip(scipy["params"].as_array().unwrap())
    {
        let b = b.as_f64().unwrap();
        assert!((a - b).abs() <= 1e-5 * b.abs(), "{key}: {a} vs scipy {b}");
    }
    for (a, b) in f.std_errors.iter().zip(scipy["se"].as_array().unwrap()) {
        let (a, b) = (a.expect("standard error"), b.as_f64().unwrap());
        assert!((a - b).abs() <= 1e-3 * b, "{key} SE: {a} vs scipy {b}");
    }
}

/// Averaging replicates changes the fit: with the mean per concentration, the RSS is
/// that of the 7 means (compare a hand-averaged fit).
#[test]
fn replicate_mean_fits_the_means() {
    let (x, y) = ryegrass();
    let averaged = fit(
        ModelKind::FourPl,
        Weighting::None,
        ReplicateUse::Mean,
        &points(&x, &y),
    )
    .expect("fit");
    assert_eq!(averaged.points.len(), 7);
    let means = cuvette::engine::calibration::average_replicates(&points(&x, &y));
    let direct = fit(
        ModelKind::FourPl,
        Weighting::None,
        ReplicateUse::Individual,
        &means,
    )
    .expect("fit");
    assert!((averaged.rss - direct.rss).abs() <= 1e-12);
}
