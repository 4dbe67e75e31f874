//! Calibration acceptance: may a new calibration be used?
//!
//! Checks, each against a per-test limit the lab sets (all optional):
//! * reagent blank absorbance inside its range (a deteriorating reagent drifts up);
//! * each calibrator's mean absorbance inside its range;
//! * change of the factor or slope against the last accepted calibration, in %
//!   (±10 % is common practice);
//! * replicate CV % of the blank and of each calibrator;
//! * recovery % of each calibrator back-calculated from the curve.
//!
//! Each limit says whether failing it rejects the calibration or only adds a remark.
//! The verdict is accepted, accepted with remarks, or rejected, with every reason in
//! words a technologist understands.

use serde::{Deserialize, Serialize};

use super::calibration::{CalibrationError, Curve, Fit};
use super::qcstats::summarize;

/// A closed range of allowed values.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Range {
    pub low: f64,
    pub high: f64,
}

impl Range {
    fn contains(&self, v: f64) -> bool {
        v >= self.low && v <= self.high
    }
}

/// What failing a check does.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum OnFail {
    Remark,
    Reject,
}

/// A limit with its consequence.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Check<T> {
    pub limit: T,
    pub on_fail: OnFail,
}

/// The per-test acceptance limits.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, Deserialize)]
pub struct AcceptanceLimits {
    pub blank_absorbance: Option<Check<Range>>,
    pub calibrator_absorbance: Option<Check<Range>>,
    /// Largest |change| of factor or slope vs the last accepted calibration, %.
    pub max_change_pct: Option<Check<f64>>,
    pub max_replicate_cv_pct: Option<Check<f64>>,
    pub recovery_pct: Option<Check<Range>>,
}

/// Readings of one calibration, raw (against water or air, before blank subtraction).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CalibrationReadings {
    pub blank: Vec<f64>,
    /// (assigned concentration, replicate absorbances) per calibrator.
    pub calibrators: Vec<(f64, Vec<f64>)>,
}

/// The verdict.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Outcome {
    Accepted,
    AcceptedWithRemarks,
    Rejected,
}

/// One reason, with its weight.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Finding {
    pub on_fail: OnFail,
    pub message: String,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Verdict {
    pub outcome: Outcome,
    pub findings: Vec<Finding>,
}

/// The single number that tracks a curve's sensitivity over time: the factor, the
/// slope, the linear coefficient of a quadratic, or the mid-point c of a logistic.
pub fn sensitivity(curve: &Curve) -> (f64, &'static str) {
    match *curve {
        Curve::Factor { factor } => (factor, "factor"),
        Curve::Linear { slope, .. } => (slope, "slope"),
        Curve::Quadratic { c1, .. } => (c1, "linear coefficient"),
        Curve::FourPl { c, .. } | Curve::FivePl { c, .. } => (c, "mid-point c"),
    }
}

/// Change from `before` to `now` in %; `None` when `before` is 0.
pub fn change_pct(now: f64, before: f64) -> Option<f64> {
    (before != 0.0).then(|| (now - before) / before * 100.0)
}

/// Judge a calibration. `previous` is the last accepted calibration's curve.
pub fn judge(
    readings: &CalibrationReadings,
    fit: Result<&Fit, &CalibrationError>,
    previous: Option<&Curve>,
    limits: &AcceptanceLimits,
) -> Verdict {
    let mut findings = Vec::new();
    let mut add = |on_fail: OnFail, message: String| findings.push(Finding { on_fail, message });
    let fit = match fit {
        Ok(f) => f,
        Err(e) => {
            add(
                OnFail::Reject,
                format!("the curve could not be fitted: {}", e.message),
            );
            return finish(findings);
        }
    };
    let blank = summarize(&readings.blank);
    if let (Some(check), Some(b)) = (limits.blank_absorbance, blank) {
        if !check.limit.contains(b.mean) {
            add(
                check.on_fail,
                format!(
                    "reagent blank absorbance {:.4} is outside {:.4}–{:.4}: the reagent may be \
                     deteriorating or contaminated; prepare fresh reagent and recalibrate",
                    b.mean, check.limit.low, check.limit.high
                ),
            );
        }
    }
    if let Some(check) = limits.max_replicate_cv_pct {
        let mut sets: Vec<(String, &Vec<f64>)> = vec![("reagent blank".into(), &readings.blank)];
        for (conc, reps) in &readings.calibrators {
            sets.push((format!("calibrator {conc}"), reps));
        }
        for (name, reps) in sets {
            if let Some(cv) = summarize(reps).and_then(|s| s.cv_pct) {
                if cv > check.limit {
                    add(
                        check.on_fail,
                        format!(
                            "{name}: replicates disagree (CV {cv:.1} % > {:.1} %); check pipetting \
                             and cuvettes, then measure again",
                            check.limit
                        ),
                    );
                }
            }
        }
    }
    if let Some(check) = limits.calibrator_absorbance {
        for (conc, reps) in &readings.calibrators {
            if let Some(s) = summarize(reps) {
                if !check.limit.contains(s.mean) {
                    add(
                        check.on_fail,
                        format!(
                            "calibrator {conc}: absorbance {:.4} is outside {:.4}–{:.4}; check the \
                             calibrator (reconstitution, stability) and the reagent",
                            s.mean, check.limit.low, check.limit.high
                        ),
                    );
                }
            }
        }
    }
    let (now, what) = sensitivity(&fit.curve);
    match (previous, limits.max_change_pct) {
        (Some(prev), Some(check)) => {
            let (before, _) = sensitivity(prev);
            if let Some(change) = change_pct(now, before) {
                if change.abs() > check.limit {
                    add(
                        check.on_fail,
                        format!(
                            "the {what} changed by {change:+.1} % against the last accepted \
                             calibration (limit ±{:.1} %); find the cause before use",
                            check.limit
                        ),
                    );
                }
            }
        }
        (None, Some(_)) => add(
            OnFail::Remark,
            format!("first calibration of this test: no earlier {what} to compare with"),
        ),
        _ => {}
    }
    if let Some(check) = limits.recovery_pct {
        for p in &fit.points {
            match p.recovery_pct {
                Some(r) if !check.limit.contains(r) => add(
                    check.on_fail,
                    format!(
                        "calibrator {}: recovery {r:.1} % is outside {:.0}–{:.0} %",
                        p.conc, check.limit.low, check.limit.high
                    ),
                ),
                None if p.conc > 0.0 => add(
                    check.on_fail,
                    format!(
                        "calibrator {}: its signal cannot be read back off the curve",
                        p.conc
                    ),
                ),
                _ => {}
            }
        }
    }
    finish(findings)
}

