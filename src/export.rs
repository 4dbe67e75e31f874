//! Records as tables: for spreadsheets (CSV through the csv crate, RFC 4180) and for the
//! printed day sheet, one table per kind of record — QC results with their decisions
//! and the rules broken, calibrations with their verdicts, patient results with their
//! flags and whether they were held, materials opened, the instrument log, and the
//! trail. Times are ISO 8601 in the lab's local time with its
//! offset; each row carries the record id so it can be traced back.
//!
//! A spreadsheet runs a cell that begins with `=`, `+`, `-`, `@`, a tab or a carriage
//! return as a formula. Every such cell is written with a leading `'` (the usual
//! neutralising mark), unless it is a plain number (a negative result is a number, not a
//! formula). Plain Rust, tested natively.

use std::borrow::Cow;

use chrono::{DateTime, NaiveDate, SecondsFormat, TimeZone, Utc};

use crate::engine::acceptance;
use crate::engine::qc;
use crate::journal::{self, Entry};
use crate::lab::Lab;

/// One table: a file (`slug`) and a section of the day sheet (`title`).
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    pub slug: &'static str,
    pub title: &'static str,
    pub headers: Vec<&'static str>,
    pub rows: Vec<Vec<String>>,
}

/// A cell as a spreadsheet may safely read it (see the module note).
pub fn neutralise(cell: &str) -> Cow<'_, str> {
    let risky = cell.starts_with(['=', '+', '-', '@', '\t', '\r']);
    let number = cell.trim().parse::<f64>().is_ok_and(f64::is_finite);
    if risky && !number {
        Cow::Owned(format!("'{cell}"))
    } else {
        Cow::Borrowed(cell)
    }
}

/// The table as CSV (RFC 4180: header row, quoted where needed, CRLF line ends).
pub fn to_csv(t: &Table) -> Result<String, String> {
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::CRLF)
        .from_writer(Vec::new());
    let err = |e: csv::Error| format!("the CSV could not be written: {e}");
    w.write_record(&t.headers).map_err(err)?;
    for row in &t.rows {
        w.write_record(row.iter().map(|c| neutralise(c).into_owned()))
            .map_err(err)?;
    }
    let bytes = w
        .into_inner()
        .map_err(|e| format!("the CSV could not be written: {e}"))?;
    String::from_utf8(bytes).map_err(|e| format!("the CSV is not text: {e}"))
}

fn time<Tz: TimeZone>(t: DateTime<Utc>, tz: &Tz) -> String
where
    Tz::Offset: std::fmt::Display,
{
    t.with_timezone(tz)
        .to_rfc3339_opts(SecondsFormat::Secs, true)
}

/// An enum's code as the records store it ("accepted-with-remarks", "reagent").
fn word<T: serde::Serialize>(v: T) -> String {
    serde_json::to_value(v)
        .ok()
        .and_then(|v| v.as_str().map(str::to_string))
        .unwrap_or_default()
}

/// Which records a table takes, by their time.
pub type Keep<'a> = &'a dyn Fn(DateTime<Utc>) -> bool;

