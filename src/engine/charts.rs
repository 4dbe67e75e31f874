//! Series for charts, computed here so the drawing code only draws.
//!
//! A Levey–Jennings chart plots each control result in run order against the target
//! mean with lines at ±1, ±2 and ±3 SD. Each point carries its run's QC decision so
//! the chart can mark warnings and rejections (by shape as well as colour).

use super::calibration::{Curve, Fit};
use super::qc::Decision;

/// Points the fitted curve is drawn through, across the calibrated range.
pub const CURVE_SAMPLES: usize = 120;

/// A calibration as drawn before it is saved: the calibrators' net signals, the fitted
/// curve through them, the last accepted curve over the same range (if any), and the
/// residuals (signal − fitted) for the strip beneath.
#[derive(Debug, Clone, PartialEq)]
pub struct CurvePlot {
    pub title: String,
    /// (concentration, net signal) of each calibrator reading.
    pub points: Vec<(f64, f64)>,
    /// (concentration, signal) along the fitted curve.
    pub curve: Vec<(f64, f64)>,
    /// Along the last accepted curve; empty when there is none.
    pub previous: Vec<(f64, f64)>,
    /// (concentration, residual) per calibrator reading.
    pub residuals: Vec<(f64, f64)>,
    pub x_max: f64,
    pub y_min: f64,
    pub y_max: f64,
    /// The residual strip's half-height (at least a hair above zero).
    pub residual_max: f64,
}

impl CurvePlot {
    /// From a fit and the curve in use before it; `None` when nothing is finite to draw.
    pub fn new(title: &str, fit: &Fit, previous: Option<&Curve>) -> Option<CurvePlot> {
        let points: Vec<(f64, f64)> = fit
            .points
            .iter()
            .map(|p| (p.conc, p.signal))
            .filter(|(x, y)| x.is_finite() && y.is_finite())
            .collect();
        let x_max = points.iter().map(|p| p.0).fold(0.0, f64::max) * 1.05;
        if points.is_empty() || x_max.is_nan() || x_max <= 0.0 {
            return None;
        }
        let along = |c: &Curve| -> Vec<(f64, f64)> {
            (0..=CURVE_SAMPLES)
                .map(|i| x_max * i as f64 / CURVE_SAMPLES as f64)
                .map(|x| (x, c.signal_at(x)))
                .filter(|(_, y)| y.is_finite())
                .collect()
        };
        let curve = along(&fit.curve);
        let previous = previous.map(along).unwrap_or_default();
        let ys = points.iter().chain(&curve).chain(&previous).map(|p| p.1);
        let (lo, hi) = ys.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), y| {
            (lo.min(y), hi.max(y))
        });
        let pad = ((hi - lo) * 0.05).max(1e-3);
        let residuals: Vec<(f64, f64)> = fit
            .points
            .iter()
            .map(|p| (p.conc, p.residual))
            .filter(|(x, r)| x.is_finite() && r.is_finite())
            .collect();
        let residual_max = residuals.iter().map(|r| r.1.abs()).fold(1e-4, f64::max) * 1.2;
        Some(CurvePlot {
            title: title.to_string(),
            points,
            curve,
            previous,
            residuals,
            x_max,
            y_min: (lo - pad).min(0.0),
            y_max: hi + pad,
            residual_max,
        })
    }
}

/// One control level's Levey–Jennings chart.
#[derive(Debug, Clone, PartialEq)]
pub struct LeveyJennings {
    pub title: String,
    pub mean: f64,
    pub sd: f64,
    /// (run number from 1, value); runs where the level was not measured are left out.
    pub points: Vec<(f64, f64)>,
    /// The decision of each point's run (same order as `points`).
    pub decisions: Vec<Decision>,
    /// Number of runs on the x axis.
    pub runs: usize,
    /// y range: at least mean ± 4 SD, widened to show every point.
    pub y_min: f64,
    pub y_max: f64,
    /// What each run is called on the x axis (its date), run 1 first; empty: numbers.
    pub run_labels: Vec<String>,
    /// Each point's explanation in words (same order as `points`; empty: none given).
    pub notes: Vec<String>,
}

