//! Reading what a technologist types at the bench: lists of absorbances and calibrator
//! lines. Plain Rust, tested natively; the UI shows the messages as they are.
//!
//! Numbers are separated by spaces, semicolons or ", " (comma and space). A number
//! with a single comma and no point is read with a decimal comma ("0,512"), since
//! many labs write decimals that way; "0.1,0.2" is two numbers.

/// Numbers in `text`, each within the general bound of `engine::plausible::VALUE`;
/// `what` names the field in messages.
pub fn numbers(text: &str, what: &str) -> Result<Vec<f64>, String> {
    parse(text, what)?
        .into_iter()
        .map(|v| crate::engine::plausible::VALUE.check(what, v))
        .collect()
}

/// Numbers in `text` as typed (finite), before any range.
fn parse(text: &str, what: &str) -> Result<Vec<f64>, String> {
    let mut out = Vec::new();
    for token in text
        .split(|c: char| c.is_whitespace() || c == ';')
        .filter(|t| !t.is_empty())
    {
        let parts: Vec<String> =
            if token.contains(',') && !token.contains('.') && token.matches(',').count() == 1 {
                vec![token.replace(',', ".")]
            } else {
                token
                    .split(',')
                    .filter(|p| !p.is_empty())
                    .map(str::to_string)
                    .collect()
            };
        for p in parts {
            let v: f64 = p.parse().map_err(|_| {
                format!(
                    "{what}: {p:?} is not a number; write numbers like 0.512 separated by spaces"
                )
            })?;
            if !v.is_finite() {
                return Err(format!("{what}: {p:?} is not a finite number"));
            }
            out.push(v);
        }
    }
    Ok(out)
}

/// Calibrator lines: "concentration  absorbance absorbance …", one calibrator per line
/// (a ':' after the concentration is allowed). Empty lines are skipped.
pub fn calibrator_lines(text: &str) -> Result<Vec<(f64, Vec<f64>)>, String> {
    let mut out = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() {
            continue;
        }
        let what = format!("calibrator line {}", i + 1);
        let v = numbers(&line.replace(':', " "), &what)?;
        if v.len() < 2 {
            return Err(format!(
                "{what}: give the concentration, then at least one absorbance (e.g. \"100: 0.412 0.415\")"
            ));
        }
        if v[0] < 0.0 {
            return Err(format!("{what}: the concentration {} is below 0", v[0]));
        }
        out.push((v[0], v[1..].to_vec()));
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_in_the_ways_people_write_them() {
        let cases: [(&str, &[f64]); 6] = [
            ("0.512 0.515", &[0.512, 0.515]),
            ("0,512; 0,515", &[0.512, 0.515]),
            ("0.1,0.2", &[0.1, 0.2]),
            ("0.1, 0.2\t0.3", &[0.1, 0.2, 0.3]),
            ("  ", &[]),
            ("1e-3", &[0.001]),
        ];
        for (text, want) in cases {
            assert_eq!(numbers(text, "x").unwrap(), want, "{text:?}");
        }
        let e = numbers("0.5 abc", "reagent blank").unwrap_err();
        assert!(
            e.starts_with("reagent blank") && e.contains("\"abc\""),
            "{e}"
        );
    }

    #[test]
    fn sample_lines_keep_their_ids() {
        let s = sample_lines("S-101 0.412\nS-102 0,233 0,251\n").unwrap();
        assert_eq!(
            s,
            vec![
                ("S-101".into(), vec![0.412]),
                ("S-102".into(), vec![0.233, 0.251])
            ]
        );
        assert!(sample_lines("S-103").unwrap_err().contains("S-103"));
    }

    #[test]
    fn calibrator_lines_and_their_errors() {
        let c = calibrator_lines("0: 0.041 0.043\n\n100: 0,412 0,415\n").unwrap();
        assert_eq!(
            c,
            vec![(0.0, vec![0.041, 0.043]), (100.0, vec![0.412, 0.415])]
        );
        assert!(calibrator_lines("100").unwrap_err().contains("line 1"));
        assert!(calibrator_lines("1 0.1\n-5 0.2")
            .unwrap_err()
            .contains("line 2"));
    }
}

