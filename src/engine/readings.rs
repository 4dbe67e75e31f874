//! Results from photometer readings: end-point, fixed-time and kinetic signals, the
//! enzyme factor, dilution of high samples, and reference-interval / critical flags.
//!
//! * End-point: ΔA = A(sample) − A(reagent blank) − A(sample blank), the sample blank
//!   read against its own blank (so already net).
//! * Fixed-time: ΔA = A(t2) − A(t1). An increasing reaction must give ΔA > 0, a
//!   decreasing one ΔA < 0; the signal used for the result is |ΔA|, and a reaction that
//!   ran the wrong way is flagged, never silently turned round.
//! * Kinetic: ΔA/min is the least-squares slope of A against time over the measuring
//!   window. Each step between successive readings, as ΔA/min, is compared with that
//!   slope; the largest deviation in % decides linearity against the test's limit. A
//!   slow first step is a lag phase; slow last steps mean the substrate is running out.
//!   For decreasing NADH assays the first absorbance must stay above a floor, or the
//!   substrate was used up before the first reading.
//! * Enzyme factor (U/L per ΔA/min) = V_total · 10⁶ / (ε · d · V_sample), volumes in the
//!   same unit, d in cm, ε in L·mol⁻¹·cm⁻¹.

use serde::{Deserialize, Serialize};
use std::fmt;

/// Molar absorptivity of NADH at 340 nm, L·mol⁻¹·cm⁻¹ (widely tabulated; from memory).
pub const NADH_EPSILON_340: f64 = 6220.0;
/// NADH at 334 nm (Hg line), L·mol⁻¹·cm⁻¹ (widely tabulated; from memory).
pub const NADH_EPSILON_334: f64 = 6180.0;
/// NADH at 365 nm (Hg line), L·mol⁻¹·cm⁻¹ (widely tabulated; from memory).
pub const NADH_EPSILON_365: f64 = 3400.0;
/// The rounded value many reagent inserts use at 340 nm.
pub const NADH_EPSILON_340_INSERT: f64 = 6300.0;

/// A reading that cannot give a result, with what to do.
#[derive(Debug, Clone, PartialEq)]
pub struct ReadingError(pub String);

impl fmt::Display for ReadingError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for ReadingError {}

fn finite(name: &str, v: f64) -> Result<f64, ReadingError> {
    if v.is_finite() {
        Ok(v)
    } else {
        Err(ReadingError(format!("{name} must be a number")))
    }
}

/// End-point ΔA.
pub fn end_point_delta(
    sample: f64,
    reagent_blank: f64,
    sample_blank: Option<f64>,
) -> Result<f64, ReadingError> {
    let s = finite("sample absorbance", sample)?;
    let b = finite("reagent blank absorbance", reagent_blank)?;
    let sb = match sample_blank {
        Some(v) => finite("sample blank absorbance", v)?,
        None => 0.0,
    };
    Ok(s - b - sb)
}

/// Which way the absorbance moves in a fixed-time or kinetic test.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Direction {
    #[default]
    Increasing,
    Decreasing,
}

/// A fixed-time reading.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct FixedTimeSignal {
    /// A(t2) − A(t1), with its sign.
    pub delta_a: f64,
    /// |ΔA|, the signal for the calibration curve.
    pub signal: f64,
    /// The absorbance moved against the test's direction.
    pub wrong_direction: bool,
}

/// Fixed-time ΔA with the sign convention made explicit.
pub fn fixed_time(
    a_t1: f64,
    a_t2: f64,
    direction: Direction,
) -> Result<FixedTimeSignal, ReadingError> {
    let d = finite("A(t2)", a_t2)? - finite("A(t1)", a_t1)?;
    let wrong = match direction {
        Direction::Increasing => d < 0.0,
        Direction::Decreasing => d > 0.0,
    };
    Ok(FixedTimeSignal {
        delta_a: d,
        signal: d.abs(),
        wrong_direction: wrong,
    })
}

/// One kinetic reading: seconds from the start, absorbance.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct KineticPoint {
    pub t_s: f64,
    pub a: f64,
}

