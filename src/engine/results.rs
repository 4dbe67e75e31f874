//! Patient sample results: from a sample's readings, through the calibration in use,
//! to a result with its flags, or to the dilution that must be made instead.
//!
//! A result beyond the reportable range (the highest calibrator or the stated
//! linearity limit, whichever is lower) is never given as a number: the advice is the
//! dilution to make and repeat. A kinetic reading that is not linear, or shows the
//! substrate running out, is held too: its rate underestimates the activity. The
//! lab's procedures and qualified staff decide on release.

use serde::{Deserialize, Serialize};

use super::calibration::{ConcFlag, Curve, ReportableRange};
use super::readings::{
    self, dilution_for, flag, DilutionAdvice, Direction, KineticFlag, KineticPoint,
    KineticSettings, Limits, ReadingError, ResultFlag,
};

/// A sample's raw readings, by reading mode.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "mode", rename_all = "kebab-case")]
pub enum SampleReading {
    EndPoint {
        sample: f64,
        reagent_blank: f64,
        sample_blank: Option<f64>,
    },
    FixedTime {
        a_t1: f64,
        a_t2: f64,
        direction: Direction,
    },
    Kinetic {
        points: Vec<KineticPoint>,
        settings: KineticSettings,
    },
}

/// What to do with the result.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Disposition {
    /// A number within the reportable range (the lab decides on release).
    Report,
    /// Below the lowest calibrator: report as "less than" per the lab's policy.
    BelowRange,
    /// Dilute and repeat (above range, or a kinetic reading that ran out of substrate).
    DiluteAndRepeat,
    /// The reading cannot give a result (outside the curve, wrong direction): repeat.
    Repeat,
}

/// A sample's result.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SampleResult {
    /// The signal read off the curve (ΔA, |ΔA| or |ΔA/min|).
    pub signal: f64,
    /// Concentration or activity from the curve (also when it may not be reported).
    pub conc: Option<f64>,
    pub disposition: Disposition,
    /// H/L or critical flag of a reportable result.
    pub flag: Option<ResultFlag>,
    pub dilution: Option<DilutionAdvice>,
    /// Reasons in words.
    pub notes: Vec<String>,
}

