//! Every test's QC verdicts for one state of the lab, judged once and read by every
//! place that needs a run's decision (today's board, what is due, corrective actions,
//! the QC runs view, the control charts), with each test's rule windows after its
//! newest run so that a new run is judged from them without replaying the history.
//! Plain Rust over the lab's records; the shell keeps one per lab revision.

use std::collections::HashMap;
use std::sync::Arc;

use crate::engine::qc::{Judge, Options, QcError, RunVerdict};
use crate::lab::Lab;

/// One test's verdicts, in the order of [`Lab::control_history`] (oldest run first).
#[derive(Debug, Clone)]
pub struct TestVerdicts {
    /// Run ids in history order, to find a run's verdict.
    run_ids: Vec<String>,
    /// One verdict per run, or why the test's QC cannot be evaluated.
    verdicts: Result<Vec<RunVerdict>, QcError>,
    /// The rule windows after the newest run.
    judge: Option<Judge>,
}

impl TestVerdicts {
    /// Judge one test's whole history.
    pub fn of(lab: &Lab, test_id: &str) -> TestVerdicts {
        let h = lab.control_history(test_id);
        let rules = lab
            .tests
            .iter()
            .find(|t| t.meta.id == test_id)
            .map(|t| t.qc_rules.clone())
            .unwrap_or_default();
        let run_ids = h.runs.iter().map(|r| r.meta.id.clone()).collect();
        let judged = Judge::new(&h.targets, &rules, Options::default()).and_then(|mut judge| {
            let verdicts = h
                .values
                .iter()
                .enumerate()
                .map(|(r, run)| judge.judge_named(run, || format!("QC run {} of the test", r + 1)))
                .collect::<Result<Vec<_>, _>>()?;
            Ok((verdicts, judge))
        });
        match judged {
            Ok((verdicts, judge)) => TestVerdicts {
                run_ids,
                verdicts: Ok(verdicts),
                judge: Some(judge),
            },
            Err(e) => TestVerdicts {
                run_ids,
                verdicts: Err(e),
                judge: None,
            },
        }
    }

    /// Every run's verdict, oldest first, or why QC cannot be evaluated.
    pub fn all(&self) -> Result<&[RunVerdict], &QcError> {
        self.verdicts.as_deref()
    }

    /// The verdict of the newest run.
    pub fn newest(&self) -> Option<&RunVerdict> {
        self.verdicts.as_ref().ok()?.last()
    }

    /// The verdict of the run with this id.
    pub fn of_run(&self, run_id: &str) -> Option<&RunVerdict> {
        let k = self.run_ids.iter().position(|id| id == run_id)?;
        self.verdicts.as_ref().ok()?.get(k)
    }

    /// A new run (one value per level in set-up order, `None` where not run) judged as
    /// the newest, from the stored windows; the stored state is not changed.
    pub fn judge_next(&self, values: &[Option<f64>]) -> Result<RunVerdict, QcError> {
        match (&self.judge, &self.verdicts) {
            (Some(judge), _) => judge.clone().judge(values),
            (None, Err(e)) => Err(e.clone()),
            (None, Ok(_)) => Err(QcError("QC cannot be evaluated".into())),
        }
    }
}

/// Every test's verdicts for one state of the lab, each with the test's key
/// ([`Lab::test_keys`]) it was judged at.
#[derive(Debug, Clone, Default)]
pub struct LabVerdicts {
    tests: HashMap<String, (u64, Arc<TestVerdicts>)>,
}

impl LabVerdicts {
    /// Judge every test of the lab once.
    pub fn of(lab: &Lab) -> LabVerdicts {
        LabVerdicts::after(None, lab)
    }

    /// The verdicts for `lab`, judging again only the tests whose key changed since
    /// `before` (the verdicts of an earlier state): a change to one test costs that
    /// test's history, not the lab's.
    pub fn after(before: Option<&LabVerdicts>, lab: &Lab) -> LabVerdicts {
        let keys = lab.test_keys();
        let tests = lab
            .tests
            .iter()
            .map(|t| {
                let id = &t.meta.id;
                let key = keys.get(id).copied().unwrap_or_default();
                let kept = before
                    .and_then(|b| b.tests.get(id))
                    .filter(|(k, _)| *k == key)
                    .map(|(_, v)| Arc::clone(v));
                let judged = kept.unwrap_or_else(|| Arc::new(TestVerdicts::of(lab, id)));
                (id.clone(), (key, judged))
            })
            .collect();
        LabVerdicts { tests }
    }