/// How a kinetic reading is judged.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct KineticSettings {
    /// Largest allowed deviation of a step from the slope, % (10 % is common practice;
    /// use the insert's value).
    pub linearity_limit_pct: f64,
    /// Only readings with window.0 ≤ t ≤ window.1 count.
    pub window_s: Option<(f64, f64)>,
    /// Expected direction, if known.
    pub direction: Option<Direction>,
    /// For decreasing NADH assays: the first absorbance must be at least this.
    pub initial_floor: Option<f64>,
}

impl Default for KineticSettings {
    fn default() -> Self {
        KineticSettings {
            linearity_limit_pct: 10.0,
            window_s: None,
            direction: None,
            initial_floor: None,
        }
    }
}

/// What a technologist should know about a kinetic reading.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum KineticFlag {
    /// Steps disagree beyond the limit.
    NotLinear,
    /// The first step is slow: the reaction had not reached its steady rate.
    LagPhase,
    /// The last steps are slow: substrate running out; dilute and repeat.
    SubstrateExhaustion,
    /// The first absorbance is below the floor: substrate used up before reading.
    InitialAbsorbanceLow,
    /// Absorbance moved against the test's direction.
    WrongDirection,
    /// Only two readings: one interval, nothing to compare it with.
    LinearityNotChecked,
}

impl KineticFlag {
    pub fn describe(self) -> &'static str {
        match self {
            KineticFlag::NotLinear => "the steps between readings disagree beyond the limit",
            KineticFlag::LagPhase => "lag phase: the first interval is slow; start reading later",
            KineticFlag::SubstrateExhaustion => {
                "substrate exhaustion: the rate falls off; dilute the sample and repeat"
            }
            KineticFlag::InitialAbsorbanceLow => {
                "first absorbance below the floor: the substrate was used up before the first \
                 reading; dilute the sample and repeat"
            }
            KineticFlag::WrongDirection => "the absorbance moved the wrong way for this test",
            KineticFlag::LinearityNotChecked => {
                "only two readings: linearity could not be checked; take 3 or more readings"
            }
        }
    }
}

/// A kinetic reading worked out.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct KineticResult {
    /// Least-squares slope, absorbance per minute, with its sign.
    pub delta_a_per_min: f64,
    /// Each step as ΔA/min.
    pub steps_per_min: Vec<f64>,
    /// Largest |step − slope| / |slope| × 100; `None` when the slope is 0.
    pub max_step_deviation_pct: Option<f64>,
    pub linear: bool,
    pub flags: Vec<KineticFlag>,
    /// Readings used (inside the window).
    pub readings_used: usize,
}

