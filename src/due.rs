//! What is due today, per test: the QC runs the test's schedule asks for, and whether
//! its calibration is still good — none yet, its validity over or ending today, or a
//! recalibration triggered since it was made (a lamp change in the instrument log,
//! another lot of a reagent the calibration used, a QC rejection by a rule that looks
//! for a systematic error). Plain Rust over the lab's
//! records; the board shows each line and leads to the view where it is dealt with.

use chrono::{DateTime, Duration, TimeZone, Utc};

use crate::engine::qc::{self, Action, Decision};
use crate::lab::{InstrumentEvent, Lab, MaterialKind, MaterialRecord, TestSetup};
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
    /// An instrument check by its schedule (`Line::test` names the check).
    Instrument(InstrumentEvent),
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
    out.extend(instrument_lines(lab, now, tz));
    out
}

/// Each scheduled instrument check (`Lab::instrument_checks`): done while its last
/// entry is younger than its interval in days, due on the day the interval ends (or
/// never recorded), overdue after. Days are the lab's calendar days in `tz`.
pub fn instrument_lines<Tz: TimeZone>(lab: &Lab, now: DateTime<Utc>, tz: &Tz) -> Vec<Line>
where
    Tz::Offset: std::fmt::Display,
{
    let day = |t: DateTime<Utc>| t.with_timezone(tz).date_naive();
    let today = day(now);
    lab.instrument_checks
        .iter()
        .filter(|c| c.every_days > 0)
        .map(|c| {
            let name = c.event.words();
            let name = name.split(" (").next().unwrap_or(name);
            let schedule = if c.every_days == 1 {
                "every day".to_string()
            } else {
                format!("every {} days", c.every_days)
            };
            let last = lab
                .instrument_log
                .iter()
                .filter(|e| e.event == c.event && e.at <= now)
                .map(|e| e.at)
                .max();
            let (state, why) = match last {
                None => (State::Due, format!("{schedule}; none recorded yet")),
                Some(at) => {
                    let next = day(at) + Duration::days(c.every_days as i64);
                    let last = local(at, tz);
                    if today < next {
                        (State::Done, format!("{schedule}; last {last}, next {next}"))
                    } else if today == next {
                        (State::Due, format!("{schedule}; last {last}: due today"))
                    } else {
                        (
                            State::Overdue,
                            format!("{schedule}; last {last}: was due {next}"),
                        )
                    }
                }
            };
            let mut test = name.to_string();
            if let Some(first) = test.get_mut(..1) {
                first.make_ascii_uppercase();
            }
            Line {
                test,
                task: Task::Instrument(c.event),
                state,
                why,
            }
        })
        .collect()
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
    // Another lot of a reagent the calibration used.
    if let Some(change) = reagent_lot_change(lab, t, cal) {
        return line(
            State::Triggered,
            format!(
                "{} lot {} in use since {} (the calibration of {} used lot {}): recalibrate",
                change.reagent,
                change.new_lot,
                local(change.since, tz),
                local(made, tz),
                change.old_lot
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

/// A reagent of the calibration replaced by another lot of it.
#[derive(Debug, Clone, PartialEq)]
pub struct ReagentLotChange {
    pub reagent: String,
    pub old_lot: String,
    pub new_lot: String,
    /// When the new lot was first recorded or used after the calibration.
    pub since: DateTime<Utc>,
}

/// The first change of a reagent lot after `cal`: a reagent the calibration names
/// (among its materials used) whose other lot was recorded in the materials list after
/// the calibration, or used in a QC run of the test after it. Reagents are matched by
/// name, as the materials list does not tie a reagent to a test. A calibration that
/// names no reagent cannot be checked and triggers nothing.
pub fn reagent_lot_change(
    lab: &Lab,
    t: &TestSetup,
    cal: &crate::lab::CalibrationRecord,
) -> Option<ReagentLotChange> {
    let material = |id: &str| lab.materials.iter().find(|m| m.meta.id == id);
    let reagents: Vec<&MaterialRecord> = cal
        .materials_used
        .iter()
        .filter_map(|id| material(id))
        .filter(|m| m.kind == MaterialKind::Reagent)
        .collect();
    // The lot of the calibration's reagent that `m` replaces, if it is another lot.
    let replaced = |m: &MaterialRecord| -> Option<String> {
        reagents
            .iter()
            .find(|r| r.name == m.name && r.lot != m.lot && m.kind == MaterialKind::Reagent)
            .map(|r| r.lot.clone())
    };
    let recorded = lab
        .materials
        .iter()
        .filter(|m| m.meta.created_at > cal.performed_at)
        .filter_map(|m| replaced(m).map(|old| (m.meta.created_at, old, m)));
    let used = lab
        .runs_of(&t.meta.id)
        .into_iter()
        .filter(|r| r.run_at > cal.performed_at)
        .flat_map(|r| {
            r.materials_used
                .iter()
                .filter_map(|id| material(id))
                .filter_map(move |m| replaced(m).map(|old| (r.run_at, old, m)))
        });
    recorded
        .chain(used)
        .min_by_key(|(at, _, _)| *at)
        .map(|(since, old_lot, m)| ReagentLotChange {
            reagent: m.name.clone(),
            old_lot,
            new_lot: m.lot.clone(),
            since,
        })
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
        let state = |now| {
            line(
                &today(&lab, &LabVerdicts::of(&lab), now, &Utc),
                "CREA",
                Task::Calibration,
            )
            .state
        };
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
        let alt = line(
            &today(&lab, &LabVerdicts::of(&lab), now, &Utc),
            "ALT",
            Task::Calibration,
        )
        .clone();
        assert_eq!(alt.state, State::Triggered);
        assert!(alt.why.starts_with("the lamp was changed"), "{}", alt.why);
    }

    /// A daily temperature check: done the day of the check, due the next day, overdue
    /// after; a weekly photometer check is done for six days after it; never recorded
    /// is due; an interval of 0 schedules nothing.
    #[test]
    fn instrument_checks_fall_due_by_their_interval() {
        use crate::lab::CheckSchedule;
        let mut lab = demo();
        lab.instrument_checks = vec![
            CheckSchedule {
                event: InstrumentEvent::TemperatureCheck,
                every_days: 1,
            },
            CheckSchedule {
                event: InstrumentEvent::PhotometerCheck,
                every_days: 7,
            },
            CheckSchedule {
                event: InstrumentEvent::ServiceVisit,
                every_days: 0,
            },
        ];
        let newest_temperature = lab
            .instrument_log
            .iter()
            .filter(|e| e.event == InstrumentEvent::TemperatureCheck)
            .map(|e| e.at)
            .max()
            .unwrap();
        let newest_photometer = lab
            .instrument_log
            .iter()
            .filter(|e| e.event == InstrumentEvent::PhotometerCheck)
            .map(|e| e.at)
            .max()
            .unwrap();
        let lines = |now| instrument_lines(&lab, now, &Utc);
        let state = |now, event| {
            lines(now)
                .into_iter()
                .find(|l| l.task == Task::Instrument(event))
                .map(|l| l.state)
        };
        let t = InstrumentEvent::TemperatureCheck;
        assert_eq!(
            state(newest_temperature + Duration::hours(1), t),
            Some(State::Done)
        );
        assert_eq!(
            state(newest_temperature + Duration::days(1), t),
            Some(State::Due)
        );
        assert_eq!(
            state(newest_temperature + Duration::days(2), t),
            Some(State::Overdue)
        );
        let p = InstrumentEvent::PhotometerCheck;
        assert_eq!(
            state(newest_photometer + Duration::days(6), p),
            Some(State::Done)
        );
        assert_eq!(
            state(newest_photometer + Duration::days(7), p),
            Some(State::Due)
        );
        let l = lines(newest_photometer + Duration::days(9));
        assert_eq!(l.len(), 2, "an interval of 0 schedules nothing");
        assert!(
            l[1].why.starts_with("every 7 days; last ") && l[1].why.contains("was due"),
            "{}",
            l[1].why
        );
        assert_eq!(l[0].test, "Temperature check");
        lab.instrument_log.clear();
        let l = instrument_lines(&lab, newest_photometer, &Utc);
        assert!(l
            .iter()
            .all(|l| l.state == State::Due && l.why.ends_with("none recorded yet")));
    }

    /// Another lot of the calibration's reagent (by name) triggers recalibration from
    /// when it was recorded or first used in a QC run of the test, whichever is first;
    /// another reagent, the same lot again, or a calibration naming no reagent do not.
    #[test]
    fn another_lot_of_the_calibrations_reagent_triggers_recalibration() {
        let mut lab = demo();
        let crea = lab.tests.iter().find(|t| t.code == "CREA").unwrap().clone();
        let reagent = lab
            .materials
            .iter()
            .find(|m| m.name.contains("Creatinine"))
            .unwrap()
            .clone();
        let cal_at = lab.current_calibration(&crea.meta.id).unwrap().performed_at;
        let cal = |lab: &Lab| lab.current_calibration(&crea.meta.id).unwrap().clone();
        let calibration = |lab: &Lab| {
            let lines = today(lab, &LabVerdicts::of(lab), cal_at + Duration::days(2), &Utc);
            line(&lines, "CREA", Task::Calibration).clone()
        };
        // The calibration names no reagent: nothing to compare.
        let mut new_lot = reagent.clone();
        new_lot.meta = RecordMeta::new([201; 16], cal_at + Duration::hours(30), "AK");
        new_lot.lot = "DK-1299".into();
        lab.materials.push(new_lot.clone());
        assert_eq!(reagent_lot_change(&lab, &crea, &cal(&lab)), None);
        assert_ne!(calibration(&lab).state, State::Triggered);
        // Now it names the old lot.
        let k = lab
            .calibrations
            .iter()
            .position(|c| c.test_id == crea.meta.id && c.performed_at == cal_at)
            .unwrap();
        lab.calibrations[k].materials_used = vec![reagent.meta.id.clone()];
        let change = reagent_lot_change(&lab, &crea, &cal(&lab)).unwrap();
        assert_eq!(change.new_lot, "DK-1299");
        assert_eq!(change.old_lot, reagent.lot);
        assert_eq!(change.since, cal_at + Duration::hours(30));
        let l = calibration(&lab);
        assert_eq!(l.state, State::Triggered, "{}", l.why);
        assert!(
            l.why.contains("lot DK-1299") && l.why.contains("recalibrate"),
            "{}",
            l.why
        );
        // A QC run of the test that used the new lot earlier than its record moves
        // the trigger to that run.
        let mut run = lab
            .runs_of(&crea.meta.id)
            .last()
            .map(|r| (*r).clone())
            .unwrap();
        run.meta = RecordMeta::new([202; 16], cal_at + Duration::hours(3), "AK");
        run.run_at = cal_at + Duration::hours(3);
        run.materials_used = vec![new_lot.meta.id.clone()];
        lab.control_runs.push(run);
        let change = reagent_lot_change(&lab, &crea, &cal(&lab)).unwrap();
        assert_eq!(change.since, cal_at + Duration::hours(3));
        // Another reagent's new lot, or the same lot recorded again, do not trigger.
        let mut lab2 = demo();
        lab2.calibrations[k].materials_used = vec![reagent.meta.id.clone()];
        let mut other = lab2
            .materials
            .iter()
            .find(|m| m.name.contains("Glucose"))
            .unwrap()
            .clone();
        other.meta = RecordMeta::new([203; 16], cal_at + Duration::hours(5), "AK");
        other.lot = "DG-9999".into();
        lab2.materials.push(other);
        let mut same = reagent.clone();
        same.meta = RecordMeta::new([204; 16], cal_at + Duration::hours(6), "AK");
        lab2.materials.push(same);
        assert_eq!(reagent_lot_change(&lab2, &crea, &cal(&lab2)), None);
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
        let alt = line(
            &today(&lab, &LabVerdicts::of(&lab), now, &Utc),
            "ALT",
            Task::Calibration,
        )
        .clone();
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
        let qc = |lab: &Lab| {
            line(
                &today(lab, &LabVerdicts::of(lab), next, &Utc),
                "ALT",
                Task::Qc,
            )
            .clone()
        };
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
