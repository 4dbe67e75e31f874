//! Calibration curves: fit a model to calibrator readings and turn signals back into
//! concentrations.
//!
//! Models: single-point factor (signal already reagent-blank subtracted), linear
//! (ordinary or weighted least squares), linear through the origin, quadratic, and the
//! four- and five-parameter logistic curves used for immunoassays:
//!
//! * 4PL: signal = d + (a − d) / (1 + (conc/c)^b)
//! * 5PL: signal = d + (a − d) / (1 + (conc/c)^b)^g
//!
//! Linear and quadratic fits solve the normal equations in t = (x − m)/h, the
//! concentrations mapped onto [−1, 1], where 1, t, t² are nearly orthogonal (in raw
//! units the NIST Pontius set loses about six digits through the normal equations;
//! centred it keeps 12). The line through the origin is Σwxy / Σwx². 4PL and 5PL go
//! through the fixed-size Levenberg–Marquardt of [`super::small_lm`] from automatic
//! starting values, keeping c > 0 and g > 0, with the replicates of each concentration
//! pooled into one weighted residual (exactly: the same sum of squares and optimum).
//!
//! Weights (1/x, 1/x², 1/y, 1/y²) use the calibrator's assigned concentration and its
//! observed signal. RSS is weighted where weighted; R² = 1 − RSS/TSS with TSS about the
//! (weighted) mean signal, also for fits through the origin.

use nalgebra::{SMatrix, SVector};
use serde::{Deserialize, Serialize};
use std::fmt;

use super::lm::{self, Settings};
use super::small_lm;

/// Which calibration function.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum ModelKind {
    #[serde(rename = "factor")]
    Factor,
    #[serde(rename = "linear")]
    Linear,
    #[serde(rename = "linear-through-origin")]
    LinearThroughOrigin,
    #[serde(rename = "quadratic")]
    Quadratic,
    #[serde(rename = "4pl")]
    FourPl,
    #[serde(rename = "5pl")]
    FivePl,
}

impl ModelKind {
    pub const ALL: [ModelKind; 6] = [
        ModelKind::Factor,
        ModelKind::Linear,
        ModelKind::LinearThroughOrigin,
        ModelKind::Quadratic,
        ModelKind::FourPl,
        ModelKind::FivePl,
    ];

    /// The name used in files and on the command line.
    pub fn code(self) -> &'static str {
        match self {
            ModelKind::Factor => "factor",
            ModelKind::Linear => "linear",
            ModelKind::LinearThroughOrigin => "linear-through-origin",
            ModelKind::Quadratic => "quadratic",
            ModelKind::FourPl => "4pl",
            ModelKind::FivePl => "5pl",
        }
    }

    pub fn from_code(s: &str) -> Option<ModelKind> {
        ModelKind::ALL.into_iter().find(|m| m.code() == s)
    }

    /// Parameter names in order, as they appear in `params`.
    pub fn param_names(self) -> &'static [&'static str] {
        match self {
            ModelKind::Factor => &["factor"],
            ModelKind::Linear | ModelKind::LinearThroughOrigin => &["slope", "intercept"],
            ModelKind::Quadratic => &["c0", "c1", "c2"],
            ModelKind::FourPl => &["a", "b", "c", "d"],
            ModelKind::FivePl => &["a", "b", "c", "d", "g"],
        }
    }

    /// How many distinct calibrator concentrations the model needs at least.
    fn min_levels(self) -> usize {
        match self {
            ModelKind::Factor | ModelKind::LinearThroughOrigin => 1,
            ModelKind::Linear => 2,
            ModelKind::Quadratic => 3,
            ModelKind::FourPl => 4,
            ModelKind::FivePl => 5,
        }
    }
}

/// Weighting of the least-squares fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub enum Weighting {
    #[default]
    #[serde(rename = "none")]
    None,
    #[serde(rename = "1/x")]
    InvX,
    #[serde(rename = "1/x2")]
    InvX2,
    #[serde(rename = "1/y")]
    InvY,
    #[serde(rename = "1/y2")]
    InvY2,
}

impl Weighting {
    pub fn code(self) -> &'static str {
        match self {
            Weighting::None => "none",
            Weighting::InvX => "1/x",
            Weighting::InvX2 => "1/x2",
            Weighting::InvY => "1/y",
            Weighting::InvY2 => "1/y2",
        }
    }
    pub fn from_code(s: &str) -> Option<Weighting> {
        [
            Weighting::None,
            Weighting::InvX,
            Weighting::InvX2,
            Weighting::InvY,
            Weighting::InvY2,
        ]
        .into_iter()
        .find(|w| w.code() == s)
    }
}

/// Whether replicate readings of a calibrator enter the fit one by one or as their mean.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ReplicateUse {
    #[default]
    Individual,
    Mean,
}

/// One calibrator reading: assigned concentration and the (blank-corrected) signal.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct CalPoint {
    pub conc: f64,
    pub signal: f64,
}

/// A fitted calibration function.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(tag = "model", rename_all = "kebab-case")]
pub enum Curve {
    /// conc = factor · signal
    Factor { factor: f64 },
    /// signal = intercept + slope · conc (intercept 0 for a fit through the origin)
    Linear { slope: f64, intercept: f64 },
    /// signal = c0 + c1·conc + c2·conc²
    Quadratic { c0: f64, c1: f64, c2: f64 },
    /// signal = d + (a − d) / (1 + (conc/c)^b)
    FourPl { a: f64, b: f64, c: f64, d: f64 },
    /// signal = d + (a − d) / (1 + (conc/c)^b)^g
    FivePl {
        a: f64,
        b: f64,
        c: f64,
        d: f64,
        g: f64,
    },
}

/// Why a concentration could not be read off the curve as a plain number.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ConcFlag {
    /// Below the lowest calibrator: report as "less than" or per the lab's policy.
    BelowRange,
    /// Above the highest calibrator or the linearity limit: dilute and repeat.
    AboveRange,
    /// The signal lies outside what the curve can produce (beyond an asymptote, or no
    /// real root).
    NoSolution,
}

impl ConcFlag {
    pub fn code(self) -> &'static str {
        match self {
            ConcFlag::BelowRange => "below-range",
            ConcFlag::AboveRange => "above-range",
            ConcFlag::NoSolution => "no-solution",
        }
    }
}

/// The concentration range in which results may be reported.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ReportableRange {
    pub low: f64,
    pub high: f64,
}

/// A concentration read off the curve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Reading {
    pub conc: Option<f64>,
    pub flag: Option<ConcFlag>,
}

