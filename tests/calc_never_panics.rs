//! The calculator and the engine behind it never panic on a number that parses: every
//! operation of `cuvette-calc`, fed with requests whose every number is replaced by an
//! arbitrary one (extremes such as 1e308, 2^64, 3e9, subnormals, negatives, zero),
//! answers exit 0 or exit 2 with `{"error": …}`, never a panic (proptest); and the
//! engine entry points the bench calls directly do the same with arbitrary numbers.

use proptest::prelude::*;
use serde_json::{json, Value};

/// One valid request per operation (the shapes of `cuvette-calc --help`).
fn templates() -> Vec<Value> {
    vec![
        json!({"op":"fit","model":"4pl","points":[
            {"conc":0,"signal":0.05},{"conc":1,"signal":0.2},{"conc":2,"signal":0.5},
            {"conc":4,"signal":0.9},{"conc":8,"signal":1.3},{"conc":16,"signal":1.5}]}),
        json!({"op":"fit","model":"5pl","weighting":"1/y2","points":[
            {"conc":0.5,"signal":0.05},{"conc":1,"signal":0.2},{"conc":2,"signal":0.5},
            {"conc":4,"signal":0.9},{"conc":8,"signal":1.3},{"conc":16,"signal":1.5},
            {"conc":32,"signal":1.6}]}),
        json!({"op":"fit","model":"linear","points":[{"conc":0,"signal":0.01},{"conc":100,"signal":0.4},{"conc":200,"signal":0.8}]}),
        json!({"op":"fit","model":"quadratic","points":[{"conc":0,"signal":0.01},{"conc":100,"signal":0.4},{"conc":200,"signal":0.7},{"conc":300,"signal":0.95}]}),
        json!({"op":"fit","model":"factor","points":[{"conc":100,"signal":0.4}]}),
        json!({"op":"inverse","model":"4pl","params":{"a":0.05,"b":1.5,"c":4,"d":1.6},
            "range":{"low":0.5,"high":20},"signals":[0.3,0.9,1.7]}),
        json!({"op":"inverse","model":"5pl","params":{"a":0.05,"b":1.5,"c":4,"d":1.6,"g":0.8},"signals":[0.3]}),
        json!({"op":"inverse","model":"quadratic","params":{"c0":0.01,"c1":0.004,"c2":-1e-6},"signals":[0.3]}),
        json!({"op":"kinetic","readings":[{"t_s":0,"a":1.2},{"t_s":60,"a":1.1},{"t_s":120,"a":1.0},{"t_s":180,"a":0.9}],
            "factor":1768,"linearity_limit_pct":10,"window_s":[0,180],"direction":"decreasing","initial_floor":0.8}),
        json!({"op":"enzyme-factor","total_volume_ml":1.1,"sample_volume_ml":0.1,"path_cm":1,"epsilon":6220}),
        json!({"op":"qc","rules":["1-2s","1-3s","2-2s","R-4s","4-1s","10-x"],
            "levels":[{"mean":100,"sd":2},{"mean":250,"sd":5}],
            "runs":[[101,249],[104,256],[99,null],[106,262]]}),
        json!({"op":"qc-stats","values":[100,101,99,102],"insert":{"mean":100,"sd":2},
            "excluded":[false,false,false,false],"run_rejected":[false,false,false,false]}),
        json!({"op":"stability","now":"2026-03-28T12:00:00Z","warning_hours":48,"warning_fraction":0.25,
            "material":{"expiry":"2026-03","opened_at":"2026-03-25T08:00:00Z","in_use_hours":168,
                "on_board_since":"2026-03-25T08:00:00Z","on_board_hours":72,
                "frozen":{"frozen_at":"2026-03-01T08:00:00Z","frozen_hours":720,"thawed_at":"2026-03-20T08:00:00Z",
                    "thaw_count":1,"after_thaw_hours":8},
                "analytes":[{"analyte":"ALT","in_use_hours":48,"after_thaw_hours":4}]}}),
        json!({"op":"end-point","sample":0.5,"reagent_blank":0.05,"sample_blank":0.01}),
        json!({"op":"fixed-time","a_t1":0.5,"a_t2":0.7,"direction":"increasing"}),
        json!({"op":"dilution","estimate":900,"linearity_limit":400}),
        json!({"op":"dilution","diluted_reading":120,"factor":5,"linearity_limit":400}),
        json!({"op":"flag","value":5,"reference":{"low":3,"high":6},"critical":{"low":2,"high":20}}),
        json!({"op":"convert","analyte":"GLU","value":100,"from":"mg/dL","to":"mmol/L"}),
        json!({"op":"rejection-probability","rules":["1-3s","2-2s"],"n_per_run":2,
            "systematic_shift_sd":1,"random_error_factor":1,"trials":1000,"seed":3}),
        json!({"op":"sigma","tea_pct":10,"bias_pct":1,"cv_pct":1.5}),
    ]
}

