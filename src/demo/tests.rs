//! The demo lab holds each episode its story promises, judged by the engine itself (the
//! QC rules, the calibration acceptance, the stability countdowns, what is due), and
//! nothing else goes wrong in it. The story's dates are fixed ([`story_end`]), so these
//! checks give the same answer at any hour.

use super::*;
use crate::due::{self, State, Task};
use crate::engine::acceptance::Outcome;
use crate::engine::qc::Rule;
use crate::engine::stability::{self, StabilityState, WarningWindow};
use crate::verdicts::LabVerdicts;

fn test_id(lab: &Lab, code: &str) -> String {
    lab.tests
        .iter()
        .find(|t| t.code == code)
        .map(|t| t.meta.id.clone())
        .unwrap_or_else(|| panic!("the demo has no {code}"))
}

/// (test code, run, rules that rejected it) for every rejected run, oldest first.
fn rejections(lab: &Lab) -> Vec<(String, ControlRun, Vec<Rule>)> {
    let judged = LabVerdicts::of(lab);
    let mut out = Vec::new();
    for t in &lab.tests {
        let h = lab.control_history(&t.meta.id);
        let verdicts = judged.verdicts(&t.meta.id).expect("judged");
        for (run, v) in h.runs.iter().zip(verdicts) {
            if v.decision == Decision::Reject {
                let rules = v
                    .violations
                    .iter()
                    .filter(|x| x.action == crate::engine::qc::Action::Reject)
                    .map(|x| x.rule)
                    .collect();
                out.push((t.code.clone(), (*run).clone(), rules));
            }
        }
    }
    out.sort_by_key(|(_, r, _)| r.run_at);
    out
}

#[test]
fn the_same_lab_every_time_and_marked_demo() {
    let (a, b) = (demo_lab(), demo_lab());
    assert_eq!(a, b);
    assert!(a.demo);
    assert!(a.lab_name.contains("DEMO"));
    assert!(
        a.implausible_records().is_empty(),
        "{:?}",
        a.implausible_records()
    );
    // Every id is unique across the lab.
    let json = serde_json::to_value(&a).unwrap();
    let mut ids = Vec::new();
    fn collect(v: &serde_json::Value, out: &mut Vec<String>) {
        match v {
            serde_json::Value::Object(m) => {
                if let Some(serde_json::Value::String(id)) = m.get("meta").and_then(|x| x.get("id"))
                {
                    out.push(id.clone());
                }
                m.values().for_each(|x| collect(x, out));
            }
            serde_json::Value::Array(xs) => xs.iter().for_each(|x| collect(x, out)),
            _ => {}
        }
    }
    collect(&json, &mut ids);
    let n = ids.len();
    ids.sort();
    ids.dedup();
    assert_eq!(ids.len(), n, "duplicate record ids");
    // It reads back as a lab (what an export and import of it would do).
    let text = serde_json::to_string(&a).unwrap();
    assert_eq!(Lab::from_json(&text).unwrap(), a);
}

#[test]
fn ten_tests_of_every_reading_mode_over_thirteen_weeks() {
    let lab = demo_lab();
    assert!((8..=12).contains(&lab.tests.len()));
    for mode in [
        ReadingMode::EndPoint,
        ReadingMode::FixedTime,
        ReadingMode::Kinetic,
    ] {
        assert!(lab.tests.iter().any(|t| t.mode == mode), "{mode:?}");
    }
    let first = lab.control_runs.iter().map(|r| r.run_at).min().unwrap();
    assert!(story_end() - first >= Duration::days(85));
    for t in &lab.tests {
        assert!(lab.runs_of(&t.meta.id).len() >= DAYS as usize, "{}", t.code);
        assert!(lab.current_calibration(&t.meta.id).is_some(), "{}", t.code);
    }
}