impl Curve {
    /// Build a curve from named parameters (as in a saved calibration or a CLI request).
    pub fn from_params(
        model: ModelKind,
        get: impl Fn(&str) -> Option<f64>,
    ) -> Result<Curve, CalibrationError> {
        let need = |name: &str| {
            get(name).filter(|v| v.is_finite()).ok_or_else(|| {
                CalibrationError::new(
                    CalErrorKind::BadParameter,
                    format!(
                        "params.{name} is missing or not a finite number; a {} curve needs {}",
                        model.code(),
                        model.param_names().join(", ")
                    ),
                )
            })
        };
        Ok(match model {
            ModelKind::Factor => Curve::Factor {
                factor: need("factor")?,
            },
            ModelKind::Linear => Curve::Linear {
                slope: need("slope")?,
                intercept: need("intercept")?,
            },
            ModelKind::LinearThroughOrigin => Curve::Linear {
                slope: need("slope")?,
                intercept: get("intercept").unwrap_or(0.0),
            },
            ModelKind::Quadratic => Curve::Quadratic {
                c0: need("c0")?,
                c1: need("c1")?,
                c2: need("c2")?,
            },
            ModelKind::FourPl => {
                let c = need("c")?;
                if c <= 0.0 {
                    return Err(CalibrationError::new(
                        CalErrorKind::BadParameter,
                        "params.c (the 4PL mid-point) must be above 0",
                    ));
                }
                Curve::FourPl {
                    a: need("a")?,
                    b: need("b")?,
                    c,
                    d: need("d")?,
                }
            }
            ModelKind::FivePl => {
                let (c, g) = (need("c")?, need("g")?);
                if c <= 0.0 || g <= 0.0 {
                    return Err(CalibrationError::new(
                        CalErrorKind::BadParameter,
                        "params.c and params.g of a 5PL curve must be above 0",
                    ));
                }
                Curve::FivePl {
                    a: need("a")?,
                    b: need("b")?,
                    c,
                    d: need("d")?,
                    g,
                }
            }
        })
    }

    /// Parameters in the order of [`ModelKind::param_names`].
    pub fn param_values(&self) -> Vec<f64> {
        match *self {
            Curve::Factor { factor } => vec![factor],
            Curve::Linear { slope, intercept } => vec![slope, intercept],
            Curve::Quadratic { c0, c1, c2 } => vec![c0, c1, c2],
            Curve::FourPl { a, b, c, d } => vec![a, b, c, d],
            Curve::FivePl { a, b, c, d, g } => vec![a, b, c, d, g],
        }
    }

    /// Expected signal at a concentration.
    pub fn signal_at(&self, conc: f64) -> f64 {
        match *self {
            Curve::Factor { factor } => conc / factor,
            Curve::Linear { slope, intercept } => intercept + slope * conc,
            Curve::Quadratic { c0, c1, c2 } => c0 + c1 * conc + c2 * conc * conc,
            Curve::FourPl { a, b, c, d } => {
                d + (a - d) / (1.0 + logistic_u(conc, b, c).unwrap_or(f64::NAN))
            }
            Curve::FivePl { a, b, c, d, g } => {
                d + (a - d) / (1.0 + logistic_u(conc, b, c).unwrap_or(f64::NAN)).powf(g)
            }
        }
    }

    /// Concentration for a signal, without range checks; `None` if the curve cannot
    /// produce that signal. `near` picks the branch of a quadratic (the middle of the
    /// calibrated range).
    pub fn conc_at(&self, signal: f64, near: f64) -> Option<f64> {
        let conc = match *self {
            Curve::Factor { factor } => factor * signal,
            Curve::Linear { slope, intercept } => {
                if slope == 0.0 {
                    return None;
                }
                (signal - intercept) / slope
            }
            Curve::Quadratic { c0, c1, c2 } => return quadratic_root(c0 - signal, c1, c2, near),
            Curve::FourPl { a, b, c, d } => {
                let q = (a - d) / (signal - d) - 1.0;
                logistic_x(q, b, c, signal, a)?
            }
            Curve::FivePl { a, b, c, d, g } => {
                let ratio = (a - d) / (signal - d);
                if ratio.is_nan() || ratio <= 0.0 {
                    return None;
                }
                let q = ratio.powf(1.0 / g) - 1.0;
                logistic_x(q, b, c, signal, a)?
            }
        };
        conc.is_finite().then_some(conc)
    }

    /// Concentration with its flag against the reportable range.
    pub fn read(&self, signal: f64, range: ReportableRange) -> Reading {
        let near = 0.5 * (range.low + range.high);
        match self.conc_at(signal, near) {
            None => Reading {
                conc: None,
                flag: Some(ConcFlag::NoSolution),
            },
            Some(conc) => {
                let eps = 1e-9 * (range.low.abs() + range.high.abs()).max(f64::MIN_POSITIVE);
                let flag = if conc < range.low - eps {
                    Some(ConcFlag::BelowRange)
                } else if conc > range.high + eps {
                    Some(ConcFlag::AboveRange)
                } else {
                    None
                };
                Reading {
                    conc: Some(conc),
                    flag,
                }
            }
        }
    }
}

/// (conc/c)^b, defined for conc ≥ 0 and c > 0; at conc = 0 only for b > 0.
fn logistic_u(conc: f64, b: f64, c: f64) -> Option<f64> {
    if c <= 0.0 || conc < 0.0 || !conc.is_finite() {
        return None;
    }
    if conc == 0.0 {
        return (b > 0.0).then_some(0.0);
    }
    Some((conc / c).powf(b))
}

/// Solve (x/c)^b = q for x ≥ 0; `q` = 0 means the zero-concentration asymptote.
fn logistic_x(q: f64, b: f64, c: f64, signal: f64, a: f64) -> Option<f64> {
    if signal == a && b > 0.0 {
        return Some(0.0);
    }
    if q.is_nan() || q <= 0.0 || !q.is_finite() || b == 0.0 {
        return None;
    }
    let x = c * q.powf(1.0 / b);
    x.is_finite().then_some(x)
}

/// Real root of c2 x² + c1 x + c0 = 0 on the branch nearest `near`.
fn quadratic_root(c0: f64, c1: f64, c2: f64, near: f64) -> Option<f64> {
    if c2 == 0.0 || (c2 * near * near).abs() < 1e-14 * (c1 * near).abs() {
        return (c1 != 0.0).then(|| -c0 / c1);
    }
    let disc = c1 * c1 - 4.0 * c2 * c0;
    if disc < 0.0 {
        return None;
    }
    // Numerically stable pair of roots.
    let sign = if c1 >= 0.0 { 1.0 } else { -1.0 };
    let q = -0.5 * (c1 + sign * disc.sqrt());
    let roots = if q == 0.0 {
        vec![0.0]
    } else {
        vec![q / c2, c0 / q]
    };
    // The calibrated branch: the same side of the vertex as `near`.
    let vertex = -c1 / (2.0 * c2);
    let side = (near - vertex).signum();
    roots
        .iter()
        .copied()
        .filter(|r| r.is_finite())
        .min_by(|x, y| {
            let kx = ((x - vertex).signum() != side, (x - near).abs());
            let ky = ((y - vertex).signum() != side, (y - near).abs());
            kx.partial_cmp(&ky).unwrap_or(std::cmp::Ordering::Equal)
        })
}

