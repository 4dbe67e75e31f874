//! What is due today, per test: the QC runs the test's schedule asks for, and whether
//! its calibration is still good — none yet, its validity over or ending today, or a
//! recalibration triggered since it was made (a lamp change in the instrument log, a
//! QC rejection by a rule that looks for a systematic error). Plain Rust over the lab's
//! records; the board shows each line and leads to the view where it is dealt with.

use chrono::{DateTime, Duration, TimeZone, Utc};

use crate::engine::qc::{self, Action, Decision};
use crate::lab::{InstrumentEvent, Lab, TestSetup};
use crate::verdicts::LabVerdicts;

/// Where a line stands.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum State {
    Done,
    Due,
    Overdue,
    /// Something since the calibration asks for a new one.
    Triggered,
}

impl State {
    pub fn code(self) -> &'static str {
        match self {
            State::Done => "done",
            State::Due => "due",
            State::Overdue => "overdue",
            State::Triggered => "triggered",
        }
    }
}

/// The kind of task, which is also where it is dealt with.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Task {
    Qc,
    Calibration,
}

/// One line of what is due.
#[derive(Debug, Clone, PartialEq)]
pub struct Line {
    pub test: String,
    pub task: Task,
    pub state: State,
    /// Why, in the lab's words (times in the lab's zone).
    pub why: String,
}

fn local<Tz: TimeZone>(t: DateTime<Utc>, tz: &Tz) -> String
where
    Tz::Offset: std::fmt::Display,
{
    t.with_timezone(tz).format("%Y-%m-%d %H:%M").to_string()
}

/// Every test's QC and calibration lines for the day `now` falls on in `tz`.
pub fn today<Tz: TimeZone>(
    lab: &Lab,
    judged: &LabVerdicts,
    now: DateTime<Utc>,
    tz: &Tz,
) -> Vec<Line>
where
    Tz::Offset: std::fmt::Display,
{
    let mut out = Vec::new();
    for t in &lab.tests {
        let h = lab.control_history(&t.meta.id);
        let verdicts = judged.verdicts(&t.meta.id).ok();
        out.push(qc_line(t, &h.runs, verdicts, now, tz));
        out.push(calibration_line(lab, t, &h.runs, verdicts, now, tz));
    }
    out
}

fn qc_line<Tz: TimeZone>(
    t: &TestSetup,
    runs: &[&crate::lab::ControlRun],
    verdicts: Option<&[qc::RunVerdict]>,
    now: DateTime<Utc>,
    tz: &Tz,
) -> Line
where
    Tz::Offset: std::fmt::Display,
{
    let needed = t.qc_runs_per_day.unwrap_or(1).max(1) as usize;
    let day = now.with_timezone(tz).date_naive();
    let Some(verdicts) = verdicts else {
        return Line {
            test: t.code.clone(),
            task: Task::Qc,
            state: State::Due,
            why: "QC cannot be evaluated: check the control levels' targets in Set-up".into(),
        };
    };
    let today: Vec<Decision> = runs
        .iter()
        .zip(verdicts)
        .filter(|(r, _)| r.run_at.with_timezone(tz).date_naive() == day)
        .map(|(_, v)| v.decision)
        .collect();
    let good = today.iter().filter(|d| **d != Decision::Reject).count();
    let schedule = if needed == 1 {
        "one QC run a day".to_string()
    } else {
        format!("{needed} QC runs a day")
    };
    let (state, why) = if good >= needed {
        (
            State::Done,
            format!("{good} of {needed} not rejected today ({schedule})"),
        )
    } else if today.last() == Some(&Decision::Reject) {
        (
            State::Due,
            format!(
                "{good} of {needed} today; the latest was rejected: corrective action, then re-run"
            ),
        )
    } else {
        (
            State::Due,
            format!("{good} of {needed} today ({schedule}): run the controls"),
        )
    };
    Line {
        test: t.code.clone(),
        task: Task::Qc,
        state,
        why,
    }
}

