//! After a rejection: a rejected QC run asks for a corrective action (what was found,
//! what was done, by whom, when) before the test's next run may be saved; that re-run
//! names the action it follows. Patient results stay held until a re-run is accepted
//! (today's gate reads the test's latest run). Plain Rust over the lab's records, judged
//! by the one rule engine through the lab's shared verdicts ([`crate::verdicts`]).

use chrono::{DateTime, Utc};

use crate::engine::qc::{self, Decision};
use crate::lab::{CorrectiveAction, Lab};
use crate::verdicts::LabVerdicts;

/// A rejected run with no corrective action recorded for it.
#[derive(Debug, Clone, PartialEq)]
pub struct Awaiting {
    pub test_id: String,
    pub test_code: String,
    pub run_id: String,
    pub run_at: DateTime<Utc>,
    /// The rejecting rules broken, in the published notation (1-3s, 2-2s, …).
    pub rules: Vec<&'static str>,
}

/// Whether a test's next QC run may be saved.
#[derive(Debug, Clone, PartialEq)]
pub enum RerunGate {
    /// The latest run was not rejected (or there is none).
    Free,
    /// The latest run was rejected and this corrective action answers it: the re-run
    /// names it.
    After { action_id: String },
    /// The latest run was rejected and nothing was recorded about it yet.
    NeedsAction {
        run_id: String,
        run_at: DateTime<Utc>,
    },
}

impl RerunGate {
    /// The message a refused save shows, telling what to do next.
    pub fn refusal(&self) -> Option<String> {
        match self {
            RerunGate::NeedsAction { .. } => Some(
                "the test's last run was rejected: record what was found and what was done \
                 (the corrective action, on that run's row) before the re-run is saved"
                    .to_string(),
            ),
            _ => None,
        }
    }
}

/// The corrective action recorded for a run, the newest if there are several.
pub fn action_for<'a>(lab: &'a Lab, run_id: &str) -> Option<&'a CorrectiveAction> {
    lab.corrective_actions
        .iter()
        .filter(|a| a.run_id == run_id)
        .max_by_key(|a| a.at)
}

/// Every rejected run of every test that has no corrective action, newest first.
/// A test whose QC cannot be evaluated contributes nothing (its view says why).
pub fn awaiting_action(lab: &Lab, judged: &LabVerdicts) -> Vec<Awaiting> {
    let mut out = Vec::new();
    for t in &lab.tests {
        let Ok(verdicts) = judged.verdicts(&t.meta.id) else {
            continue;
        };
        for (run, verdict) in lab.runs_of(&t.meta.id).iter().zip(verdicts) {
            if verdict.decision != Decision::Reject || action_for(lab, &run.meta.id).is_some() {
                continue;
            }
            let mut rules: Vec<&'static str> = verdict
                .violations
                .iter()
                .filter(|v| v.action == qc::Action::Reject)
                .map(|v| v.rule.code())
                .collect();
            rules.dedup();
            out.push(Awaiting {
                test_id: t.meta.id.clone(),
                test_code: t.code.clone(),
                run_id: run.meta.id.clone(),
                run_at: run.run_at,
                rules,
            });
        }
    }
    out.sort_by_key(|w| std::cmp::Reverse(w.run_at));
    out
}