/// Work out a kinetic reading.
pub fn kinetic(
    points: &[KineticPoint],
    settings: &KineticSettings,
) -> Result<KineticResult, ReadingError> {
    for (i, p) in points.iter().enumerate() {
        if !p.t_s.is_finite() || !p.a.is_finite() {
            return Err(ReadingError(format!(
                "readings[{i}]: t_s and a must be numbers"
            )));
        }
        if i > 0 && p.t_s <= points[i - 1].t_s {
            return Err(ReadingError(format!(
                "readings[{i}].t_s ({}) is not after the reading before it; list readings in time order",
                p.t_s
            )));
        }
    }
    if !(settings.linearity_limit_pct.is_finite() && settings.linearity_limit_pct > 0.0) {
        return Err(ReadingError(
            "linearity_limit_pct must be a number above 0".into(),
        ));
    }
    let used: Vec<KineticPoint> = points
        .iter()
        .copied()
        .filter(|p| {
            settings
                .window_s
                .is_none_or(|(lo, hi)| p.t_s >= lo && p.t_s <= hi)
        })
        .collect();
    if used.len() < 2 {
        return Err(ReadingError(format!(
            "a kinetic result needs at least 2 readings in the measuring window (3 or more to \
             check linearity); {} given",
            used.len()
        )));
    }
    let n = used.len() as f64;
    let tbar = used.iter().map(|p| p.t_s).sum::<f64>() / n;
    let abar = used.iter().map(|p| p.a).sum::<f64>() / n;
    let sxx: f64 = used.iter().map(|p| (p.t_s - tbar).powi(2)).sum();
    let sxy: f64 = used.iter().map(|p| (p.t_s - tbar) * (p.a - abar)).sum();
    let slope = sxy / sxx * 60.0;
    let steps: Vec<f64> = used
        .windows(2)
        .map(|w| (w[1].a - w[0].a) / (w[1].t_s - w[0].t_s) * 60.0)
        .collect();
    let deviations: Option<Vec<f64>> = (slope != 0.0).then(|| {
        steps
            .iter()
            .map(|s| (s - slope) / slope.abs() * 100.0)
            .collect()
    });
    let max_dev = deviations
        .as_ref()
        .map(|d| d.iter().fold(0.0_f64, |m, v| m.max(v.abs())));
    let limit = settings.linearity_limit_pct;
    let linear = match max_dev {
        Some(d) => d <= limit,
        None => steps.iter().all(|s| *s == 0.0),
    };
    let mut flags = Vec::new();
    if used.len() == 2 {
        flags.push(KineticFlag::LinearityNotChecked);
    }
    if !linear {
        flags.push(KineticFlag::NotLinear);
    }
    if let Some(dev) = &deviations {
        // Deviation of each step's magnitude from the slope's, in %: negative = slower.
        let slower: Vec<f64> = steps
            .iter()
            .map(|s| (s.abs() - slope.abs()) / slope.abs() * 100.0)
            .collect();
        let k = slower.len();
        let rest_max = dev[1..].iter().fold(0.0_f64, |m, v| m.max(v.abs()));
        if slower[0] < -limit && rest_max < slower[0].abs() {
            flags.push(KineticFlag::LagPhase);
        }
        if slower[k - 1] < -limit && steps[k - 1].abs() < steps[0].abs() {
            flags.push(KineticFlag::SubstrateExhaustion);
        }
    }
    if let Some(dir) = settings.direction {
        let wrong = match dir {
            Direction::Increasing => slope < 0.0,
            Direction::Decreasing => slope > 0.0,
        };
        if wrong {
            flags.push(KineticFlag::WrongDirection);
        }
        if dir == Direction::Decreasing {
            if let Some(floor) = settings.initial_floor {
                if used[0].a < floor {
                    flags.push(KineticFlag::InitialAbsorbanceLow);
                }
            }
        }
    }
    Ok(KineticResult {
        delta_a_per_min: slope,
        steps_per_min: steps,
        max_step_deviation_pct: max_dev,
        linear,
        flags,
        readings_used: used.len(),
    })
}

/// Enzyme factor: U/L per ΔA/min.
pub fn enzyme_factor(
    total_volume: f64,
    sample_volume: f64,
    path_cm: f64,
    epsilon: f64,
) -> Result<f64, ReadingError> {
    for (name, v) in [
        ("total_volume_ml", total_volume),
        ("sample_volume_ml", sample_volume),
        ("path_cm", path_cm),
        ("epsilon", epsilon),
    ] {
        if !(v.is_finite() && v > 0.0) {
            return Err(ReadingError(format!(
                "{name} must be a number above 0 (it is {v})"
            )));
        }
    }
    if sample_volume > total_volume {
        return Err(ReadingError(
            "sample_volume_ml is larger than total_volume_ml: the total includes the sample".into(),
        ));
    }
    Ok(total_volume * 1e6 / (epsilon * path_cm * sample_volume))
}

/// Dilution factors a bench usually makes (common practice).
pub const DILUTIONS: [u32; 7] = [2, 3, 5, 10, 20, 50, 100];

/// Advice for a result above the linearity limit.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct DilutionAdvice {
    /// Dilute 1 + (factor − 1): e.g. factor 5 = 1 part sample + 4 parts diluent.
    pub factor: u32,
    /// The reading expected in the diluted sample.
    pub expected_reading: f64,
}