#[test]
fn never_in_the_future_wherever_it_is_placed() {
    assert_eq!(demo_lab().newest_time(), Some(story_end()));
    let lead = Duration::minutes(3);
    for now in [
        Utc.with_ymd_and_hms(2026, 3, 9, 10, 30, 0).unwrap(),
        Utc.with_ymd_and_hms(2031, 12, 31, 23, 59, 0).unwrap(),
    ] {
        assert_eq!(demo_lab_before(now, lead).newest_time(), Some(now - lead));
    }
}

#[test]
fn the_rejections_are_exactly_the_story_s() {
    let lab = demo_lab();
    let got: Vec<(String, Vec<Rule>)> = rejections(&lab)
        .into_iter()
        .map(|(code, _, rules)| (code, rules))
        .collect();
    let want = vec![
        ("UREA".to_string(), vec![Rule::RangeFourS]),
        ("CREA".to_string(), vec![Rule::OneThreeS]),
        ("GLU".to_string(), vec![Rule::TwoTwoS]),
        ("ALT".to_string(), vec![Rule::OneThreeS]),
        ("GLU".to_string(), vec![Rule::FourOneS]),
    ];
    assert_eq!(got, want);
}

#[test]
fn every_rejection_but_this_morning_s_has_an_action_and_an_accepted_rerun() {
    let lab = demo_lab();
    let judged = LabVerdicts::of(&lab);
    let all = rejections(&lab);
    let (last, earlier) = all.split_last().unwrap();
    for (code, run, _) in earlier {
        let action = crate::corrective::action_for(&lab, &run.meta.id)
            .unwrap_or_else(|| panic!("{code}: no action for {}", run.run_at));
        let rerun = lab
            .control_runs
            .iter()
            .find(|r| r.after_action.as_deref() == Some(&action.meta.id))
            .unwrap_or_else(|| panic!("{code}: no re-run"));
        assert!(rerun.run_at > action.at && action.at > run.run_at);
        let v = judged
            .test(&rerun.test_id)
            .unwrap()
            .of_run(&rerun.meta.id)
            .unwrap();
        assert_ne!(v.decision, Decision::Reject, "{code}");
    }
    // This morning's glucose 4-1s waits for its action: the board lists it.
    assert_eq!(last.1.run_at, story_end());
    let waiting = crate::corrective::awaiting_action(&lab, &judged);
    assert_eq!(waiting.len(), 1);
}

#[test]
fn glucose_4_1s_comes_after_a_new_reagent_lot() {
    let lab = demo_lab();
    let glu = test_id(&lab, "GLU");
    let lots: Vec<(&str, DateTime<Utc>)> = lab
        .materials
        .iter()
        .filter(|m| m.name.starts_with("Glucose reagent R1"))
        .map(|m| (m.lot.as_str(), m.meta.created_at))
        .collect();
    let new_lot = lots
        .iter()
        .filter(|(lot, _)| *lot == "GG-2611")
        .map(|l| l.1)
        .min()
        .unwrap();
    assert!(lots
        .iter()
        .any(|(lot, at)| *lot != "GG-2611" && *at < new_lot));
    assert!(story_end() - new_lot <= Duration::days(5));
    // The calibration after the lot change names the new lot, so the trigger on the
    // board is this morning's systematic rejection.
    let cal = lab.current_calibration(&glu).unwrap();
    assert!(cal.performed_at > new_lot);
    let lines = due::today(&lab, &LabVerdicts::of(&lab), story_end(), &Utc);
    let line = lines
        .iter()
        .find(|l| l.test == "GLU" && l.task == Task::Calibration)
        .unwrap();
    assert_eq!(line.state, State::Triggered);
    assert!(line.why.contains("4-1s"), "{}", line.why);
}

