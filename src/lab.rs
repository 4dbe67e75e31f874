//! The lab's records as plain data: what is saved, exported and imported.
//!
//! Every record carries a [`RecordMeta`]: a stable id (UUID), when it was created and
//! last changed (UTC, ISO 8601 in files), and the initials of the technician who did
//! it. Ids never change, so two PCs' exports can later be merged record by record.
//! This module holds data only; calculations live in [`crate::engine`], storage in
//! `crate::store`.

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};

use crate::engine::acceptance::{AcceptanceLimits, Outcome};
use crate::engine::calibration::{Curve, ModelKind, ReplicateUse, Weighting};
use crate::engine::qc::{Rule, RuleSetting};
use crate::engine::readings::{Direction, Limits};

/// The schema version written into every saved lab and export.
pub const SCHEMA_VERSION: u32 = 1;

/// Who made a record and when.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct RecordMeta {
    pub id: String,
    pub created_at: DateTime<Utc>,
    pub changed_at: DateTime<Utc>,
    /// Technician's initials.
    pub by: String,
}

impl RecordMeta {
    /// A new record made at `now` by `by`, with an id from 16 random bytes.
    pub fn new(random: [u8; 16], now: DateTime<Utc>, by: &str) -> RecordMeta {
        RecordMeta {
            id: uuid::Builder::from_random_bytes(random)
                .into_uuid()
                .to_string(),
            created_at: now,
            changed_at: now,
            by: by.trim().to_uppercase(),
        }
    }
}

/// How a test turns absorbance into a result.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ReadingMode {
    EndPoint,
    FixedTime,
    Kinetic,
}

/// A test the lab runs (glucose, ALT, …) and how it is calibrated.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TestSetup {
    pub meta: RecordMeta,
    /// Short code on the bench, e.g. "GLU".
    pub code: String,
    pub name: String,
    /// UCUM unit of the result, e.g. "mg/dL", "U/L".
    pub unit: String,
    pub mode: ReadingMode,
    pub model: ModelKind,
    #[serde(default)]
    pub weighting: Weighting,
    /// Wavelength in nm.
    pub wavelength_nm: f64,
    /// Upper limit of linearity from the maker's instructions.
    pub linearity_limit: Option<f64>,
    /// The QC rules the lab applies to this test, with their actions.
    #[serde(default = "default_qc_rules")]
    pub qc_rules: Vec<RuleSetting>,
    /// Limits a new calibration is judged against.
    #[serde(default)]
    pub acceptance: AcceptanceLimits,
    #[serde(default)]
    pub replicates: ReplicateUse,
    /// Reference interval (H/L flags) and critical limits, in the result unit.
    #[serde(default)]
    pub reference: Limits,
    #[serde(default)]
    pub critical: Limits,
    /// Which way the absorbance moves (fixed-time and kinetic tests).
    #[serde(default)]
    pub direction: Direction,
}

/// One calibrator's readings: assigned concentration and replicate absorbances.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CalibratorReading {
    pub conc: f64,
    pub absorbances: Vec<f64>,
}

/// A calibration as performed: the raw readings, the curve fitted to them and the
/// verdict at the time. Only an accepted one (with or without remarks) is used for
/// results.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CalibrationRecord {
    pub meta: RecordMeta,
    pub test_id: String,
    pub performed_at: DateTime<Utc>,
    pub model: ModelKind,
    pub weighting: Weighting,
    pub replicates: ReplicateUse,
    /// Reagent blank absorbances.
    pub blank: Vec<f64>,
    pub calibrators: Vec<CalibratorReading>,
    pub curve: Curve,
    pub outcome: Outcome,
    /// The verdict's reasons, as shown when it was saved.
    pub findings: Vec<String>,
}

impl CalibrationRecord {
    pub fn usable(&self) -> bool {
        self.outcome != Outcome::Rejected
    }
}

/// 1-2s warning; 1-3s, 2-2s, R-4s, 4-1s, 10-x rejection: the two-level multirule
/// procedure as published (Westgard et al., Clin Chem 1981). The lab may change it.
pub fn default_qc_rules() -> Vec<RuleSetting> {
    [
        Rule::OneTwoS,
        Rule::OneThreeS,
        Rule::TwoTwoS,
        Rule::RangeFourS,
        Rule::FourOneS,
        Rule::TenX,
    ]
    .into_iter()
    .map(RuleSetting::default_for)
    .collect()
}

/// One control level of one test, with its target.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ControlLevel {
    pub meta: RecordMeta,
    pub test_id: String,
    /// "Normal", "Abnormal", "Level 1" …
    pub name: String,
    pub lot: String,
    /// Target mean and SD (from the insert until the lab has its own).
    pub mean: f64,
    pub sd: f64,
}