/// What kind of problem stopped a fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CalErrorKind {
    /// Fewer calibrators than the model needs.
    TooFewPoints,
    /// A concentration or signal that is not a usable number.
    BadValue,
    /// A weight that cannot be formed (1/x at conc 0, 1/y at a signal ≤ 0).
    BadWeight,
    /// All signals are the same: no curve can be fitted.
    FlatSignal,
    /// The iterative fit did not settle on a solution.
    NoConvergence,
    /// The data do not determine the parameters (e.g. all points at one concentration).
    Undetermined,
    /// A parameter supplied from outside is missing or out of bounds.
    BadParameter,
}

/// A calibration that could not be fitted, with what to do about it.
#[derive(Debug, Clone, PartialEq)]
pub struct CalibrationError {
    pub kind: CalErrorKind,
    pub message: String,
}

impl CalibrationError {
    fn new(kind: CalErrorKind, message: impl Into<String>) -> Self {
        CalibrationError {
            kind,
            message: message.into(),
        }
    }
}

impl fmt::Display for CalibrationError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.message)
    }
}

impl std::error::Error for CalibrationError {}

/// One calibrator as the fit used it.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct FittedPoint {
    pub conc: f64,
    pub signal: f64,
    /// Signal the curve gives at `conc`.
    pub fitted: f64,
    /// signal − fitted (unweighted).
    pub residual: f64,
    /// Concentration the curve gives for `signal`.
    pub back_calculated: Option<f64>,
    /// back_calculated / conc × 100; `None` at conc 0.
    pub recovery_pct: Option<f64>,
}

/// A fitted calibration with its diagnostics.
#[derive(Debug, Clone, PartialEq)]
pub struct Fit {
    pub model: ModelKind,
    pub weighting: Weighting,
    pub curve: Curve,
    /// Standard error per parameter (order of [`ModelKind::param_names`]); `None` where
    /// the data leave no degrees of freedom or the parameter is fixed.
    pub std_errors: Vec<Option<f64>>,
    /// Residual sum of squares (weighted where weighted).
    pub rss: f64,
    pub r_squared: Option<f64>,
    pub points: Vec<FittedPoint>,
    /// Residual evaluations used by the iterative fit (0 for closed-form fits).
    pub evaluations: usize,
}

impl ReportableRange {
    /// From the lowest calibrator up to the highest calibrator or the stated linearity
    /// limit, whichever is lower: results are never reported beyond either.
    pub fn for_fit(fit: &Fit, linearity_limit: Option<f64>) -> ReportableRange {
        ReportableRange::from_calibrators(fit.points.iter().map(|p| p.conc), linearity_limit)
    }

    /// The same from the calibrator concentrations alone (a saved calibration). A
    /// single-point calibration assumes the linear response the maker states, so it
    /// counts from 0 up to the linearity limit (or its calibrator when none is given);
    /// with no calibrators (a factor from the method, such as an enzyme factor) the
    /// range is 0 up to the linearity limit.
    pub fn from_calibrators(
        concs: impl Iterator<Item = f64>,
        linearity_limit: Option<f64>,
    ) -> ReportableRange {
        let (low, high) = concs.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), c| {
            (lo.min(c), hi.max(c))
        });
        if low > high {
            return ReportableRange {
                low: 0.0,
                high: linearity_limit.unwrap_or(f64::INFINITY),
            };
        }
        if low == high {
            return ReportableRange {
                low: low.min(0.0),
                high: linearity_limit.unwrap_or(high),
            };
        }
        ReportableRange {
            low,
            high: linearity_limit.map_or(high, |l| l.min(high)),
        }
    }
}

impl Fit {
    /// Lowest and highest calibrator concentration.
    pub fn calibrated_range(&self) -> ReportableRange {
        let low = self
            .points
            .iter()
            .map(|p| p.conc)
            .fold(f64::INFINITY, f64::min);
        let high = self
            .points
            .iter()
            .map(|p| p.conc)
            .fold(f64::NEG_INFINITY, f64::max);
        ReportableRange { low, high }
    }
}

/// Calibrator points from raw readings: each replicate absorbance minus the mean
/// reagent blank (no subtraction when no blank was read).
pub fn blank_corrected(blank: &[f64], calibrators: &[(f64, Vec<f64>)]) -> Vec<CalPoint> {
    let b = if blank.is_empty() {
        0.0
    } else {
        blank.iter().sum::<f64>() / blank.len() as f64
    };
    calibrators
        .iter()
        .flat_map(|(conc, reps)| {
            reps.iter().map(move |a| CalPoint {
                conc: *conc,
                signal: a - b,
            })
        })
        .collect()
}

/// Average replicate readings at the same concentration (order of first appearance).
pub fn average_replicates(points: &[CalPoint]) -> Vec<CalPoint> {
    let mut groups: Vec<(f64, f64, usize)> = Vec::new();
    for p in points {
        match groups.iter_mut().find(|g| g.0 == p.conc) {
            Some(g) => {
                g.1 += p.signal;
                g.2 += 1;
            }
            None => groups.push((p.conc, p.signal, 1)),
        }
    }
    groups
        .into_iter()
        .map(|(conc, sum, n)| CalPoint {
            conc,
            signal: sum / n as f64,
        })
        .collect()
}