/// Numbers people and damaged files bring: the extremes among them.
fn number() -> impl Strategy<Value = f64> {
    prop_oneof![
        Just(1e308),
        Just(-1e308),
        Just(f64::MAX),
        Just(18_446_744_073_709_551_616.0), // 2^64
        Just(3e9),
        Just(0.0),
        Just(-0.0),
        Just(5e-324),
        Just(1e-300),
        -1e6..1e6f64,
        any::<f64>().prop_filter("JSON has no NaN or infinity", |x| x.is_finite()),
    ]
}

/// Every number of `v` replaced in turn by the next of `with` (cycling).
fn replace_numbers(v: &mut Value, with: &[f64], k: &mut usize) {
    match v {
        Value::Number(_) => {
            let x = with[*k % with.len()];
            *k += 1;
            if let Some(n) = serde_json::Number::from_f64(x) {
                *v = Value::Number(n);
            }
        }
        Value::Array(items) => items.iter_mut().for_each(|i| replace_numbers(i, with, k)),
        Value::Object(m) => m.values_mut().for_each(|i| replace_numbers(i, with, k)),
        _ => {}
    }
}

fn answer(request: &Value) -> (i32, Value) {
    let text = request.to_string();
    let (code, out) = std::panic::catch_unwind(|| cuvette::calc::run(&text))
        .unwrap_or_else(|_| panic!("the calculator panicked on {text}"));
    let v: Value = serde_json::from_str(&out).expect("the answer is JSON");
    (code, v)
}

#[test]
fn every_template_is_a_valid_request() {
    for t in templates() {
        let (code, v) = answer(&t);
        assert_eq!(code, 0, "{t} -> {v}");
    }
}

