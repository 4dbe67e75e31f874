//! The calculation verification report: reference cases run on the engine as shipped,
//! each with its source, the expected value, the value obtained and pass or fail, so a
//! lab can file the report as evidence that the program calculates correctly.
//!
//! Cases: NIST StRD linear (Norris) and quadratic (Pontius) regression through the
//! calibration fit, the NIST nonlinear set Misra1a through the Levenberg–Marquardt
//! solver (data files embedded as published), false-rejection probabilities of single
//! rules against standard normal table values, the enzyme factor by worked arithmetic,
//! multirule sequences built from the published rule definitions, and stability edge
//! cases of the label convention, and a published sigma-metric table (its rows that
//! reproduce from their printed inputs). Plain Rust; the same cases run natively in the tests.

use chrono::{DateTime, Utc};

use crate::engine::calibration::{self, CalPoint, Curve, ModelKind, ReplicateUse, Weighting};
use crate::engine::lm::{self, CurveModel, CurveProblem, Settings};
use crate::engine::planning::{self, Error};
use crate::engine::qc::{self, Decision, LevelTarget, Rule};
use crate::engine::readings;
use crate::engine::stability::{self, Limit, Material, WarningWindow};

/// One reference case and how it went.
#[derive(Debug, Clone, PartialEq)]
pub struct Case {
    pub check: String,
    pub source: &'static str,
    pub expected: String,
    pub obtained: String,
    pub pass: bool,
}

/// A NIST StRD data set: starting values (nonlinear sets), certified values and their
/// standard deviations, the certified residual sum of squares, and the data.
pub struct StrdSet {
    pub starts: [Vec<f64>; 2],
    pub certified: Vec<f64>,
    pub certified_sd: Vec<f64>,
    pub certified_rss: f64,
    pub x: Vec<f64>,
    pub y: Vec<f64>,
}

fn numbers(line: &str) -> Option<Vec<f64>> {
    let v: Result<Vec<f64>, _> = line.split_whitespace().map(str::parse::<f64>).collect();
    v.ok().filter(|v| !v.is_empty())
}

/// Read a NIST StRD file (the nonlinear "nls" or linear "lls" layout).
pub fn parse_strd(text: &str) -> Result<StrdSet, String> {
    let lines: Vec<&str> = text.lines().collect();
    let mut starts = [Vec::new(), Vec::new()];
    let mut certified = Vec::new();
    let mut certified_sd = Vec::new();
    let mut certified_rss = f64::NAN;
    for line in &lines {
        let t = line.trim();
        // nls: "b1 =   25   0.25   1.9280693458E-01  1.1435312227E-02"
        if let Some((lhs, rhs)) = t.split_once('=') {
            let lhs = lhs.trim();
            if lhs.len() <= 3 && lhs.starts_with('b') {
                if let Some(v) = numbers(rhs).filter(|v| v.len() == 4) {
                    starts[0].push(v[0]);
                    starts[1].push(v[1]);
                    certified.push(v[2]);
                    certified_sd.push(v[3]);
                }
            }
        }
        // lls: "B0   -0.262323073774029     0.232818234301152"
        if t.starts_with('B') && t.len() > 2 && t.as_bytes()[1].is_ascii_digit() {
            let rest: Vec<&str> = t.split_whitespace().skip(1).collect();
            if let Some(v) = numbers(&rest.join(" ")).filter(|v| v.len() == 2) {
                certified.push(v[0]);
                certified_sd.push(v[1]);
            }
        }
        if t.starts_with("Residual Sum of Squares") {
            if let Some(v) = t
                .split(|c: char| c == ':' || c.is_whitespace())
                .filter_map(|s| s.parse::<f64>().ok())
                .next()
            {
                certified_rss = v;
            }
        }
    }
    let data_at = lines
        .iter()
        .rposition(|l| l.trim_start().starts_with("Data:"))
        .ok_or("no Data: line")?;
    let mut x = Vec::new();
    let mut y = Vec::new();
    for line in &lines[data_at + 1..] {
        if let Some(v) = numbers(line) {
            let [yv, xv] = v[..] else {
                return Err(format!("data row {line:?} is not y x"));
            };
            y.push(yv);
            x.push(xv);
        }
    }
    Ok(StrdSet {
        starts,
        certified,
        certified_sd,
        certified_rss,
        x,
        y,
    })
}

