//! Plausible ranges: the values a lab can record, so that a typing slip or a damaged
//! file (a stability of 1e308 hours, an SD of 0) is refused with a message naming the
//! field and the range before anything is computed with it.
//!
//! The bounds are wide on purpose (common practice, not a standard): they only keep out
//! what no bench would write. Every number the engine computes with passes through one
//! of them, so the arithmetic after it (dates plus durations, z-scores) cannot overflow.

use serde_json::Value;

/// A closed or half-open range of a field, with its unit for the message.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Range {
    pub low: f64,
    /// Whether `low` itself is allowed (an SD of 0 is not).
    pub low_allowed: bool,
    pub high: f64,
    pub unit: &'static str,
}

impl Range {
    const fn closed(low: f64, high: f64, unit: &'static str) -> Range {
        Range {
            low,
            low_allowed: true,
            high,
            unit,
        }
    }
    const fn above(low: f64, high: f64, unit: &'static str) -> Range {
        Range {
            low,
            low_allowed: false,
            high,
            unit,
        }
    }

    pub fn contains(&self, v: f64) -> bool {
        v.is_finite() && (v > self.low || (self.low_allowed && v == self.low)) && v <= self.high
    }

    /// `Ok(v)` inside the range, else a message naming `field`, the value and the range.
    pub fn check(&self, field: &str, v: f64) -> Result<f64, String> {
        if self.contains(v) {
            return Ok(v);
        }
        let unit = if self.unit.is_empty() {
            String::new()
        } else {
            format!(" {}", self.unit)
        };
        let low = if self.low_allowed { "from" } else { "above" };
        let typed = if v.is_finite() && v.abs() < 1e9 {
            format!("{v}")
        } else {
            format!("{v:e}")
        };
        Err(format!(
            "{field}: {typed} is outside what this field can hold ({low} {} to {}{unit}); \
             check the number and type it again",
            show(self.low),
            show(self.high),
        ))
    }
}

/// A bound as people write it (10 000 000, not 1e7).
fn show(v: f64) -> String {
    if v.abs() >= 10_000.0 && v.fract() == 0.0 {
        let digits = format!("{}", v.abs() as u64);
        let mut out = String::new();
        for (k, c) in digits.chars().enumerate() {
            if k > 0 && (digits.len() - k) % 3 == 0 {
                out.push(' ');
            }
            out.push(c);
        }
        if v < 0.0 {
            format!("−{out}")
        } else {
            out
        }
    } else {
        format!("{v}")
    }
}

/// The largest magnitude of a measured value, a concentration, a target mean or an
/// absorbance (no photometric result or reading is this large).
pub const LARGEST_VALUE: f64 = 10_000_000.0;

/// Any measured value, concentration, mean or reading.
pub const VALUE: Range = Range::closed(-LARGEST_VALUE, LARGEST_VALUE, "");
/// A control's target SD, or a linearity limit: at least 0.000001 (a z-score divides by
/// it, so it must not be vanishingly small).
pub const SD: Range = Range::closed(1e-6, LARGEST_VALUE, "");
/// A stability: above 0, at most 10 years.
pub const STABILITY_HOURS: Range = Range::above(0.0, 87_600.0, "hours");
/// A stability as inserts state it.
pub const STABILITY_DAYS: Range = Range::above(0.0, 3_650.0, "days");
/// A reconstitution volume: control and calibrator vials take 1–20 mL (common
/// practice); our bound leaves room for any vial, never for a typing slip of 10 000.
pub const RECONSTITUTION_ML: Range = Range::above(0.0, 1_000.0, "mL");
/// A photometer's wavelength (ultraviolet to near infrared).
pub const WAVELENGTH_NM: Range = Range::closed(200.0, 1_100.0, "nm");
/// An allowable total error, in percent.
pub const ALLOWABLE_ERROR_PCT: Range = Range::above(0.0, 100.0, "%");
/// A bias, in percent.
pub const BIAS_PCT: Range = Range::closed(-100.0, 100.0, "%");
/// How long a calibration stays valid, in days (up to ten years; our bound).
pub const CALIBRATION_VALID_DAYS: Range = Range::closed(1.0, 3_650.0, "days");
/// QC runs a day's schedule asks for (one an hour at most; our bound).
pub const QC_RUNS_PER_DAY: Range = Range::closed(1.0, 24.0, "runs");
/// Frozen aliquots made at one time (our bound).
pub const ALIQUOTS_AT_ONCE: Range = Range::closed(1.0, 200.0, "aliquots");
/// A temperature a bench check can read.
pub const TEMPERATURE_C: Range = Range::closed(-90.0, 150.0, "°C");