/// Work out one sample.
pub fn sample_result(
    reading: &SampleReading,
    curve: &Curve,
    range: ReportableRange,
    reference: Limits,
    critical: Limits,
) -> Result<SampleResult, ReadingError> {
    let mut notes = Vec::new();
    let mut must_dilute = false;
    let mut must_repeat = false;
    let signal = match reading {
        SampleReading::EndPoint {
            sample,
            reagent_blank,
            sample_blank,
        } => readings::end_point_delta(*sample, *reagent_blank, *sample_blank)?,
        SampleReading::FixedTime {
            a_t1,
            a_t2,
            direction,
        } => {
            let f = readings::fixed_time(*a_t1, *a_t2, *direction)?;
            if f.wrong_direction {
                notes.push("the absorbance moved the wrong way for this test: repeat".to_string());
                must_repeat = true;
            }
            f.signal
        }
        SampleReading::Kinetic { points, settings } => {
            let k = readings::kinetic(points, settings)?;
            for f in &k.flags {
                notes.push(f.describe().to_string());
                match f {
                    KineticFlag::SubstrateExhaustion | KineticFlag::InitialAbsorbanceLow => {
                        must_dilute = true
                    }
                    KineticFlag::NotLinear | KineticFlag::WrongDirection => must_repeat = true,
                    KineticFlag::LagPhase | KineticFlag::LinearityNotChecked => {}
                }
            }
            k.delta_a_per_min.abs()
        }
    };
    let read = curve.read(signal, range);
    let conc = read.conc;
    let mut dilution = None;
    let disposition = match read.flag {
        Some(ConcFlag::NoSolution) => {
            notes.push("the signal is outside what the calibration curve covers".to_string());
            if conc.is_none() && signal > 0.0 {
                must_dilute = true;
            }
            if must_dilute {
                Disposition::DiluteAndRepeat
            } else {
                Disposition::Repeat
            }
        }
        Some(ConcFlag::AboveRange) => {
            dilution = conc.and_then(|c| dilution_for(c, range.high));
            notes.push(format!(
                "above the reportable range (up to {}): dilute and repeat",
                range.high
            ));
            Disposition::DiluteAndRepeat
        }
        _ if must_dilute => {
            // The rate underestimates a high activity: at least this much.
            dilution = conc.and_then(|c| dilution_for(c.max(range.high * 1.01), range.high));
            Disposition::DiluteAndRepeat
        }
        _ if must_repeat => Disposition::Repeat,
        Some(ConcFlag::BelowRange) => Disposition::BelowRange,
        None => Disposition::Report,
    };
    let flag = match (disposition, conc) {
        (Disposition::Report, Some(c)) => flag(c, reference, critical),
        // Below the lowest calibrator: the value is under range.low, so it is under any
        // limit at or above range.low.
        (Disposition::BelowRange, _) if critical.low.is_some_and(|l| l >= range.low) => {
            Some(ResultFlag::CriticalLow)
        }
        (Disposition::BelowRange, _) if reference.low.is_some_and(|l| l >= range.low) => {
            Some(ResultFlag::Low)
        }
        _ => None,
    };
    Ok(SampleResult {
        signal,
        conc,
        disposition,
        flag,
        dilution,
        notes,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    const GLU: Curve = Curve::Factor {
        factor: 100.0 / 0.420,
    };
    const RANGE: ReportableRange = ReportableRange {
        low: 0.0,
        high: 400.0,
    };
    const REF: Limits = Limits {
        low: Some(70.0),
        high: Some(110.0),
    };
    const CRIT: Limits = Limits {
        low: Some(40.0),
        high: Some(450.0),
    };

    fn end_point(sample: f64) -> SampleReading {
        SampleReading::EndPoint {
            sample,
            reagent_blank: 0.050,
            sample_blank: None,
        }
    }

    /// Worked arithmetic: ΔA 0.300 × F 238.1 = 71.4 mg/dL; 0.200 × F = 47.6 → L.
    #[test]
    fn end_point_results_with_flags() {
        let r = sample_result(&end_point(0.350), &GLU, RANGE, REF, CRIT).unwrap();
        assert_eq!(r.disposition, Disposition::Report);
        assert!((r.conc.unwrap() - 0.300 * 100.0 / 0.420).abs() < 1e-9);
        assert_eq!(r.flag, None);
        let r = sample_result(&end_point(0.250), &GLU, RANGE, REF, CRIT).unwrap();
        assert_eq!(r.flag, Some(ResultFlag::Low));
    }

    /// ΔA 2.05 → 488 mg/dL, above the 400 limit: not reported; dilute 1:2 (244 expected).
    #[test]
    fn above_range_is_not_reported_but_diluted() {
        let r = sample_result(&end_point(2.100), &GLU, RANGE, REF, CRIT).unwrap();
        assert_eq!(r.disposition, Disposition::DiluteAndRepeat);
        assert_eq!(r.flag, None);
        assert_eq!(r.dilution.unwrap().factor, 2);
    }

    #[test]
    fn kinetic_running_out_is_diluted() {
        let alt = Curve::Factor { factor: 1768.49 };
        let range = ReportableRange {
            low: 0.0,
            high: 500.0,
        };
        let pts = [(0.0, 1.20), (60.0, 1.12), (120.0, 1.06), (180.0, 1.04)]
            .iter()
            .map(|&(t_s, a)| KineticPoint { t_s, a })
            .collect();
        let reading = SampleReading::Kinetic {
            points: pts,
            settings: KineticSettings {
                direction: Some(Direction::Decreasing),
                ..Default::default()
            },
        };
        let r = sample_result(&reading, &alt, range, Limits::default(), Limits::default()).unwrap();
        assert_eq!(r.disposition, Disposition::DiluteAndRepeat);
        assert!(r.notes.iter().any(|n| n.contains("substrate exhaustion")));
        assert!(r.dilution.is_some());
    }

    #[test]
    fn wrong_direction_is_repeated() {
        let reading = SampleReading::FixedTime {
            a_t1: 0.40,
            a_t2: 0.35,
            direction: Direction::Increasing,
        };
        let r = sample_result(&reading, &GLU, RANGE, REF, CRIT).unwrap();
        assert_eq!(r.disposition, Disposition::Repeat);
    }
}