/// Number of correct significant digits of `got` against `want` (the log relative
/// error of NIST StRD evaluations: LRE = −log10(|got − want| / |want|), at most 16).
pub fn correct_digits(got: f64, want: f64) -> f64 {
    if got == want {
        return 16.0;
    }
    let rel = if want == 0.0 {
        got.abs()
    } else {
        ((got - want) / want).abs()
    };
    (-rel.log10()).min(16.0)
}

const NORRIS: &str = include_str!("../tests/reference/nist/Norris.dat");
const PONTIUS: &str = include_str!("../tests/reference/nist/Pontius.dat");
const MISRA1A: &str = include_str!("../tests/reference/nist/Misra1a.dat");
const NIST: &str = "NIST Statistical Reference Datasets (StRD), certified values";
const SIGMA_TABLE: &str = include_str!("../tests/reference/sigma/biochem-med-2018-table2.csv");
const SIGMA_SOURCE: &str = "Biochem Med 2018;28(2):020711, Table 2 (doi:10.11613/BM.2018.020711)";
/// Rows of that table its printed inputs cannot give (see tests/reference/README.md).
pub const SIGMA_ROWS_NOT_REPRODUCIBLE: [&str; 2] = ["Calcium", "Cholesterol"];

/// One row of a published sigma-metric table.
#[derive(Debug, Clone, PartialEq)]
pub struct SigmaRow {
    pub analyte: String,
    pub tea_pct: f64,
    pub bias_pct: f64,
    pub cv_pct: f64,
    pub sigma: f64,
}

/// The published sigma table carried with the program (analyte, TEa source, TEa %,
/// bias %, CV %, sigma).
pub fn sigma_table() -> Result<Vec<SigmaRow>, String> {
    SIGMA_TABLE
        .lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            let [analyte, _, tea, bias, cv, sigma] = f[..] else {
                return Err(format!("sigma table row {l:?} does not have 6 fields"));
            };
            let num = |s: &str| s.trim().parse::<f64>().map_err(|e| format!("{l:?}: {e}"));
            Ok(SigmaRow {
                analyte: analyte.to_string(),
                tea_pct: num(tea)?,
                bias_pct: num(bias)?,
                cv_pct: num(cv)?,
                sigma: num(sigma)?,
            })
        })
        .collect()
}

/// The range sigma takes over the rounding intervals of a row's printed inputs (TEa to
/// 0.01, bias and CV to 0.1): sigma rises with TEa and falls with |bias| and CV.
pub fn sigma_range(row: &SigmaRow) -> Result<(f64, f64), String> {
    let b = row.bias_pct.abs();
    let lo = planning::sigma(row.tea_pct - 0.005, b + 0.05, row.cv_pct + 0.05)?;
    let hi = planning::sigma(row.tea_pct + 0.005, (b - 0.05).max(0.0), row.cv_pct - 0.05)?;
    Ok((lo, hi))
}

fn sigma_case() -> Case {
    let check = "sigma metric = (TEa − |bias|) / CV, published rows";
    let rows = match sigma_table() {
        Ok(r) => r,
        Err(e) => return failed(check, SIGMA_SOURCE, String::new(), e),
    };
    let usable: Vec<&SigmaRow> = rows
        .iter()
        .filter(|r| !SIGMA_ROWS_NOT_REPRODUCIBLE.contains(&r.analyte.as_str()))
        .collect();
    let mut wrong = Vec::new();
    for r in &usable {
        match sigma_range(r) {
            Ok((lo, hi)) if r.sigma >= lo - 0.05 && r.sigma <= hi + 0.05 => {}
            Ok((lo, hi)) => wrong.push(format!("{} {lo:.2}–{hi:.2}", r.analyte)),
            Err(e) => wrong.push(format!("{}: {e}", r.analyte)),
        }
    }
    Case {
        check: format!(
            "{check} (all but {})",
            SIGMA_ROWS_NOT_REPRODUCIBLE.join(", ")
        ),
        source: SIGMA_SOURCE,
        expected: format!(
            "{} of {} within the rounding of the printed inputs",
            usable.len(),
            usable.len()
        ),
        obtained: if wrong.is_empty() {
            format!("{} of {}", usable.len(), usable.len())
        } else {
            format!(
                "{} of {}; outside: {}",
                usable.len() - wrong.len(),
                usable.len(),
                wrong.join("; ")
            )
        },
        pass: wrong.is_empty() && usable.len() >= 17,
    }
}