/// The longest text a field may hold (a note, a name, a reason), in characters.
pub const LONGEST_TEXT: usize = 2_000;

/// Every number and string inside `value` (a record as JSON), checked against the
/// general bounds: numbers finite and within ±[`LARGEST_VALUE`] (counts and times of day
/// too), strings at most [`LONGEST_TEXT`] characters. Returns the first offending path
/// (`calibrators[2].absorbances[0]`) with the message.
pub fn check_json(value: &Value) -> Result<(), String> {
    fn walk(v: &Value, path: &mut String) -> Result<(), String> {
        match v {
            Value::Number(n) => {
                let x = n.as_f64().unwrap_or(f64::INFINITY);
                VALUE.check(path, x).map(|_| ())
            }
            Value::String(s) if s.chars().count() > LONGEST_TEXT => Err(format!(
                "{path}: a text of {} characters; at most {LONGEST_TEXT} are kept",
                s.chars().count()
            )),
            Value::Array(items) => {
                for (k, item) in items.iter().enumerate() {
                    let len = path.len();
                    path.push_str(&format!("[{k}]"));
                    walk(item, path)?;
                    path.truncate(len);
                }
                Ok(())
            }
            Value::Object(fields) => {
                for (name, item) in fields {
                    let len = path.len();
                    if !path.is_empty() {
                        path.push('.');
                    }
                    path.push_str(name);
                    walk(item, path)?;
                    path.truncate(len);
                }
                Ok(())
            }
            _ => Ok(()),
        }
    }
    walk(value, &mut String::new())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ranges_name_the_field_and_refuse_the_edges_that_are_out() {
        assert_eq!(SD.check("SD", 2.5), Ok(2.5));
        let e = SD.check("SD", 0.0).unwrap_err();
        assert!(
            e.starts_with("SD: 0 is outside") && e.contains("from 0.000001 to 10 000 000"),
            "{e}"
        );
        assert!(SD.check("SD", 1e-320).is_err());
        assert!(SD.check("SD", -1.0).is_err());
        assert!(STABILITY_HOURS.check("in_use_hours", 1e308).is_err());
        assert!(STABILITY_HOURS.check("in_use_hours", f64::NAN).is_err());
        assert!(STABILITY_HOURS.contains(87_600.0));
        assert!(!STABILITY_HOURS.contains(87_600.1));
        assert!(VALUE.contains(-LARGEST_VALUE) && !VALUE.contains(-1e7 - 1.0));
        assert!(WAVELENGTH_NM.check("wavelength", 340.0).is_ok());
        assert!(WAVELENGTH_NM
            .check("wavelength", 20.0)
            .unwrap_err()
            .contains("from 200 to 1100 nm"));
    }

    #[test]
    fn any_number_or_text_in_a_record_is_bounded() {
        let ok = serde_json::json!({"a": [1.5, {"b": -3}], "s": "x"});
        assert_eq!(check_json(&ok), Ok(()));
        let big = serde_json::json!({"stability": {"frozen": {"frozen_hours": 1e308}}});
        assert!(check_json(&big)
            .unwrap_err()
            .starts_with("stability.frozen.frozen_hours: 1e308"));
        let list = serde_json::json!({"calibrators": [{"absorbances": [0.1, 2e9]}]});
        assert!(check_json(&list)
            .unwrap_err()
            .starts_with("calibrators[0].absorbances[1]"));
        let long = serde_json::json!({"note": "x".repeat(LONGEST_TEXT + 1)});
        assert!(check_json(&long).unwrap_err().contains("at most 2000"));
    }
}