/// Sample lines: "sample-id reading reading …", one sample per line.
pub fn sample_lines(text: &str) -> Result<Vec<(String, Vec<f64>)>, String> {
    let mut out = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() {
            continue;
        }
        let (id, rest) = line.split_once(char::is_whitespace).unwrap_or((line, ""));
        let what = format!("sample line {} ({id})", i + 1);
        let v = numbers(rest, &what)?;
        if v.is_empty() {
            return Err(format!(
                "{what}: give the sample id, then its absorbance reading(s)"
            ));
        }
        out.push((id.to_string(), v));
    }
    Ok(out)
}

/// A material opened or reconstituted now, as typed in the materials form. Stabilities
/// are typed in days (as inserts state them) and kept in hours.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct MaterialForm {
    /// "reagent", "calibrator" or "control".
    pub kind: String,
    pub name: String,
    pub lot: String,
    /// "2027-03" or "2027-03-31".
    pub expiry: String,
    pub in_use_days: String,
    /// "ALT 5; Bilirubin 2": analytes with their own, shorter stability in days.
    pub analytes: String,
    /// Received into stock, not opened yet (opened later from the materials list).
    pub received_only: bool,
    /// Reconstituted now: the diluent's volume in mL (empty: not reconstituted), the
    /// diluent and its lot.
    pub volume_ml: String,
    pub diluent: String,
    pub diluent_lot: String,
}

impl MaterialForm {
    /// The material record, opened at `opened_at` (or only received then).
    pub fn into_material(
        self,
        meta: crate::lab::RecordMeta,
        opened_at: chrono::DateTime<chrono::Utc>,
    ) -> Result<crate::lab::MaterialRecord, String> {
        use crate::engine::plausible::STABILITY_DAYS;
        use crate::engine::stability::{AnalyteStability, ExpiryDate, Material};
        use crate::lab::MaterialKind;
        let kind = match self.kind.as_str() {
            "reagent" => MaterialKind::Reagent,
            "calibrator" => MaterialKind::Calibrator,
            "control" => MaterialKind::Control,
            k => {
                return Err(format!(
                    "kind: {k:?}; choose reagent, calibrator or control"
                ))
            }
        };
        let name = self.name.trim().to_string();
        if name.is_empty() {
            return Err("name: say which material, e.g. Glucose reagent R1".into());
        }
        let expiry: ExpiryDate = self.expiry.parse().map_err(|e| format!("expiry: {e}"))?;
        let in_use_days = one_number(&self.in_use_days, "stability after opening")?
            .ok_or("stability after opening: give the days from the insert, a number above 0")?;
        STABILITY_DAYS.check("stability after opening", in_use_days)?;
        let mut analytes = Vec::new();
        for part in self
            .analytes
            .split(';')
            .map(str::trim)
            .filter(|p| !p.is_empty())
        {
            let (analyte, days) = part.rsplit_once(char::is_whitespace).ok_or_else(|| {
                format!("analytes: {part:?}; write the analyte and its days, e.g. \"ALT 5\"")
            })?;
            let what = format!("analytes: {analyte}");
            let days = one_number(days, &what)?
                .ok_or_else(|| format!("{what}: give its days, a number above 0"))?;
            STABILITY_DAYS.check(&what, days)?;
            analytes.push(AnalyteStability {
                analyte: analyte.trim().to_string(),
                in_use_hours: Some(days * 24.0),
                after_thaw_hours: None,
            });
        }
        let reconstitution = match one_number(&self.volume_ml, "reconstitution volume")? {
            None if self.diluent.trim().is_empty() && self.diluent_lot.trim().is_empty() => None,
            None => {
                return Err(
                    "reconstitution volume: give the mL of diluent added, or clear the diluent"
                        .into(),
                )
            }
            Some(_) if self.received_only => {
                return Err("reconstitution: a material received but not opened is not \
                            reconstituted yet; record it when it is opened"
                    .into())
            }
            Some(ml) => {
                crate::engine::plausible::RECONSTITUTION_ML.check("reconstitution volume", ml)?;
                let diluent = self.diluent.trim().to_string();
                if diluent.is_empty() {
                    return Err(
                        "diluent: say what was added, e.g. distilled water or the maker's diluent"
                            .into(),
                    );
                }
                Some(crate::lab::Reconstitution {
                    volume_ml: ml,
                    diluent,
                    diluent_lot: self.diluent_lot.trim().to_string(),
                })
            }
        };
        Ok(crate::lab::MaterialRecord {
            meta,
            kind,
            name,
            lot: self.lot.trim().to_string(),
            reconstitution,
            discarded: None,
            stability: Material {
                expiry,
                opened_at: (!self.received_only).then_some(opened_at),
                in_use_hours: Some(in_use_days * 24.0),
                on_board_since: None,
                on_board_hours: None,
                frozen: None,
                analytes,
            },
        })
    }
}