#[test]
fn the_cholesterol_reagent_blank_creeps_up_until_a_calibration_is_rejected() {
    let lab = demo_lab();
    let cals = lab.calibrations_of(&test_id(&lab, "CHOL"));
    let mean = |c: &CalibrationRecord| c.blank.iter().sum::<f64>() / c.blank.len() as f64;
    let rejected: Vec<&&CalibrationRecord> = cals
        .iter()
        .filter(|c| c.outcome == Outcome::Rejected)
        .collect();
    assert_eq!(rejected.len(), 1);
    let r = rejected[0];
    assert!(
        r.findings
            .iter()
            .any(|f| f.contains("reagent blank absorbance")),
        "{:?}",
        r.findings
    );
    // Same bottle: the blank rises from calibration to calibration up to the rejection.
    let bottle = &r.materials_used;
    let same: Vec<f64> = cals
        .iter()
        .filter(|c| &c.materials_used == bottle)
        .map(|c| mean(c))
        .collect();
    assert!(same.len() >= 5, "{same:?}");
    assert!(same.windows(2).all(|w| w[1] > w[0]), "{same:?}");
    // The fresh bottle's calibration right after is accepted, and is the one in use.
    let next = cals
        .iter()
        .find(|c| c.performed_at > r.performed_at)
        .unwrap();
    assert!(next.usable() && mean(next) < same[0] + 0.005);
    assert_eq!(
        lab.current_calibration(&r.test_id).unwrap().meta.id,
        next.meta.id
    );
    let old = lab
        .materials
        .iter()
        .find(|m| m.meta.id == bottle[0])
        .unwrap();
    assert!(old
        .discarded
        .as_ref()
        .unwrap()
        .reason
        .contains("reagent blank"));
}

#[test]
fn a_control_lot_crossover_is_under_way() {
    let lab = demo_lab();
    let c = crate::board::crossovers(&lab, &LabVerdicts::of(&lab), story_end(), &Utc);
    assert_eq!(c.len(), 1, "{c:?}");
    let c = &c[0];
    assert_eq!((c.test.as_str(), c.level.as_str()), ("CHOL", "Normal"));
    assert!(c.new_results >= 5 && c.still_needed > 0, "{c:?}");
    assert!(c.old_runs_out.is_some_and(|t| t > story_end()));
}

#[test]
fn the_materials_tell_their_part() {
    let lab = demo_lab();
    let now = story_end();
    let report = |m: &MaterialRecord| {
        stability::evaluate(&m.stability, now, &Utc, WarningWindow::default()).unwrap()
    };
    let in_use = || lab.materials.iter().filter(|m| m.in_use());
    // One expires today, by its maker's date.
    let today: Vec<&MaterialRecord> = in_use()
        .filter(|m| {
            let until = report(m).material.until;
            until > now
                && until
                    <= now
                        .date_naive()
                        .succ_opt()
                        .unwrap()
                        .and_hms_opt(0, 0, 0)
                        .unwrap()
                        .and_utc()
        })
        .filter(|m| m.stability.frozen.is_none())
        .collect();
    assert_eq!(today.len(), 1);
    assert_eq!(
        report(today[0]).material.governed_by,
        stability::Limit::MakerExpiry
    );
    // The multi-analyte control is usable, but its ALT is past its own stability.
    let control = in_use().find(|m| m.lot == "DQ-N-2611").unwrap();
    let r = report(control);
    assert_ne!(r.material.state, StabilityState::Expired);
    let alt = r.analytes.iter().find(|(a, _)| a == "ALT").unwrap();
    assert_eq!(alt.1.state, StabilityState::Expired);
    let alt_test = lab.tests.iter().find(|t| t.code == "ALT").unwrap();
    let glu_test = lab.tests.iter().find(|t| t.code == "GLU").unwrap();
    let chosen = [control.meta.id.clone()];
    assert_eq!(
        crate::usage::warnings(&lab, &chosen, alt_test, now, &Utc).len(),
        1
    );
    assert!(crate::usage::warnings(&lab, &chosen, glu_test, now, &Utc).is_empty());
    // Frozen aliquots: one thawed this morning, the others may still be thawed once.
    let aliquots: Vec<&MaterialRecord> =
        in_use().filter(|m| m.stability.frozen.is_some()).collect();
    let thawed: Vec<_> = aliquots
        .iter()
        .filter(|m| m.stability.frozen.as_ref().unwrap().thaw_count == 1)
        .collect();
    assert_eq!(thawed.len(), 1);
    assert!(stability::thaw(&thawed[0].stability, now).is_err());
    assert!(aliquots.len() >= 2);
    assert!(aliquots
        .iter()
        .any(|m| stability::thaw(&m.stability, now).is_ok()));
}

