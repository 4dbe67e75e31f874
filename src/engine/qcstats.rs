//! QC statistics for the monthly review: n, mean, SD, CV, per period and cumulative, and
//! the choice of target (the lab's own once it has enough results, the insert's until
//! then).
//!
//! Results of rejected runs and results the lab flagged as excluded do not count. SD is
//! the sample SD (n − 1). A lab's own target needs at least 20 accepted results (common
//! practice; CLSI C24 recommends 20 or more, over 20 days — from memory).

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};
use statrs::statistics::Statistics;

use super::qc::LevelTarget;

/// Results needed before the lab's own mean and SD replace the insert's.
pub const MIN_RESULTS_FOR_LAB_TARGET: usize = 20;

/// n, mean, SD and CV of a set of results.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    pub n: usize,
    pub mean: f64,
    /// Sample SD; `None` for a single result.
    pub sd: Option<f64>,
    /// SD / mean × 100; `None` without an SD or at mean 0.
    pub cv_pct: Option<f64>,
}

/// Summarise values; `None` for no values.
pub fn summarize(values: &[f64]) -> Option<Summary> {
    if values.is_empty() {
        return None;
    }
    let mean = values.mean();
    let sd = (values.len() >= 2).then(|| values.std_dev());
    let cv_pct = sd.filter(|_| mean != 0.0).map(|s| s / mean.abs() * 100.0);
    Some(Summary {
        n: values.len(),
        mean,
        sd,
        cv_pct,
    })
}

/// One control result with what decides whether it counts.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ControlResult {
    pub at: DateTime<Utc>,
    pub value: f64,
    /// The run was rejected by the QC rules (or by the technologist).
    pub run_rejected: bool,
    /// The lab excluded this result (with a reason in the record).
    pub excluded: bool,
}

impl ControlResult {
    fn counts(&self) -> bool {
        !self.run_rejected && !self.excluded && self.value.is_finite()
    }
}

/// The values that count for statistics.
pub fn counted(results: &[ControlResult]) -> Vec<f64> {
    results
        .iter()
        .filter(|r| r.counts())
        .map(|r| r.value)
        .collect()
}

/// Cumulative statistics of every result that counts.
pub fn cumulative(results: &[ControlResult]) -> Option<Summary> {
    summarize(&counted(results))
}

/// Statistics of the results that count with `from <= at < to` (any period: a week,
/// a reagent lot's time in use, an assessor's sample).
pub fn between(
    results: &[ControlResult],
    from: DateTime<Utc>,
    to: DateTime<Utc>,
) -> Option<Summary> {
    let in_period: Vec<ControlResult> = results
        .iter()
        .copied()
        .filter(|r| r.at >= from && r.at < to)
        .collect();
    cumulative(&in_period)
}

/// Where a level's target comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "source", rename_all = "kebab-case")]
pub enum TargetSource {
    /// The lab's own mean and SD from `n` accepted results.
    Lab { n: usize },
    /// The insert's range, provisional while the lab has `n` of the results it needs.
    Insert { n: usize },
}

/// The target in use and where it comes from.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Target {
    pub mean: f64,
    pub sd: f64,
    pub source: TargetSource,
}

/// The lab's own target once there are [`MIN_RESULTS_FOR_LAB_TARGET`] counted results,
/// else the insert's. `None` when neither exists.
pub fn choose_target(insert: Option<LevelTarget>, results: &[ControlResult]) -> Option<Target> {
    let values = counted(results);
    if values.len() >= MIN_RESULTS_FOR_LAB_TARGET {
        if let Some(Summary {
            mean, sd: Some(sd), ..
        }) = summarize(&values)
        {
            if sd > 0.0 {
                return Some(Target {
                    mean,
                    sd,
                    source: TargetSource::Lab { n: values.len() },
                });
            }
        }
    }
    insert.map(|t| Target {
        mean: t.mean,
        sd: t.sd,
        source: TargetSource::Insert { n: values.len() },
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::TimeZone;

    fn at(day: u32) -> DateTime<Utc> {
        Utc.with_ymd_and_hms(2026, 10, 1, 8, 0, 0).unwrap() + chrono::Duration::days(day as i64)
    }

    /// Worked arithmetic: 98, 100, 102 → mean 100, SD 2, CV 2 %.
    #[test]
    fn worked_example() {
        let s = summarize(&[98.0, 100.0, 102.0]).unwrap();
        assert_eq!((s.n, s.mean), (3, 100.0));
        assert!((s.sd.unwrap() - 2.0).abs() < 1e-12);
        assert!((s.cv_pct.unwrap() - 2.0).abs() < 1e-12);
        assert_eq!(summarize(&[5.0]).unwrap().sd, None);
        assert!(summarize(&[]).is_none());
    }

    #[test]
    fn rejected_and_excluded_do_not_count_and_target_switches_at_twenty() {
        let mut results: Vec<ControlResult> = (0..19)
            .map(|d| ControlResult {
                at: at(d),
                value: 100.0 + (d % 3) as f64,
                run_rejected: false,
                excluded: false,
            })
            .collect();
        results.push(ControlResult {
            at: at(19),
            value: 180.0,
            run_rejected: true,
            excluded: false,
        });
        results.push(ControlResult {
            at: at(20),
            value: 20.0,
            run_rejected: false,
            excluded: true,
        });
        let insert = Some(LevelTarget {
            mean: 99.0,
            sd: 3.0,
        });
        let t = choose_target(insert, &results).unwrap();
        assert_eq!(t.source, TargetSource::Insert { n: 19 });
        assert_eq!((t.mean, t.sd), (99.0, 3.0));
        results.push(ControlResult {
            at: at(21),
            value: 101.0,
            run_rejected: false,
            excluded: false,
        });
        let t = choose_target(insert, &results).unwrap();
        assert_eq!(t.source, TargetSource::Lab { n: 20 });
        assert!(t.mean > 100.0 && t.mean < 102.0);
        let first_week = between(&results, at(0), at(7)).unwrap();
        assert_eq!(first_week.n, 7);
    }
}