/// The smallest usual dilution that brings `estimate` under 80 % of the linearity
/// limit (a margin of common practice). `None` if no dilution is needed, or even 1:100
/// is not enough (then say so to the user: dilute in steps).
pub fn dilution_for(estimate: f64, linearity_limit: f64) -> Option<DilutionAdvice> {
    if !(estimate.is_finite() && linearity_limit > 0.0) || estimate <= linearity_limit {
        return None;
    }
    DILUTIONS
        .iter()
        .find(|&&f| estimate / f as f64 <= 0.8 * linearity_limit)
        .map(|&f| DilutionAdvice {
            factor: f,
            expected_reading: estimate / f as f64,
        })
}

/// The result of a diluted sample: the reading times the dilution factor.
pub fn undiluted(measured: f64, factor: f64) -> Result<f64, ReadingError> {
    if !(factor.is_finite() && factor >= 1.0) {
        return Err(ReadingError(format!(
            "dilution factor must be 1 or more (it is {factor})"
        )));
    }
    Ok(finite("diluted result", measured)? * factor)
}

/// A limit pair; either side may be absent.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, Deserialize)]
pub struct Limits {
    pub low: Option<f64>,
    pub high: Option<f64>,
}

/// Result flags against the reference interval and the critical limits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ResultFlag {
    /// Below the reference interval (L).
    Low,
    /// Above the reference interval (H).
    High,
    /// Below the critical limit: tell the clinician now, per the lab's procedure.
    CriticalLow,
    CriticalHigh,
}

impl ResultFlag {
    pub fn letter(self) -> &'static str {
        match self {
            ResultFlag::Low => "L",
            ResultFlag::High => "H",
            ResultFlag::CriticalLow => "LL",
            ResultFlag::CriticalHigh => "HH",
        }
    }
}

/// Flag a result; critical limits win over the reference interval.
pub fn flag(value: f64, reference: Limits, critical: Limits) -> Option<ResultFlag> {
    if critical.low.is_some_and(|l| value < l) {
        Some(ResultFlag::CriticalLow)
    } else if critical.high.is_some_and(|h| value > h) {
        Some(ResultFlag::CriticalHigh)
    } else if reference.low.is_some_and(|l| value < l) {
        Some(ResultFlag::Low)
    } else if reference.high.is_some_and(|h| value > h) {
        Some(ResultFlag::High)
    } else {
        None
    }
}

/// `x` to `decimals` places (with a sign when `signed`); a value that rounds to zero is
/// shown as zero, never "-0.0" (a water blank of −0.00004 is zero, a z of −0.04 is 0).
pub fn fixed(x: f64, decimals: usize, signed: bool) -> String {
    let x = if format!("{:.*}", decimals, x.abs())
        .bytes()
        .all(|b| b == b'0' || b == b'.')
    {
        0.0
    } else {
        x
    };
    if signed {
        format!("{x:+.decimals$}")
    } else {
        format!("{x:.decimals$}")
    }
}

