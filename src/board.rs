//! What today's board says about control lots: a new lot of a control level run in
//! parallel with the old one (the same level name, another lot) needs its own target
//! from at least 20 accepted results (`engine::qcstats`) before the old lot runs out.
//! Plain Rust; the board shows the lines.

use chrono::{DateTime, TimeZone, Utc};

use crate::engine::qc::{self, Decision};
use crate::engine::qcstats::{self, ControlResult, MIN_RESULTS_FOR_LAB_TARGET};
use crate::engine::stability::{self, WarningWindow};
use crate::lab::Lab;

/// One control lot changeover in progress.
#[derive(Debug, Clone, PartialEq)]
pub struct Crossover {
    pub test: String,
    pub level: String,
    pub old_lot: String,
    pub new_lot: String,
    /// Accepted results of the new lot so far, and how many more it needs.
    pub new_results: usize,
    pub still_needed: usize,
    /// When the old lot's material runs out (the earliest of its materials in the
    /// materials list), if it is recorded there.
    pub old_runs_out: Option<DateTime<Utc>>,
}

/// Every level name of a test with more than one lot: the newest-made lot against the
/// one before it.
pub fn crossovers<Tz: TimeZone>(lab: &Lab, now: DateTime<Utc>, tz: &Tz) -> Vec<Crossover> {
    let mut out = Vec::new();
    for t in &lab.tests {
        let h = lab.control_history(&t.meta.id);
        let Ok(verdicts) = qc::evaluate(&h.targets, &h.values, &t.qc_rules) else {
            continue;
        };
        let mut names: Vec<&str> = h.levels.iter().map(|l| l.name.as_str()).collect();
        names.sort_unstable();
        names.dedup();
        for name in names {
            let mut lots: Vec<usize> = (0..h.levels.len())
                .filter(|&k| h.levels[k].name == name)
                .collect();
            if lots.len() < 2 {
                continue;
            }
            lots.sort_by_key(|&k| h.levels[k].meta.created_at);
            let (old, new) = (lots[lots.len() - 2], lots[lots.len() - 1]);
            let results: Vec<ControlResult> = h
                .runs
                .iter()
                .zip(&h.values)
                .zip(&verdicts)
                .filter_map(|((run, v), verdict)| {
                    v[new].map(|value| ControlResult {
                        at: run.run_at,
                        value,
                        run_rejected: verdict.decision == Decision::Reject,
                        excluded: false,
                    })
                })
                .collect();
            let n = qcstats::counted(&results).len();
            let old_lot = &h.levels[old].lot;
            let old_runs_out = lab
                .materials
                .iter()
                .filter(|m| &m.lot == old_lot)
                .filter_map(|m| {
                    stability::evaluate(&m.stability, now, tz, WarningWindow::default())
                        .ok()
                        .map(|r| r.material.until)
                })
                .min();
            out.push(Crossover {
                test: t.code.clone(),
                level: name.to_string(),
                old_lot: old_lot.clone(),
                new_lot: h.levels[new].lot.clone(),
                new_results: n,
                still_needed: MIN_RESULTS_FOR_LAB_TARGET.saturating_sub(n),
                old_runs_out,
            });
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::lab::{ControlLevel, ControlRun, RecordMeta};

    /// A new lot of the demo's first glucose level run in parallel for 5 runs: 15 more
    /// results needed; the old lot's end is the earliest usable-until of its materials.
    #[test]
    fn a_new_lot_counts_its_results_toward_its_own_target() {
        let mut lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
        let now = lab.newest_time().unwrap();
        assert!(crossovers(&lab, now, &Utc).is_empty());
        let old = lab.control_levels[0].clone();
        let new = ControlLevel {
            meta: RecordMeta::new([9; 16], now, "AK"),
            lot: "NEW-LOT".into(),
            ..old.clone()
        };
        lab.control_levels.push(new.clone());
        for k in 0..5u8 {
            let at = now + chrono::Duration::hours(k as i64 + 1);
            lab.control_runs.push(ControlRun {
                meta: RecordMeta::new([k + 20; 16], at, "AK"),
                test_id: old.test_id.clone(),
                run_at: at,
                level_ids: vec![new.meta.id.clone()],
                values: vec![Some(new.mean)],
            });
        }
        let c = crossovers(&lab, now, &Utc);
        assert_eq!(c.len(), 1);
        assert_eq!((c[0].new_results, c[0].still_needed), (5, 15));
        assert_eq!(
            (c[0].old_lot.as_str(), c[0].new_lot.as_str()),
            (old.lot.as_str(), "NEW-LOT")
        );
        let want = lab
            .materials
            .iter()
            .filter(|m| m.lot == old.lot)
            .filter_map(|m| {
                stability::evaluate(&m.stability, now, &Utc, WarningWindow::default()).ok()
            })
            .map(|r| r.material.until)
            .min();
        assert_eq!(c[0].old_runs_out, want);
    }
}
