//! QC planning: the sigma metric, and how likely a rule set is to reject a run — with no
//! error (false rejection, Pfr) or with a systematic shift and a larger random error
//! (error detection, Ped).
//!
//! * Sigma metric = (TEa − |bias|) / CV, all in percent.
//! * A single rule 1-ks with N control results per run, each result z ~ N(Δ, f²) for a
//!   shift of Δ SD and random error multiplied by f: one result is outside ±k with
//!   p = 1 − [Φ((k − Δ)/f) − Φ((−k − Δ)/f)], and the run is rejected with 1 − (1 − p)^N
//!   (closed form; Δ = 0, f = 1 gives Pfr).
//! * Any other rule set: seeded Monte Carlo through the very engine that judges the
//!   bench's runs ([`super::qc::evaluate`]), so planning and the bench cannot disagree.
//!   Each trial is [`HISTORY_RUNS`] runs in control, then one run with the error; the
//!   trial counts when that last run is rejected by any rule of the set (every listed
//!   rule rejects here). The standard error is √(p(1 − p)/trials).

use rand::rngs::SmallRng;
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use statrs::distribution::{ContinuousCDF, Normal};

use super::qc::{self, Action, LevelTarget, Rule, RuleSetting};

/// In-control runs before the run with the error, so that every across-run window
/// (12-x over one level) can fill.
pub const HISTORY_RUNS: usize = 12;

/// The error the run under test carries.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Error {
    /// Systematic shift, in SD.
    pub shift_sd: f64,
    /// Random error as a multiple of the stable SD (1 = none added).
    pub random_factor: f64,
}

/// A probability, and its standard error (0 for a closed form).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Probability {
    pub p: f64,
    pub std_error: f64,
}

/// An allowable total error figure the lab may start from (it stays the lab's choice).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AllowableErrorSuggestion {
    pub analyte: &'static str,
    pub tea_pct: f64,
    /// Where the figure comes from, in words shown beside it.
    pub source: &'static str,
}

const TABLE_CLIA: &str =
    "US CLIA limit as printed in Biochem Med 2018;28(2):020711, Table 2 — verify against the current rule";
const TABLE_BV: &str =
    "biological variation, desirable, as printed in Biochem Med 2018;28(2):020711, Table 2";
const FROM_MEMORY_CLIA_2024: &str =
    "US CLIA acceptance limit as revised in 2024, from memory — verify (it has an absolute floor at low values)";

/// Published allowable-error figures offered as editable suggestions, each with its source.
pub const ALLOWABLE_ERROR_SUGGESTIONS: [AllowableErrorSuggestion; 17] = [
    AllowableErrorSuggestion {
        analyte: "Albumin",
        tea_pct: 10.0,
        source: TABLE_CLIA,
    },
    AllowableErrorSuggestion {
        analyte: "ALP",
        tea_pct: 30.0,
        source: TABLE_CLIA,
    },
    AllowableErrorSuggestion {
        analyte: "ALT",
        tea_pct: 27.48,
        source: TABLE_BV,
    },
    AllowableErrorSuggestion {
        analyte: "ALT",
        tea_pct: 15.0,
        source: FROM_MEMORY_CLIA_2024,
    },
    AllowableErrorSuggestion {
        analyte: "Bilirubin, total",
        tea_pct: 26.94,
        source: TABLE_BV,
    },
    AllowableErrorSuggestion {
        analyte: "Cholesterol",
        tea_pct: 9.01,
        source: TABLE_BV,
    },
    AllowableErrorSuggestion {
        analyte: "Creatinine",
        tea_pct: 8.87,
        source: TABLE_BV,
    },
    AllowableErrorSuggestion {
        analyte: "Creatinine",
        tea_pct: 10.0,
        source: FROM_MEMORY_CLIA_2024,
    },
    AllowableErrorSuggestion {
        analyte: "GGT",
        tea_pct: 22.11,
        source: TABLE_BV,
    },
    AllowableErrorSuggestion {
        analyte: "Glucose",
        tea_pct: 10.0,
        source: TABLE_CLIA,
    },
    AllowableErrorSuggestion {
        analyte: "Glucose",
        tea_pct: 8.0,
        source: FROM_MEMORY_CLIA_2024,
    },
    AllowableErrorSuggestion {
        analyte: "LD",
        tea_pct: 20.0,
        source: TABLE_CLIA,
    },
    AllowableErrorSuggestion {
        analyte: "Potassium",
        tea_pct: 5.61,
        source: TABLE_BV,
    },
    AllowableErrorSuggestion {
        analyte: "Total protein",
        tea_pct: 10.0,
        source: TABLE_CLIA,
    },
    AllowableErrorSuggestion {
        analyte: "Triglycerides",
        tea_pct: 25.99,
        source: TABLE_BV,
    },
    AllowableErrorSuggestion {
        analyte: "Urea",
        tea_pct: 15.55,
        source: TABLE_BV,
    },
    AllowableErrorSuggestion {
        analyte: "Uric acid",
        tea_pct: 11.97,
        source: TABLE_BV,
    },
];