/// Fit `model` to the calibrator readings.
pub fn fit(
    model: ModelKind,
    weighting: Weighting,
    replicates: ReplicateUse,
    points: &[CalPoint],
) -> Result<Fit, CalibrationError> {
    for (i, p) in points.iter().enumerate() {
        if !p.conc.is_finite() || !p.signal.is_finite() {
            return Err(CalibrationError::new(
                CalErrorKind::BadValue,
                format!("point {}: concentration and signal must be numbers", i + 1),
            ));
        }
        if p.conc < 0.0 {
            return Err(CalibrationError::new(
                CalErrorKind::BadValue,
                format!(
                    "point {}: concentration {} is below 0; enter the calibrator's assigned value",
                    i + 1,
                    p.conc
                ),
            ));
        }
    }
    let pts = match replicates {
        ReplicateUse::Individual => points.to_vec(),
        ReplicateUse::Mean => average_replicates(points),
    };
    let mut levels: Vec<f64> = pts.iter().map(|p| p.conc).collect();
    levels.sort_by(f64::total_cmp);
    levels.dedup();
    let nonzero_levels = levels.iter().filter(|&&c| c > 0.0).count();
    let enough = match model {
        ModelKind::Factor | ModelKind::LinearThroughOrigin => nonzero_levels >= 1,
        _ => levels.len() >= model.min_levels(),
    };
    if pts.is_empty() || !enough {
        return Err(CalibrationError::new(
            CalErrorKind::TooFewPoints,
            format!(
                "a {} calibration needs at least {} different calibrator concentration{}{}; \
                 this one has {}",
                model.code(),
                model.min_levels(),
                if model.min_levels() == 1 { "" } else { "s" },
                if matches!(model, ModelKind::Factor | ModelKind::LinearThroughOrigin) {
                    " above 0"
                } else {
                    ""
                },
                levels.len()
            ),
        ));
    }
    let (smin, smax) = pts
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), p| {
            (lo.min(p.signal), hi.max(p.signal))
        });
    if levels.len() > 1 && (smax - smin) <= 1e-12 * smax.abs().max(smin.abs()) {
        return Err(CalibrationError::new(
            CalErrorKind::FlatSignal,
            format!(
                "every calibrator gave the same signal ({smin}); check the reagent and the \
                 photometer, then measure the calibrators again"
            ),
        ));
    }
    let weights = weights_for(weighting, &pts)?;
    let x: Vec<f64> = pts.iter().map(|p| p.conc).collect();
    let y: Vec<f64> = pts.iter().map(|p| p.signal).collect();

    let (curve, std_errors, evaluations) = match model {
        ModelKind::Factor => {
            let ls = polynomial(&x, &y, weights.as_deref(), 1, false)?;
            let slope = ls.coef[0];
            if slope == 0.0 {
                return Err(CalibrationError::new(
                    CalErrorKind::FlatSignal,
                    "the calibrator signal is 0",
                ));
            }
            let se = ls.se.map(|s| s[0] / (slope * slope));
            (
                Curve::Factor {
                    factor: 1.0 / slope,
                },
                vec![se],
                0,
            )
        }
        ModelKind::Linear => {
            let ls = polynomial(&x, &y, weights.as_deref(), 1, true)?;
            let se = ls.se.as_ref();
            (
                Curve::Linear {
                    slope: ls.coef[1],
                    intercept: ls.coef[0],
                },
                vec![se.map(|s| s[1]), se.map(|s| s[0])],
                0,
            )
        }
        ModelKind::LinearThroughOrigin => {
            let ls = polynomial(&x, &y, weights.as_deref(), 1, false)?;
            (
                Curve::Linear {
                    slope: ls.coef[0],
                    intercept: 0.0,
                },
                vec![ls.se.map(|s| s[0]), None],
                0,
            )
        }
        ModelKind::Quadratic => {
            let ls = polynomial(&x, &y, weights.as_deref(), 2, true)?;
            let se = ls.se.as_ref();
            (
                Curve::Quadratic {
                    c0: ls.coef[0],
                    c1: ls.coef[1],
                    c2: ls.coef[2],
                },
                (0..3).map(|k| se.map(|s| s[k])).collect(),
                0,
            )
        }
        ModelKind::FourPl | ModelKind::FivePl => logistic_fit(model, &x, &y, weights.as_deref())?,
    };

    let w = |i: usize| weights.as_ref().map_or(1.0, |w| w[i]);
    // A logistic curve costs a `powf` a point: replicates reuse their concentration's.
    let mut seen: Vec<(f64, f64)> = Vec::with_capacity(x.len());
    let fitted: Vec<f64> = if matches!(curve, Curve::FourPl { .. } | Curve::FivePl { .. }) {
        x.iter()
            .map(|&c| match seen.iter().find(|s| s.0 == c) {
                Some(s) => s.1,
                None => {
                    let f = curve.signal_at(c);
                    seen.push((c, f));
                    f
                }
            })
            .collect()
    } else {
        x.iter().map(|&c| curve.signal_at(c)).collect()
    };
    let rss: f64 = (0..y.len())
        .map(|i| w(i) * (y[i] - fitted[i]).powi(2))
        .sum();
    let wsum: f64 = (0..y.len()).map(w).sum();
    let ybar = (0..y.len()).map(|i| w(i) * y[i]).sum::<f64>() / wsum;
    let tss: f64 = (0..y.len()).map(|i| w(i) * (y[i] - ybar).powi(2)).sum();
    let r_squared = (tss > 0.0 && y.len() > 1).then(|| 1.0 - rss / tss);
    let near = 0.5 * (levels[0] + levels[levels.len() - 1]);
    let points = pts
        .iter()
        .zip(&fitted)
        .map(|(p, &f)| {
            let back = curve.conc_at(p.signal, near);
            FittedPoint {
                conc: p.conc,
                signal: p.signal,
                fitted: f,
                residual: p.signal - f,
                back_calculated: back,
                recovery_pct: back.filter(|_| p.conc > 0.0).map(|b| b / p.conc * 100.0),
            }
        })
        .collect();
    Ok(Fit {
        model,
        weighting,
        curve,
        std_errors,
        rss,
        r_squared,
        points,
        evaluations,
    })
}

fn weights_for(
    weighting: Weighting,
    pts: &[CalPoint],
) -> Result<Option<Vec<f64>>, CalibrationError> {
    let (by_x, power) = match weighting {
        Weighting::None => return Ok(None),
        Weighting::InvX => (true, 1),
        Weighting::InvX2 => (true, 2),
        Weighting::InvY => (false, 1),
        Weighting::InvY2 => (false, 2),
    };
    pts.iter()
        .enumerate()
        .map(|(i, p)| {
            let v = if by_x { p.conc } else { p.signal };
            if v <= 0.0 {
                Err(CalibrationError::new(
                    CalErrorKind::BadWeight,
                    format!(
                        "point {}: {} weighting needs a {} above 0 (it is {v}); remove that \
                         calibrator or choose another weighting",
                        i + 1,
                        weighting.code(),
                        if by_x { "concentration" } else { "signal" }
                    ),
                ))
            } else {
                Ok(1.0 / v.powi(power))
            }
        })
        .collect::<Result<Vec<_>, _>>()
        .map(Some)
}

struct Polynomial {
    /// Coefficients of 1, x, x², … (without the constant when it is not fitted).
    coef: Vec<f64>,
    se: Option<Vec<f64>>,
}

/// Weighted least-squares polynomial of `degree` (1 or 2), with or without the
/// constant term (without: degree 1 only, the line through the origin).
fn polynomial(
    x: &[f64],
    y: &[f64],
    w: Option<&[f64]>,
    degree: usize,
    constant: bool,
) -> Result<Polynomial, CalibrationError> {
    match (degree, constant) {
        (1, false) => through_origin(x, y, w),
        (1, true) => centred_polynomial::<2>(x, y, w),
        (2, true) => centred_polynomial::<3>(x, y, w),
        _ => Err(undetermined()),
    }
}

fn undetermined() -> CalibrationError {
    CalibrationError::new(
        CalErrorKind::Undetermined,
        "the calibrator concentrations do not determine this curve (too few distinct \
         concentrations); measure more levels or choose a simpler model",
    )
}