/// One QC run of one test: the value measured for each control level (same order as
/// `level_ids`; `None` where a level was not run).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ControlRun {
    pub meta: RecordMeta,
    pub test_id: String,
    pub run_at: DateTime<Utc>,
    pub level_ids: Vec<String>,
    pub values: Vec<Option<f64>>,
}

/// A reagent, calibrator or control material in use.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MaterialRecord {
    pub meta: RecordMeta,
    pub kind: MaterialKind,
    pub name: String,
    pub lot: String,
    pub stability: crate::engine::stability::Material,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum MaterialKind {
    Reagent,
    Calibrator,
    Control,
}

/// A test's control levels and runs lined up for the QC engine.
#[derive(Debug, Clone)]
pub struct ControlHistory<'a> {
    pub levels: Vec<&'a ControlLevel>,
    pub runs: Vec<&'a ControlRun>,
    pub targets: Vec<crate::engine::qc::LevelTarget>,
    /// values[run][level]
    pub values: Vec<Vec<Option<f64>>>,
}

/// Anything with a [`RecordMeta`].
pub trait Record {
    fn meta(&self) -> &RecordMeta;
}

macro_rules! record {
    ($($t:ty),*) => {
        $(impl Record for $t {
            fn meta(&self) -> &RecordMeta {
                &self.meta
            }
        })*
    };
}
record!(
    TestSetup,
    ControlLevel,
    ControlRun,
    MaterialRecord,
    CalibrationRecord
);

/// What an import did, per kind of record.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct MergeCount {
    /// Records this PC did not have.
    pub added: usize,
    /// Records changed more recently on the other PC.
    pub updated: usize,
    /// Records the same on both, or newer here (kept as they are).
    pub kept: usize,
}

impl MergeCount {
    fn add(&mut self, other: MergeCount) {
        self.added += other.added;
        self.updated += other.updated;
        self.kept += other.kept;
    }
}

/// Merge `incoming` into `ours` by record id: new ids are added, a record changed
/// later elsewhere replaces ours, everything else stays.
fn merge_records<T: Record + Clone + PartialEq>(ours: &mut Vec<T>, incoming: &[T]) -> MergeCount {
    let mut count = MergeCount::default();
    for theirs in incoming {
        match ours.iter_mut().find(|o| o.meta().id == theirs.meta().id) {
            None => {
                ours.push(theirs.clone());
                count.added += 1;
            }
            Some(mine) if theirs.meta().changed_at > mine.meta().changed_at => {
                *mine = theirs.clone();
                count.updated += 1;
            }
            Some(_) => count.kept += 1,
        }
    }
    count
}

/// What kind of instrument log entry.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum InstrumentEvent {
    /// Reaction cell / incubator temperature, °C.
    TemperatureCheck,
    /// Photometer check: water or reagent blank, or an absorbance standard.
    PhotometerCheck,
    Maintenance,
    LampChange,
    ServiceVisit,
    Other,
}

impl InstrumentEvent {
    pub const ALL: [InstrumentEvent; 6] = [
        InstrumentEvent::TemperatureCheck,
        InstrumentEvent::PhotometerCheck,
        InstrumentEvent::Maintenance,
        InstrumentEvent::LampChange,
        InstrumentEvent::ServiceVisit,
        InstrumentEvent::Other,
    ];

    pub fn code(self) -> &'static str {
        match self {
            InstrumentEvent::TemperatureCheck => "temperature-check",
            InstrumentEvent::PhotometerCheck => "photometer-check",
            InstrumentEvent::Maintenance => "maintenance",
            InstrumentEvent::LampChange => "lamp-change",
            InstrumentEvent::ServiceVisit => "service-visit",
            InstrumentEvent::Other => "other",
        }
    }

    pub fn words(self) -> &'static str {
        match self {
            InstrumentEvent::TemperatureCheck => "temperature check (°C)",
            InstrumentEvent::PhotometerCheck => "photometer check (absorbance)",
            InstrumentEvent::Maintenance => "maintenance",
            InstrumentEvent::LampChange => "lamp change (recalibrate the tests)",
            InstrumentEvent::ServiceVisit => "service visit",
            InstrumentEvent::Other => "other",
        }
    }

    pub fn from_code(s: &str) -> Option<InstrumentEvent> {
        InstrumentEvent::ALL.into_iter().find(|e| e.code() == s)
    }
}

/// One entry in the instrument log.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InstrumentEntry {
    pub meta: RecordMeta,
    pub at: DateTime<Utc>,
    pub event: InstrumentEvent,
    /// The reading, for checks.
    #[serde(default)]
    pub value: Option<f64>,
    #[serde(default)]
    pub note: String,
}

/// Reaction temperature limits: 37 ± 0.5 °C unless the lab sets its own (common
/// practice; use the analyzer maker's tolerance).
pub fn default_temperature_limits() -> Limits {
    Limits {
        low: Some(36.5),
        high: Some(37.5),
    }
}