/// Sigma metric = (TEa − |bias|) / CV; every input in percent.
pub fn sigma(tea_pct: f64, bias_pct: f64, cv_pct: f64) -> Result<f64, String> {
    for (name, v) in [
        ("tea_pct", tea_pct),
        ("bias_pct", bias_pct),
        ("cv_pct", cv_pct),
    ] {
        if !v.is_finite() {
            return Err(format!("{name}: a number in percent is needed"));
        }
    }
    if tea_pct <= 0.0 || tea_pct > 100.0 {
        return Err("tea_pct: the allowable total error must be above 0 and at most 100 %".into());
    }
    if cv_pct <= 0.0 || cv_pct > 100.0 {
        return Err("cv_pct: the CV must be above 0 and at most 100 %".into());
    }
    Ok((tea_pct - bias_pct.abs()) / cv_pct)
}

/// What sigma-based QC design suggests for a test of this sigma metric, in our own
/// words (common practice after the published sigma-based selection of rules and
/// numbers of controls; the lab's QC policy decides).
pub fn design_for(sigma: f64) -> &'static str {
    if !sigma.is_finite() {
        ""
    } else if sigma >= 6.0 {
        "1-3s with 2 controls per run is enough"
    } else if sigma >= 5.0 {
        "1-3s, 2-2s and R-4s with 2 controls per run"
    } else if sigma >= 4.0 {
        "1-3s, 2-2s, R-4s and 4-1s with 4 controls per run (or 2 per run over two runs)"
    } else {
        "the full multirule (with 8-x or 10-x), 4 or more controls per run and QC more \
         often; reduce the method's imprecision or bias"
    }
}

fn check(n_per_run: usize, error: Error) -> Result<(), String> {
    if !(1..=6).contains(&n_per_run) {
        return Err("n_per_run: give 1 to 6 control results per run".into());
    }
    if !(error.shift_sd.is_finite() && (-10.0..=10.0).contains(&error.shift_sd)) {
        return Err("systematic_shift_sd: give a shift from −10 to 10 SD".into());
    }
    if !(error.random_factor.is_finite() && (1.0..=10.0).contains(&error.random_factor)) {
        return Err("random_error_factor: give a factor from 1 to 10".into());
    }
    Ok(())
}

/// The limit k of a single 1-ks rule, if `rules` is exactly one such rule.
fn single_limit(rules: &[Rule]) -> Option<f64> {
    match rules {
        [Rule::OneTwoS] => Some(2.0),
        [Rule::OneTwoHalfS] => Some(2.5),
        [Rule::OneThreeS] => Some(3.0),
        [Rule::OneThreeHalfS] => Some(3.5),
        _ => None,
    }
}

/// Probability that one run of `n_per_run` results is rejected by a single 1-ks rule
/// (closed form, see the module note).
pub fn single_rule(k: f64, n_per_run: usize, error: Error) -> Result<Probability, String> {
    check(n_per_run, error)?;
    let z = Normal::new(0.0, 1.0).map_err(|e| e.to_string())?;
    let (d, f) = (error.shift_sd, error.random_factor);
    let inside = z.cdf((k - d) / f) - z.cdf((-k - d) / f);
    Ok(Probability {
        p: 1.0 - inside.powi(n_per_run as i32),
        std_error: 0.0,
    })
}

