//! The demo lab, built from a fixed seed: an invented district hospital laboratory with
//! thirteen weeks of history across ten tests (end-point, fixed-time and kinetic), so
//! that every view has something to show. Nothing in it is a real lab, person, lot or
//! patient, and the lab is marked demo.
//!
//! The story, all ending at [`story_end`] (the newest record is glucose QC of that
//! morning):
//! * cholesterol: each reagent bottle's blank creeps up with its age, until the
//!   calibration six days ago is rejected for its reagent blank; a fresh bottle, and the
//!   recalibration the same morning is accepted;
//! * glucose: a 2-2s rejection after a calibrator past its stability, with its corrective
//!   action and an accepted re-run; a new reagent lot four days ago, and this morning a
//!   4-1s rejection still waiting for its corrective action;
//! * urea an R-4s, creatinine and ALT a 1-3s, each with its action and re-run;
//! * a new lot of the lipid control's normal level run beside the old one;
//! * the albumin reagent expires today; in the multi-analyte control, ALT ran out
//!   yesterday though the control itself is still usable; calibrator aliquots in the
//!   freezer, one thawed this morning;
//! * a reaction temperature out of limits nine days ago, rechecked; a lamp change
//!   with every test recalibrated after it; urea's weekly calibration missed (overdue)
//!   and bilirubin's ending today.
//!
//! Every other QC run is drawn from the targets and kept only when the lab's rules
//! accept it, so the rejections are exactly the story's. Plain Rust; the shell places
//! the lab before "now" with [`Lab::place_before`].

use chrono::{DateTime, Duration, NaiveDate, TimeZone, Utc};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;

use crate::engine::acceptance::{self, AcceptanceLimits, Check, OnFail, Range};
use crate::engine::calibration::{self, ModelKind, ReplicateUse, Weighting};
use crate::engine::qc::{Decision, Judge, LevelTarget, Options};
use crate::engine::readings::{Direction, Limits};
use crate::engine::stability::{AnalyteStability, ExpiryDate, FrozenAliquot, Material};
use crate::lab::{
    self, CalibrationRecord, CalibratorReading, CheckSchedule, ControlLevel, ControlRun,
    CorrectiveAction, Discard, InstrumentEntry, InstrumentEvent, Lab, MaterialKind, MaterialRecord,
    ReadingMode, Reconstitution, RecordMeta, TestSetup,
};

/// The demo lab's name, shown on every screen with the demo mark.
pub const LAB_NAME: &str = "Ndovu Hill Hospital lab (DEMO, invented)";

/// Days of history, the last one being the story's day.
pub const DAYS: i64 = 91;

/// The newest moment of the story: this morning's glucose QC run.
pub fn story_end() -> DateTime<Utc> {
    Utc.with_ymd_and_hms(2026, 11, 27, 9, 27, 0).unwrap()
}

/// The seed every demo lab is drawn from (any fixed number; this one is ours).
const SEED: u64 = 20_261_127;

/// The technologists on the rota (initials only; invented).
const STAFF: [&str; 4] = ["WN", "OM", "FK", "SL"];

/// One control level as planned: name, lot, target mean, SD, decimals recorded.
struct LevelPlan {
    name: &'static str,
    lot: &'static str,
    mean: f64,
    sd: f64,
    /// The day (from the story's day, ≤ 0) the level was set up.
    from_day: i64,
}

/// One test as planned.
struct TestPlan {
    code: &'static str,
    name: &'static str,
    unit: &'static str,
    mode: ReadingMode,
    model: ModelKind,
    wavelength_nm: f64,
    linearity_limit: f64,
    reference: (Option<f64>, Option<f64>),
    critical: (Option<f64>, Option<f64>),
    direction: Direction,
    valid_days: u32,
    /// Decimals the analyser prints for this test.
    decimals: i32,
    levels: Vec<LevelPlan>,
    /// Calibrator concentrations and the signal of one unit (quadratic term second).
    calibrators: &'static [f64],
    sensitivity: (f64, f64),
    /// Reagent blank (absorbance or ΔA/min) of a fresh bottle, and its upper limit.
    blank: f64,
    blank_limit: f64,
    /// Calibration days (from the story's day) and the minute of the day.
    calibrated_on: Vec<i64>,
    cal_minute: u32,
    /// QC minute of the day (UTC).
    qc_minute: u32,
    /// The reagent the calibrations name, if the demo follows its bottles.
    reagent: Option<&'static str>,
}

fn limits(low: Option<f64>, high: Option<f64>) -> Limits {
    Limits { low, high }
}