#[test]
fn a_failed_temperature_check_and_a_lamp_change_in_the_log() {
    let lab = demo_lab();
    let limits = lab.temperature_limits;
    let out: Vec<&InstrumentEntry> = lab
        .instrument_log
        .iter()
        .filter(|e| e.event == InstrumentEvent::TemperatureCheck)
        .filter(|e| {
            e.value.is_some_and(|v| {
                limits.low.is_some_and(|l| v < l) || limits.high.is_some_and(|h| v > h)
            })
        })
        .collect();
    assert_eq!(out.len(), 1);
    // Rechecked within the hour, in limits.
    let recheck = lab
        .instrument_log
        .iter()
        .filter(|e| e.event == InstrumentEvent::TemperatureCheck && e.at > out[0].at)
        .min_by_key(|e| e.at)
        .unwrap();
    assert!(recheck.at - out[0].at <= Duration::hours(1));
    // The lamp change: every test was recalibrated after it (so nothing is triggered by it).
    let lamp = lab
        .instrument_log
        .iter()
        .find(|e| e.event == InstrumentEvent::LampChange)
        .unwrap();
    for t in &lab.tests {
        assert!(
            lab.current_calibration(&t.meta.id).unwrap().performed_at > lamp.at,
            "{}",
            t.code
        );
    }
    // Every photometer check passes its standard; one water blank is stored as −0.
    assert!(crate::board::failed_photometer_checks(&lab).is_empty());
    assert!(lab
        .instrument_log
        .iter()
        .any(|e| e.value.is_some_and(|v| v == 0.0 && v.is_sign_negative())));
}

#[test]
fn the_board_this_morning_lists_what_the_story_implies() {
    let lab = demo_lab();
    let lines = due::today(&lab, &LabVerdicts::of(&lab), story_end(), &Utc);
    let state = |test: &str, task: Task| {
        lines
            .iter()
            .find(|l| l.test == test && l.task == task)
            .map(|l| l.state)
            .unwrap_or_else(|| panic!("no line for {test}"))
    };
    assert_eq!(state("GLU", Task::Qc), State::Due);
    assert_eq!(state("GLU", Task::Calibration), State::Triggered);
    assert_eq!(state("UREA", Task::Calibration), State::Overdue);
    assert_eq!(state("TBIL", Task::Calibration), State::Due);
    for code in ["CREA", "CHOL", "TP", "ALB", "ALT", "AST", "ALP"] {
        assert_eq!(state(code, Task::Calibration), State::Done, "{code}");
    }
    for code in [
        "UREA", "CREA", "CHOL", "TP", "ALB", "TBIL", "ALT", "AST", "ALP",
    ] {
        assert_eq!(state(code, Task::Qc), State::Done, "{code}");
    }
    // Today's temperature and photometer checks are still to do; maintenance is done.
    assert_eq!(
        state(
            "Temperature check",
            Task::Instrument(InstrumentEvent::TemperatureCheck)
        ),
        State::Due
    );
    assert_eq!(
        state(
            "Photometer check",
            Task::Instrument(InstrumentEvent::PhotometerCheck)
        ),
        State::Due
    );
    assert_eq!(
        state(
            "Maintenance",
            Task::Instrument(InstrumentEvent::Maintenance)
        ),
        State::Done
    );
    assert_eq!(lines.len(), 2 * lab.tests.len() + 3);
}