/// Everything one lab keeps.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Lab {
    pub schema_version: u32,
    pub lab_name: String,
    /// True for the invented demo lab: the UI marks every screen "demo".
    #[serde(default)]
    pub demo: bool,
    #[serde(default)]
    pub tests: Vec<TestSetup>,
    #[serde(default)]
    pub control_levels: Vec<ControlLevel>,
    #[serde(default)]
    pub control_runs: Vec<ControlRun>,
    #[serde(default)]
    pub materials: Vec<MaterialRecord>,
    #[serde(default)]
    pub calibrations: Vec<CalibrationRecord>,
    #[serde(default)]
    pub instrument_log: Vec<InstrumentEntry>,
    #[serde(default = "default_temperature_limits")]
    pub temperature_limits: Limits,
}

impl Lab {
    /// An empty lab with a name.
    pub fn empty(lab_name: &str) -> Lab {
        Lab {
            schema_version: SCHEMA_VERSION,
            lab_name: lab_name.to_string(),
            demo: false,
            tests: Vec::new(),
            control_levels: Vec::new(),
            control_runs: Vec::new(),
            materials: Vec::new(),
            calibrations: Vec::new(),
            instrument_log: Vec::new(),
            temperature_limits: default_temperature_limits(),
        }
    }

    /// Parse a lab from JSON, with a message naming what is wrong.
    pub fn from_json(text: &str) -> Result<Lab, String> {
        let lab: Lab = serde_json::from_str(text).map_err(|e| {
            format!(
                "this file is not a Cuvette lab (line {}, column {}): {e}",
                e.line(),
                e.column()
            )
        })?;
        if lab.schema_version > SCHEMA_VERSION {
            return Err(format!(
                "this file was written by a newer Cuvette (schema {}; this one reads up to {}): \
                 open it with the newer version",
                lab.schema_version, SCHEMA_VERSION
            ));
        }
        Ok(lab)
    }

    /// Merge another PC's export into this lab, record by record (see
    /// [`merge_records`]). The lab name and demo mark stay this PC's.
    pub fn merge(&mut self, incoming: &Lab) -> MergeCount {
        let mut total = MergeCount::default();
        total.add(merge_records(&mut self.tests, &incoming.tests));
        total.add(merge_records(
            &mut self.control_levels,
            &incoming.control_levels,
        ));
        total.add(merge_records(
            &mut self.control_runs,
            &incoming.control_runs,
        ));
        total.add(merge_records(&mut self.materials, &incoming.materials));
        total.add(merge_records(
            &mut self.calibrations,
            &incoming.calibrations,
        ));
        total
    }

    /// Move every date in the lab by whole days. The demo lab is moved so that its last
    /// QC run was this morning, and its materials count down from today.
    pub fn shift_days(&mut self, days: i64) {
        let d = chrono::Duration::days(days);
        let meta = |m: &mut RecordMeta| {
            m.created_at += d;
            m.changed_at += d;
        };
        self.tests.iter_mut().for_each(|t| meta(&mut t.meta));
        self.control_levels
            .iter_mut()
            .for_each(|l| meta(&mut l.meta));
        for r in &mut self.control_runs {
            meta(&mut r.meta);
            r.run_at += d;
        }
        for c in &mut self.calibrations {
            meta(&mut c.meta);
            c.performed_at += d;
        }
        for m in &mut self.materials {
            meta(&mut m.meta);
            m.stability.shift_days(days);
        }
        for e in &mut self.instrument_log {
            meta(&mut e.meta);
            e.at += d;
        }
    }

    /// Shift the lab so its last activity falls on `today` (local date in `tz`).
    pub fn bring_to<Tz: chrono::TimeZone>(&mut self, today: chrono::NaiveDate, tz: &Tz) {
        if let Some(last) = self.last_activity() {
            let days = (today - last.with_timezone(tz).date_naive()).num_days();
            self.shift_days(days);
        }
    }

    /// The latest QC run or calibration time, if any.
    pub fn last_activity(&self) -> Option<DateTime<Utc>> {
        let runs = self.control_runs.iter().map(|r| r.run_at);
        let cals = self.calibrations.iter().map(|c| c.performed_at);
        runs.chain(cals).max()
    }

    /// Control levels of a test, in the order they were set up.
    pub fn levels_of(&self, test_id: &str) -> Vec<&ControlLevel> {
        self.control_levels
            .iter()
            .filter(|l| l.test_id == test_id)
            .collect()
    }

    /// Calibrations of a test, oldest first.
    pub fn calibrations_of(&self, test_id: &str) -> Vec<&CalibrationRecord> {
        let mut c: Vec<&CalibrationRecord> = self
            .calibrations
            .iter()
            .filter(|c| c.test_id == test_id)
            .collect();
        c.sort_by_key(|c| c.performed_at);
        c
    }