fn finish(findings: Vec<Finding>) -> Verdict {
    let outcome = match findings.iter().map(|f| f.on_fail).max() {
        None => Outcome::Accepted,
        Some(OnFail::Remark) => Outcome::AcceptedWithRemarks,
        Some(OnFail::Reject) => Outcome::Rejected,
    };
    Verdict { outcome, findings }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::calibration::{fit, CalPoint, ModelKind, ReplicateUse, Weighting};

    fn limits() -> AcceptanceLimits {
        AcceptanceLimits {
            blank_absorbance: Some(Check {
                limit: Range {
                    low: 0.0,
                    high: 0.100,
                },
                on_fail: OnFail::Reject,
            }),
            calibrator_absorbance: Some(Check {
                limit: Range {
                    low: 0.250,
                    high: 0.600,
                },
                on_fail: OnFail::Reject,
            }),
            max_change_pct: Some(Check {
                limit: 10.0,
                on_fail: OnFail::Reject,
            }),
            max_replicate_cv_pct: Some(Check {
                limit: 3.0,
                on_fail: OnFail::Reject,
            }),
            recovery_pct: Some(Check {
                limit: Range {
                    low: 95.0,
                    high: 105.0,
                },
                on_fail: OnFail::Remark,
            }),
        }
    }

    fn factor_fit(blank: f64, cal: &[f64]) -> (CalibrationReadings, Fit) {
        let readings = CalibrationReadings {
            blank: vec![blank, blank],
            calibrators: vec![(100.0, cal.to_vec())],
        };
        let pts: Vec<CalPoint> = cal
            .iter()
            .map(|a| CalPoint {
                conc: 100.0,
                signal: a - blank,
            })
            .collect();
        (
            readings,
            fit(ModelKind::Factor, Weighting::None, ReplicateUse::Mean, &pts).unwrap(),
        )
    }

    #[test]
    fn good_calibration_is_accepted() {
        let (r, f) = factor_fit(0.040, &[0.400, 0.404]);
        let prev = Curve::Factor {
            factor: 100.0 / 0.36,
        };
        let v = judge(&r, Ok(&f), Some(&prev), &limits());
        assert_eq!(v.outcome, Outcome::Accepted, "{:?}", v.findings);
    }

    #[test]
    fn high_blank_and_factor_jump_reject_with_reasons() {
        // New factor 100 / (0.402 − 0.130) = 367.6 against 100 / 0.36 = 277.8: +32.4 %.
        let (r, f) = factor_fit(0.130, &[0.400, 0.404]);
        let prev = Curve::Factor {
            factor: 100.0 / 0.36,
        };
        let v = judge(&r, Ok(&f), Some(&prev), &limits());
        assert_eq!(v.outcome, Outcome::Rejected);
        assert!(v
            .findings
            .iter()
            .any(|f| f.message.contains("reagent blank absorbance 0.1300")));
        assert!(
            v.findings
                .iter()
                .any(|f| f.message.contains("factor changed by +32.4 %")),
            "{:?}",
            v.findings
        );
    }

    #[test]
    fn first_calibration_is_accepted_with_a_remark() {
        let (r, f) = factor_fit(0.040, &[0.400, 0.404]);
        let v = judge(&r, Ok(&f), None, &limits());
        assert_eq!(v.outcome, Outcome::AcceptedWithRemarks);
        assert!(v.findings[0].message.contains("first calibration"));
    }

    #[test]
    fn scattered_replicates_reject() {
        let (r, f) = factor_fit(0.040, &[0.380, 0.420]);
        let v = judge(&r, Ok(&f), Some(&f.curve.clone()), &limits());
        assert_eq!(v.outcome, Outcome::Rejected);
        assert!(v
            .findings
            .iter()
            .any(|f| f.message.contains("replicates disagree")));
    }
}