/// An absorbance as the photometer shows it, to 4 decimals.
pub fn absorbance_text(a: f64) -> String {
    fixed(a, 4, false)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pts(v: &[(f64, f64)]) -> Vec<KineticPoint> {
        v.iter().map(|&(t_s, a)| KineticPoint { t_s, a }).collect()
    }

    #[test]
    fn end_point_and_fixed_time_arithmetic() {
        assert!((end_point_delta(0.512, 0.045, Some(0.020)).unwrap() - 0.447).abs() < 1e-12);
        let f = fixed_time(0.300, 0.420, Direction::Increasing).unwrap();
        assert!((f.signal - 0.120).abs() < 1e-12 && !f.wrong_direction);
        let f = fixed_time(0.300, 0.420, Direction::Decreasing).unwrap();
        assert!(f.wrong_direction);
        assert!(end_point_delta(f64::NAN, 0.0, None).is_err());
    }

    #[test]
    fn kinetic_flags() {
        // Decreasing NADH: steady −0.050/min.
        let steady = pts(&[(0.0, 1.500), (60.0, 1.450), (120.0, 1.400), (180.0, 1.350)]);
        let s = KineticSettings {
            direction: Some(Direction::Decreasing),
            initial_floor: Some(1.0),
            ..Default::default()
        };
        let r = kinetic(&steady, &s).unwrap();
        assert!((r.delta_a_per_min + 0.05).abs() < 1e-12);
        assert!(r.linear && r.flags.is_empty(), "{:?}", r.flags);
        // Running out: steps −0.08, −0.06, −0.02.
        let exhausted = pts(&[(0.0, 1.20), (60.0, 1.12), (120.0, 1.06), (180.0, 1.04)]);
        let r = kinetic(&exhausted, &s).unwrap();
        assert!(!r.linear);
        assert!(
            r.flags.contains(&KineticFlag::SubstrateExhaustion),
            "{:?}",
            r.flags
        );
        // Started low.
        let low = pts(&[(0.0, 0.80), (60.0, 0.75), (120.0, 0.70), (180.0, 0.65)]);
        assert!(kinetic(&low, &s)
            .unwrap()
            .flags
            .contains(&KineticFlag::InitialAbsorbanceLow));
        // Lag: first step slow, the rest steady.
        let lag = pts(&[
            (0.0, 1.50),
            (60.0, 1.49),
            (120.0, 1.44),
            (180.0, 1.39),
            (240.0, 1.34),
        ]);
        let r = kinetic(&lag, &s).unwrap();
        assert!(r.flags.contains(&KineticFlag::LagPhase), "{:?}", r.flags);
        // Window drops the lag reading: linear again.
        let w = KineticSettings {
            window_s: Some((60.0, 240.0)),
            ..s
        };
        assert!(kinetic(&lag, &w).unwrap().linear);
        let two = kinetic(&pts(&[(0.0, 1.5), (60.0, 1.45)]), &s).unwrap();
        assert!(two.flags.contains(&KineticFlag::LinearityNotChecked));
        assert!(kinetic(&pts(&[(0.0, 1.5)]), &s).is_err());
        let e = kinetic(&pts(&[(0.0, 1.0), (0.0, 0.9), (60.0, 0.8)]), &s).unwrap_err();
        assert!(e.0.contains("readings[1]"), "{}", e.0);
    }

    /// Worked arithmetic: 1.1 mL total, 0.1 mL sample, 1 cm, ε 6220 → 1.1e6 / 622 =
    /// 1768.49 U/L per ΔA/min (the "about 1768" of NADH-linked assays).
    #[test]
    fn enzyme_factor_worked_example() {
        let f = enzyme_factor(1.1, 0.1, 1.0, NADH_EPSILON_340).unwrap();
        assert!((f - 1_100_000.0 / 622.0).abs() < 1e-9);
        assert!((f - 1768.49).abs() < 0.01);
        assert!(enzyme_factor(1.0, 0.0, 1.0, 6220.0)
            .unwrap_err()
            .0
            .contains("sample_volume_ml"));
    }

    #[test]
    fn dilution_and_flags() {
        let d = dilution_for(1150.0, 500.0).unwrap();
        assert_eq!(d.factor, 3);
        assert_eq!(dilution_for(400.0, 500.0), None);
        assert_eq!(undiluted(212.0, 5.0).unwrap(), 1060.0);
        let reference = Limits {
            low: Some(70.0),
            high: Some(110.0),
        };
        let critical = Limits {
            low: Some(40.0),
            high: Some(450.0),
        };
        assert_eq!(flag(65.0, reference, critical), Some(ResultFlag::Low));
        assert_eq!(
            flag(35.0, reference, critical),
            Some(ResultFlag::CriticalLow)
        );
        assert_eq!(
            flag(500.0, reference, critical),
            Some(ResultFlag::CriticalHigh)
        );
        assert_eq!(flag(90.0, reference, critical), None);
    }

    #[test]
    fn an_absorbance_near_zero_is_shown_without_a_minus_sign() {
        assert_eq!(absorbance_text(-0.0), "0.0000");
        assert_eq!(absorbance_text(-0.00004), "0.0000");
        assert_eq!(absorbance_text(-0.0004), "-0.0004");
        assert_eq!(absorbance_text(0.5124), "0.5124");
        assert_eq!(fixed(-0.04, 1, true), "+0.0");
        assert_eq!(fixed(-1.26, 1, true), "-1.3");
        assert_eq!(fixed(1.25, 1, true), "+1.2");
    }
}
