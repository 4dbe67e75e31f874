//! What today's board says about control lots: a new lot of a control level run in
//! parallel with the old one (the same level name, another lot) needs its own target
//! from at least 20 accepted results (`engine::qcstats`) before the old lot runs out;
//! and whether the PC's clock can be trusted for the countdowns. Plain Rust; the board
//! shows the lines.

use chrono::{DateTime, TimeZone, Utc};

use crate::engine::qc::Decision;
use crate::engine::qcstats::{self, ControlResult, MIN_RESULTS_FOR_LAB_TARGET};
use crate::engine::stability::{self, WarningWindow};
use crate::lab::Lab;
use crate::verdicts::LabVerdicts;

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
pub fn crossovers<Tz: TimeZone>(
    lab: &Lab,
    judged: &LabVerdicts,
    now: DateTime<Utc>,
    tz: &Tz,
) -> Vec<Crossover> {
    let mut out = Vec::new();
    for t in &lab.tests {
        let h = lab.control_history(&t.meta.id);
        let Ok(verdicts) = judged.verdicts(&t.meta.id) else {
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
                .zip(verdicts)
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
                .filter(|m| &m.lot == old_lot && m.in_use())
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

/// How far a record may lie ahead of the clock before the clock is doubted: records
/// carried from a PC whose clock runs a little fast should not raise the alarm (our
/// choice).
pub const CLOCK_TOLERANCE: chrono::Duration = chrono::Duration::minutes(2);

/// A gap between two sittings long enough to mention (the lab may simply have been
/// closed; the technologist confirms the date).
pub const CLOCK_GAP: chrono::Duration = chrono::Duration::hours(24);

/// Why the PC's clock should be checked before a countdown is trusted.
#[derive(Debug, Clone, PartialEq)]
pub enum ClockDoubt {
    /// The clock reads earlier than a stored record: it was set back, or is wrong.
    BehindRecords { newest: DateTime<Utc> },
    /// The clock reads earlier than when this browser last ran Cuvette.
    WentBack { last_seen: DateTime<Utc> },
    /// More than a day since this browser last ran Cuvette.
    Gap { last_seen: DateTime<Utc> },
}

/// Compare the clock with the newest stored record and with the time this browser last
/// saw (the previous sitting); the most serious doubt first.
pub fn clock_doubt(
    now: DateTime<Utc>,
    newest_record: Option<DateTime<Utc>>,
    last_seen: Option<DateTime<Utc>>,
) -> Option<ClockDoubt> {
    if let Some(newest) = newest_record.filter(|t| *t > now + CLOCK_TOLERANCE) {
        return Some(ClockDoubt::BehindRecords { newest });
    }
    match last_seen {
        Some(t) if t > now + CLOCK_TOLERANCE => Some(ClockDoubt::WentBack { last_seen: t }),
        Some(t) if now - t > CLOCK_GAP => Some(ClockDoubt::Gap { last_seen: t }),
        _ => None,
    }
}

/// Each absorbance standard whose newest photometer check failed: the standard and that
/// entry. A later pass on the same standard clears it.
pub fn failed_photometer_checks(
    lab: &Lab,
) -> Vec<(
    &crate::lab::AbsorbanceStandard,
    &crate::lab::InstrumentEntry,
)> {
    let mut out = Vec::new();
    for s in &lab.absorbance_standards {
        let newest = lab
            .instrument_log
            .iter()
            .filter(|e| e.standard.as_deref() == Some(s.name.as_str()))
            .max_by_key(|e| e.at);
        if let Some(e) = newest {
            if lab.photometer_verdict(e).is_some_and(|(_, ok)| !ok) {
                out.push((s, e));
            }
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
        assert!(crossovers(&lab, &LabVerdicts::of(&lab), now, &Utc).is_empty());
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
                after_action: None,
                materials_used: Vec::new(),
                acknowledged: Vec::new(),
            });
        }
        let c = crossovers(&lab, &LabVerdicts::of(&lab), now, &Utc);
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

    fn at(s: &str) -> DateTime<Utc> {
        s.parse().unwrap()
    }

    #[test]
    fn a_clock_behind_the_records_or_the_last_sitting_is_doubted() {
        let now = at("2026-11-27T08:00:00Z");
        assert_eq!(
            clock_doubt(
                now,
                Some(at("2026-11-27T07:59:00Z")),
                Some(at("2026-11-26T16:00:00Z"))
            ),
            None
        );
        // Within the tolerance: a record from a PC a minute fast.
        assert_eq!(
            clock_doubt(now, Some(at("2026-11-27T08:01:00Z")), None),
            None
        );
        assert_eq!(
            clock_doubt(now, Some(at("2026-11-28T08:00:00Z")), None),
            Some(ClockDoubt::BehindRecords {
                newest: at("2026-11-28T08:00:00Z")
            })
        );
        assert_eq!(
            clock_doubt(now, None, Some(at("2026-11-27T09:00:00Z"))),
            Some(ClockDoubt::WentBack {
                last_seen: at("2026-11-27T09:00:00Z")
            })
        );
        assert_eq!(
            clock_doubt(now, None, Some(at("2026-11-26T07:59:00Z"))),
            Some(ClockDoubt::Gap {
                last_seen: at("2026-11-26T07:59:00Z")
            })
        );
        assert_eq!(
            clock_doubt(now, None, Some(at("2026-11-26T08:01:00Z"))),
            None
        );
    }

    /// A reading outside its standard's tolerance stays on the board until a later
    /// reading of the same standard passes.
    #[test]
    fn a_failed_photometer_check_shows_until_the_standard_passes() {
        use crate::lab::{InstrumentEntry, InstrumentEvent};
        let mut lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
        lab.absorbance_standards = crate::lab::example_absorbance_standards();
        let now = lab.newest_time().unwrap();
        let check = |k: u8, minutes: i64, v: f64| InstrumentEntry {
            meta: RecordMeta::new([k; 16], now, "AK"),
            at: now + chrono::Duration::minutes(minutes),
            event: InstrumentEvent::PhotometerCheck,
            value: Some(v),
            note: String::new(),
            standard: Some("grey filter, low".into()),
        };
        assert!(failed_photometer_checks(&lab).is_empty());
        lab.instrument_log.push(check(40, 1, 0.530));
        let failed = failed_photometer_checks(&lab);
        assert_eq!(failed.len(), 1);
        assert_eq!(
            (failed[0].0.name.as_str(), failed[0].1.value),
            ("grey filter, low", Some(0.530))
        );
        lab.instrument_log.push(check(41, 2, 0.503));
        assert!(failed_photometer_checks(&lab).is_empty());
    }
}