/// A control result explained in words for the chart: when, the value and its z-score,
/// the run's decision and every rule it broke, with the results that broke it
/// (`run_label` names a run of the history by its index, as violations count them).
pub fn point_note(
    when: &str,
    value: f64,
    target: super::qc::LevelTarget,
    unit: &str,
    verdict: Option<&super::qc::RunVerdict>,
    level_names: &[String],
    run_label: &dyn Fn(usize) -> String,
) -> String {
    let z = super::qc::z_score(value, target);
    let head = format!(
        "{when}: {value} {unit}, z {}",
        super::readings::fixed(z, 2, true)
    );
    let Some(v) = verdict else {
        return head;
    };
    if v.violations.is_empty() {
        return format!("{head} — run accepted, no rule broken");
    }
    let broken: Vec<String> = v
        .violations
        .iter()
        .map(|x| x.explain(level_names, run_label))
        .collect();
    format!("{head} — run {}: {}", v.decision.code(), broken.join("; "))
}

impl LeveyJennings {
    /// Build the chart series; `None` when the SD is not a positive number.
    /// `decisions[i]` is run i's decision (missing ones count as accept).
    pub fn new(
        title: &str,
        mean: f64,
        sd: f64,
        values: &[Option<f64>],
        decisions: &[Decision],
    ) -> Option<LeveyJennings> {
        if !(sd > 0.0 && sd.is_finite() && mean.is_finite()) {
            return None;
        }
        let (points, decisions): (Vec<(f64, f64)>, Vec<Decision>) = values
            .iter()
            .enumerate()
            .filter_map(|(i, v)| {
                v.filter(|v| v.is_finite()).map(|v| {
                    (
                        ((i + 1) as f64, v),
                        decisions.get(i).copied().unwrap_or(Decision::Accept),
                    )
                })
            })
            .unzip();
        let lo = points.iter().map(|p| p.1).fold(mean - 4.0 * sd, f64::min);
        let hi = points.iter().map(|p| p.1).fold(mean + 4.0 * sd, f64::max);
        Some(LeveyJennings {
            title: title.to_string(),
            mean,
            sd,
            points,
            decisions,
            runs: values.len().max(1),
            y_min: lo,
            y_max: hi,
            run_labels: Vec::new(),
            notes: Vec::new(),
        })
    }

    /// Explain each point: `per_run[i]` is run i's note (the runs given to [`Self::new`]);
    /// the notes of runs without a point are dropped.
    pub fn with_notes(mut self, per_run: &[String]) -> LeveyJennings {
        self.notes = self
            .points
            .iter()
            .map(|(x, _)| per_run.get(*x as usize - 1).cloned().unwrap_or_default())
            .collect();
        self
    }

    /// The point nearest a horizontal position, given as the fraction (0 at the left
    /// edge, 1 at the right) of the plotting area, whose x axis runs from 0 to runs + 1;
    /// `None` when no point lies within half a run of it.
    pub fn point_at(&self, fraction: f64) -> Option<usize> {
        if !fraction.is_finite() {
            return None;
        }
        let x = fraction * (self.runs as f64 + 1.0);
        let (k, d) = self
            .points
            .iter()
            .enumerate()
            .map(|(k, (px, _))| (k, (px - x).abs()))
            .min_by(|a, b| a.1.total_cmp(&b.1))?;
        (d <= 0.5).then_some(k)
    }

    /// Name the runs on the x axis (one label per run, run 1 first).
    pub fn with_run_labels(mut self, labels: Vec<String>) -> LeveyJennings {
        self.run_labels = labels;
        self
    }

    /// The axis label at `x`: the run's label where `x` is a run, else nothing.
    pub fn x_label(&self, x: f64) -> String {
        let k = x.round();
        if (x - k).abs() > 1e-6 || k < 1.0 {
            return String::new();
        }
        match self.run_labels.get(k as usize - 1) {
            Some(l) => l.clone(),
            None if self.run_labels.is_empty() && k as usize <= self.runs => format!("{k:.0}"),
            None => String::new(),
        }
    }