/// The instrument check intervals as typed in Set-up, one text per
/// [`crate::lab::SCHEDULABLE_CHECKS`] entry: whole days from 1 to 366, empty for not
/// scheduled.
pub fn check_schedule(texts: &[String]) -> Result<Vec<crate::lab::CheckSchedule>, String> {
    let mut out = Vec::new();
    for (event, text) in crate::lab::SCHEDULABLE_CHECKS.iter().zip(texts) {
        let text = text.trim();
        if text.is_empty() {
            continue;
        }
        let name = event.words().split(" (").next().unwrap_or(event.words());
        let days: u32 = text
            .parse()
            .ok()
            .filter(|d| (1..=366).contains(d))
            .ok_or_else(|| {
                format!("{name}: give whole days from 1 to 366, or leave it empty (got {text:?})")
            })?;
        out.push(crate::lab::CheckSchedule {
            event: *event,
            every_days: days,
        });
    }
    Ok(out)
}

/// Frozen aliquots to make, as typed: how many (1–200), days stable frozen, hours stable
/// after thawing → (count, frozen hours, after-thaw hours); the stability engine checks
/// the hours' range.
pub fn aliquot_plan(
    count: &str,
    frozen_days: &str,
    thaw_hours: &str,
) -> Result<(usize, f64, f64), String> {
    use crate::engine::plausible::ALIQUOTS_AT_ONCE;
    let n = whole_number(count, "aliquots", ALIQUOTS_AT_ONCE)?
        .ok_or("aliquots: how many to freeze, e.g. 10")?;
    let days = one_number(frozen_days, "days frozen")?
        .ok_or("days frozen: the stability while frozen, from the insert")?;
    let hours = one_number(thaw_hours, "hours after thawing")?
        .ok_or("hours after thawing: the stability once thawed, from the insert")?;
    Ok((n as usize, days * 24.0, hours))
}

/// The lab's absorbance standards, one per line: "name; nm; expected; tolerance"
/// (blank lines skipped). Names are unique; each number is checked for its range.
pub fn absorbance_standards(text: &str) -> Result<Vec<crate::lab::AbsorbanceStandard>, String> {
    use crate::engine::plausible::WAVELENGTH_NM;
    let mut out: Vec<crate::lab::AbsorbanceStandard> = Vec::new();
    for (i, line) in text
        .lines()
        .enumerate()
        .filter(|(_, l)| !l.trim().is_empty())
    {
        let at = format!("standard line {}", i + 1);
        let f: Vec<&str> = line.split(';').map(str::trim).collect();
        let [name, nm, expected, tolerance] = f[..] else {
            return Err(format!(
                "{at}: write name; nm; expected absorbance; tolerance, e.g. grey filter; 340; 0.500; 0.010"
            ));
        };
        if name.is_empty() || name.chars().count() > 60 {
            return Err(format!(
                "{at}: give the standard a name of up to 60 characters"
            ));
        }
        if out.iter().any(|s| s.name == name) {
            return Err(format!(
                "{at}: {name:?} is listed twice; give each standard its own name"
            ));
        }
        let one = |t: &str, what: &str| -> Result<f64, String> {
            one_number(t, &format!("{at}: {what}"))?.ok_or(format!("{at}: {what}: give a number"))
        };
        let wavelength_nm =
            WAVELENGTH_NM.check(&format!("{at}: wavelength"), one(nm, "wavelength")?)?;
        let expected = one(expected, "expected absorbance")?;
        if !(-0.5..=4.0).contains(&expected) {
            return Err(format!("{at}: expected absorbance: between -0.5 and 4"));
        }
        let tolerance = one(tolerance, "tolerance")?;
        if !(tolerance > 0.0 && tolerance <= 1.0) {
            return Err(format!(
                "{at}: tolerance: above 0 and at most 1 absorbance unit"
            ));
        }
        out.push(crate::lab::AbsorbanceStandard {
            name: name.to_string(),
            wavelength_nm,
            expected,
            tolerance,
        });
    }
    Ok(out)
}