fn digits_case(check: &str, source: &'static str, got: &[f64], want: &[f64], need: f64) -> Case {
    let digits = got
        .iter()
        .zip(want)
        .map(|(&g, &w)| correct_digits(g, w))
        .fold(f64::INFINITY, f64::min);
    Case {
        check: check.to_string(),
        source,
        expected: format!(
            "{} (at least {need} correct digits)",
            want.iter()
                .map(|v| format!("{v:e}"))
                .collect::<Vec<_>>()
                .join(", ")
        ),
        obtained: format!(
            "{} ({digits:.1} digits)",
            got.iter()
                .map(|v| format!("{v:e}"))
                .collect::<Vec<_>>()
                .join(", ")
        ),
        pass: got.len() == want.len() && digits >= need,
    }
}

fn failed(check: &str, source: &'static str, expected: String, why: String) -> Case {
    Case {
        check: check.to_string(),
        source,
        expected,
        obtained: why,
        pass: false,
    }
}

fn nist_polynomial(name: &str, text: &str, model: ModelKind, need: f64) -> Case {
    let check = format!("NIST {name}: {} regression coefficients", model.code());
    let set = match parse_strd(text) {
        Ok(s) => s,
        Err(e) => return failed(&check, NIST, String::new(), e),
    };
    let points: Vec<CalPoint> = set
        .x
        .iter()
        .zip(&set.y)
        .map(|(&conc, &signal)| CalPoint { conc, signal })
        .collect();
    match calibration::fit(model, Weighting::None, ReplicateUse::Individual, &points) {
        Ok(f) => {
            let got = match f.curve {
                Curve::Linear { slope, intercept } => vec![intercept, slope],
                Curve::Quadratic { c0, c1, c2 } => vec![c0, c1, c2],
                _ => Vec::new(),
            };
            digits_case(&check, NIST, &got, &set.certified, need)
        }
        Err(e) => failed(&check, NIST, String::new(), e.message),
    }
}

/// y = b1 · (1 − exp(−b2 · x)), NIST's Misra1a model.
struct Misra1a;

impl CurveModel for Misra1a {
    fn n_params(&self) -> usize {
        2
    }
    fn value(&self, x: f64, b: &[f64]) -> Option<f64> {
        Some(b[0] * (1.0 - (-b[1] * x).exp())).filter(|v| v.is_finite())
    }
    fn gradient(&self, x: f64, b: &[f64], g: &mut [f64]) -> Option<()> {
        let e = (-b[1] * x).exp();
        g[0] = 1.0 - e;
        g[1] = b[0] * x * e;
        g.iter().all(|v| v.is_finite()).then_some(())
    }
}

fn nist_misra1a() -> Case {
    let check = "NIST Misra1a (nonlinear, from start 1): parameters";
    let set = match parse_strd(MISRA1A) {
        Ok(s) => s,
        Err(e) => return failed(check, NIST, String::new(), e),
    };
    let problem = CurveProblem {
        model: &Misra1a,
        x: &set.x,
        y: &set.y,
        weights: None,
    };
    let report = lm::solve(&problem, &set.starts[0], &Settings::default());
    digits_case(check, NIST, &report.params, &set.certified, 6.0)
}

fn probability_case(check: &str, rule: Rule, n: usize, want: f64) -> Case {
    let source = "standard normal table: Φ(2) = 0.97725, Φ(3) = 0.99865; P = 1 − (2Φ(k) − 1)^N";
    let got = planning::rejection_probability(
        &[rule],
        n,
        Error {
            shift_sd: 0.0,
            random_factor: 1.0,
        },
        100_000,
        1,
    );
    match got {
        Ok(p) => Case {
            check: check.to_string(),
            source,
            expected: format!("{want:.4}"),
            obtained: format!("{:.4}", p.p),
            pass: (p.p - want).abs() < 0.00015,
        },
        Err(e) => failed(check, source, format!("{want:.4}"), e),
    }
}