#[test]
fn the_reported_extremes_give_a_message_not_a_panic() {
    // The stability the issue reported as a panic: date plus 1e308 hours.
    for h in [1e308, 3e9, 18_446_744_073_709_551_616.0] {
        let req = json!({"op":"stability","now":"2026-03-28T12:00:00Z",
            "material":{"expiry":"2026-03","opened_at":"2026-03-25T08:00:00Z","in_use_hours":h}});
        let (code, v) = answer(&req);
        assert_eq!(code, 2, "{v}");
        assert!(v["error"].as_str().unwrap().contains("in_use_hours"), "{v}");
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    #[test]
    fn no_operation_panics_on_any_number(which in 0..21usize, with in proptest::collection::vec(number(), 1..12), every in 1..4usize) {
        let mut req = templates()[which].clone();
        // Replace every number, or keep most of the valid request and change some.
        let mut k = 0;
        if every == 1 {
            replace_numbers(&mut req, &with, &mut k);
        } else if let Value::Object(m) = &mut req {
            for (n, (_, v)) in m.iter_mut().enumerate() {
                if n % every == 0 {
                    replace_numbers(v, &with, &mut k);
                }
            }
        }
        let (code, v) = answer(&req);
        prop_assert!(code == 0 || (code == 2 && v["error"].is_string()), "{} -> {}", req, v);
    }
}

/// The engine entry points the bench calls (the multirule evaluation, monthly
/// statistics, the Levey–Jennings series, a calibration fitted and judged, a patient
/// sample through the curve, the export tables) with arbitrary finite numbers in the
/// demo lab's targets, control values, calibrator readings and sample readings: values
/// or messages, never a panic. (The plausible ranges keep such numbers out of a lab;
/// this is the engine's own guarantee underneath them.)
mod engine_entry_points {
    use super::number;
    use cuvette::engine::acceptance::{self, CalibrationReadings};
    use cuvette::engine::calibration::{self, ReplicateUse, ReportableRange, Weighting};
    use cuvette::engine::charts::LeveyJennings;
    use cuvette::engine::qc;
    use cuvette::engine::qcstats;
    use cuvette::engine::readings::{Direction, Limits};
    use cuvette::engine::results::{sample_result, SampleReading};
    use cuvette::lab::Lab;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig { cases: 128, ..ProptestConfig::default() })]

        #[test]
        fn the_bench_computations_never_panic(xs in proptest::collection::vec(number(), 16)) {
            let mut lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
            lab.control_levels[0].mean = xs[0];
            lab.control_levels[0].sd = xs[1];
            lab.control_levels[1].sd = xs[2].abs();
            lab.control_runs[0].values[0] = Some(xs[3]);
            lab.control_runs[1].values[1] = Some(xs[4]);
            for t in lab.tests.clone() {
                let h = lab.control_history(&t.meta.id);
                if let Ok(verdicts) = qc::evaluate(&h.targets, &h.values, &t.qc_rules) {
                    let decisions: Vec<_> = verdicts.iter().map(|v| v.decision).collect();
                    for (k, target) in h.targets.iter().enumerate() {
                        let values: Vec<Option<f64>> = h.values.iter().map(|r| r[k]).collect();
                        let _ = LeveyJennings::new("x", target.mean, target.sd, &values, &decisions);
                        let flat: Vec<f64> = values.iter().flatten().copied().collect();
                        let _ = qcstats::summarize(&flat);
                    }
                }
            }
            let cal = &lab.calibrations[0];
            let mut calibrators: Vec<(f64, Vec<f64>)> =
                cal.calibrators.iter().map(|c| (c.conc, c.absorbances.clone())).collect();
            calibrators[0].1[0] = xs[5];
            calibrators.last_mut().unwrap().0 = xs[6];
            let blank = vec![xs[7]];
            let points = calibration::blank_corrected(&blank, &calibrators);
            for model in calibration::ModelKind::ALL {
                let fit = calibration::fit(model, Weighting::None, ReplicateUse::Individual, &points);
                let readings = CalibrationReadings { blank: blank.clone(), calibrators: calibrators.clone() };
                let _ = acceptance::judge(&readings, fit.as_ref(), Some(&cal.curve), &Default::default());
                if let Ok(f) = &fit {
                    let range = ReportableRange::from_calibrators(calibrators.iter().map(|c| c.0), Some(xs[8].abs()));
                    for reading in [
                        SampleReading::EndPoint { sample: xs[9], reagent_blank: xs[10], sample_blank: Some(xs[11]) },
                        SampleReading::FixedTime { a_t1: xs[12], a_t2: xs[13], direction: Direction::Increasing },
                    ] {
                        let _ = sample_result(&reading, &f.curve, range, Limits { low: Some(xs[14]), high: Some(xs[15]) }, Limits::default());
                    }
                }
            }
            let _ = cuvette::export::qc_results_csv(&lab, &chrono::Utc);
            let _ = cuvette::export::calibrations_csv(&lab, &chrono::Utc);
        }
    }
}