/// Probability that a run is rejected by `rules` with `n_per_run` results per run:
/// closed form for a single 1-ks rule, else `trials` seeded Monte Carlo trials.
pub fn rejection_probability(
    rules: &[Rule],
    n_per_run: usize,
    error: Error,
    trials: usize,
    seed: u64,
) -> Result<Probability, String> {
    if rules.is_empty() {
        return Err("rules: give at least one rule".into());
    }
    if let Some(k) = single_limit(rules) {
        return single_rule(k, n_per_run, error);
    }
    check(n_per_run, error)?;
    if !(1_000..=10_000_000).contains(&trials) {
        return Err("trials: give 1000 to 10 000 000".into());
    }
    let mut sim = Simulation::new(rules, n_per_run, error, seed);
    sim.run(trials)?;
    Ok(sim.result())
}

/// A Monte Carlo estimate that can be run in slices (so a page stays responsive) and
/// read at any point.
pub struct Simulation {
    rules: Vec<RuleSetting>,
    targets: Vec<LevelTarget>,
    error: Error,
    rng: SmallRng,
    pub done: usize,
    pub rejected: usize,
}

impl Simulation {
    pub fn new(rules: &[Rule], n_per_run: usize, error: Error, seed: u64) -> Simulation {
        Simulation {
            rules: rules
                .iter()
                .map(|&rule| RuleSetting {
                    rule,
                    action: Action::Reject,
                })
                .collect(),
            targets: vec![LevelTarget { mean: 0.0, sd: 1.0 }; n_per_run],
            error,
            rng: SmallRng::seed_from_u64(seed),
            done: 0,
            rejected: 0,
        }
    }

    /// Run `trials` more trials.
    pub fn run(&mut self, trials: usize) -> Result<(), String> {
        let n = self.targets.len();
        let mut runs: Vec<Vec<Option<f64>>> = vec![vec![None; n]; HISTORY_RUNS + 1];
        for _ in 0..trials {
            for (r, run) in runs.iter_mut().enumerate() {
                let last = r == HISTORY_RUNS;
                for v in run.iter_mut() {
                    let z: f64 = StandardNormal.sample(&mut self.rng);
                    *v = Some(if last {
                        self.error.shift_sd + self.error.random_factor * z
                    } else {
                        z
                    });
                }
            }
            let verdicts = qc::evaluate(&self.targets, &runs, &self.rules).map_err(|e| e.0)?;
            if verdicts
                .last()
                .is_some_and(|v| v.decision == qc::Decision::Reject)
            {
                self.rejected += 1;
            }
            self.done += 1;
        }
        Ok(())
    }

    pub fn result(&self) -> Probability {
        let n = self.done.max(1) as f64;
        let p = self.rejected as f64 / n;
        Probability {
            p,
            std_error: (p * (1.0 - p) / n).sqrt(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn inputs_out_of_range_are_refused_with_the_field() {
        let e = Error {
            shift_sd: 0.0,
            random_factor: 1.0,
        };
        assert!(single_rule(3.0, 0, e).unwrap_err().starts_with("n_per_run"));
        assert!(sigma(10.0, 1.0, 0.0).unwrap_err().starts_with("cv_pct"));
        assert!(rejection_probability(&[], 2, e, 1000, 1).is_err());
        let big = Error {
            shift_sd: 1e308,
            random_factor: 1.0,
        };
        assert!(rejection_probability(&[Rule::TwoTwoS], 2, big, 1000, 1)
            .unwrap_err()
            .starts_with("systematic_shift_sd"));
    }

    /// The same seed gives the same estimate; slices add up to one run.
    #[test]
    fn the_monte_carlo_is_reproducible_and_can_run_in_slices() {
        let rules = [Rule::OneThreeS, Rule::TwoTwoS, Rule::RangeFourS];
        let e = Error {
            shift_sd: 2.0,
            random_factor: 1.0,
        };
        let a = rejection_probability(&rules, 2, e, 2_000, 42).unwrap();
        let b = rejection_probability(&rules, 2, e, 2_000, 42).unwrap();
        assert_eq!(a, b);
        let mut s = Simulation::new(&rules, 2, e, 42);
        s.run(500).unwrap();
        s.run(1_500).unwrap();
        assert_eq!(s.result(), a);
    }
}