    /// The horizontal lines: (multiple of SD, value) for −3 … +3.
    pub fn sd_lines(&self) -> Vec<(i32, f64)> {
        (-3..=3)
            .map(|k| (k, self.mean + k as f64 * self.sd))
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lines_and_range() {
        let lj = LeveyJennings::new(
            "GLU N",
            100.0,
            2.0,
            &[Some(101.0), None, Some(111.0)],
            &[Decision::Accept, Decision::Accept, Decision::Reject],
        )
        .unwrap();
        assert_eq!(lj.points, vec![(1.0, 101.0), (3.0, 111.0)]);
        assert_eq!(lj.sd_lines()[0], (-3, 94.0));
        assert_eq!(lj.y_min, 92.0);
        assert_eq!(lj.y_max, 111.0);
        assert_eq!(lj.decisions, vec![Decision::Accept, Decision::Reject]);
        assert!(LeveyJennings::new("x", 1.0, 0.0, &[], &[]).is_none());
    }

    /// Runs 1 and 3 have points on an axis from 0 to 4: a quarter of the way is run 1,
    /// three quarters run 3, the middle (run 2, not measured) and the edges nothing.
    #[test]
    fn the_point_under_the_pointer_and_its_note() {
        let lj = LeveyJennings::new(
            "GLU N",
            100.0,
            2.0,
            &[Some(101.0), None, Some(111.0)],
            &[Decision::Accept, Decision::Accept, Decision::Reject],
        )
        .unwrap()
        .with_notes(&["first".into(), "second".into(), "third".into()]);
        assert_eq!(lj.notes, vec!["first".to_string(), "third".to_string()]);
        assert_eq!(lj.point_at(0.25), Some(0));
        assert_eq!(lj.point_at(0.7), Some(1));
        assert_eq!(lj.point_at(0.5), None);
        assert_eq!(lj.point_at(0.0), None);
        assert_eq!(lj.point_at(f64::NAN), None);
    }

    /// A result 5.5 SD above its mean in a run the engine rejected by 1-3s, explained
    /// in words: when, value, z, the decision and the rule with its level and run.
    #[test]
    fn a_rejected_point_explains_its_rule() {
        use crate::engine::qc::{evaluate, LevelTarget, Rule, RuleSetting};
        let t = LevelTarget {
            mean: 100.0,
            sd: 2.0,
        };
        let rules = [RuleSetting::default_for(Rule::OneThreeS)];
        let v = evaluate(&[t], &[vec![Some(101.0)], vec![Some(111.0)]], &rules).unwrap();
        let names = vec!["Normal".to_string()];
        let label = |r: usize| format!("day {}", r + 1);
        let note = point_note(
            "2026-11-02 08:00",
            111.0,
            t,
            "mg/dL",
            Some(&v[1]),
            &names,
            &label,
        );
        assert_eq!(
            note,
            "2026-11-02 08:00: 111 mg/dL, z +5.50 — run reject: 1-3s (reject, within the run): \
             one result beyond ±3 SD — Normal; run day 2"
        );
        let calm = point_note(
            "2026-11-01 08:00",
            99.0,
            t,
            "mg/dL",
            Some(&v[0]),
            &names,
            &label,
        );
        assert!(
            calm.ends_with("z -0.50 — run accepted, no rule broken"),
            "{calm}"
        );
    }
}

/// A trend of one quantity over successive calibrations (reagent blank absorbance,
/// sensitivity), with the acceptance range when the lab set one.
#[derive(Debug, Clone, PartialEq)]
pub struct Trend {
    pub title: String,
    /// (x, value): the calibration number from 1, or another x such as a shift in SD.
    pub points: Vec<(f64, f64)>,
    pub range: Option<(f64, f64)>,
    pub y_min: f64,
    pub y_max: f64,
}

impl Trend {
    /// `None` with fewer than two values (no trend to show).
    pub fn new(title: &str, values: &[f64], range: Option<(f64, f64)>) -> Option<Trend> {
        let points: Vec<(f64, f64)> = values
            .iter()
            .enumerate()
            .map(|(i, &v)| ((i + 1) as f64, v))
            .collect();
        Trend::from_points(title, points, range)
    }