/// y = β·x: β = Σwxy / Σwx², var β = s² / Σwx² with s² = RSS / (n − 1).
fn through_origin(x: &[f64], y: &[f64], w: Option<&[f64]>) -> Result<Polynomial, CalibrationError> {
    let wt = |i: usize| w.map_or(1.0, |w| w[i]);
    let (sxx, sxy) = (0..x.len()).fold((0.0, 0.0), |(sxx, sxy), i| {
        (sxx + wt(i) * x[i] * x[i], sxy + wt(i) * x[i] * y[i])
    });
    if sxx.is_nan() || sxx <= 0.0 {
        return Err(undetermined());
    }
    let slope = sxy / sxx;
    let se = (x.len() > 1).then(|| {
        let rss: f64 = (0..x.len())
            .map(|i| wt(i) * (y[i] - slope * x[i]).powi(2))
            .sum();
        (rss / (x.len() - 1) as f64 / sxx).sqrt()
    });
    Ok(Polynomial {
        coef: vec![slope],
        se: se.map(|s| vec![s]),
    })
}

/// Polynomial with N coefficients (1, x, x², …) by the normal equations in
/// t = (x − m)/h, the concentrations mapped onto [−1, 1]. There the monomials are
/// nearly orthogonal (the Gram matrix of 1, t, t² has a condition number of a few tens
/// for spread calibrators, against 10¹⁰ and more in raw units), so a Cholesky on N×N
/// keeps the digits a QR would (NIST Pontius to 10 digits, Norris to 12, in the
/// tests), without forming or storing the design matrix. The coefficients and their
/// covariance come back to powers of x through t's exact linear map.
fn centred_polynomial<const N: usize>(
    x: &[f64],
    y: &[f64],
    w: Option<&[f64]>,
) -> Result<Polynomial, CalibrationError> {
    let wt = |i: usize| w.map_or(1.0, |w| w[i]);
    let (lo, hi) = x
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| {
            (lo.min(v), hi.max(v))
        });
    let (mid, half) = (0.5 * (lo + hi), 0.5 * (hi - lo));
    if half.is_nan() || half <= 0.0 || x.len() < N {
        return Err(undetermined());
    }
    let basis = |v: f64| -> SVector<f64, N> {
        let t = (v - mid) / half;
        SVector::from_fn(|k, _| t.powi(k as i32))
    };
    let mut gram = SMatrix::<f64, N, N>::zeros();
    let mut rhs = SVector::<f64, N>::zeros();
    for i in 0..x.len() {
        let phi = basis(x[i]);
        let wi = wt(i);
        for j in 0..N {
            rhs[j] += wi * phi[j] * y[i];
            for k in j..N {
                gram[(j, k)] += wi * phi[j] * phi[k];
            }
        }
    }
    gram.fill_lower_triangle_with_upper_triangle();
    // Refuse a Gram matrix too ill-conditioned to trust (its 1-norm condition number,
    // scaled to a unit diagonal, beyond 1e14: the calibrators nearly coincide).
    let d: [f64; N] = std::array::from_fn(|j| gram[(j, j)].sqrt());
    let scaled = SMatrix::<f64, N, N>::from_fn(|i, j| gram[(i, j)] / (d[i] * d[j]));
    let chol = scaled.cholesky().ok_or_else(undetermined)?;
    let inverse_scaled = chol.inverse();
    let norm1 = |m: &SMatrix<f64, N, N>| {
        (0..N)
            .map(|j| m.column(j).iter().map(|v| v.abs()).sum::<f64>())
            .fold(0.0, f64::max)
    };
    let condition = norm1(&scaled) * norm1(&inverse_scaled);
    if condition.is_nan() || condition > 1e14 {
        return Err(undetermined());
    }
    let rhs_scaled = SVector::<f64, N>::from_fn(|j, _| rhs[j] / d[j]);
    let beta_scaled = chol.solve(&rhs_scaled);
    let beta = SVector::<f64, N>::from_fn(|j, _| beta_scaled[j] / d[j]);
    // t = αx + γ: the coefficient of x^k in Σ βⱼ tʲ is Σⱼ βⱼ C(j, k) α^k γ^(j−k).
    let (alpha, gamma) = (1.0 / half, -mid / half);
    let map = SMatrix::<f64, N, N>::from_fn(|k, j| {
        if j < k {
            0.0
        } else {
            let binom = match (j, k) {
                (2, 1) => 2.0,
                _ => 1.0,
            };
            binom * alpha.powi(k as i32) * gamma.powi((j - k) as i32)
        }
    });
    let coef = map * beta;
    let se = (x.len() > N).then(|| {
        let rss: f64 = (0..x.len())
            .map(|i| wt(i) * (y[i] - basis(x[i]).dot(&beta)).powi(2))
            .sum();
        let s2 = rss / (x.len() - N) as f64;
        let inverse = SMatrix::<f64, N, N>::from_fn(|i, j| inverse_scaled[(i, j)] / (d[i] * d[j]));
        let cov = map * inverse * map.transpose();
        (0..N).map(|k| (s2 * cov[(k, k)]).sqrt()).collect()
    });
    Ok(Polynomial {
        coef: coef.iter().copied().collect(),
        se,
    })
}

/// The 4PL / 5PL least-squares problem for [`small_lm`]: p = [a, b, c, d] or
/// [a, b, c, d, g]. Replicates of one concentration are pooled exactly: for the points
/// of one concentration, Σ wᵢ (yᵢ − f)² = W (ȳ − f)² + Σ wᵢ (yᵢ − ȳ)² with W = Σ wᵢ and ȳ
/// their weighted mean, so the fit sees one residual per concentration (weight W) plus
/// a constant, the same sum of squares, the same JᵀJ, the same optimum. ln(conc) is
/// computed once; an evaluation costs one `exp` per concentration (4PL).
struct LogisticProblem {
    /// In increasing concentration.
    levels: Vec<LogisticLevel>,
    /// Σ wᵢ (yᵢ − ȳ)² within the concentrations: the part no curve can explain.
    within: f64,
}

struct LogisticLevel {
    conc: f64,
    /// ln(conc), `None` at conc 0.
    ln_x: Option<f64>,
    /// Σ wᵢ over the readings at this concentration.
    weight: f64,
    /// Their weighted mean signal.
    mean: f64,
}

impl LogisticProblem {
    fn new(x: &[f64], y: &[f64], w: Option<&[f64]>) -> Self {
        let wt = |i: usize| w.map_or(1.0, |w| w[i]);
        let mut levels: Vec<LogisticLevel> = Vec::with_capacity(x.len());
        let mut level_of = Vec::with_capacity(x.len());
        for i in 0..x.len() {
            let k = match levels.iter().position(|l| l.conc == x[i]) {
                Some(k) => k,
                None => {
                    levels.push(LogisticLevel {
                        conc: x[i],
                        ln_x: (x[i] > 0.0).then(|| x[i].ln()),
                        weight: 0.0,
                        mean: 0.0,
                    });
                    levels.len() - 1
                }
            };
            // Σw and Σwy for now; the mean once every reading is in.
            levels[k].weight += wt(i);
            levels[k].mean += wt(i) * y[i];
            level_of.push(k);
        }
        for l in &mut levels {
            l.mean /= l.weight;
        }
        let within = (0..x.len())
            .map(|i| wt(i) * (y[i] - levels[level_of[i]].mean).powi(2))
            .sum();
        levels.sort_by(|p, q| p.conc.total_cmp(&q.conc));
        LogisticProblem { levels, within }
    }
}

