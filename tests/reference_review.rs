//! The monthly QC review of the demo lab against numpy: each level's n, mean, sample SD
//! (ddof = 1) and CV of the month's counted results (rejected runs left out), bias %
//! and SDI by their definitions, and the rule tallies agree with the runs' decisions.

mod common;

use chrono::{Datelike, Utc};
use cuvette::engine::qc;
use cuvette::export;
use cuvette::lab::Lab;
use cuvette::verdicts::LabVerdicts;
use serde_json::json;

#[test]
fn the_monthly_review_matches_numpy_and_the_decisions() {
    let lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
    let newest = lab.newest_time().unwrap();
    let (y, m) = (newest.year(), newest.month());
    let review = export::monthly_review(&lab, &LabVerdicts::of(&lab), y, m, &Utc).unwrap();
    assert_eq!(review.rows.len(), lab.control_levels.len());
    let col = |name: &str| review.headers.iter().position(|h| *h == name).unwrap();
    let mut groups = Vec::new();
    for t in &lab.tests {
        let h = lab.control_history(&t.meta.id);
        let verdicts = qc::evaluate(&h.targets, &h.values, &t.qc_rules).unwrap();
        for k in 0..h.levels.len() {
            let values: Vec<f64> = h
                .runs
                .iter()
                .zip(&h.values)
                .zip(&verdicts)
                .filter(|((run, _), v)| {
                    v.decision != qc::Decision::Reject
                        && (run.run_at.year(), run.run_at.month()) == (y, m)
                })
                .filter_map(|((_, vals), _)| vals[k])
                .collect();
            groups
                .push(json!({"values": values, "mean": h.targets[k].mean, "sd": h.targets[k].sd}));
        }
    }
    let script = r#"
import json, sys
import numpy as np
out = []
for g in json.load(sys.stdin):
    v = np.array(g["values"], dtype=float)
    mean = float(v.mean()); sd = float(v.std(ddof=1))
    out.append([len(v), mean, sd, sd / abs(mean) * 100, (mean - g["mean"]) / g["mean"] * 100, (mean - g["mean"]) / g["sd"]])
print(json.dumps(out))
"#;
    let want: Vec<(usize, f64, f64, f64, f64, f64)> =
        serde_json::from_value(common::python_json(script, &json!(groups))).unwrap();
    for (row, (n, mean, sd, cv, bias, sdi)) in review.rows.iter().zip(want) {
        let num = |c: &str| row[col(c)].parse::<f64>().unwrap();
        assert_eq!(row[col("n")], n.to_string(), "{row:?}");
        assert!((num("mean") - mean).abs() < 5e-4, "{row:?} mean {mean}");
        assert!((num("sd") - sd).abs() < 5e-4, "{row:?} sd {sd}");
        assert!((num("cv_pct") - cv).abs() < 5e-3, "{row:?} cv {cv}");
        assert!((num("bias_pct") - bias).abs() < 5e-3, "{row:?} bias {bias}");
        assert!((num("sdi") - sdi).abs() < 5e-3, "{row:?} sdi {sdi}");
        assert_eq!(row[col("previous_n")], "0", "the demo has one month");
    }
    // The demo's glucose shift is rejected by a systematic-error rule this month.
    let glu = review.rows.iter().find(|r| r[0] == "GLU").unwrap();
    assert!(glu[col("rejections")].contains("2-2s ×"), "{glu:?}");
    // With an allowable total error of 10 %, sigma = (10 − |bias|) / CV of the month.
    let mut with_goal = lab.clone();
    with_goal.tests[0].allowable_error_pct = Some(10.0);
    let r = export::monthly_review(&with_goal, &LabVerdicts::of(&with_goal), y, m, &Utc).unwrap();
    let row = &r.rows[0];
    let num = |c: &str| row[col(c)].parse::<f64>().unwrap();
    let want = (10.0 - num("bias_pct").abs()) / num("cv_pct");
    assert!((num("sigma") - want).abs() < 0.06, "{row:?}");
    assert!(!row[col("qc_design")].is_empty());
    // And a month with no runs has no statistics.
    let empty = export::monthly_review(&lab, &LabVerdicts::of(&lab), y - 1, m, &Utc).unwrap();
    assert!(empty
        .rows
        .iter()
        .all(|r| r[col("n")] == "0" && r[col("mean")].is_empty()));
}
