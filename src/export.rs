//! Exports for spreadsheets: the lab's QC results and calibrations as CSV, one row per
//! result, with ISO 8601 times, the engine's decision for each run and the record id
//! (so a row can be traced back to its record). Plain Rust, tested natively.

use chrono::SecondsFormat;

use crate::engine::acceptance;
use crate::engine::qc;
use crate::lab::Lab;

fn writer() -> csv::Writer<Vec<u8>> {
    csv::WriterBuilder::new().from_writer(Vec::new())
}

fn finish(w: csv::Writer<Vec<u8>>) -> Result<String, String> {
    let bytes = w
        .into_inner()
        .map_err(|e| format!("the CSV could not be written: {e}"))?;
    String::from_utf8(bytes).map_err(|e| format!("the CSV is not text: {e}"))
}

/// Every control result: test, level, lot, run time, value, target, z, the run's
/// decision, who ran it, and the run's record id.
pub fn qc_results_csv(lab: &Lab) -> Result<String, String> {
    let mut w = writer();
    let err = |e: csv::Error| format!("the CSV could not be written: {e}");
    w.write_record([
        "test",
        "level",
        "lot",
        "run_at",
        "value",
        "unit",
        "target_mean",
        "target_sd",
        "z",
        "decision",
        "rules_broken",
        "by",
        "record_id",
    ])
    .map_err(err)?;
    for t in &lab.tests {
        let h = lab.control_history(&t.meta.id);
        let verdicts = qc::evaluate(&h.targets, &h.values, &t.qc_rules).map_err(|e| e.0)?;
        for ((run, values), verdict) in h.runs.iter().zip(&h.values).zip(&verdicts) {
            let broken: Vec<&str> = verdict.violations.iter().map(|v| v.rule.code()).collect();
            for (k, v) in values.iter().enumerate() {
                let Some(v) = v else { continue };
                let level = h.levels[k];
                let target = h.targets[k];
                w.write_record([
                    t.code.clone(),
                    level.name.clone(),
                    level.lot.clone(),
                    run.run_at.to_rfc3339_opts(SecondsFormat::Secs, true),
                    v.to_string(),
                    t.unit.clone(),
                    target.mean.to_string(),
                    target.sd.to_string(),
                    format!("{:.3}", qc::z_score(*v, target)),
                    verdict.decision.code().to_string(),
                    broken.join(" "),
                    run.meta.by.clone(),
                    run.meta.id.clone(),
                ])
                .map_err(err)?;
            }
        }
    }
    finish(w)
}

/// Every calibration: test, time, model, sensitivity, verdict, who, record id.
pub fn calibrations_csv(lab: &Lab) -> Result<String, String> {
    let mut w = writer();
    let err = |e: csv::Error| format!("the CSV could not be written: {e}");
    w.write_record([
        "test",
        "performed_at",
        "model",
        "sensitivity",
        "value",
        "verdict",
        "by",
        "record_id",
    ])
    .map_err(err)?;
    for t in &lab.tests {
        for c in lab.calibrations_of(&t.meta.id) {
            let (value, what) = acceptance::sensitivity(&c.curve);
            let verdict = serde_json::to_value(c.outcome)
                .ok()
                .and_then(|v| v.as_str().map(str::to_string))
                .unwrap_or_default();
            w.write_record([
                t.code.clone(),
                c.performed_at.to_rfc3339_opts(SecondsFormat::Secs, true),
                c.model.code().to_string(),
                what.to_string(),
                value.to_string(),
                verdict,
                c.meta.by.clone(),
                c.meta.id.clone(),
            ])
            .map_err(err)?;
        }
    }
    finish(w)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Read back with the csv crate's reader: one row per measured control value, and
    /// the columns where they belong.
    #[test]
    fn qc_csv_has_one_row_per_result() {
        let lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
        let text = qc_results_csv(&lab).unwrap();
        let mut r = csv::Reader::from_reader(text.as_bytes());
        let headers = r.headers().unwrap().clone();
        assert_eq!(&headers[3], "run_at");
        let rows: Vec<csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
        let measured: usize = lab
            .control_runs
            .iter()
            .map(|run| run.values.iter().filter(|v| v.is_some()).count())
            .sum();
        assert_eq!(rows.len(), measured);
        assert!(rows
            .iter()
            .all(|row| ["accept", "warning", "reject"].contains(&&row[9])));
        assert!(rows
            .iter()
            .any(|row| &row[9] == "reject" && row[10].contains("2-2s")));
        let cal = calibrations_csv(&lab).unwrap();
        assert_eq!(
            csv::Reader::from_reader(cal.as_bytes()).records().count(),
            lab.calibrations.len()
        );
    }
}