impl<const N: usize> small_lm::SmallProblem<N> for LogisticProblem {
    /// Per concentration: the residual ȳ − f and ∂f/∂p (a, b, c, d, g), summed into
    /// the normal equations of the pooled residuals √W (ȳ − f). With t = b·ln(x/c) the
    /// shape s = (1 + eᵗ)^−g comes from one exp of −|t|, so neither tail overflows;
    /// x = 0 gives s = 1 (needs b > 0).
    fn sums(&self, p: &[f64; N], out: &mut small_lm::NormalSums<N>) -> Option<()> {
        let (a, b, c, d) = (p[0], p[1], p[2], p[3]);
        let g = if N == 5 { p[4] } else { 1.0 };
        if !(c > 0.0 && g > 0.0) {
            return None;
        }
        let ln_c = c.ln();
        let (span, b_over_c) = (a - d, b / c);
        let mut cost = self.within;
        let mut jtj = SMatrix::<f64, N, N>::zeros();
        let mut jtr = SVector::<f64, N>::zeros();
        for level in &self.levels {
            let (shape, dshape_dt, ln_den, l) = match level.ln_x {
                None if b <= 0.0 => return None,
                None => (1.0, 0.0, 0.0, 0.0),
                Some(lx) => {
                    let l = lx - ln_c;
                    let t = b * l;
                    // q = 1/(1 + eᵗ) and (5PL) ln(1 + eᵗ).
                    let e = (-t.abs()).exp();
                    let q = if t > 0.0 {
                        e / (1.0 + e)
                    } else {
                        1.0 / (1.0 + e)
                    };
                    if N == 5 {
                        let ln_den = t.max(0.0) + e.ln_1p();
                        let shape = (-g * ln_den).exp();
                        // ds/dt = −g · s · eᵗ/(1 + eᵗ) = −g · s · (1 − q)
                        (shape, -g * shape * (1.0 - q), ln_den, l)
                    } else {
                        (q, -q * (1.0 - q), 0.0, l)
                    }
                }
            };
            let r = level.mean - (d + span * shape);
            let k = span * dshape_dt;
            let grad: [f64; N] = std::array::from_fn(|j| match j {
                0 => shape,
                1 => k * l,
                2 => -k * b_over_c,
                3 => 1.0 - shape,
                _ => -span * shape * ln_den,
            });
            // Residual √w (ȳ − f), Jacobian row −√w ∂f/∂p.
            let w = level.weight;
            cost += w * r * r;
            for j in 0..N {
                let wg = w * grad[j];
                jtr[j] -= wg * r;
                for k in j..N {
                    jtj[(j, k)] += wg * grad[k];
                }
            }
        }
        jtj.fill_lower_triangle_with_upper_triangle();
        *out = small_lm::NormalSums { cost, jtj, jtr };
        Some(())
    }
}

fn termination_words(t: lm::Termination) -> &'static str {
    use lm::Termination::*;
    match t {
        TooManyEvaluations => "it ran out of iterations",
        BadStart => "the starting curve could not be evaluated",
        Stuck => "no change of the parameters improved it",
        BadInput => "the input cannot be fitted",
        ConvergedSumOfSquares | ConvergedStep | ConvergedGradient | NoFurtherReduction => {
            "converged"
        }
    }
}

/// Starting values for a 4PL from the data: asymptotes just beyond the extreme mean
/// signals, c where the signal crosses half-way (log-interpolated), b from the
/// logit-log regression of the points in between.
fn logistic_start(problem: &LogisticProblem) -> [f64; 4] {
    // The pooled levels, in increasing concentration: (conc, ln conc, mean signal).
    let pts = &problem.levels;
    let lo = pts[0].mean;
    let hi = pts[pts.len() - 1].mean;
    let span = hi - lo;
    let a = lo - 0.05 * span;
    let d = hi + 0.05 * span;
    let half = 0.5 * (lo + hi);
    let positive = || pts.iter().filter_map(|p| p.ln_x.map(|lx| (lx, p.mean)));
    let count = positive().count();
    let mut c = (positive().map(|(lx, _)| lx).sum::<f64>() / count.max(1) as f64).exp();
    let mut previous: Option<(f64, f64)> = None;
    for (lx, mean) in positive() {
        if let Some((pl, pm)) = previous {
            if (pm - half) * (mean - half) <= 0.0 && pm != mean {
                let t = (half - pm) / (mean - pm);
                c = (pl + t * (lx - pl)).exp();
                break;
            }
        }
        previous = Some((lx, mean));
    }
    // logit: ln((a − y)/(y − d)) = b ln x − b ln c
    let (mut sx, mut sy, mut sxx, mut sxy, mut k) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for (lx, mean) in positive() {
        let ratio = (a - mean) / (mean - d);
        if ratio > 0.0 && ratio.is_finite() {
            let ly = ratio.ln();
            sx += lx;
            sy += ly;
            sxx += lx * lx;
            sxy += lx * ly;
            k += 1.0;
        }
    }
    let mut b = 1.0;
    if k >= 2.0 {
        let den = k * sxx - sx * sx;
        if den > 0.0 {
            let slope = (k * sxy - sx * sy) / den;
            if slope.is_finite() && slope > 0.05 {
                b = slope.min(20.0);
            }
        }
    }
    [a, b, c, d]
}

/// The lowest-RSS converged fit from `starts`, tried in order until one is `sound`, with
/// its standard errors; adds to the evaluation count and keeps the last reason to stop.
fn best_start<const N: usize>(
    problem: &LogisticProblem,
    starts: [[f64; N]; 5],
    settings: &Settings,
    n_points: usize,
    sound: &dyn Fn(&[f64], lm::Termination) -> bool,
    (evaluations, last_reason): (&mut usize, &mut lm::Termination),
) -> Option<([f64; N], Option<[f64; N]>)> {
    let mut best: Option<small_lm::SmallReport<N>> = None;
    for start in starts {
        let rep = small_lm::solve(problem, start, settings);
        *evaluations += rep.evaluations;
        *last_reason = rep.termination;
        let done = sound(&rep.params, rep.termination);
        if rep.termination.converged() && best.as_ref().is_none_or(|b| rep.rss < b.rss) {
            best = Some(rep);
        }
        if done {
            break;
        }
    }
    best.map(|rep| {
        let se = n_points
            .checked_sub(N)
            .and_then(|dof| small_lm::standard_errors(&rep.sums.jtj, rep.rss, dof));
        (rep.params, se)
    })
}