/// The standards as the set-up field shows them (what [`absorbance_standards`] reads).
pub fn absorbance_standards_text(list: &[crate::lab::AbsorbanceStandard]) -> String {
    list.iter()
        .map(|s| {
            format!(
                "{}; {}; {:.3}; {:.3}",
                s.name, s.wavelength_nm, s.expected, s.tolerance
            )
        })
        .collect::<Vec<_>>()
        .join("\n")
}

/// What the set-up form for a new test holds, as typed.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct TestForm {
    pub code: String,
    pub name: String,
    pub unit: String,
    pub mode: String,
    pub model: String,
    pub wavelength_nm: String,
    pub linearity_limit: String,
    /// Allowable total error, % (optional).
    pub allowable_error_pct: String,
    /// Bias from an external scheme, % (optional).
    pub external_bias_pct: String,
    /// Days a calibration stays valid (optional).
    pub calibration_valid_days: String,
    /// QC runs a day (optional; once a day when empty).
    pub qc_runs_per_day: String,
}

/// A whole number in a range, or none.
fn whole_number(
    text: &str,
    what: &str,
    range: crate::engine::plausible::Range,
) -> Result<Option<u32>, String> {
    match one_number(text, what)? {
        None => Ok(None),
        Some(v) => {
            range.check(what, v)?;
            if v.fract() != 0.0 {
                return Err(format!(
                    "{what}: a whole number from {} to {}",
                    range.low, range.high
                ));
            }
            Ok(Some(v as u32))
        }
    }
}

/// One number or none; the caller checks the field's own range.
fn one_number(text: &str, what: &str) -> Result<Option<f64>, String> {
    let v = parse(text, what)?;
    match v.as_slice() {
        [] => Ok(None),
        [x] => Ok(Some(*x)),
        _ => Err(format!("{what}: one number only")),
    }
}