/// May the test's next QC run be saved, and after which action?
pub fn rerun_gate(lab: &Lab, judged: &LabVerdicts, test_id: &str) -> RerunGate {
    let Some(verdicts) = judged.test(test_id) else {
        return RerunGate::Free;
    };
    match lab.runs_of(test_id).last().zip(verdicts.newest()) {
        Some((run, v)) if v.decision == Decision::Reject => match action_for(lab, &run.meta.id) {
            Some(a) => RerunGate::After {
                action_id: a.meta.id.clone(),
            },
            None => RerunGate::NeedsAction {
                run_id: run.meta.id.clone(),
                run_at: run.run_at,
            },
        },
        _ => RerunGate::Free,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lab::{ControlRun, RecordMeta};
    use chrono::Duration;

    fn run(lab: &Lab, k: u8, at: DateTime<Utc>, z: f64) -> ControlRun {
        let levels = lab.levels_of(&lab.tests[0].meta.id);
        ControlRun {
            meta: RecordMeta::new([k; 16], at, "AK"),
            test_id: lab.tests[0].meta.id.clone(),
            run_at: at,
            level_ids: levels.iter().map(|l| l.meta.id.clone()).collect(),
            values: levels.iter().map(|l| Some(l.mean + z * l.sd)).collect(),
            after_action: None,
            materials_used: Vec::new(),
            acknowledged: Vec::new(),
        }
    }

    /// A run at +3.5 SD on every level breaks 1-3s (published rule: one result beyond
    /// 3 SD rejects): the next run is refused until an action is recorded; the action
    /// opens the gate and names itself; an accepted re-run frees the test.
    #[test]
    fn a_rejected_run_needs_an_action_before_its_rerun() {
        let mut lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
        let now = lab.newest_time().unwrap() + Duration::hours(1);
        let test_id = lab.tests[0].meta.id.clone();
        let before = awaiting_action(&lab, &LabVerdicts::of(&lab)).len();
        let bad = run(&lab, 101, now, 3.5);
        let bad_id = bad.meta.id.clone();
        lab.control_runs.push(bad);
        let gate = rerun_gate(&lab, &LabVerdicts::of(&lab), &test_id);
        assert_eq!(
            gate,
            RerunGate::NeedsAction {
                run_id: bad_id.clone(),
                run_at: now
            }
        );
        assert!(gate.refusal().unwrap().contains("corrective action"));
        let waiting = awaiting_action(&lab, &LabVerdicts::of(&lab));
        assert_eq!(waiting.len(), before + 1);
        assert_eq!(waiting[0].run_id, bad_id);
        assert!(waiting[0].rules.contains(&"1-3s"), "{:?}", waiting[0].rules);

        let action = CorrectiveAction {
            meta: RecordMeta::new([102; 16], now + Duration::minutes(20), "AK"),
            test_id: test_id.clone(),
            run_id: bad_id.clone(),
            at: now + Duration::minutes(20),
            found: "reagent left uncapped overnight".into(),
            done: "new reagent bottle opened".into(),
        };
        let action_id = action.meta.id.clone();
        lab.corrective_actions.push(action);
        assert_eq!(
            rerun_gate(&lab, &LabVerdicts::of(&lab), &test_id),
            RerunGate::After { action_id }
        );
        assert_eq!(awaiting_action(&lab, &LabVerdicts::of(&lab)).len(), before);

        let mut good = run(&lab, 103, now + Duration::minutes(40), 0.0);
        good.after_action = Some(lab.corrective_actions[0].meta.id.clone());
        lab.control_runs.push(good);
        assert_eq!(
            rerun_gate(&lab, &LabVerdicts::of(&lab), &test_id),
            RerunGate::Free
        );
    }

    /// A warning (1-2s alone: one result between 2 and 3 SD, no other rule broken, by
    /// the published rule definitions) is not a rejection: nothing is asked.
    #[test]
    fn a_warning_asks_for_no_action() {
        let mut lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
        lab.control_runs.clear();
        let now = lab.newest_time().unwrap() + Duration::hours(1);
        let test_id = lab.tests[0].meta.id.clone();
        let levels = lab.levels_of(&test_id);
        let mut r = run(&lab, 104, now, 0.0);
        r.values[0] = Some(levels[0].mean + 2.5 * levels[0].sd);
        lab.control_runs.push(r);
        let h = lab.control_history(&test_id);
        let v = qc::evaluate(&h.targets, &h.values, &lab.tests[0].qc_rules).unwrap();
        assert_eq!(v.last().unwrap().decision, Decision::Warning);
        assert_eq!(
            rerun_gate(&lab, &LabVerdicts::of(&lab), &test_id),
            RerunGate::Free
        );
        assert!(awaiting_action(&lab, &LabVerdicts::of(&lab)).is_empty());
    }

    /// The demo's story: the earlier rejections (CREA, ALT, and glucose's 2-2s episode)
    /// have their actions, each followed by a re-run that names it; this morning's
    /// glucose rejection (4-1s) has none yet, so glucose cannot be re-run.
    #[test]
    fn the_demo_has_one_rejection_waiting_for_its_action() {
        let lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
        let waiting = awaiting_action(&lab, &LabVerdicts::of(&lab));
        assert_eq!(waiting.len(), 1, "{waiting:?}");
        assert_eq!(
            (waiting[0].test_code.as_str(), waiting[0].rules.clone()),
            ("GLU", vec!["4-1s"])
        );
        assert!(matches!(
            rerun_gate(&lab, &LabVerdicts::of(&lab), &waiting[0].test_id),
            RerunGate::NeedsAction { .. }
        ));
        assert_eq!(lab.corrective_actions.len(), 4);
        for a in &lab.corrective_actions {
            let rerun = lab
                .control_runs
                .iter()
                .find(|r| r.after_action.as_deref() == Some(a.meta.id.as_str()))
                .expect("a re-run names the action");
            assert!(rerun.run_at > a.at && rerun.test_id == a.test_id);
        }
    }
}