fn logistic_fit(
    model: ModelKind,
    x: &[f64],
    y: &[f64],
    w: Option<&[f64]>,
) -> Result<(Curve, Vec<Option<f64>>, usize), CalibrationError> {
    // The sum of squares converges linearly (by about 200× a step on real curves):
    // when a step gains less than 1e-12 of it, the next would gain ~1e-14, far below
    // anything a result can show.
    let settings = Settings {
        ftol: 1e-12,
        xtol: 1e-14,
        gtol: 1e-14,
        max_evaluations: 5_000,
    };
    let problem = LogisticProblem::new(x, y, w);
    let base = logistic_start(&problem);
    // The data-driven start first; a few starts around it only when it does not end
    // in a sound optimum (the logistic surface has flat valleys). "Sound" is our bound:
    // converged, slope 0.05–50, mid-point within ten times the calibrators' span, 5PL
    // asymmetry 0.05–20; anything else tries the other starts.
    let positive = x.iter().copied().filter(|&v| v > 0.0);
    let (lowest, highest) = (
        positive.clone().fold(f64::INFINITY, f64::min),
        positive.fold(0.0_f64, f64::max),
    );
    let sound = |p: &[f64], t: lm::Termination| {
        t.converged()
            && p.iter().all(|v| v.is_finite())
            && (0.05..=50.0).contains(&p[1].abs())
            && p[2] >= lowest / 10.0
            && p[2] <= highest * 10.0
            && p.get(4).is_none_or(|g| (0.05..=20.0).contains(g))
    };
    let mut evaluations = 0;
    let mut last_reason = lm::Termination::BadStart;
    let [a0, b0, c0, d0] = base;
    let mut best = best_start(
        &problem,
        [
            [a0, b0, c0, d0],
            [a0, b0 * 0.5, c0, d0],
            [a0, b0 * 2.0, c0, d0],
            [a0, b0, c0 * 0.5, d0],
            [a0, b0, c0 * 2.0, d0],
        ],
        &settings,
        x.len(),
        &sound,
        (&mut evaluations, &mut last_reason),
    )
    .map(|(p, se)| (p.to_vec(), se.map(Vec::from)));
    if model == ModelKind::FivePl {
        let from = best.as_ref().map_or(base.to_vec(), |b| b.0.clone());
        best = best_start(
            &problem,
            [1.0, 0.5, 2.0, 0.25, 4.0].map(|g| [from[0], from[1], from[2], from[3], g]),
            &settings,
            x.len(),
            &sound,
            (&mut evaluations, &mut last_reason),
        )
        .map(|(p, se)| (p.to_vec(), se.map(Vec::from)));
    }
    let Some((p, se)) = best else {
        return Err(CalibrationError::new(
            CalErrorKind::NoConvergence,
            format!(
                "the {} fit did not converge ({}); the readings may not follow an S-shaped \
                 curve: check the calibrator values and readings, or use a linear or quadratic \
                 model",
                model.code(),
                termination_words(last_reason)
            ),
        ));
    };
    let p = &p;
    // A mid-point far outside the calibrators means the data do not define the curve.
    if !(p[2] >= lowest / 100.0 && p[2] <= highest * 100.0) {
        return Err(CalibrationError::new(
            CalErrorKind::Undetermined,
            format!(
                "the {} mid-point c = {:.3e} lies far outside the calibrators ({lowest}–{highest}): \
                 these calibrators do not define the curve; check the readings or use another model",
                model.code(),
                p[2]
            ),
        ));
    }
    let curve = if model == ModelKind::FivePl {
        Curve::FivePl {
            a: p[0],
            b: p[1],
            c: p[2],
            d: p[3],
            g: p[4],
        }
    } else {
        Curve::FourPl {
            a: p[0],
            b: p[1],
            c: p[2],
            d: p[3],
        }
    };
    let std_errors = (0..p.len()).map(|j| se.as_ref().map(|s| s[j])).collect();
    Ok((curve, std_errors, evaluations))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pts(v: &[(f64, f64)]) -> Vec<CalPoint> {
        v.iter()
            .map(|&(conc, signal)| CalPoint { conc, signal })
            .collect()
    }

    /// Worked arithmetic: calibrator 100 mg/dL reading ΔA 0.250 and 0.254 gives
    /// F = 100 / 0.252 = 396.825… (the single-point factor, C_cal / ΔA_cal).
    #[test]
    fn factor_is_concentration_over_mean_signal() {
        let f = fit(
            ModelKind::Factor,
            Weighting::None,
            ReplicateUse::Individual,
            &pts(&[(100.0, 0.250), (100.0, 0.254)]),
        )
        .unwrap();
        let Curve::Factor { factor } = f.curve else {
            panic!()
        };
        assert!((factor - 100.0 / 0.252).abs() < 1e-9);
        assert!((f.curve.conc_at(0.126, 50.0).unwrap() - 50.0).abs() < 1e-9);
    }

    #[test]
    fn reportable_range_stops_at_the_lower_of_top_calibrator_and_linearity() {
        let f = fit(
            ModelKind::Linear,
            Weighting::None,
            ReplicateUse::Individual,
            &pts(&[(0.0, 0.01), (200.0, 0.41), (400.0, 0.81)]),
        )
        .unwrap();
        assert_eq!(ReportableRange::for_fit(&f, Some(300.0)).high, 300.0);
        assert_eq!(ReportableRange::for_fit(&f, Some(500.0)).high, 400.0);
        assert_eq!(ReportableRange::for_fit(&f, None).high, 400.0);
        let single = ReportableRange::from_calibrators([100.0, 100.0].into_iter(), Some(400.0));
        assert_eq!((single.low, single.high), (0.0, 400.0));
        let none = ReportableRange::from_calibrators(std::iter::empty(), Some(500.0));
        assert_eq!((none.low, none.high), (0.0, 500.0));
        let r = f
            .curve
            .read(0.71, ReportableRange::for_fit(&f, Some(300.0)));
        assert_eq!(r.flag, Some(ConcFlag::AboveRange));
        assert!((f.points[1].residual).abs() < 1e-12);
    }

    /// A straight line has no finite 4PL optimum and zig-zag readings no sensible one:
    /// both are refused with a reason instead of returning a nonsense curve.
    #[test]
    fn logistic_refuses_data_that_do_not_define_a_curve() {
        let line = pts(&[
            (0.0, 0.0),
            (1.0, 0.1),
            (2.0, 0.2),
            (3.0, 0.3),
            (4.0, 0.4),
            (5.0, 0.5),
        ]);
        let zigzag = pts(&[(0.0, 0.1), (1.0, 0.9), (2.0, 0.2), (3.0, 1.0), (4.0, 0.15)]);
        for data in [line, zigzag] {
            let e = fit(
                ModelKind::FourPl,
                Weighting::None,
                ReplicateUse::Individual,
                &data,
            )
            .unwrap_err();
            assert!(
                matches!(
                    e.kind,
                    CalErrorKind::NoConvergence | CalErrorKind::Undetermined
                ),
                "{e:?}"
            );
            assert!(e.message.contains("model"), "{}", e.message);
        }
    }

    #[test]
    fn too_few_and_flat_are_clear_errors() {
        let e = fit(
            ModelKind::FourPl,
            Weighting::None,
            ReplicateUse::Individual,
            &pts(&[(1.0, 0.1), (2.0, 0.2)]),
        )
        .unwrap_err();
        assert_eq!(e.kind, CalErrorKind::TooFewPoints);
        assert!(e.message.contains("at least 4"), "{}", e.message);
        let e = fit(
            ModelKind::Linear,
            Weighting::None,
            ReplicateUse::Individual,
            &pts(&[(1.0, 0.3), (2.0, 0.3), (3.0, 0.3)]),
        )
        .unwrap_err();
        assert_eq!(e.kind, CalErrorKind::FlatSignal);
        let e = fit(
            ModelKind::Linear,
            Weighting::InvX,
            ReplicateUse::Individual,
            &pts(&[(0.0, 0.0), (2.0, 0.3)]),
        )
        .unwrap_err();
        assert_eq!(e.kind, CalErrorKind::BadWeight);
        assert!(e.message.contains("point 1"));
    }

    /// 4PL inverse: conc = c · ((a − d)/(s − d) − 1)^(1/b); a signal beyond an
    /// asymptote has no solution.
    #[test]
    fn logistic_inverse_and_asymptotes() {
        let curve = Curve::FourPl {
            a: 0.05,
            b: 1.5,
            c: 10.0,
            d: 2.0,
        };
        for conc in [0.5, 3.0, 10.0, 40.0] {
            let s = curve.signal_at(conc);
            assert!((curve.conc_at(s, 10.0).unwrap() - conc).abs() < 1e-9 * conc);
        }
        assert!((curve.signal_at(10.0) - 1.025).abs() < 1e-12); // half-way at c
        assert_eq!(curve.conc_at(2.5, 10.0), None);
        assert_eq!(curve.conc_at(0.01, 10.0), None);
        let r = curve.read(
            curve.signal_at(60.0),
            ReportableRange {
                low: 1.0,
                high: 50.0,
            },
        );
        assert_eq!(r.flag, Some(ConcFlag::AboveRange));
        let five = Curve::FivePl {
            a: 0.05,
            b: 1.5,
            c: 10.0,
            d: 2.0,
            g: 0.7,
        };
        let s = five.signal_at(7.0);
        assert!((five.conc_at(s, 10.0).unwrap() - 7.0).abs() < 1e-9);
    }

    /// The pooled 4PL/5PL sums equal those of the raw points: the sum of squares is
    /// Σ wᵢ (yᵢ − f(xᵢ))² computed directly with the curve, Jᵀr is half the central
    /// finite-difference gradient of that sum, and JᵀJ is Σ wᵢ ∇f ∇fᵀ from central
    /// differences of the curve, with replicates, weights and a zero concentration.
    #[test]
    fn pooled_logistic_sums_match_the_raw_points() {
        use small_lm::SmallProblem;
        let x = [0.0, 0.0, 0.5, 2.0, 2.0, 2.0, 8.0, 30.0, 30.0];
        let y = [0.1, 0.12, 0.3, 0.9, 0.86, 0.95, 1.6, 1.9, 1.88];
        let w = [1.0, 1.2, 2.0, 0.5, 0.7, 0.6, 1.5, 1.0, 0.9];
        fn curve(p: &[f64]) -> Curve {
            match *p {
                [a, b, c, d] => Curve::FourPl { a, b, c, d },
                [a, b, c, d, g] => Curve::FivePl { a, b, c, d, g },
                _ => unreachable!(),
            }
        }
        fn check<const N: usize>(p: [f64; N], x: &[f64], y: &[f64], w: &[f64]) {
            let prob = LogisticProblem::new(x, y, Some(w));
            let mut sums = small_lm::NormalSums::<N>::default();
            prob.sums(&p, &mut sums).unwrap();
            let cost = |p: &[f64]| -> f64 {
                let c = curve(p);
                (0..x.len())
                    .map(|i| w[i] * (y[i] - c.signal_at(x[i])).powi(2))
                    .sum()
            };
            assert!((sums.cost - cost(&p)).abs() <= 1e-12 * cost(&p), "N={N}");
            let h = |j: usize| 1e-6 * p[j].abs().max(1e-3);
            let shifted = |j: usize, by: f64| {
                let mut q = p.to_vec();
                q[j] += by;
                q
            };
            for j in 0..N {
                let fd = (cost(&shifted(j, h(j))) - cost(&shifted(j, -h(j)))) / (2.0 * h(j));
                assert!(
                    (2.0 * sums.jtr[j] - fd).abs() <= 1e-6 * fd.abs().max(1e-6),
                    "N={N} j={j}: {} vs {fd}",
                    2.0 * sums.jtr[j]
                );
            }
            let grad = |i: usize, j: usize| {
                (curve(&shifted(j, h(j))).signal_at(x[i])
                    - curve(&shifted(j, -h(j))).signal_at(x[i]))
                    / (2.0 * h(j))
            };
            for j in 0..N {
                for k in 0..N {
                    let fd: f64 = (0..x.len()).map(|i| w[i] * grad(i, j) * grad(i, k)).sum();
                    assert!(
                        (sums.jtj[(j, k)] - fd).abs() <= 1e-6 * fd.abs().max(1e-6),
                        "N={N} ({j},{k}): {} vs {fd}",
                        sums.jtj[(j, k)]
                    );
                }
            }
        }
        check([0.05, 1.3, 4.0, 2.1], &x, &y, &w);
        check([0.05, 1.3, 4.0, 2.1, 0.7], &x, &y, &w);
        // A steep curve far in its tails (t = b ln(x/c) beyond ±700) stays finite.
        let prob = LogisticProblem::new(&x, &y, None);
        let mut sums = small_lm::NormalSums::<5>::default();
        prob.sums(&[0.05, 400.0, 4.0, 2.1, 0.7], &mut sums).unwrap();
        assert!(sums.cost.is_finite() && sums.jtj.iter().all(|v| v.is_finite()));
    }

    #[test]
    fn quadratic_inverse_takes_calibrated_branch() {
        // signal = 0.01 + 0.02 x − 0.0001 x², vertex at x = 100; calibrated 0..60.
        let q = Curve::Quadratic {
            c0: 0.01,
            c1: 0.02,
            c2: -0.0001,
        };
        let s = q.signal_at(40.0);
        assert!((q.conc_at(s, 30.0).unwrap() - 40.0).abs() < 1e-9);
        assert_eq!(q.conc_at(5.0, 30.0), None);
    }
}