fn calibration_line<Tz: TimeZone>(
    lab: &Lab,
    t: &TestSetup,
    runs: &[&crate::lab::ControlRun],
    verdicts: Option<&[qc::RunVerdict]>,
    now: DateTime<Utc>,
    tz: &Tz,
) -> Line
where
    Tz::Offset: std::fmt::Display,
{
    let line = |state, why| Line {
        test: t.code.clone(),
        task: Task::Calibration,
        state,
        why,
    };
    let Some(cal) = lab.current_calibration(&t.meta.id) else {
        return line(
            State::Due,
            "not calibrated: calibrate before patient samples".into(),
        );
    };
    let made = cal.performed_at;
    // A lamp change after the calibration.
    if let Some(lamp) = lab
        .instrument_log
        .iter()
        .filter(|e| e.event == InstrumentEvent::LampChange && e.at > made)
        .map(|e| e.at)
        .max()
    {
        return line(
            State::Triggered,
            format!(
                "the lamp was changed {} after the calibration of {}: recalibrate",
                local(lamp, tz),
                local(made, tz)
            ),
        );
    }
    // A rejection since the calibration by a rule that looks for a systematic error.
    if let Some(verdicts) = verdicts {
        // The newest such rejection.
        let systematic = runs
            .iter()
            .zip(verdicts)
            .rev()
            .filter(|(r, v)| r.run_at > made && v.decision == Decision::Reject)
            .filter_map(|(r, v)| {
                let rules: Vec<&str> = v
                    .violations
                    .iter()
                    .filter(|x| x.action == Action::Reject && x.rule.detects_systematic_error())
                    .map(|x| x.rule.code())
                    .collect();
                (!rules.is_empty()).then_some((r.run_at, rules))
            })
            .next();
        if let Some((at, mut rules)) = systematic {
            rules.dedup();
            return line(
                State::Triggered,
                format!(
                    "QC of {} rejected by {} (a systematic error) after the calibration of {}: \
                     find the cause; recalibrate if it points to the calibration",
                    local(at, tz),
                    rules.join(", "),
                    local(made, tz)
                ),
            );
        }
    }
    let Some(days) = t.calibration_valid_days else {
        return line(
            State::Done,
            format!("calibrated {} (no validity set in Set-up)", local(made, tz)),
        );
    };
    let until = made + Duration::days(days as i64);
    let day = |x: DateTime<Utc>| x.with_timezone(tz).date_naive();
    if now >= until {
        line(
            State::Overdue,
            format!(
                "calibrated {}, valid {days} days: expired {}; recalibrate",
                local(made, tz),
                local(until, tz)
            ),
        )
    } else if day(until) == day(now) {
        line(
            State::Due,
            format!(
                "calibrated {}, valid {days} days: ends today at {}",
                local(made, tz),
                until.with_timezone(tz).format("%H:%M")
            ),
        )
    } else {
        line(
            State::Done,
            format!(
                "calibrated {}, valid until {}",
                local(made, tz),
                local(until, tz)
            ),
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lab::{ControlRun, InstrumentEntry, RecordMeta};

    fn demo() -> Lab {
        Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap()
    }

    fn line<'a>(lines: &'a [Line], test: &str, task: Task) -> &'a Line {
        lines
            .iter()
            .find(|l| l.test == test && l.task == task)
            .unwrap()
    }

    /// A validity of 7 days: done the day before it ends, due on its last day,
    /// overdue from the moment it ends.
    #[test]
    fn a_calibration_expires_after_its_validity() {
        let mut lab = demo();
        let crea = lab.tests.iter().position(|t| t.code == "CREA").unwrap();
        lab.tests[crea].calibration_valid_days = Some(7);
        let made = lab
            .current_calibration(&lab.tests[crea].meta.id)
            .unwrap()
            .performed_at;
        let at = |d: Duration| made + d;
        let state = |now| line(&today(&lab, &LabVerdicts::of(&lab), now, &Utc), "CREA", Task::Calibration).state;
        assert_eq!(
            state(at(Duration::days(6) - Duration::hours(12))),
            State::Done
        );
        assert_eq!(
            state(at(Duration::days(7) - Duration::minutes(1))),
            State::Due
        );
        assert_eq!(state(at(Duration::days(7))), State::Overdue);
        let later = today(&lab, &LabVerdicts::of(&lab), at(Duration::days(8)), &Utc);
        let why = &line(&later, "CREA", Task::Calibration).why;
        assert!(why.contains("valid 7 days: expired"), "{why}");
    }

    /// A lamp change after the calibration triggers a new one; the demo's glucose
    /// 2-2s and 4-1s rejections (rules for a systematic error) trigger one too.
    #[test]
    fn a_lamp_change_or_a_systematic_rejection_triggers_recalibration() {
        let mut lab = demo();
        let now = lab.newest_time().unwrap();
        let lines = today(&lab, &LabVerdicts::of(&lab), now, &Utc);
        let glu = line(&lines, "GLU", Task::Calibration);
        assert_eq!(glu.state, State::Triggered, "{}", glu.why);
        assert!(glu.why.contains("4-1s"), "{}", glu.why);
        assert_eq!(line(&lines, "ALT", Task::Calibration).state, State::Done);
        lab.instrument_log.push(InstrumentEntry {
            meta: RecordMeta::new([7; 16], now, "AK"),
            at: now,
            event: InstrumentEvent::LampChange,
            value: None,
            note: String::new(),
            standard: None,
        });
        let alt = line(&today(&lab, &LabVerdicts::of(&lab), now, &Utc), "ALT", Task::Calibration).clone();
        assert_eq!(alt.state, State::Triggered);
        assert!(alt.why.starts_with("the lamp was changed"), "{}", alt.why);
    }

    /// One result beyond 3 SD (1-3s) is a random error: it does not ask for a
    /// recalibration.
    #[test]
    fn a_random_error_rejection_does_not_trigger_recalibration() {
        assert!(!qc::Rule::OneThreeS.detects_systematic_error());
        assert!(!qc::Rule::RangeFourS.detects_systematic_error());
        for r in [qc::Rule::TwoTwoS, qc::Rule::FourOneS, qc::Rule::TenX] {
            assert!(r.detects_systematic_error(), "{}", r.code());
        }
        let lab = demo();
        let now = lab.newest_time().unwrap();
        // ALT's 1-3s rejection of the demo came after its calibration: still done.
        let alt = line(&today(&lab, &LabVerdicts::of(&lab), now, &Utc), "ALT", Task::Calibration).clone();
        assert_eq!(alt.state, State::Done, "{}", alt.why);
    }

    /// Two runs a day: one accepted run is not enough; a second makes it done; a
    /// rejected run does not count.
    #[test]
    fn the_qc_schedule_counts_runs_that_were_not_rejected() {
        let mut lab = demo();
        let alt = lab.tests.iter().position(|t| t.code == "ALT").unwrap();
        lab.tests[alt].qc_runs_per_day = Some(2);
        let id = lab.tests[alt].meta.id.clone();
        let last = lab.runs_of(&id).last().map(|r| r.run_at).unwrap();
        // The next day, 09:00 UTC: no run yet.
        let next = (last + Duration::days(1))
            .date_naive()
            .and_hms_opt(9, 0, 0)
            .unwrap()
            .and_utc();
        let qc = |lab: &Lab| line(&today(lab, &LabVerdicts::of(lab), next, &Utc), "ALT", Task::Qc).clone();
        assert_eq!(qc(&lab).state, State::Due);
        assert!(qc(&lab).why.starts_with("0 of 2 today"), "{}", qc(&lab).why);
        let levels = lab.levels_of(&id);
        let run = |k: u8, z: f64, at: DateTime<Utc>| ControlRun {
            meta: RecordMeta::new([k; 16], at, "AK"),
            test_id: id.clone(),
            run_at: at,
            level_ids: levels.iter().map(|l| l.meta.id.clone()).collect(),
            values: levels.iter().map(|l| Some(l.mean + z * l.sd)).collect(),
            after_action: None,
            materials_used: Vec::new(),
            acknowledged: Vec::new(),
        };
        let (a, b, c) = (
            run(201, 0.0, next - Duration::hours(2)),
            run(202, 3.5, next - Duration::hours(1)),
            run(203, 0.0, next - Duration::minutes(30)),
        );
        lab.control_runs.push(a);
        assert!(qc(&lab).why.starts_with("1 of 2"), "{}", qc(&lab).why);
        lab.control_runs.push(b);
        assert!(
            qc(&lab).why.contains("latest was rejected"),
            "{}",
            qc(&lab).why
        );
        lab.control_runs.push(c);
        assert_eq!(qc(&lab).state, State::Done, "{}", qc(&lab).why);
    }
}