fn rule_case(check: &str, runs: &[[f64; 2]], want_rule: Option<Rule>, want: Decision) -> Case {
    let source = "rule definitions: Westgard et al., Clin Chem 1981;27:493–501";
    let targets = [LevelTarget {
        mean: 100.0,
        sd: 2.0,
    }; 2];
    let values: Vec<Vec<Option<f64>>> = runs.iter().map(|r| vec![Some(r[0]), Some(r[1])]).collect();
    let rules = crate::lab::default_qc_rules();
    let expected = format!(
        "{}{}",
        want.code(),
        want_rule.map_or(String::new(), |r| format!(" by {}", r.code()))
    );
    match qc::evaluate(&targets, &values, &rules) {
        Ok(v) => {
            let last = v.last();
            let broken: Vec<&str> = last
                .map(|l| l.violations.iter().map(|x| x.rule.code()).collect())
                .unwrap_or_default();
            let decision = last.map(|l| l.decision);
            Case {
                check: check.to_string(),
                source,
                expected,
                obtained: format!(
                    "{} ({})",
                    decision.map_or("none", |d| d.code()),
                    if broken.is_empty() {
                        "no rule broken".to_string()
                    } else {
                        broken.join(", ")
                    }
                ),
                pass: decision == Some(want)
                    && want_rule.is_none_or(|r| broken.contains(&r.code())),
            }
        }
        Err(e) => failed(check, source, expected, e.0),
    }
}

fn at(s: &str) -> DateTime<Utc> {
    s.parse().unwrap_or(DateTime::UNIX_EPOCH)
}

fn stability_case(
    check: &str,
    material: Material,
    now: &str,
    want_until: &str,
    want_limit: Limit,
) -> Case {
    let source = "label convention: a year-month expiry ends with that month, a stability \
                  counts elapsed hours from opening (common practice)";
    let Some(offset) = chrono::FixedOffset::east_opt(3 * 3600) else {
        return failed(check, source, want_until.to_string(), "no time zone".into());
    };
    match stability::evaluate(&material, at(now), &offset, WarningWindow::default()) {
        Ok(r) => {
            let got = r.material.until.with_timezone(&offset).to_rfc3339();
            Case {
                check: check.to_string(),
                source,
                expected: format!("{want_until} ({})", want_limit.describe()),
                obtained: format!("{got} ({})", r.material.governed_by.describe()),
                pass: r.material.until == at(want_until) && r.material.governed_by == want_limit,
            }
        }
        Err(e) => failed(check, source, want_until.to_string(), e.0),
    }
}