impl TestForm {
    /// A new test from the form, or what to correct. Codes are unique in a lab.
    pub fn into_test(
        self,
        lab: &crate::lab::Lab,
        meta: crate::lab::RecordMeta,
    ) -> Result<crate::lab::TestSetup, String> {
        use crate::engine::calibration::ModelKind;
        use crate::engine::plausible;
        use crate::lab::ReadingMode;
        let code = self.code.trim().to_uppercase();
        if code.is_empty() || code.len() > 8 {
            return Err("code: give a short code of 1 to 8 characters, e.g. GLU".into());
        }
        if lab.tests.iter().any(|t| t.code == code) {
            return Err(format!(
                "code: {code} is already set up; choose another code"
            ));
        }
        let name = self.name.trim().to_string();
        if name.is_empty() {
            return Err("name: give the test's name, e.g. Glucose (GOD-PAP)".into());
        }
        let unit = self.unit.trim().to_string();
        if unit.is_empty() {
            return Err("unit: give the result unit, e.g. mg/dL or U/L".into());
        }
        let mode = match self.mode.as_str() {
            "end-point" => ReadingMode::EndPoint,
            "fixed-time" => ReadingMode::FixedTime,
            "kinetic" => ReadingMode::Kinetic,
            other => {
                return Err(format!(
                    "reading: {other:?}; choose end-point, fixed-time or kinetic"
                ))
            }
        };
        let model = ModelKind::from_code(&self.model)
            .ok_or_else(|| format!("calibration: {:?} is not a model", self.model))?;
        let wavelength_nm = one_number(&self.wavelength_nm, "wavelength")?
            .ok_or("wavelength: give the filter or wavelength in nm, between 200 and 1100")?;
        plausible::WAVELENGTH_NM.check("wavelength", wavelength_nm)?;
        let linearity_limit = one_number(&self.linearity_limit, "linearity limit")?;
        if let Some(l) = linearity_limit {
            plausible::SD
                .check("linearity limit", l)
                .map_err(|e| format!("{e} (or leave it empty)"))?;
        }
        let allowable_error_pct = one_number(&self.allowable_error_pct, "allowable total error")?;
        if let Some(v) = allowable_error_pct {
            plausible::ALLOWABLE_ERROR_PCT.check("allowable total error", v)?;
        }
        let external_bias_pct = one_number(&self.external_bias_pct, "external bias")?;
        if let Some(v) = external_bias_pct {
            plausible::BIAS_PCT.check("external bias", v)?;
        }
        let calibration_valid_days = whole_number(
            &self.calibration_valid_days,
            "calibration valid for",
            plausible::CALIBRATION_VALID_DAYS,
        )?;
        let qc_runs_per_day = whole_number(
            &self.qc_runs_per_day,
            "QC runs a day",
            plausible::QC_RUNS_PER_DAY,
        )?;
        Ok(crate::lab::TestSetup {
            meta,
            code,
            name,
            unit,
            mode,
            model,
            weighting: Default::default(),
            wavelength_nm,
            linearity_limit,
            qc_rules: crate::lab::default_qc_rules(),
            acceptance: Default::default(),
            replicates: Default::default(),
            reference: Default::default(),
            critical: Default::default(),
            direction: Default::default(),
            allowable_error_pct,
            external_bias_pct,
            calibration_valid_days,
            qc_runs_per_day,
        })
    }
}

/// A new control level of a test, as typed.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct LevelForm {
    pub name: String,
    pub lot: String,
    pub mean: String,
    pub sd: String,
}

impl LevelForm {
    pub fn into_level(
        self,
        test_id: &str,
        meta: crate::lab::RecordMeta,
    ) -> Result<crate::lab::ControlLevel, String> {
        let name = self.name.trim().to_string();
        if name.is_empty() {
            return Err("level: give its name, e.g. Normal or Level 1".into());
        }
        let mean = one_number(&self.mean, "mean")?
            .ok_or("mean: give the target mean (from the insert until the lab has its own)")?;
        crate::engine::plausible::VALUE.check("mean", mean)?;
        let sd = one_number(&self.sd, "SD")?.ok_or("SD: give the target SD, a number above 0")?;
        crate::engine::plausible::SD.check("SD", sd)?;
        Ok(crate::lab::ControlLevel {
            meta,
            test_id: test_id.to_string(),
            name,
            lot: self.lot.trim().to_string(),
            mean,
            sd,
        })
    }
}

#[cfg(test)]
mod form_tests {
    use super::*;
    use crate::lab::{Lab, RecordMeta};

    fn meta() -> RecordMeta {
        RecordMeta::new([1; 16], chrono::DateTime::UNIX_EPOCH, "ab")
    }

    fn form() -> TestForm {
        TestForm {
            code: "glu".into(),
            name: "Glucose".into(),
            unit: "mg/dL".into(),
            mode: "end-point".into(),
            model: "factor".into(),
            wavelength_nm: "505".into(),
            linearity_limit: "400".into(),
            ..Default::default()
        }
    }