/// Every control result: test, level, lot, run time, value, target, z, the run's
/// decision and the rules broken, who ran it, and the run's record id.
pub fn qc_results<Tz: TimeZone>(lab: &Lab, keep: Keep, tz: &Tz) -> Result<Table, String>
where
    Tz::Offset: std::fmt::Display,
{
    let mut rows = Vec::new();
    for t in &lab.tests {
        let h = lab.control_history(&t.meta.id);
        let verdicts = qc::evaluate(&h.targets, &h.values, &t.qc_rules).map_err(|e| e.0)?;
        for ((run, values), verdict) in h.runs.iter().zip(&h.values).zip(&verdicts) {
            if !keep(run.run_at) {
                continue;
            }
            let broken: Vec<&str> = verdict.violations.iter().map(|v| v.rule.code()).collect();
            for (k, v) in values.iter().enumerate() {
                let Some(v) = v else { continue };
                let level = h.levels[k];
                let target = h.targets[k];
                rows.push(vec![
                    t.code.clone(),
                    level.name.clone(),
                    level.lot.clone(),
                    time(run.run_at, tz),
                    v.to_string(),
                    t.unit.clone(),
                    target.mean.to_string(),
                    target.sd.to_string(),
                    format!("{:.3}", qc::z_score(*v, target)),
                    verdict.decision.code().to_string(),
                    broken.join(" "),
                    run.after_action.clone().unwrap_or_default(),
                    run.acknowledged.join("; "),
                    run.meta.by.clone(),
                    run.meta.id.clone(),
                ]);
            }
        }
    }
    Ok(Table {
        slug: "qc-results",
        title: "QC results",
        headers: vec![
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
            "after_corrective_action",
            "acknowledged_warnings",
            "by",
            "record_id",
        ],
        rows,
    })
}

/// Every calibration: test, time, model, sensitivity, verdict and its reasons, who.
pub fn calibrations<Tz: TimeZone>(lab: &Lab, keep: Keep, tz: &Tz) -> Table
where
    Tz::Offset: std::fmt::Display,
{
    let mut rows = Vec::new();
    for t in &lab.tests {
        for c in lab.calibrations_of(&t.meta.id) {
            if !keep(c.performed_at) {
                continue;
            }
            let (value, what) = acceptance::sensitivity(&c.curve);
            let verdict = word(c.outcome);
            rows.push(vec![
                t.code.clone(),
                time(c.performed_at, tz),
                c.model.code().to_string(),
                what.to_string(),
                value.to_string(),
                verdict,
                c.findings.join("; "),
                c.meta.by.clone(),
                c.meta.id.clone(),
            ]);
        }
    }
    Table {
        slug: "calibrations",
        title: "Calibrations",
        headers: vec![
            "test",
            "performed_at",
            "model",
            "sensitivity",
            "value",
            "verdict",
            "findings",
            "by",
            "record_id",
        ],
        rows,
    }
}

/// Materials received, opened (or reconstituted) or discarded in the period: kind, name,
/// lot, maker's expiry, when received and opened, the stability after opening in days,
/// the reconstitution, who, and the discard with its reason.
pub fn materials_opened<Tz: TimeZone>(lab: &Lab, keep: Keep, tz: &Tz) -> Table
where
    Tz::Offset: std::fmt::Display,
{
    let rows = lab
        .materials
        .iter()
        .filter(|m| {
            keep(m.meta.created_at)
                || m.stability.opened_at.is_some_and(keep)
                || m.discarded.as_ref().is_some_and(|d| keep(d.at))
        })
        .map(|m| {
            let kind = word(m.kind);
            let r = m.reconstitution.as_ref();
            let d = m.discarded.as_ref();
            vec![
                kind,
                m.name.clone(),
                m.lot.clone(),
                m.stability.expiry.to_string(),
                time(m.meta.created_at, tz),
                m.stability.opened_at.map_or(String::new(), |t| time(t, tz)),
                m.stability
                    .in_use_hours
                    .map_or(String::new(), |h| format!("{}", h / 24.0)),
                r.map_or(String::new(), |r| format!("{}", r.volume_ml)),
                r.map_or(String::new(), |r| r.diluent.clone()),
                r.map_or(String::new(), |r| r.diluent_lot.clone()),
                m.meta.by.clone(),
                d.map_or(String::new(), |d| time(d.at, tz)),
                d.map_or(String::new(), |d| d.by.clone()),
                d.map_or(String::new(), |d| d.reason.clone()),
                m.meta.id.clone(),
            ]
        })
        .collect();
    Table {
        slug: "materials",
        title: "Materials received, opened or discarded",
        headers: vec![
            "kind",
            "name",
            "lot",
            "maker_expiry",
            "recorded_at",
            "opened_at",
            "stable_days_after_opening",
            "reconstituted_ml",
            "diluent",
            "diluent_lot",
            "by",
            "discarded_at",
            "discarded_by",
            "discard_reason",
            "record_id",
        ],
        rows,
    }
}