/// Every reference case, run now on this build's engine.
pub fn run_all() -> Vec<Case> {
    let mut out = vec![
        nist_polynomial("Norris", NORRIS, ModelKind::Linear, 9.0),
        nist_polynomial("Pontius", PONTIUS, ModelKind::Quadratic, 8.0),
        nist_misra1a(),
        probability_case("false rejection, 1-2s, 1 control", Rule::OneTwoS, 1, 0.0455),
        probability_case(
            "false rejection, 1-2s, 2 controls",
            Rule::OneTwoS,
            2,
            0.0889,
        ),
        probability_case(
            "false rejection, 1-3s, 1 control",
            Rule::OneThreeS,
            1,
            0.0027,
        ),
        probability_case(
            "false rejection, 1-3s, 2 controls",
            Rule::OneThreeS,
            2,
            0.0054,
        ),
    ];
    out.push(sigma_case());
    let factor = readings::enzyme_factor(1.1, 0.1, 1.0, 6220.0);
    out.push(Case {
        check: "enzyme factor: 1.1 mL total, 0.1 mL sample, 1 cm, ε 6220".into(),
        source: "worked arithmetic: 1.1 × 10⁶ / (0.1 × 1 × 6220) U/L per ΔA/min (NADH at 340 nm, ε from memory)",
        expected: "1768.49".into(),
        obtained: factor
            .as_ref()
            .map_or_else(|e| e.to_string(), |f| format!("{f:.2}")),
        pass: factor.is_ok_and(|f| (f - 1_768.488_745_980_707).abs() < 1e-9),
    });
    out.extend([
        rule_case(
            "two consecutive results of one level above +2 SD",
            &[[104.5, 100.0], [104.6, 101.0]],
            Some(Rule::TwoTwoS),
            Decision::Reject,
        ),
        rule_case(
            "one level above +2 SD, the other below −2 SD in one run",
            &[[104.4, 95.5]],
            Some(Rule::RangeFourS),
            Decision::Reject,
        ),
        rule_case(
            "four consecutive results above +1 SD (two runs of two levels)",
            &[[102.2, 102.4], [102.3, 102.5]],
            Some(Rule::FourOneS),
            Decision::Reject,
        ),
        rule_case(
            "ten consecutive results above the mean (five runs of two levels)",
            &[
                [100.5, 100.6],
                [100.4, 100.7],
                [100.8, 100.3],
                [100.5, 100.9],
                [100.2, 100.6],
            ],
            Some(Rule::TenX),
            Decision::Reject,
        ),
        rule_case(
            "one result beyond 2 SD but within 3 SD, nothing else",
            &[[104.5, 100.2]],
            Some(Rule::OneTwoS),
            Decision::Warning,
        ),
        rule_case(
            "one result beyond 3 SD",
            &[[106.5, 100.2]],
            Some(Rule::OneThreeS),
            Decision::Reject,
        ),
    ]);
    let mut opened = Material {
        expiry: match "2026-03".parse() {
            Ok(e) => e,
            Err(e) => {
                out.push(failed("stability", "", String::new(), e.to_string()));
                return out;
            }
        },
        opened_at: Some(at("2026-03-25T08:00:00Z")),
        in_use_hours: Some(168.0),
        on_board_since: None,
        on_board_hours: None,
        frozen: None,
        analytes: Vec::new(),
    };
    out.push(stability_case(
        "opened 7 days before a year-month expiry: the month's end governs",
        opened.clone(),
        "2026-03-28T12:00:00Z",
        "2026-04-01T00:00:00+03:00",
        Limit::MakerExpiry,
    ));
    if let Ok(e) = "2026-12".parse() {
        opened.expiry = e;
    }
    out.push(stability_case(
        "opened with 168 h stability, expiry far away: 168 h after opening",
        opened,
        "2026-03-28T12:00:00Z",
        "2026-04-01T11:00:00+03:00",
        Limit::InUse,
    ));
    out
}

/// The report as a table (for the screen, the printed sheet and CSV).
pub fn table(cases: &[Case]) -> crate::export::Table {
    crate::export::Table {
        slug: "verification",
        title: "Calculation verification",
        headers: vec!["check", "source", "expected", "obtained", "result"],
        rows: cases
            .iter()
            .map(|c| {
                vec![
                    c.check.clone(),
                    c.source.to_string(),
                    c.expected.clone(),
                    c.obtained.clone(),
                    if c.pass { "pass" } else { "FAIL" }.to_string(),
                ]
            })
            .collect(),
    }
}

/// The program version the report names.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_reference_case_passes_on_this_build() {
        let cases = run_all();
        assert!(cases.len() >= 15);
        for c in &cases {
            assert!(
                c.pass,
                "{} — expected {}, obtained {}",
                c.check, c.expected, c.obtained
            );
        }
    }

    /// The report can fail: a wrong expectation shows as FAIL, not as pass.
    #[test]
    fn a_case_that_disagrees_is_reported_as_a_failure() {
        let c = probability_case("1-2s with a wrong expectation", Rule::OneTwoS, 1, 0.05);
        assert!(!c.pass);
        let c = rule_case(
            "no rule in a quiet run",
            &[[100.5, 99.8]],
            None,
            Decision::Reject,
        );
        assert!(!c.pass);
        assert_eq!(table(&[c]).rows[0][4], "FAIL");
    }
}