    #[test]
    fn a_test_form_becomes_a_test_or_says_what_to_fix() {
        let mut lab = Lab::empty("x");
        let t = form().into_test(&lab, meta()).unwrap();
        assert_eq!(
            (t.code.as_str(), t.wavelength_nm, t.linearity_limit),
            ("GLU", 505.0, Some(400.0))
        );
        lab.tests.push(t);
        assert!(form()
            .into_test(&lab, meta())
            .unwrap_err()
            .contains("already set up"));
        let bad = TestForm {
            code: "ALT".into(),
            wavelength_nm: "34O".into(),
            ..form()
        };
        assert!(bad
            .into_test(&lab, meta())
            .unwrap_err()
            .starts_with("wavelength"));
        let bad = TestForm {
            code: "ALT".into(),
            wavelength_nm: "3400".into(),
            ..form()
        };
        assert!(bad
            .into_test(&lab, meta())
            .unwrap_err()
            .contains("from 200 to 1100 nm"));
    }

    /// Numbers no lab would type (common-practice bounds of `engine::plausible`) are
    /// refused with the field named, never stored: the extremes a damaged file or a
    /// slip of the keyboard brings.
    #[test]
    fn extreme_numbers_are_refused_naming_the_field() {
        for typed in ["1e308", "100000000", "2e7", "-2e7"] {
            let e = numbers(typed, "control value").unwrap_err();
            assert!(e.starts_with("control value: "), "{e}");
        }
        assert_eq!(numbers("9999999", "v"), Ok(vec![9_999_999.0]));
        let material = |days: &str, analytes: &str| MaterialForm {
            kind: "reagent".into(),
            name: "R1".into(),
            expiry: "2030-12".into(),
            in_use_days: days.into(),
            analytes: analytes.into(),
            ..Default::default()
        };
        let at = chrono::DateTime::UNIX_EPOCH;
        for days in ["100000000", "3651", "0", "-1"] {
            let e = material(days, "").into_material(meta(), at).unwrap_err();
            assert!(e.starts_with("stability after opening"), "{e}");
        }
        assert!(material("3650", "").into_material(meta(), at).is_ok());
        let e = material("30", "ALT 1000000000")
            .into_material(meta(), at)
            .unwrap_err();
        assert!(e.starts_with("analytes: ALT"), "{e}");
        let level = |mean: &str, sd: &str| LevelForm {
            name: "N".into(),
            lot: "L".into(),
            mean: mean.into(),
            sd: sd.into(),
        };
        for (mean, sd, field) in [
            ("1e308", "1e308", "mean"),
            ("95", "0", "SD"),
            ("95", "-1", "SD"),
        ] {
            let e = level(mean, sd).into_level("t", meta()).unwrap_err();
            assert!(e.starts_with(field), "{e}");
        }
    }

    /// Received only: no opening time, no reconstitution; reconstituted: the volume, the
    /// diluent and its lot are kept, and a volume needs a diluent (and a diluent a volume).
    #[test]
    fn a_material_received_or_reconstituted() {
        let at = chrono::DateTime::UNIX_EPOCH;
        let form = MaterialForm {
            kind: "control".into(),
            name: "Control N".into(),
            lot: "N1".into(),
            expiry: "2027-02".into(),
            in_use_days: "7".into(),
            ..Default::default()
        };
        let received = MaterialForm {
            received_only: true,
            ..form.clone()
        }
        .into_material(meta(), at)
        .unwrap();
        assert_eq!(received.stability.opened_at, None);
        assert_eq!(received.reconstitution, None);
        let made_up = MaterialForm {
            volume_ml: "5".into(),
            diluent: " distilled water ".into(),
            diluent_lot: "W-1".into(),
            ..form.clone()
        }
        .into_material(meta(), at)
        .unwrap();
        assert_eq!(made_up.stability.opened_at, Some(at));
        let r = made_up.reconstitution.unwrap();
        assert_eq!(
            (r.volume_ml, r.diluent.as_str(), r.diluent_lot.as_str()),
            (5.0, "distilled water", "W-1")
        );
        for (volume, diluent, received_only, starts) in [
            ("5", "", false, "diluent:"),
            ("", "water", false, "reconstitution volume:"),
            ("0", "water", false, "reconstitution volume"),
            ("5000", "water", false, "reconstitution volume"),
            ("5", "water", true, "reconstitution:"),
        ] {
            let e = MaterialForm {
                volume_ml: volume.into(),
                diluent: diluent.into(),
                received_only,
                ..form.clone()
            }
            .into_material(meta(), at)
            .unwrap_err();
            assert!(e.starts_with(starts), "{volume}/{diluent}: {e}");
        }
    }