/// The instrument log: time, what, reading, note, who.
pub fn instrument_log<Tz: TimeZone>(lab: &Lab, keep: Keep, tz: &Tz) -> Table
where
    Tz::Offset: std::fmt::Display,
{
    let rows = lab
        .instrument_log
        .iter()
        .filter(|e| keep(e.at))
        .map(|e| {
            vec![
                time(e.at, tz),
                e.event.words().to_string(),
                e.value.map_or(String::new(), |v| v.to_string()),
                e.note.clone(),
                e.meta.by.clone(),
                e.meta.id.clone(),
            ]
        })
        .collect();
    Table {
        slug: "instrument-log",
        title: "Instrument log",
        headers: vec!["at", "event", "reading", "note", "by", "record_id"],
        rows,
    }
}

/// Corrective actions after rejected QC runs: test, the rejected run, when the action
/// was taken, what was found, what was done, who.
pub fn corrective_actions<Tz: TimeZone>(lab: &Lab, keep: Keep, tz: &Tz) -> Table
where
    Tz::Offset: std::fmt::Display,
{
    let rows = lab
        .corrective_actions
        .iter()
        .filter(|a| keep(a.at))
        .map(|a| {
            let test = lab.tests.iter().find(|t| t.meta.id == a.test_id);
            let run = lab.control_runs.iter().find(|r| r.meta.id == a.run_id);
            vec![
                test.map_or(String::new(), |t| t.code.clone()),
                run.map_or(String::new(), |r| time(r.run_at, tz)),
                time(a.at, tz),
                a.found.clone(),
                a.done.clone(),
                a.meta.by.clone(),
                a.run_id.clone(),
                a.meta.id.clone(),
            ]
        })
        .collect();
    Table {
        slug: "corrective-actions",
        title: "Corrective actions",
        headers: vec![
            "test",
            "rejected_run_at",
            "at",
            "found",
            "done",
            "by",
            "run_id",
            "record_id",
        ],
        rows,
    }
}

/// Patient results as recorded at the bench: test, sample, when, signal, result and
/// unit, flag, what to do, whether it was held (QC not accepted), who, the calibration.
pub fn patient_results<Tz: TimeZone>(lab: &Lab, keep: Keep, tz: &Tz) -> Table
where
    Tz::Offset: std::fmt::Display,
{
    let rows = lab
        .patient_results
        .iter()
        .filter(|r| keep(r.at))
        .map(|r| {
            let test = lab.tests.iter().find(|t| t.meta.id == r.test_id);
            vec![
                test.map_or(String::new(), |t| t.code.clone()),
                r.sample_id.clone(),
                time(r.at, tz),
                r.signal.to_string(),
                r.result.map_or(String::new(), |v| v.to_string()),
                test.map_or(String::new(), |t| t.unit.clone()),
                r.flag.map_or("", |f| f.letter()).to_string(),
                word(r.disposition),
                if r.held { "held" } else { "not held" }.to_string(),
                r.meta.by.clone(),
                r.calibration_id.clone(),
                r.meta.id.clone(),
            ]
        })
        .collect();
    Table {
        slug: "patient-results",
        title: "Patient results",
        headers: vec![
            "test",
            "sample",
            "at",
            "signal",
            "result",
            "unit",
            "flag",
            "disposition",
            "held",
            "by",
            "calibration_id",
            "record_id",
        ],
        rows,
    }
}