    /// A series of (x, y) points in increasing x (a power curve: probability against
    /// the shift); `None` with fewer than two finite points.
    pub fn from_points(
        title: &str,
        points: Vec<(f64, f64)>,
        range: Option<(f64, f64)>,
    ) -> Option<Trend> {
        let points: Vec<(f64, f64)> = points
            .into_iter()
            .filter(|(x, y)| x.is_finite() && y.is_finite())
            .collect();
        if points.len() < 2 {
            return None;
        }
        let mut lo = points.iter().map(|p| p.1).fold(f64::INFINITY, f64::min);
        let mut hi = points.iter().map(|p| p.1).fold(f64::NEG_INFINITY, f64::max);
        if let Some((a, b)) = range {
            lo = lo.min(a);
            hi = hi.max(b);
        }
        let pad = if hi > lo {
            0.1 * (hi - lo)
        } else {
            0.1 * hi.abs().max(1e-3)
        };
        Some(Trend {
            title: title.to_string(),
            points,
            range,
            y_min: lo - pad,
            y_max: hi + pad,
        })
    }
}

#[cfg(test)]
mod trend_tests {
    use super::*;

    #[test]
    fn trend_needs_two_points_and_shows_the_range() {
        assert!(Trend::new("blank", &[0.04], None).is_none());
        let t = Trend::new("blank", &[0.040, 0.050], Some((0.0, 0.08))).unwrap();
        assert_eq!(t.points, vec![(1.0, 0.040), (2.0, 0.050)]);
        assert!(t.y_min < 0.0 && t.y_max > 0.08);
    }

    #[test]
    fn runs_are_named_by_their_labels_on_the_axis() {
        let lj = LeveyJennings::new("GLU N", 100.0, 2.0, &[Some(101.0), Some(99.0)], &[]).unwrap();
        assert_eq!(
            (lj.x_label(1.0), lj.x_label(2.5), lj.x_label(3.0)),
            ("1".into(), "".into(), "".into())
        );
        let lj = lj.with_run_labels(vec!["26 Nov".into(), "27 Nov".into()]);
        assert_eq!(lj.x_label(2.0), "27 Nov");
        assert_eq!(lj.x_label(0.0), "");
    }

    /// The curve is drawn through the fitted function (the same the results use), and
    /// the residuals are the fit's own.
    #[test]
    fn a_calibration_plot_follows_its_fit() {
        use crate::engine::calibration::{self, CalPoint, ModelKind, ReplicateUse, Weighting};
        let points = [
            CalPoint {
                conc: 50.0,
                signal: 0.21,
            },
            CalPoint {
                conc: 100.0,
                signal: 0.43,
            },
            CalPoint {
                conc: 200.0,
                signal: 0.84,
            },
        ];
        let fit = calibration::fit(
            ModelKind::Linear,
            Weighting::None,
            ReplicateUse::Individual,
            &points,
        )
        .unwrap();
        let previous = Curve::Factor { factor: 240.0 };
        let plot = CurvePlot::new("GLU", &fit, Some(&previous)).unwrap();
        assert_eq!(plot.points.len(), 3);
        assert_eq!(plot.curve.len(), CURVE_SAMPLES + 1);
        assert!((plot.x_max - 210.0).abs() < 1e-9);
        for (x, y) in &plot.curve {
            assert!((y - fit.curve.signal_at(*x)).abs() < 1e-12);
        }
        assert!((plot.previous[CURVE_SAMPLES].1 - 210.0 / 240.0).abs() < 1e-12);
        let rss: f64 = plot.residuals.iter().map(|r| r.1 * r.1).sum();
        assert!((rss - fit.rss).abs() < 1e-12, "{rss} vs {}", fit.rss);
        assert!(plot.residual_max >= plot.residuals.iter().map(|r| r.1.abs()).fold(0.0, f64::max));
    }
}