    /// The calibration in use for a test: the latest accepted one.
    pub fn current_calibration(&self, test_id: &str) -> Option<&CalibrationRecord> {
        self.calibrations_of(test_id)
            .into_iter()
            .rev()
            .find(|c| c.usable())
    }

    /// QC runs of a test, oldest first.
    pub fn runs_of(&self, test_id: &str) -> Vec<&ControlRun> {
        let mut runs: Vec<&ControlRun> = self
            .control_runs
            .iter()
            .filter(|r| r.test_id == test_id)
            .collect();
        runs.sort_by_key(|r| r.run_at);
        runs
    }

    /// A test's QC history in the engine's terms: the level targets and, per run
    /// (oldest first), each level's value in set-up order (`None` where not run).
    pub fn control_history(&self, test_id: &str) -> ControlHistory<'_> {
        let levels = self.levels_of(test_id);
        let runs = self.runs_of(test_id);
        let values = runs
            .iter()
            .map(|r| {
                levels
                    .iter()
                    .map(|l| {
                        r.level_ids
                            .iter()
                            .position(|id| *id == l.meta.id)
                            .and_then(|k| r.values.get(k).copied().flatten())
                    })
                    .collect()
            })
            .collect();
        let targets = levels
            .iter()
            .map(|l| crate::engine::qc::LevelTarget {
                mean: l.mean,
                sd: l.sd,
            })
            .collect();
        ControlHistory {
            levels,
            runs,
            targets,
            values,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn demo_lab_parses_and_is_marked_demo() {
        let lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).expect("demo lab");
        assert!(lab.demo, "the demo lab must be marked demo");
        assert!(lab.lab_name.to_lowercase().contains("demo"));
        assert!(!lab.tests.is_empty() && !lab.control_runs.is_empty());
        let mut ids: Vec<&str> = lab.tests.iter().map(|t| t.meta.id.as_str()).collect();
        ids.extend(lab.control_runs.iter().map(|r| r.meta.id.as_str()));
        let n = ids.len();
        ids.sort();
        ids.dedup();
        assert_eq!(ids.len(), n, "record ids must be unique");
    }

    #[test]
    fn newer_schema_is_refused_with_a_reason() {
        let text = r#"{"schema_version": 99, "lab_name": "x"}"#;
        let err = Lab::from_json(text).unwrap_err();
        assert!(err.contains("newer Cuvette"), "{err}");
        let err = Lab::from_json("{ not json").unwrap_err();
        assert!(err.contains("line 1"), "{err}");
    }

    #[test]
    fn merge_by_id_adds_new_and_takes_later_changes() {
        let demo = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
        let mut here = demo.clone();
        here.control_runs.truncate(10);
        let mut there = demo.clone();
        let later = there.control_runs[0].meta.changed_at + chrono::Duration::hours(1);
        there.control_runs[0].values[0] = Some(1.0);
        there.control_runs[0].meta.changed_at = later;
        // Older edit on the other PC must not win.
        let earlier = there.control_runs[1].meta.changed_at - chrono::Duration::hours(1);
        there.control_runs[1].values[0] = Some(2.0);
        there.control_runs[1].meta.changed_at = earlier;
        let count = here.merge(&there);
        assert_eq!(count.added, demo.control_runs.len() - 10);
        assert_eq!(count.updated, 1);
        assert_eq!(here.control_runs.len(), demo.control_runs.len());
        assert_eq!(here.control_runs[0].values[0], Some(1.0));
        assert_ne!(here.control_runs[1].values[0], Some(2.0));
        // Merging again changes nothing.
        let again = here.merge(&there);
        assert_eq!((again.added, again.updated), (0, 0));
    }

    #[test]
    fn shifting_moves_every_date_and_keeps_ids() {
        let demo = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
        let mut moved = demo.clone();
        moved.shift_days(10);
        let before = demo.last_activity().unwrap();
        assert_eq!(
            moved.last_activity().unwrap() - before,
            chrono::Duration::days(10)
        );
        assert_eq!(moved.control_runs[0].meta.id, demo.control_runs[0].meta.id);
        assert_eq!(
            moved.materials[0].stability.expiry,
            demo.materials[0].stability.expiry.shifted(10)
        );
        // A month label moves with its last day: 2027-05 + 10 days → 2027-06.
        assert_eq!(
            "2027-05"
                .parse::<crate::engine::stability::ExpiryDate>()
                .unwrap()
                .shifted(10)
                .to_string(),
            "2027-06"
        );
    }

    #[test]
    fn record_ids_are_uuid_v4() {
        let now = Utc::now();
        let m = RecordMeta::new([7; 16], now, " ab ");
        assert_eq!(m.by, "AB");
        assert_eq!(m.id.len(), 36);
        assert_eq!(&m.id[14..15], "4");
    }
}