fn acceptance_for(blank_high: f64, cal: (f64, f64)) -> AcceptanceLimits {
    AcceptanceLimits {
        blank_absorbance: Some(Check {
            limit: Range {
                low: 0.0,
                high: blank_high,
            },
            on_fail: OnFail::Reject,
        }),
        calibrator_absorbance: Some(Check {
            limit: Range {
                low: cal.0,
                high: cal.1,
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

/// Every `every` days back from `last`, from the first day of the history; plus `extra`.
fn schedule(last: i64, every: i64, extra: &[i64]) -> Vec<i64> {
    let mut days: Vec<i64> = (0..)
        .map(|k| last - k * every)
        .take_while(|d| *d > -DAYS)
        .chain(extra.iter().copied())
        .collect();
    days.sort_unstable();
    days.dedup();
    days
}

/// The day of the lamp change: every test is recalibrated after it.
const LAMP_DAY: i64 = -50;

fn plans() -> Vec<TestPlan> {
    let normal = |lot, mean, sd| LevelPlan {
        name: "Normal",
        lot,
        mean,
        sd,
        from_day: -DAYS + 1,
    };
    let abnormal = |lot, mean, sd| LevelPlan {
        name: "Abnormal",
        lot,
        mean,
        sd,
        from_day: -DAYS + 1,
    };
    let x = LAMP_DAY;
    vec![
        TestPlan {
            code: "GLU",
            name: "Glucose (GOD-PAP)",
            unit: "mg/dL",
            mode: ReadingMode::EndPoint,
            model: ModelKind::Factor,
            wavelength_nm: 505.0,
            linearity_limit: 400.0,
            reference: (Some(70.0), Some(110.0)),
            critical: (Some(40.0), Some(450.0)),
            direction: Direction::Increasing,
            valid_days: 7,
            decimals: 1,
            levels: vec![
                normal("DQ-N-2611", 95.0, 2.8),
                abnormal("DQ-A-2611", 265.0, 6.5),
            ],
            calibrators: &[100.0],
            sensitivity: (0.0042, 0.0),
            blank: 0.045,
            blank_limit: 0.08,
            calibrated_on: schedule(-4, 7, &[x]),
            cal_minute: 7 * 60,
            qc_minute: 7 * 60 + 50,
            reagent: Some("Glucose reagent R1"),
        },
        TestPlan {
            code: "UREA",
            name: "Urea (urease-GLDH, fixed-time)",
            unit: "mg/dL",
            mode: ReadingMode::FixedTime,
            model: ModelKind::Factor,
            wavelength_nm: 340.0,
            linearity_limit: 300.0,
            reference: (Some(15.0), Some(45.0)),
            critical: (None, Some(200.0)),
            direction: Direction::Decreasing,
            valid_days: 7,
            decimals: 1,
            levels: vec![
                normal("DQ-N-2611", 32.0, 1.6),
                abnormal("DQ-A-2611", 110.0, 4.5),
            ],
            calibrators: &[50.0],
            sensitivity: (0.0036, 0.0),
            blank: 0.004,
            blank_limit: 0.02,
            calibrated_on: schedule(-8, 7, &[x]),
            cal_minute: 7 * 60 + 5,
            qc_minute: 7 * 60 + 54,
            reagent: None,
        },
        TestPlan {
            code: "CREA",
            name: "Creatinine (Jaffe, fixed-time)",
            unit: "mg/dL",
            mode: ReadingMode::FixedTime,
            model: ModelKind::Factor,
            wavelength_nm: 492.0,
            linearity_limit: 15.0,
            reference: (Some(0.6), Some(1.2)),
            critical: (None, Some(7.0)),
            direction: Direction::Increasing,
            valid_days: 7,
            decimals: 2,
            levels: vec![
                normal("DQ-N-2611", 1.05, 0.05),
                abnormal("DQ-A-2611", 4.6, 0.18),
            ],
            calibrators: &[2.0],
            sensitivity: (0.056, 0.0),
            blank: 0.002,
            blank_limit: 0.02,
            calibrated_on: schedule(-2, 7, &[x]),
            cal_minute: 7 * 60 + 10,
            qc_minute: 7 * 60 + 58,
            reagent: None,
        },
        TestPlan {
            code: "CHOL",
            name: "Cholesterol (CHOD-PAP)",
            unit: "mg/dL",
            mode: ReadingMode::EndPoint,
            model: ModelKind::Factor,
            wavelength_nm: 505.0,
            linearity_limit: 600.0,
            reference: (None, Some(200.0)),
            critical: (None, None),
            direction: Direction::Increasing,
            valid_days: 7,
            decimals: 0,
            levels: vec![
                normal("LP-N-2605", 180.0, 5.5),
                abnormal("LP-A-2605", 255.0, 7.5),
                LevelPlan {
                    name: "Normal",
                    lot: "LP-N-2611",
                    mean: 188.0,
                    sd: 6.0,
                    from_day: CROSSOVER_DAY,
                },
            ],
            calibrators: &[200.0],
            sensitivity: (0.0021, 0.0),
            blank: 0.030,
            blank_limit: 0.08,
            calibrated_on: schedule(-6, 7, &[x]),
            cal_minute: 7 * 60 + 15,
            qc_minute: 8 * 60 + 2,
            reagent: Some("Cholesterol reagent (CHOD-PAP)"),
        },
        TestPlan {
            code: "TP",
            name: "Total protein (biuret)",
            unit: "g/dL",
            mode: ReadingMode::EndPoint,
            model: ModelKind::Linear,
            wavelength_nm: 546.0,
            linearity_limit: 12.0,
            reference: (Some(6.4), Some(8.3)),
            critical: (None, None),
            direction: Direction::Increasing,
            valid_days: 14,
            decimals: 1,
            levels: vec![
                normal("DQ-N-2611", 6.8, 0.15),
                abnormal("DQ-A-2611", 4.6, 0.12),
            ],
            calibrators: &[2.0, 4.0, 8.0],
            sensitivity: (0.052, 0.0),
            blank: 0.085,
            blank_limit: 0.15,
            calibrated_on: schedule(-5, 14, &[x]),
            cal_minute: 7 * 60 + 20,
            qc_minute: 8 * 60 + 6,
            reagent: None,
        },
        TestPlan {
            code: "ALB",
            name: "Albumin (BCG)",
            unit: "g/dL",
            mode: ReadingMode::EndPoint,
            model: ModelKind::Quadratic,
            wavelength_nm: 630.0,
            linearity_limit: 6.0,
            reference: (Some(3.5), Some(5.2)),
            critical: (None, None),
            direction: Direction::Increasing,
            valid_days: 14,
            decimals: 1,
            levels: vec![
                normal("DQ-N-2611", 4.2, 0.12),
                abnormal("DQ-A-2611", 2.6, 0.10),
            ],
            calibrators: &[1.0, 2.5, 4.0, 5.5],
            sensitivity: (0.150, -0.0055),
            blank: 0.12,
            blank_limit: 0.2,
            calibrated_on: schedule(-10, 14, &[x]),
            cal_minute: 7 * 60 + 25,
            qc_minute: 8 * 60 + 10,
            reagent: Some("Albumin reagent (BCG)"),
        },
        TestPlan {
            code: "TBIL",
            name: "Bilirubin, total (DCA)",
            unit: "mg/dL",
            mode: ReadingMode::EndPoint,
            model: ModelKind::Factor,
            wavelength_nm: 546.0,
            linearity_limit: 20.0,
            reference: (None, Some(1.2)),
            critical: (None, Some(15.0)),
            direction: Direction::Increasing,
            valid_days: 7,
            decimals: 2,
            levels: vec![
                normal("DQ-N-2611", 1.0, 0.06),
                abnormal("DQ-A-2611", 5.8, 0.25),
            ],
            calibrators: &[5.0],
            sensitivity: (0.048, 0.0),
            blank: 0.018,
            blank_limit: 0.05,
            // Its last calibration, a week ago at 10:15, ends this morning's day.
            calibrated_on: schedule(-7, 7, &[x]),
            cal_minute: 10 * 60 + 15,
            qc_minute: 8 * 60 + 14,
            reagent: None,
        },
        TestPlan {
            code: "ALT",
            name: "ALT (IFCC without P-5-P)",
            unit: "U/L",
            mode: ReadingMode::Kinetic,
            model: ModelKind::Factor,
            wavelength_nm: 340.0,
            linearity_limit: 500.0,
            reference: (None, Some(41.0)),
            critical: (None, None),
            direction: Direction::Decreasing,
            valid_days: 30,
            decimals: 0,
            levels: vec![
                normal("DQ-N-2611", 38.0, 2.4),
                abnormal("DQ-A-2611", 142.0, 6.0),
            ],
            calibrators: &[118.0],
            sensitivity: (0.000_57, 0.0),
            blank: 0.0008,
            blank_limit: 0.005,
            calibrated_on: vec![-80, x, -20],
            cal_minute: 7 * 60 + 30,
            qc_minute: 8 * 60 + 18,
            reagent: None,
        },
        TestPlan {
            code: "AST",
            name: "AST (IFCC without P-5-P)",
            unit: "U/L",
            mode: ReadingMode::Kinetic,
            model: ModelKind::Factor,
            wavelength_nm: 340.0,
            linearity_limit: 500.0,
            reference: (None, Some(40.0)),
            critical: (None, None),
            direction: Direction::Decreasing,
            valid_days: 30,
            decimals: 0,
            levels: vec![
                normal("DQ-N-2611", 35.0, 2.2),
                abnormal("DQ-A-2611", 160.0, 7.0),
            ],
            calibrators: &[125.0],
            sensitivity: (0.000_57, 0.0),
            blank: 0.0009,
            blank_limit: 0.005,
            calibrated_on: vec![-80, x, -20],
            cal_minute: 7 * 60 + 35,
            qc_minute: 8 * 60 + 22,
            reagent: None,
        },
        TestPlan {
            code: "ALP",
            name: "ALP (IFCC, AMP buffer)",
            unit: "U/L",
            mode: ReadingMode::Kinetic,
            model: ModelKind::Factor,
            wavelength_nm: 405.0,
            linearity_limit: 800.0,
            reference: (Some(40.0), Some(130.0)),
            critical: (None, None),
            direction: Direction::Increasing,
            valid_days: 30,
            decimals: 0,
            levels: vec![
                normal("DQ-N-2611", 95.0, 5.0),
                abnormal("DQ-A-2611", 390.0, 15.0),
            ],
            calibrators: &[250.0],
            sensitivity: (0.000_37, 0.0),
            blank: 0.0006,
            blank_limit: 0.005,
            calibrated_on: vec![-79, x, -21],
            cal_minute: 7 * 60 + 40,
            qc_minute: 8 * 60 + 26,
            reagent: None,
        },
    ]
}

/// The day the new lot of the lipid control's normal level joined the old one.
const CROSSOVER_DAY: i64 = -7;

/// The cholesterol reagent bottles: opened on these days; each one's blank rises with
/// its age (absorbance per day, an invented deterioration).
const CHOL_BOTTLES: [i64; 3] = [-90, -50, -6];
const CHOL_BLANK_PER_DAY: f64 = 0.0013;

/// The morning glucose was calibrated with a calibrator past its stability (a 2-2s).
const GLU_2_2S_DAY: i64 = -18;

/// QC results the story sets (z per level, set-up order; `None`: not run).
struct Scripted {
    code: &'static str,
    day: i64,
    z: &'static [Option<f64>],
}

const SCRIPTED: &[Scripted] = &[
    // Glucose after the new reagent lot (day −4): a creep to +1 SD and more, until 4-1s.
    Scripted {
        code: "GLU",
        day: -3,
        z: &[Some(0.6), Some(1.2)],
    },
    Scripted {
        code: "GLU",
        day: -2,
        z: &[Some(0.9), Some(1.1)],
    },
    Scripted {
        code: "GLU",
        day: -1,
        z: &[Some(1.3), Some(1.5)],
    },
    Scripted {
        code: "GLU",
        day: 0,
        z: &[Some(2.3), Some(1.4)],
    },
    // Glucose 2-2s on a calibration with a calibrator past its stability.
    Scripted {
        code: "GLU",
        day: GLU_2_2S_DAY,
        z: &[Some(2.3), Some(2.5)],
    },
    // Urea R-4s: a scratched cuvette.
    Scripted {
        code: "UREA",
        day: -55,
        z: &[Some(2.2), Some(-2.1)],
    },
    // Creatinine 1-3s on the abnormal level; and a day the abnormal level was not run.
    Scripted {
        code: "CREA",
        day: -20,
        z: &[Some(0.4), Some(3.6)],
    },
    Scripted {
        code: "CREA",
        day: -9,
        z: &[Some(0.3), None],
    },
    // ALT 1-3s: a bubble in the sample probe line.
    Scripted {
        code: "ALT",
        day: -13,
        z: &[Some(-0.4), Some(3.4)],
    },
];

/// What was found and done after each of the story's rejections but this morning's.
const ACTIONS: &[(&str, i64, &str, &str)] = &[
    (
        "GLU",
        GLU_2_2S_DAY,
        "Both levels above 2 SD on the same side after this morning's calibration; the \
         calibrator vial had been open 9 days (its stability is 7)",
        "Fresh calibrator vial reconstituted, glucose recalibrated, controls re-run",
    ),
    (
        "UREA",
        -55,
        "Normal level above +2 SD and abnormal below −2 SD in one run; a scratched cuvette \
         in the rack",
        "Cuvette rack replaced, controls re-run on fresh cuvettes",
    ),
    (
        "CREA",
        -20,
        "Abnormal level alone beyond 3 SD; a bubble in that control's cup",
        "Fresh control poured, controls re-run",
    ),
    (
        "ALT",
        -13,
        "One result beyond 3 SD; bubble seen in the sample probe line",
        "Probe primed and line cleared, controls re-run",
    ),
];

struct Builder {
    rng: ChaCha8Rng,
    lab: Lab,
    end_day: NaiveDate,
}

impl Builder {
    fn meta(&mut self, at: DateTime<Utc>, by: &str) -> RecordMeta {
        RecordMeta::new(self.rng.gen(), at, by)
    }

    fn at(&self, day: i64, minute: u32) -> DateTime<Utc> {
        let date = self.end_day + Duration::days(day);
        Utc.from_utc_datetime(&date.and_hms_opt(0, 0, 0).unwrap())
            + Duration::minutes(minute as i64)
    }

    fn who(day: i64) -> &'static str {
        STAFF[day.rem_euclid(STAFF.len() as i64) as usize]
    }

    fn normal(&mut self) -> f64 {
        self.rng.sample(StandardNormal)
    }

    fn material(
        &mut self,
        kind: MaterialKind,
        name: &str,
        lot: &str,
        stability: Material,
        made: DateTime<Utc>,
        by: &str,
    ) -> String {
        let meta = self.meta(made, by);
        let id = meta.id.clone();
        self.lab.materials.push(MaterialRecord {
            meta,
            kind,
            name: name.to_string(),
            lot: lot.to_string(),
            stability,
            reconstitution: None,
            discarded: None,
        });
        id
    }

    fn discard(&mut self, id: &str, at: DateTime<Utc>, reason: &str) {
        if let Some(m) = self.lab.materials.iter_mut().find(|m| m.meta.id == id) {
            m.discarded = Some(Discard {
                at,
                by: Self::who(0).to_string(),
                reason: reason.to_string(),
            });
            m.meta.changed_at = at;
            m.meta.version += 1;
        }
    }
}

fn round_to(x: f64, decimals: i32) -> f64 {
    let p = 10f64.powi(decimals);
    (x * p).round() / p
}

fn opened(expiry: &str, at: DateTime<Utc>, in_use_hours: f64) -> Material {
    Material {
        expiry: expiry.parse().unwrap_or(ExpiryDate::Month {
            year: 2027,
            month: 12,
        }),
        opened_at: Some(at),
        in_use_hours: Some(in_use_hours),
        on_board_since: None,
        on_board_hours: None,
        frozen: None,
        analytes: Vec::new(),
    }
}

/// The demo lab at its own dates ([`story_end`] is its newest moment).
pub fn demo_lab() -> Lab {
    let end = story_end();
    let mut b = Builder {
        rng: ChaCha8Rng::seed_from_u64(SEED),
        lab: Lab::empty(LAB_NAME),
        end_day: end.date_naive(),
    };
    b.lab.demo = true;
    b.lab.absorbance_standards = lab::example_absorbance_standards();
    b.lab.instrument_checks = vec![
        CheckSchedule {
            event: InstrumentEvent::TemperatureCheck,
            every_days: 1,
        },
        CheckSchedule {
            event: InstrumentEvent::PhotometerCheck,
            every_days: 1,
        },
        CheckSchedule {
            event: InstrumentEvent::Maintenance,
            every_days: 7,
        },
    ];
    let founded = b.at(-DAYS, 14 * 60);
    let plans = plans();

    // Materials whose story the tests and calibrations follow.
    let reagents = reagent_bottles(&mut b);
    controls_and_calibrators(&mut b);

    for plan in &plans {
        let meta = b.meta(founded, "SL");
        let test_id = meta.id.clone();
        b.lab.tests.push(test_setup(plan, meta));
        for level in &plan.levels {
            let made = if level.from_day > -DAYS + 1 {
                b.at(level.from_day, 7 * 60 + 30)
            } else {
                founded
            };
            let meta = b.meta(made, "SL");
            b.lab.control_levels.push(ControlLevel {
                meta,
                test_id: test_id.clone(),
                name: level.name.to_string(),
                lot: level.lot.to_string(),
                mean: level.mean,
                sd: level.sd,
            });
        }
        calibrations(&mut b, plan, &test_id, &reagents);
        qc_runs(&mut b, plan, &test_id);
    }
    instrument_log(&mut b);
    b.lab
}

/// The demo lab moved so that its newest moment lies `lead` before `now`.
pub fn demo_lab_before(now: DateTime<Utc>, lead: Duration) -> Lab {
    let mut lab = demo_lab();
    lab.place_before(now, lead);
    lab
}

fn test_setup(p: &TestPlan, meta: RecordMeta) -> TestSetup {
    let cal_signal = |c: f64| p.blank + p.sensitivity.0 * c + p.sensitivity.1 * c * c;
    let (lo, hi) = p.calibrators.iter().fold((f64::MAX, 0f64), |(lo, hi), &c| {
        (lo.min(cal_signal(c)), hi.max(cal_signal(c)))
    });
    TestSetup {
        meta,
        code: p.code.to_string(),
        name: p.name.to_string(),
        unit: p.unit.to_string(),
        mode: p.mode,
        model: p.model,
        weighting: Weighting::None,
        wavelength_nm: p.wavelength_nm,
        linearity_limit: Some(p.linearity_limit),
        qc_rules: lab::default_qc_rules(),
        acceptance: acceptance_for(
            p.blank_limit,
            (round_to(lo * 0.7, 3), round_to(hi * 1.3, 3)),
        ),
        replicates: ReplicateUse::Mean,
        reference: limits(p.reference.0, p.reference.1),
        critical: limits(p.critical.0, p.critical.1),
        direction: p.direction,
        allowable_error_pct: None,
        external_bias_pct: None,
        calibration_valid_days: Some(p.valid_days),
        qc_runs_per_day: None,
    }
}

/// Reagent bottles the calibrations name: (test code, opened on day, material id).
type Bottles = Vec<(&'static str, i64, String)>;

fn reagent_bottles(b: &mut Builder) -> Bottles {
    let mut out = Vec::new();
    // Glucose: a bottle every 30 days of lot GG-2607, then the new lot GG-2611.
    let glucose = "Glucose reagent R1";
    let mut previous: Option<String> = None;
    for (day, lot) in [
        (-90, "GG-2607"),
        (-60, "GG-2607"),
        (-30, "GG-2607"),
        (-4, "GG-2611"),
    ] {
        let at = b.at(day, 6 * 60 + 50);
        let who = Builder::who(day);
        if let Some(old) = previous.take() {
            b.discard(&old, at, "used up");
        }
        let id = b.material(
            MaterialKind::Reagent,
            glucose,
            lot,
            opened(
                if lot == "GG-2611" {
                    "2027-08"
                } else {
                    "2027-03"
                },
                at,
                720.0,
            ),
            at,
            who,
        );
        out.push(("GLU", day, id.clone()));
        previous = Some(id);
    }
    // Cholesterol: one lot, three bottles; the second's blank failed a calibration.
    let chol = "Cholesterol reagent (CHOD-PAP)";
    let mut previous: Option<String> = None;
    for (k, day) in CHOL_BOTTLES.into_iter().enumerate() {
        // The third bottle was opened after the rejected calibration of that morning.
        let at = b.at(day, if k == 2 { 7 * 60 + 40 } else { 6 * 60 + 55 });
        if let Some(old) = previous.take() {
            let reason = if k == 2 {
                "reagent blank above the calibration's limit (calibration rejected)"
            } else {
                "used up"
            };
            b.discard(&old, at, reason);
        }
        let id = b.material(
            MaterialKind::Reagent,
            chol,
            "CH-2606",
            opened("2027-06", at, 1440.0),
            at,
            Builder::who(day),
        );
        out.push(("CHOL", day, id.clone()));
        previous = Some(id);
    }
    // Albumin: the lot's own expiry is today.
    let at = b.at(-20, 6 * 60 + 45);
    let expiry = b.end_day.format("%Y-%m-%d").to_string();
    let id = b.material(
        MaterialKind::Reagent,
        "Albumin reagent (BCG)",
        "AB-2511",
        opened(&expiry, at, 1440.0),
        at,
        Builder::who(-20),
    );
    out.push(("ALB", -20, id));
    // Creatinine picrate, opened last week.
    let at = b.at(-5, 6 * 60 + 45);
    b.material(
        MaterialKind::Reagent,
        "Creatinine picrate reagent",
        "CP-2609",
        opened("2027-04-30", at, 336.0),
        at,
        Builder::who(-5),
    );
    out
}

fn controls_and_calibrators(b: &mut Builder) {
    // The multi-analyte control in use: the control is good until tomorrow, but its
    // ALT ran out yesterday and its bilirubin three days ago.
    let at = b.at(-6, 7 * 60);
    let mut normal = opened("2027-02-28", at, 168.0);
    normal.analytes = vec![
        AnalyteStability {
            analyte: "ALT".into(),
            in_use_hours: Some(120.0),
            after_thaw_hours: None,
        },
        AnalyteStability {
            analyte: "Bilirubin".into(),
            in_use_hours: Some(48.0),
            after_thaw_hours: None,
        },
    ];
    let id = b.material(
        MaterialKind::Control,
        "Multi-analyte control, normal (lyophilised)",
        "DQ-N-2611",
        normal,
        at,
        Builder::who(-6),
    );
    reconstituted(b, &id, 5.0, "distilled water", "");
    let id = b.material(
        MaterialKind::Control,
        "Multi-analyte control, abnormal (lyophilised)",
        "DQ-A-2611",
        opened("2027-02-28", at, 168.0),
        at,
        Builder::who(-6),
    );
    reconstituted(b, &id, 5.0, "distilled water", "");
    // The lipid control: the old normal lot runs out in six days, the new one began a
    // week ago.
    let at = b.at(-24, 7 * 60);
    b.material(
        MaterialKind::Control,
        "Lipid control, normal",
        "LP-N-2605",
        opened("2027-01", at, 720.0),
        at,
        Builder::who(-24),
    );
    b.material(
        MaterialKind::Control,
        "Lipid control, abnormal",
        "LP-A-2605",
        opened("2027-01", at, 720.0),
        at,
        Builder::who(-24),
    );
    let at = b.at(CROSSOVER_DAY, 7 * 60 + 20);
    b.material(
        MaterialKind::Control,
        "Lipid control, normal",
        "LP-N-2611",
        opened("2027-10", at, 720.0),
        at,
        Builder::who(CROSSOVER_DAY),
    );
    // Calibrator aliquots frozen twenty days ago; one thawed this morning (4 h after
    // thawing), two still in the freezer.
    let frozen_at = b.at(-20, 9 * 60);
    for k in 0..3 {
        let thawed = (k == 0).then(|| b.at(0, 6 * 60 + 20));
        let m = Material {
            expiry: ExpiryDate::Month {
                year: 2027,
                month: 3,
            },
            opened_at: None,
            in_use_hours: None,
            on_board_since: None,
            on_board_hours: None,
            frozen: Some(FrozenAliquot {
                frozen_at,
                frozen_hours: 720.0,
                thawed_at: thawed,
                thaw_count: u32::from(thawed.is_some()),
                after_thaw_hours: 4.0,
            }),
            analytes: Vec::new(),
        };
        let name = format!("Multi-analyte calibrator, frozen aliquot {}/3", k + 1);
        let id = b.material(
            MaterialKind::Calibrator,
            &name,
            "DC-0907",
            m,
            frozen_at,
            Builder::who(-20),
        );
        if let Some(t) = thawed {
            let m = b.lab.materials.iter_mut().find(|m| m.meta.id == id);
            if let Some(m) = m {
                m.meta.changed_at = t;
                m.meta.version = 2;
            }
        }
    }
}

fn reconstituted(b: &mut Builder, id: &str, volume_ml: f64, diluent: &str, lot: &str) {
    if let Some(m) = b.lab.materials.iter_mut().find(|m| m.meta.id == id) {
        m.reconstitution = Some(Reconstitution {
            volume_ml,
            diluent: diluent.to_string(),
            diluent_lot: lot.to_string(),
        });
    }
}

/// The reagent bottle of `code` in use on `day` (the newest opened by then).
fn bottle_on(reagents: &Bottles, code: &str, day: i64) -> Option<(i64, String)> {
    reagents
        .iter()
        .filter(|(c, opened, _)| *c == code && *opened <= day)
        .max_by_key(|(_, opened, _)| *opened)
        .map(|(_, opened, id)| (*opened, id.clone()))
}

fn calibrations(b: &mut Builder, p: &TestPlan, test_id: &str, reagents: &Bottles) {
    // The lamp: the photometer's sensitivity steps a little at the change.
    let mut accepted: Option<calibration::Curve> = None;
    for &day in &p.calibrated_on {
        // Glucose on the day of its 2-2s: recalibrated after it (see ACTIONS).
        let rerun_glucose = p.code == "GLU" && day == GLU_2_2S_DAY;
        let mut tries: Vec<(u32, f64)> = vec![(p.cal_minute, 1.0)];
        if rerun_glucose {
            // The morning's calibration read a calibrator past its stability (reads
            // 5 % low, so results read high); the recalibration after the action.
            tries = vec![(p.cal_minute, 0.955), (9 * 60 + 10, 1.0)];
        }
        if day == LAMP_DAY {
            tries = vec![(8 * 60 + 40 + (p.cal_minute % 60), 1.0)];
        }
        let chol_rejected = p.code == "CHOL" && day == CHOL_BOTTLES[2];
        if chol_rejected {
            // The old bottle at the usual time, rejected; the fresh bottle after it.
            tries = vec![(p.cal_minute, 1.0), (8 * 60 - 5, 1.0)];
        }
        for (k, (minute, calibrator_bias)) in tries.into_iter().enumerate() {
            let at = b.at(day, minute);
            // Which bottle: the rejected cholesterol calibration used the old one.
            let bottle_day = if chol_rejected && k == 0 {
                day - 1
            } else {
                day
            };
            let bottle = p.reagent.and(bottle_on(reagents, p.code, bottle_day));
            let age = bottle.as_ref().map_or(0, |(opened, _)| day - opened) as f64;
            let drift = if p.code == "CHOL" {
                CHOL_BLANK_PER_DAY * age
            } else {
                0.0
            };
            let lamp = if day >= LAMP_DAY { 1.02 } else { 1.0 };
            // Replicates agree within the acceptance CV (an invented 0.8 %).
            let noise = p.blank.abs() * 0.008;
            let blank_level = p.blank + drift;
            let blank: Vec<f64> = (0..2)
                .map(|_| round_to(blank_level + noise * b.normal(), 4))
                .collect();
            let calibrators: Vec<(f64, Vec<f64>)> = p
                .calibrators
                .iter()
                .map(|&c| {
                    let signal =
                        (p.sensitivity.0 * c + p.sensitivity.1 * c * c) * lamp * calibrator_bias;
                    let reps = (0..2)
                        .map(|_| round_to(blank_level + signal * (1.0 + 0.004 * b.normal()), 4))
                        .collect();
                    (c, reps)
                })
                .collect();
            let points = calibration::blank_corrected(&blank, &calibrators);
            let Ok(fit) = calibration::fit(p.model, Weighting::None, ReplicateUse::Mean, &points)
            else {
                continue;
            };
            let readings = acceptance::CalibrationReadings {
                blank: blank.clone(),
                calibrators: calibrators.clone(),
            };
            let limits = b
                .lab
                .tests
                .iter()
                .find(|t| t.meta.id == test_id)
                .map(|t| t.acceptance)
                .unwrap_or_default();
            let verdict = acceptance::judge(&readings, Ok(&fit), accepted.as_ref(), &limits);
            let meta = b.meta(at, Builder::who(day));
            let record = CalibrationRecord {
                meta,
                test_id: test_id.to_string(),
                performed_at: at,
                model: p.model,
                weighting: Weighting::None,
                replicates: ReplicateUse::Mean,
                blank,
                calibrators: calibrators
                    .into_iter()
                    .map(|(conc, absorbances)| CalibratorReading { conc, absorbances })
                    .collect(),
                curve: fit.curve,
                outcome: verdict.outcome,
                findings: verdict.findings.iter().map(|f| f.message.clone()).collect(),
                materials_used: bottle.map(|(_, id)| vec![id]).unwrap_or_default(),
                acknowledged: Vec::new(),
            };
            if record.usable() {
                accepted = Some(record.curve);
            }
            b.lab.calibrations.push(record);
        }
    }
}

fn qc_runs(b: &mut Builder, p: &TestPlan, test_id: &str) {
    let levels: Vec<(String, LevelTarget, i64)> = b
        .lab
        .control_levels
        .iter()
        .filter(|l| l.test_id == test_id)
        .zip(&p.levels)
        .map(|(l, plan)| {
            (
                l.meta.id.clone(),
                LevelTarget {
                    mean: l.mean,
                    sd: l.sd,
                },
                plan.from_day,
            )
        })
        .collect();
    let targets: Vec<LevelTarget> = levels.iter().map(|l| l.1).collect();
    let rules = lab::default_qc_rules();
    let Ok(mut judge) = Judge::new(&targets, &rules, Options::default()) else {
        return;
    };
    for day in (-DAYS + 1)..=0 {
        let minute = if p.code == "GLU" && day == 0 {
            // This morning's glucose run: the story's newest moment.
            9 * 60 + 27
        } else {
            p.qc_minute + (b.rng.gen_range(0..12u32))
        };
        let at = b.at(day, minute);
        let scripted = SCRIPTED.iter().find(|s| s.code == p.code && s.day == day);
        let in_use = |k: usize| levels[k].2 <= day;
        let values: Vec<Option<f64>> = match scripted {
            Some(s) => (0..levels.len())
                .map(|k| {
                    let z = s.z.get(k).copied().flatten()?;
                    Some(round_to(targets[k].mean + z * targets[k].sd, p.decimals))
                })
                .collect(),
            None => {
                // Drawn from the targets, and kept only if the rules accept the run.
                let mut chosen = None;
                for _ in 0..50 {
                    let v: Vec<Option<f64>> = (0..levels.len())
                        .map(|k| {
                            let z: f64 = b.normal();
                            in_use(k).then(|| {
                                round_to(targets[k].mean + 0.9 * z * targets[k].sd, p.decimals)
                            })
                        })
                        .collect();
                    if judge.clone().judge(&v).map(|r| r.decision) == Ok(Decision::Accept) {
                        chosen = Some(v);
                        break;
                    }
                }
                chosen.unwrap_or_else(|| {
                    (0..levels.len())
                        .map(|k| in_use(k).then_some(targets[k].mean))
                        .collect()
                })
            }
        };
        let level_ids: Vec<String> = levels.iter().map(|l| l.0.clone()).collect();
        let verdict = judge.judge(&values);
        let meta = b.meta(at, Builder::who(day));
        let run_id = meta.id.clone();
        b.lab.control_runs.push(ControlRun {
            meta,
            test_id: test_id.to_string(),
            run_at: at,
            level_ids: level_ids.clone(),
            values,
            after_action: None,
            materials_used: Vec::new(),
            acknowledged: Vec::new(),
        });
        let rejected = verdict.map(|v| v.decision) == Ok(Decision::Reject);
        let Some(&(_, _, found, done)) = ACTIONS.iter().find(|a| a.0 == p.code && a.1 == day)
        else {
            continue;
        };
        if !rejected {
            continue;
        }
        // The corrective action, then the re-run, accepted near the targets.
        let acted = at + Duration::minutes(if p.code == "GLU" { 60 } else { 35 });
        let meta = b.meta(acted, Builder::who(day));
        let action_id = meta.id.clone();
        b.lab.corrective_actions.push(CorrectiveAction {
            meta,
            test_id: test_id.to_string(),
            run_id,
            at: acted,
            found: found.to_string(),
            done: done.to_string(),
        });
        let rerun_at = acted + Duration::minutes(30);
        let values: Vec<Option<f64>> = (0..levels.len())
            .map(|k| {
                let z = 0.3 * b.normal();
                in_use(k).then(|| round_to(targets[k].mean + z * targets[k].sd, p.decimals))
            })
            .collect();
        let _ = judge.judge(&values);
        let meta = b.meta(rerun_at, Builder::who(day));
        b.lab.control_runs.push(ControlRun {
            meta,
            test_id: test_id.to_string(),
            run_at: rerun_at,
            level_ids,
            values,
            after_action: Some(action_id),
            materials_used: Vec::new(),
            acknowledged: Vec::new(),
        });
    }
}

fn instrument_log(b: &mut Builder) {
    let temperature = InstrumentEvent::TemperatureCheck;
    let photometer = InstrumentEvent::PhotometerCheck;
    for day in (-DAYS + 1)..=-1 {
        let who = Builder::who(day);
        let at = b.at(day, 6 * 60 + 40);
        let (value, note) = if day == -9 {
            (
                38.1,
                "reaction cell above its limit: the cover had been left open overnight",
            )
        } else {
            (round_to(37.0 + 0.12 * b.normal(), 1), "")
        };
        push_entry(b, at, temperature, Some(value), note, None, who);
        if day == -9 {
            let at = b.at(day, 7 * 60 + 20);
            push_entry(
                b,
                at,
                temperature,
                Some(37.1),
                "rechecked with the cover closed",
                None,
                who,
            );
        }
        let at = b.at(day, 6 * 60 + 44);
        // One water blank reads exactly zero below the fourth decimal (stored as −0).
        let blank = if day == -3 {
            -0.0
        } else {
            round_to(0.001 * b.normal(), 4)
        };
        push_entry(b, at, photometer, Some(blank), "", Some("water blank"), who);
        if day.rem_euclid(7) == 1 {
            let at = b.at(day, 6 * 60 + 48);
            let low = round_to(0.5 + 0.003 * b.normal(), 4);
            push_entry(
                b,
                at,
                photometer,
                Some(low),
                "",
                Some("grey filter, low"),
                who,
            );
            let high = round_to(1.0 + 0.005 * b.normal(), 4);
            push_entry(
                b,
                b.at(day, 6 * 60 + 50),
                photometer,
                Some(high),
                "",
                Some("grey filter, high"),
                who,
            );
        }
        if (day + 90).rem_euclid(7) == 0 {
            let at = b.at(day, 13 * 60);
            push_entry(
                b,
                at,
                InstrumentEvent::Maintenance,
                None,
                "flow cell rinsed, tubing checked (weekly)",
                None,
                who,
            );
        }
        if day == LAMP_DAY {
            let at = b.at(day, 8 * 60 + 20);
            push_entry(
                b,
                at,
                InstrumentEvent::LampChange,
                None,
                "halogen lamp replaced after it flickered; every test recalibrated",
                None,
                who,
            );
        }
    }
}

fn push_entry(
    b: &mut Builder,
    at: DateTime<Utc>,
    event: InstrumentEvent,
    value: Option<f64>,
    note: &str,
    standard: Option<&str>,
    who: &str,
) {
    let meta = b.meta(at, who);
    b.lab.instrument_log.push(InstrumentEntry {
        meta,
        at,
        event,
        value,
        note: note.to_string(),
        standard: standard.map(str::to_string),
    });
}

#[cfg(test)]
mod tests;