/// The monthly QC review: per test and level, the month's n, mean, SD and CV, bias %
/// and SDI against the level's target, the warnings and rejections counted by rule,
/// and the previous month and the cumulative figures beside them. Results of rejected
/// runs do not count in the statistics (as in `engine::qcstats`); every run of the
/// month counts for the rule tallies. bias % = (mean − target) / target × 100;
/// SDI = (mean − target) / target SD. `verdicts` are the lab's own
/// ([`LabVerdicts::of`] the same lab, or the shell's shared ones).
pub fn monthly_review<Tz: TimeZone>(
    lab: &Lab,
    verdicts: &crate::verdicts::LabVerdicts,
    year: i32,
    month: u32,
    tz: &Tz,
) -> Result<Table, String> {
    use crate::engine::qcstats::{self, ControlResult, Summary};
    use crate::period::{Month, Period};
    // The month and the one before as instants: each record is placed by comparing
    // instants, with no zone arithmetic per record.
    let window = |m: Month| {
        Period::Month(m)
            .instants(tz)
            .ok_or_else(|| format!("{} is outside the calendar", m.iso()))
    };
    let this = Month { year, month };
    let (from, to) = window(this)?;
    let (previous_from, _) = window(this.step(-1))?;
    let fmt = |v: Option<f64>, digits: usize| v.map_or(String::new(), |v| format!("{v:.digits$}"));
    let stats = |s: Option<&Summary>| -> [String; 4] {
        [
            s.map_or("0".into(), |s| s.n.to_string()),
            fmt(s.map(|s| s.mean), 3),
            fmt(s.and_then(|s| s.sd), 3),
            fmt(s.and_then(|s| s.cv_pct), 2),
        ]
    };
    let mut rows = Vec::new();
    for t in &lab.tests {
        let h = lab.control_history(&t.meta.id);
        let verdicts = verdicts.verdicts(&t.meta.id).map_err(|e| e.0)?;
        for (k, level) in h.levels.iter().enumerate() {
            let results: Vec<ControlResult> = h
                .runs
                .iter()
                .zip(&h.values)
                .zip(verdicts)
                .filter_map(|((run, values), v)| {
                    values[k].map(|value| ControlResult {
                        at: run.run_at,
                        value,
                        run_rejected: v.decision == qc::Decision::Reject,
                        excluded: false,
                    })
                })
                .collect();
            let now = qcstats::between(&results, from, to);
            let now = now.as_ref();
            let target = h.targets[k];
            let bias = now.map(|s| (s.mean - target.mean) / target.mean * 100.0);
            let sdi = now.map(|s| (s.mean - target.mean) / target.sd);
            let mut warnings = std::collections::BTreeMap::<&str, usize>::new();
            let mut rejections = std::collections::BTreeMap::<&str, usize>::new();
            for (run, v) in h.runs.iter().zip(verdicts) {
                if !(from <= run.run_at && run.run_at < to) {
                    continue;
                }
                for x in v.violations.iter().filter(|x| x.levels.contains(&k)) {
                    let tally = match x.action {
                        qc::Action::Warning => &mut warnings,
                        qc::Action::Reject => &mut rejections,
                    };
                    *tally.entry(x.rule.code()).or_default() += 1;
                }
            }
            let tally = |m: &std::collections::BTreeMap<&str, usize>| {
                m.iter()
                    .map(|(r, n)| format!("{r} ×{n}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            };
            let mut row = vec![
                t.code.clone(),
                level.name.clone(),
                level.lot.clone(),
                t.unit.clone(),
                target.mean.to_string(),
                target.sd.to_string(),
            ];
            row.extend(stats(now));
            row.push(fmt(bias, 2));
            row.push(fmt(sdi, 2));
            // Sigma = (TEa − |bias|) / CV, with the external scheme's bias where given.
            let used_bias = t.external_bias_pct.or(bias);
            let sigma = match (t.allowable_error_pct, used_bias, now.and_then(|s| s.cv_pct)) {
                (Some(tea), Some(b), Some(cv)) => crate::engine::planning::sigma(tea, b, cv).ok(),
                _ => None,
            };
            row.push(
                t.allowable_error_pct
                    .map_or(String::new(), |v| v.to_string()),
            );
            row.push(fmt(sigma, 1));
            row.push(sigma.map_or(String::new(), |s| {
                crate::engine::planning::design_for(s).to_string()
            }));
            row.push(tally(&warnings));
            row.push(tally(&rejections));
            row.extend(stats(
                qcstats::between(&results, previous_from, from).as_ref(),
            ));
            // Cumulative up to the end of the month reviewed.
            let upto: Vec<ControlResult> = results.iter().copied().filter(|r| r.at < to).collect();
            row.extend(stats(qcstats::cumulative(&upto).as_ref()));
            rows.push(row);
        }
    }
    Ok(Table {
        slug: "qc-review",
        title: "Monthly QC review",
        headers: vec![
            "test",
            "level",
            "lot",
            "unit",
            "target_mean",
            "target_sd",
            "n",
            "mean",
            "sd",
            "cv_pct",
            "bias_pct",
            "sdi",
            "tea_pct",
            "sigma",
            "qc_design",
            "warnings",
            "rejections",
            "previous_n",
            "previous_mean",
            "previous_sd",
            "previous_cv_pct",
            "cumulative_n",
            "cumulative_mean",
            "cumulative_sd",
            "cumulative_cv_pct",
        ],
        rows,
    })
}

/// What an entry says about its record, in a few words (the trail's summary).
pub fn entry_summary(e: &Entry) -> String {
    let Some(b) = &e.body else {
        return String::new();
    };
    let field = |k: &str| {
        b.get(k)
            .map(|v| v.to_string().trim_matches('"').to_string())
    };
    [
        field("what"),
        field("sample_id").map(|v| format!("sample {v}")),
        field("code"),
        field("name"),
        field("lot"),
        field("mean").map(|m| format!("mean {m}")),
        field("sd").map(|m| format!("SD {m}")),
        field("values").map(|v| format!("values {v}")),
        field("event"),
        field("value")
            .filter(|v| v != "null")
            .map(|v| format!("value {v}")),
        field("lab_name"),
    ]
    .into_iter()
    .flatten()
    .collect::<Vec<_>>()
    .join(", ")
}

/// The trail: every journal entry, in order.
pub fn trail<Tz: TimeZone>(entries: &[&Entry], tz: &Tz) -> Table
where
    Tz::Offset: std::fmt::Display,
{
    let rows = entries
        .iter()
        .map(|e| {
            vec![
                time(e.at, tz),
                e.by.clone(),
                e.action.words().to_string(),
                e.kind.words().to_string(),
                e.version.to_string(),
                e.reason.clone().unwrap_or_default(),
                entry_summary(e),
                e.id.clone(),
                e.hash.clone(),
            ]
        })
        .collect();
    Table {
        slug: "trail",
        title: "Trail (every change, by whom)",
        headers: vec![
            "at",
            "by",
            "action",
            "record",
            "version",
            "reason",
            "summary",
            "record_id",
            "sha256",
        ],
        rows,
    }
}

/// The day's tables (local to `tz`), in the order of the day sheet.
pub fn day_tables<Tz: TimeZone>(
    lab: &Lab,
    entries: &[Entry],
    day: NaiveDate,
    tz: &Tz,
) -> Result<Vec<Table>, String>
where
    Tz::Offset: std::fmt::Display,
{
    let on_day = |t: DateTime<Utc>| t.with_timezone(tz).date_naive() == day;
    Ok(vec![
        qc_results(lab, &on_day, tz)?,
        corrective_actions(lab, &on_day, tz),
        calibrations(lab, &on_day, tz),
        patient_results(lab, &on_day, tz),
        materials_opened(lab, &on_day, tz),
        instrument_log(lab, &on_day, tz),
        trail(&journal::day(entries, day, tz), tz),
    ])
}

/// Initials of everyone with an entry on the day, sorted.
pub fn who_worked<Tz: TimeZone>(entries: &[Entry], day: NaiveDate, tz: &Tz) -> Vec<String> {
    let who: std::collections::BTreeSet<String> = journal::day(entries, day, tz)
        .iter()
        .map(|e| e.by.clone())
        .filter(|b| !b.is_empty())
        .collect();
    who.into_iter().collect()
}

/// A file name: `cuvette-<lab>-<what>-<date>.<ext>`, the lab's name reduced to letters,
/// digits and hyphens.
pub fn file_name(lab_name: &str, what: &str, date: NaiveDate, ext: &str) -> String {
    let mut lab: String = lab_name
        .chars()
        .map(|c| {
            if c.is_alphanumeric() {
                c.to_ascii_lowercase()
            } else {
                '-'
            }
        })
        .collect();
    while lab.contains("--") {
        lab = lab.replace("--", "-");
    }
    let lab: String = lab.trim_matches('-').chars().take(40).collect();
    let lab = if lab.is_empty() { "lab".into() } else { lab };
    format!("cuvette-{lab}-{what}-{}.{ext}", date.format("%Y-%m-%d"))
}

/// Every QC result of the lab as CSV (times in `tz`).
pub fn qc_results_csv<Tz: TimeZone>(lab: &Lab, tz: &Tz) -> Result<String, String>
where
    Tz::Offset: std::fmt::Display,
{
    to_csv(&qc_results(lab, &|_| true, tz)?)
}

/// Every calibration of the lab as CSV (times in `tz`).
pub fn calibrations_csv<Tz: TimeZone>(lab: &Lab, tz: &Tz) -> Result<String, String>
where
    Tz::Offset: std::fmt::Display,
{
    to_csv(&calibrations(lab, &|_| true, tz))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Read back with the csv crate's reader: one row per measured control value, and
    /// the columns where they belong.
    #[test]
    fn qc_csv_has_one_row_per_result() {
        let lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
        let text = qc_results_csv(&lab, &Utc).unwrap();
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
        let cal = calibrations_csv(&lab, &Utc).unwrap();
        assert_eq!(
            csv::Reader::from_reader(cal.as_bytes()).records().count(),
            lab.calibrations.len()
        );
    }

    /// The formula-injection cases of the issue (and OWASP's list of trigger
    /// characters): each is written with a leading `'`; numbers stay numbers.
    #[test]
    fn cells_a_spreadsheet_would_run_are_neutralised() {
        for bad in [
            "=1+1",
            "+cmd|' /C calc'!A0",
            "-2+3",
            "@SUM(A1:A2)",
            "\t=1",
            "\r=1",
            "=HYPERLINK(\"http://x\")",
        ] {
            assert_eq!(neutralise(bad), format!("'{bad}"), "{bad:?}");
        }
        for fine in ["-0.512", "+5", "1e-3", "GLU", "Level 1", "", "a=b"] {
            assert_eq!(neutralise(fine), fine);
        }
        // Through the CSV writer and back with the csv reader.
        let t = Table {
            slug: "t",
            title: "t",
            headers: vec!["a", "b"],
            rows: vec![vec!["=1+1".into(), "-0.5".into()]],
        };
        let text = to_csv(&t).unwrap();
        assert!(text.ends_with("\r\n"));
        let row = csv::Reader::from_reader(text.as_bytes())
            .records()
            .next()
            .unwrap()
            .unwrap();
        assert_eq!((&row[0], &row[1]), ("'=1+1", "-0.5"));
    }

    #[test]
    fn file_names_carry_the_lab_and_the_iso_date() {
        let d = NaiveDate::from_ymd_opt(2026, 11, 27).unwrap();
        assert_eq!(
            file_name("Hill Clinic / Lab #2", "day", d, "json"),
            "cuvette-hill-clinic-lab-2-day-2026-11-27.json"
        );
        assert_eq!(
            file_name("  ", "qc-results", d, "csv"),
            "cuvette-lab-qc-results-2026-11-27.csv"
        );
    }
}