    #[test]
    fn check_intervals_are_whole_days_or_nothing() {
        use crate::lab::InstrumentEvent;
        let t = |v: [&str; 3]| check_schedule(&v.map(String::from));
        let list = t(["1", "", " 7 "]).unwrap();
        assert_eq!(list.len(), 2);
        assert_eq!(
            (list[0].event, list[0].every_days),
            (InstrumentEvent::TemperatureCheck, 1)
        );
        assert_eq!(
            (list[1].event, list[1].every_days),
            (InstrumentEvent::Maintenance, 7)
        );
        for bad in ["0", "1.5", "400", "weekly", "-1"] {
            let e = t(["1", bad, ""]).unwrap_err();
            assert!(
                e.starts_with("photometer check: give whole days"),
                "{bad}: {e}"
            );
        }
        assert!(t(["", "", ""]).unwrap().is_empty());
    }

    #[test]
    fn a_material_form_with_analytes() {
        let f = MaterialForm {
            kind: "control".into(),
            name: "Control N".into(),
            lot: "N1".into(),
            expiry: "2027-02".into(),
            in_use_days: "7".into(),
            analytes: "ALT 5; Total bilirubin 2".into(),
            ..Default::default()
        };
        let m = f
            .clone()
            .into_material(meta(), chrono::DateTime::UNIX_EPOCH)
            .unwrap();
        assert_eq!(m.stability.in_use_hours, Some(168.0));
        assert_eq!(m.stability.analytes[1].analyte, "Total bilirubin");
        assert_eq!(m.stability.analytes[1].in_use_hours, Some(48.0));
        let bad = MaterialForm {
            expiry: "31.03.2027".into(),
            ..f.clone()
        };
        assert!(bad
            .into_material(meta(), chrono::DateTime::UNIX_EPOCH)
            .unwrap_err()
            .starts_with("expiry"));
        let bad = MaterialForm {
            analytes: "ALT".into(),
            ..f
        };
        assert!(bad
            .into_material(meta(), chrono::DateTime::UNIX_EPOCH)
            .unwrap_err()
            .starts_with("analytes"));
    }

    #[test]
    fn a_level_needs_a_positive_sd() {
        let f = LevelForm {
            name: "Normal".into(),
            lot: "L1".into(),
            mean: "95".into(),
            sd: "0".into(),
        };
        assert!(f.into_level("t", meta()).unwrap_err().starts_with("SD"));
        let f = LevelForm {
            name: "Normal".into(),
            lot: "L1".into(),
            mean: "95,5".into(),
            sd: "2,8".into(),
        };
        let l = f.into_level("t", meta()).unwrap();
        assert_eq!((l.mean, l.sd), (95.5, 2.8));
    }

    /// The example set reads back from its own text; a reading passes within the
    /// tolerance and fails outside it; bad lines name what to write.
    #[test]
    fn absorbance_standards_are_read_and_judged() {
        let example = crate::lab::example_absorbance_standards();
        let text = absorbance_standards_text(&example);
        assert_eq!(absorbance_standards(&text).unwrap(), example);
        let grey = &example[1];
        assert!(grey.passes(0.509) && grey.passes(0.49) && !grey.passes(0.512));
        assert!(example[0].passes(-0.0004));
        for (bad, says) in [
            ("filter; 340; 0,5", "write name; nm"),
            ("filter; 90; 0.5; 0.01", "wavelength"),
            ("filter; 340; 0.5; 0", "tolerance"),
            ("a; 340; 0.5; 0.01\na; 505; 1; 0.02", "listed twice"),
        ] {
            let e = absorbance_standards(bad).unwrap_err();
            assert!(e.contains(says), "{bad}: {e}");
        }
    }
}