    /// True when no test was judged (no lab yet, or a lab without tests).
    pub fn is_empty(&self) -> bool {
        self.tests.is_empty()
    }

    /// A test's verdicts (`None` for a test this lab state does not have).
    pub fn test(&self, test_id: &str) -> Option<&TestVerdicts> {
        self.tests.get(test_id).map(|(_, v)| v.as_ref())
    }

    /// A test's verdicts in history order, or why they cannot be given.
    pub fn verdicts(&self, test_id: &str) -> Result<&[RunVerdict], QcError> {
        match self.test(test_id) {
            Some(t) => t.all().map_err(Clone::clone),
            None => Err(QcError(format!("no test with id {test_id}"))),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::qc;

    /// The verdicts of [`qc::evaluate`] over the test's whole history.
    fn replayed(lab: &Lab, test_id: &str) -> Result<Vec<RunVerdict>, QcError> {
        let h = lab.control_history(test_id);
        let t = lab.tests.iter().find(|t| t.meta.id == test_id).unwrap();
        qc::evaluate(&h.targets, &h.values, &t.qc_rules)
    }

    fn demo() -> Lab {
        Lab::from_json(include_str!("../demo-data/demo-lab.json")).expect("demo lab")
    }

    #[test]
    fn shared_verdicts_are_the_engines_verdicts_over_each_history() {
        let lab = demo();
        let all = LabVerdicts::of(&lab);
        for t in &lab.tests {
            let replay = replayed(&lab, &t.meta.id).unwrap();
            assert_eq!(all.verdicts(&t.meta.id).unwrap(), replay.as_slice());
            let runs = lab.runs_of(&t.meta.id);
            let newest = runs.last().unwrap();
            assert_eq!(
                all.test(&t.meta.id).unwrap().of_run(&newest.meta.id),
                replay.last()
            );
        }
        assert!(all.verdicts("no-such-test").is_err());
    }

    /// After a new run of one test, that test is judged again and the others are kept
    /// as they were; every verdict equals a judging of the whole lab afresh.
    #[test]
    fn only_the_changed_test_is_judged_again() {
        let lab = crate::demo::demo_lab();
        let before = LabVerdicts::of(&lab);
        let changed_test = lab.tests[0].meta.id.clone();
        let mut more = lab.clone();
        let mut run = more
            .runs_of(&changed_test)
            .last()
            .map(|r| (*r).clone())
            .unwrap();
        run.meta.id = "a-new-run".into();
        run.run_at += chrono::Duration::hours(1);
        more.control_runs.push(run);
        let after = LabVerdicts::after(Some(&before), &more);
        let afresh = LabVerdicts::of(&more);
        for t in &more.tests {
            let id = &t.meta.id;
            assert_eq!(after.verdicts(id), afresh.verdicts(id), "{}", t.code);
            let kept = Arc::ptr_eq(&after.tests[id].1, &before.tests[id].1);
            assert_eq!(kept, *id != changed_test, "{} kept: {kept}", t.code);
        }
        assert_eq!(
            after.verdicts(&changed_test).unwrap().len(),
            before.verdicts(&changed_test).unwrap().len() + 1
        );
    }

    #[test]
    fn a_new_run_is_judged_as_if_appended_to_the_history() {
        let lab = demo();
        let all = LabVerdicts::of(&lab);
        for t in &lab.tests {
            let h = lab.control_history(&t.meta.id);
            for z in [-3.5, -2.2, 0.0, 1.2, 2.5] {
                let next: Vec<Option<f64>> =
                    h.targets.iter().map(|l| Some(l.mean + z * l.sd)).collect();
                let mut values = h.values.clone();
                values.push(next.clone());
                let appended = qc::evaluate(&h.targets, &values, &t.qc_rules).unwrap();
                let judged = all.test(&t.meta.id).unwrap().judge_next(&next).unwrap();
                assert_eq!(Some(&judged), appended.last(), "{} at z = {z}", t.code);
            }
        }
    }
}
