//! Quality-control rules: z-scores and a multirule engine that decides, run by run,
//! accept / warning / reject.
//!
//! Rule definitions follow Westgard JO, Barry PL, Hunt MR, Groth T. "A multi-rule
//! Shewhart chart for quality control in clinical chemistry." Clin Chem
//! 1981;27:493–501, and the three-level rules (2of3-2s, 3-1s, 6-x, 9-x, 12-x) of the
//! same family. With z = (value − mean) / SD for each control result:
//!
//! | rule | violated when |
//! |---|---|
//! | 1-2s, 1-2.5s, 1-3s, 1-3.5s | one result beyond ±2, ±2.5, ±3, ±3.5 SD |
//! | 2-2s | two consecutive results beyond the same 2 SD limit (both above +2 or both below −2) |
//! | R-4s | in one run, one result above +2 SD and another below −2 SD |
//! | 3-1s, 4-1s | three / four consecutive results beyond the same 1 SD limit |
//! | 2of3-2s | two of three consecutive results beyond the same 2 SD limit |
//! | 6-x, 8-x, 9-x, 10-x, 12-x | that many consecutive results on the same side of the mean |
//!
//! "Consecutive" is read in three ways, as the published definitions do:
//! * **within the run**, across its control levels (two levels both above +2 SD);
//! * **across runs within one level** (the last results of that level);
//! * **across runs and levels**: all results in run order, levels in their set-up order
//!   inside a run (4-1s over two runs of two levels).
//!
//! The third reading is reported only when the first two did not already find the
//! same rule broken in that run. A missing level is skipped, not counted. By default
//! every earlier result counts, also those of rejected runs; [`Options`] can start the
//! windows afresh after a rejection (once the cause was corrected). A violation belongs to the run that
//! completes it: its window ends with that run's results. Every rule is checked on
//! every run (the 1981 chart used 1-2s only as a trigger for the others; computers
//! can apply all of them). Each rule's action, warning or rejection, is the lab's
//! choice; by default 1-2s warns and every other rule rejects. The lab, not this
//! program, decides which rules it applies.

use serde::{Deserialize, Serialize};
use std::fmt;

/// A control rule.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(try_from = "String", into = "String")]
pub enum Rule {
    OneTwoS,
    OneTwoHalfS,
    OneThreeS,
    OneThreeHalfS,
    TwoTwoS,
    RangeFourS,
    FourOneS,
    TwoOfThreeTwoS,
    ThreeOneS,
    SixX,
    EightX,
    NineX,
    TenX,
    TwelveX,
}

/// What a rule looks for.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Pattern {
    /// `count` consecutive results beyond the same `limit` (in SD).
    Beyond { count: usize, limit: f64 },
    /// `hits` of `of` consecutive results beyond the same `limit`.
    Some { hits: usize, of: usize, limit: f64 },
    /// `count` consecutive results on the same side of the mean.
    Side { count: usize },
    /// One result above +limit and another below −limit in the same run.
    Range { limit: f64 },
}

impl Rule {
    pub const ALL: [Rule; 14] = [
        Rule::OneTwoS,
        Rule::OneTwoHalfS,
        Rule::OneThreeS,
        Rule::OneThreeHalfS,
        Rule::TwoTwoS,
        Rule::RangeFourS,
        Rule::FourOneS,
        Rule::TwoOfThreeTwoS,
        Rule::ThreeOneS,
        Rule::SixX,
        Rule::EightX,
        Rule::NineX,
        Rule::TenX,
        Rule::TwelveX,
    ];

    /// The published notation.
    pub fn code(self) -> &'static str {
        match self {
            Rule::OneTwoS => "1-2s",
            Rule::OneTwoHalfS => "1-2.5s",
            Rule::OneThreeS => "1-3s",
            Rule::OneThreeHalfS => "1-3.5s",
            Rule::TwoTwoS => "2-2s",
            Rule::RangeFourS => "R-4s",
            Rule::FourOneS => "4-1s",
            Rule::TwoOfThreeTwoS => "2of3-2s",
            Rule::ThreeOneS => "3-1s",
            Rule::SixX => "6-x",
            Rule::EightX => "8-x",
            Rule::NineX => "9-x",
            Rule::TenX => "10-x",
            Rule::TwelveX => "12-x",
        }
    }

    /// Whether the rule looks for a systematic error (results on one side of the mean:
    /// 2-2s, 2of3-2s, 4-1s, 3-1s, the n-x rules) rather than a random one (a single
    /// result beyond a limit, R-4s), as the published multirule interpretation reads
    /// them (from memory of that literature); a rejection by such a rule points to the
    /// calibration or the reagent.
    pub fn detects_systematic_error(self) -> bool {
        match self.pattern() {
            Pattern::Beyond { count, .. } => count >= 2,
            Pattern::Some { .. } | Pattern::Side { .. } => true,
            Pattern::Range { .. } => false,
        }
    }

    /// The rule in words, for the run's explanation.
    pub fn describe(self) -> String {
        match self.pattern() {
            Pattern::Beyond { count: 1, limit } => format!("one result beyond ±{limit} SD"),
            Pattern::Beyond { count, limit } => {
                format!("{count} consecutive results beyond the same {limit} SD limit")
            }
            Pattern::Some { hits, of, limit } => {
                format!("{hits} of {of} consecutive results beyond the same {limit} SD limit")
            }
            Pattern::Side { count } => {
                format!("{count} consecutive results on the same side of the mean")
            }
            Pattern::Range { limit } => {
                format!("in one run, one result above +{limit} SD and another below −{limit} SD")
            }
        }
    }

    fn pattern(self) -> Pattern {
        use Pattern::*;
        match self {
            Rule::OneTwoS => Beyond {
                count: 1,
                limit: 2.0,
            },
            Rule::OneTwoHalfS => Beyond {
                count: 1,
                limit: 2.5,
            },
            Rule::OneThreeS => Beyond {
                count: 1,
                limit: 3.0,
            },
            Rule::OneThreeHalfS => Beyond {
                count: 1,
                limit: 3.5,
            },
            Rule::TwoTwoS => Beyond {
                count: 2,
                limit: 2.0,
            },
            Rule::RangeFourS => Range { limit: 2.0 },
            Rule::FourOneS => Beyond {
                count: 4,
                limit: 1.0,
            },
            Rule::TwoOfThreeTwoS => Some {
                hits: 2,
                of: 3,
                limit: 2.0,
            },
            Rule::ThreeOneS => Beyond {
                count: 3,
                limit: 1.0,
            },
            Rule::SixX => Side { count: 6 },
            Rule::EightX => Side { count: 8 },
            Rule::NineX => Side { count: 9 },
            Rule::TenX => Side { count: 10 },
            Rule::TwelveX => Side { count: 12 },
        }
    }

    /// The action a lab usually gives the rule: 1-2s warns, the others reject.
    pub fn default_action(self) -> Action {
        if self == Rule::OneTwoS {
            Action::Warning
        } else {
            Action::Reject
        }
    }
}

impl fmt::Display for Rule {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.code())
    }
}

impl std::str::FromStr for Rule {
    type Err = String;
    fn from_str(s: &str) -> Result<Rule, String> {
        let norm: String = s
            .trim()
            .to_lowercase()
            .chars()
            .filter(|c| !c.is_whitespace())
            .collect();
        let norm = norm.replace('_', "-");
        Rule::ALL
            .into_iter()
            .find(|r| r.code().to_lowercase() == norm)
            .ok_or_else(|| {
                format!(
                    "unknown QC rule {s:?}; use one of {}",
                    Rule::ALL
                        .iter()
                        .map(|r| r.code())
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            })
    }
}

impl TryFrom<String> for Rule {
    type Error = String;
    fn try_from(s: String) -> Result<Rule, String> {
        s.parse()
    }
}

impl From<Rule> for String {
    fn from(r: Rule) -> String {
        r.code().to_string()
    }
}

/// What a violation of a rule does to the run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Action {
    Warning,
    Reject,
}

/// A rule with the lab's chosen action.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct RuleSetting {
    pub rule: Rule,
    pub action: Action,
}

impl RuleSetting {
    pub fn default_for(rule: Rule) -> RuleSetting {
        RuleSetting {
            rule,
            action: rule.default_action(),
        }
    }
}

/// The run's verdict.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Decision {
    Accept,
    Warning,
    Reject,
}

impl Decision {
    pub fn code(self) -> &'static str {
        match self {
            Decision::Accept => "accept",
            Decision::Warning => "warning",
            Decision::Reject => "reject",
        }
    }
}

/// How "consecutive" was read for a violation.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Scope {
    WithinRun,
    AcrossRuns,
    AcrossRunsAndLevels,
}

/// One rule broken, with the levels and runs (0-based) whose results broke it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Violation {
    pub rule: Rule,
    pub action: Action,
    pub scope: Scope,
    pub levels: Vec<usize>,
    pub runs: Vec<usize>,
}

impl Violation {
    /// A sentence for the technologist; `run_label` names a run (its date, say).
    pub fn explain(&self, level_names: &[String], run_label: impl Fn(usize) -> String) -> String {
        let names: Vec<String> = self
            .levels
            .iter()
            .map(|&l| {
                level_names
                    .get(l)
                    .cloned()
                    .unwrap_or_else(|| format!("level {}", l + 1))
            })
            .collect();
        let runs: Vec<String> = self.runs.iter().map(|&r| run_label(r)).collect();
        let scope = match self.scope {
            Scope::WithinRun => "within the run",
            Scope::AcrossRuns => "across runs",
            Scope::AcrossRunsAndLevels => "across runs and levels",
        };
        format!(
            "{} ({}, {scope}): {} — {}; run{} {}",
            self.rule.code(),
            match self.action {
                Action::Warning => "warning",
                Action::Reject => "reject",
            },
            self.rule.describe(),
            names.join(" and "),
            if runs.len() == 1 { "" } else { "s" },
            runs.join(", ")
        )
    }
}

/// The verdict on one run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunVerdict {
    pub decision: Decision,
    pub violations: Vec<Violation>,
}

/// The target of one control level.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct LevelTarget {
    pub mean: f64,
    pub sd: f64,
}

/// QC input that cannot be evaluated.
#[derive(Debug, Clone, PartialEq)]
pub struct QcError(pub String);

impl fmt::Display for QcError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for QcError {}

/// z = (value − mean) / SD.
pub fn z_score(value: f64, target: LevelTarget) -> f64 {
    (value - target.mean) / target.sd
}

/// One control result in the run-ordered sequence.
#[derive(Debug, Clone, Copy)]
struct Obs {
    run: usize,
    level: usize,
    z: f64,
}

/// How rule windows treat earlier runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub struct Options {
    /// After a rejected run (and the corrective action that follows it), start the
    /// across-run windows afresh with the next run instead of counting the results
    /// from before. Off by default: "consecutive" then means every result in order.
    pub restart_after_reject: bool,
}

/// Evaluate every run in order; run `r`'s verdict uses runs `0..=r`.
/// `runs[r][l]` is level `l`'s value in run `r` (`None` = not run).
pub fn evaluate(
    targets: &[LevelTarget],
    runs: &[Vec<Option<f64>>],
    rules: &[RuleSetting],
) -> Result<Vec<RunVerdict>, QcError> {
    evaluate_with(targets, runs, rules, Options::default())
}

/// [`evaluate`] with [`Options`].
pub fn evaluate_with(
    targets: &[LevelTarget],
    runs: &[Vec<Option<f64>>],
    rules: &[RuleSetting],
    options: Options,
) -> Result<Vec<RunVerdict>, QcError> {
    let mut judge = Judge::new(targets, rules, options)?;
    let mut verdicts = Vec::with_capacity(runs.len());
    for (r, run) in runs.iter().enumerate() {
        verdicts.push(judge.judge_named(run, || format!("runs[{r}]"))?);
    }
    Ok(verdicts)
}

/// The longest window any rule looks back over (12-x): no verdict depends on results
/// further back, so the judge keeps only this many per level and in run order.
pub const LONGEST_WINDOW: usize = 12;

/// The rule windows of one test after its last judged run: enough to judge the next
/// run without replaying the history. Judging a run costs the same at the first run
/// and after ten years, and the state's size does not grow with the history.
/// Cloning it is cheap, so a preview judges a copy.
#[derive(Debug, Clone)]
pub struct Judge {
    targets: Vec<LevelTarget>,
    rules: Vec<RuleSetting>,
    options: Options,
    /// Runs judged so far (the next run's index).
    runs: usize,
    /// The newest results of each level, oldest first.
    per_level: Vec<Vec<Obs>>,
    /// The newest results in run order, oldest first.
    in_order: Vec<Obs>,
    /// How many results each window keeps (`usize::MAX` keeps everything: the tests'
    /// reading of the rules over the whole history, to compare with).
    keep: usize,
}

impl Judge {
    /// A judge with no runs yet; the targets are checked here.
    pub fn new(
        targets: &[LevelTarget],
        rules: &[RuleSetting],
        options: Options,
    ) -> Result<Judge, QcError> {
        if targets.is_empty() {
            return Err(QcError(
                "levels: give at least one control level with its mean and SD".into(),
            ));
        }
        for (l, t) in targets.iter().enumerate() {
            if !(t.mean.is_finite() && t.sd.is_finite() && t.sd > 0.0) {
                return Err(QcError(format!(
                    "levels[{l}]: the mean must be a number and the SD a number above 0 (SD is {})",
                    t.sd
                )));
            }
        }
        Ok(Judge {
            targets: targets.to_vec(),
            rules: rules.to_vec(),
            options,
            runs: 0,
            per_level: vec![Vec::new(); targets.len()],
            in_order: Vec::new(),
            // In run order a window may end at any result of the newest run.
            keep: LONGEST_WINDOW + targets.len(),
        })
    }

    /// A judge that keeps every result: the rules read over the whole history, to check
    /// that keeping [`LONGEST_WINDOW`] results changes no verdict.
    #[cfg(test)]
    fn keeping_everything(mut self) -> Judge {
        self.keep = usize::MAX;
        self
    }

    /// How many runs have been judged.
    pub fn runs_judged(&self) -> usize {
        self.runs
    }

    /// Judge the next run (`run[l]` is level `l`'s value, `None` = not run) and take
    /// it into the windows. A run that cannot be judged leaves the state as it was.
    pub fn judge(&mut self, run: &[Option<f64>]) -> Result<RunVerdict, QcError> {
        self.judge_named(run, || "the run".to_string())
    }

    /// [`Judge::judge`], naming the run as `name` in an error.
    pub(crate) fn judge_named(
        &mut self,
        run: &[Option<f64>],
        name: impl Fn() -> String,
    ) -> Result<RunVerdict, QcError> {
        let n_levels = self.targets.len();
        if run.len() != n_levels {
            return Err(QcError(format!(
                "{} has {} values for {n_levels} levels: give one value per level, null \
                 where a level was not run",
                name(),
                run.len(),
            )));
        }
        if let Some(l) = run.iter().position(|v| v.is_some_and(|v| !v.is_finite())) {
            return Err(QcError(format!("{}[{l}] is not a number", name())));
        }
        let r = self.runs;
        let this_run: Vec<Obs> = run
            .iter()
            .enumerate()
            .filter_map(|(level, v)| {
                v.map(|v| Obs {
                    run: r,
                    level,
                    z: z_score(v, self.targets[level]),
                })
            })
            .collect();
        for o in &this_run {
            self.per_level[o.level].push(*o);
            self.in_order.push(*o);
        }
        let mut violations = Vec::new();
        for setting in &self.rules {
            check_rule(
                *setting,
                n_levels,
                &self.per_level,
                &self.in_order,
                &this_run,
                &mut violations,
            );
        }
        let decision = violations.iter().fold(Decision::Accept, |d, v| {
            d.max(match v.action {
                Action::Warning => Decision::Warning,
                Action::Reject => Decision::Reject,
            })
        });
        self.runs += 1;
        if self.options.restart_after_reject && decision == Decision::Reject {
            self.per_level.iter_mut().for_each(Vec::clear);
            self.in_order.clear();
        }
        let keep = self.keep;
        let trim = |v: &mut Vec<Obs>| {
            // Amortised: drop the old results only once the window is well past full.
            if v.len() > keep.saturating_mul(4) {
                v.drain(..v.len() - keep);
            }
        };
        self.per_level.iter_mut().for_each(trim);
        trim(&mut self.in_order);
        Ok(RunVerdict {
            decision,
            violations,
        })
    }
}

/// +1 if beyond +limit, −1 if beyond −limit, 0 otherwise.
fn beyond(z: f64, limit: f64) -> i32 {
    if z > limit {
        1
    } else if z < -limit {
        -1
    } else {
        0
    }
}

fn side(z: f64) -> i32 {
    if z > 0.0 {
        1
    } else if z < 0.0 {
        -1
    } else {
        0
    }
}

fn violation(setting: RuleSetting, scope: Scope, window: &[Obs]) -> Violation {
    let mut levels: Vec<usize> = window.iter().map(|o| o.level).collect();
    levels.sort_unstable();
    levels.dedup();
    let mut runs: Vec<usize> = window.iter().map(|o| o.run).collect();
    runs.sort_unstable();
    runs.dedup();
    Violation {
        rule: setting.rule,
        action: setting.action,
        scope,
        levels,
        runs,
    }
}

/// Does the window (oldest first) match the pattern? For `Some`, the newest result
/// must be one of the hits, so the run that completes the pattern owns it.
fn window_matches(p: Pattern, window: &[Obs]) -> Option<Vec<Obs>> {
    match p {
        Pattern::Beyond { count, limit } => {
            if window.len() < count {
                return None;
            }
            let w = &window[window.len() - count..];
            let s = beyond(w[0].z, limit);
            (s != 0 && w.iter().all(|o| beyond(o.z, limit) == s)).then(|| w.to_vec())
        }
        Pattern::Side { count } => {
            if window.len() < count {
                return None;
            }
            let w = &window[window.len() - count..];
            let s = side(w[0].z);
            (s != 0 && w.iter().all(|o| side(o.z) == s)).then(|| w.to_vec())
        }
        Pattern::Some { hits, of, limit } => {
            if window.len() < of {
                return None;
            }
            let w = &window[window.len() - of..];
            let newest = beyond(w[of - 1].z, limit);
            if newest == 0 {
                return None;
            }
            let is_hit = |o: &&Obs| beyond(o.z, limit) == newest;
            (w.iter().filter(is_hit).count() >= hits)
                .then(|| w.iter().filter(is_hit).copied().collect())
        }
        Pattern::Range { .. } => None,
    }
}

/// `per_level[l]` and `history` end with this run's results.
fn check_rule(
    setting: RuleSetting,
    n_levels: usize,
    per_level: &[Vec<Obs>],
    history: &[Obs],
    this_run: &[Obs],
    out: &mut Vec<Violation>,
) {
    let Some(current) = this_run.first().map(|o| o.run) else {
        return;
    };
    let pattern = setting.rule.pattern();
    let window_len = match pattern {
        Pattern::Beyond { count, .. } | Pattern::Side { count } => count,
        Pattern::Some { of, .. } => of,
        Pattern::Range { limit } => {
            let high = |o: &&Obs| o.z > limit;
            let low = |o: &&Obs| o.z < -limit;
            if this_run.iter().any(|o| high(&o)) && this_run.iter().any(|o| low(&o)) {
                let both: Vec<Obs> = this_run
                    .iter()
                    .filter(high)
                    .chain(this_run.iter().filter(low))
                    .copied()
                    .collect();
                out.push(violation(setting, Scope::WithinRun, &both));
            }
            return;
        }
    };
    // One result: any level of this run.
    if window_len == 1 {
        let hit = |o: &&Obs| window_matches(pattern, std::slice::from_ref(*o)).is_some();
        if this_run.iter().any(|o| hit(&o)) {
            let hits: Vec<Obs> = this_run.iter().filter(hit).copied().collect();
            out.push(violation(setting, Scope::WithinRun, &hits));
        }
        return;
    }
    // Within the run, across levels: enough levels in this run on their own.
    if this_run.len() >= window_len {
        let (sign, needed): (fn(f64, f64) -> i32, usize) = match pattern {
            Pattern::Beyond { count, .. } => (beyond, count),
            Pattern::Some { hits, .. } => (beyond, hits),
            Pattern::Side { count } => (|z, _| side(z), count),
            Pattern::Range { .. } => return, // R-4s was judged above
        };
        let limit = match pattern {
            Pattern::Beyond { limit, .. } | Pattern::Some { limit, .. } => limit,
            _ => 0.0,
        };
        let matched = [1, -1].into_iter().find_map(|s| {
            let on_side = |o: &&Obs| sign(o.z, limit) == s;
            (this_run.iter().filter(on_side).count() >= needed).then(|| {
                this_run
                    .iter()
                    .filter(on_side)
                    .copied()
                    .collect::<Vec<Obs>>()
            })
        });
        if let Some(hit) = matched {
            out.push(violation(setting, Scope::WithinRun, &hit));
        }
    }
    // Across runs within each level measured in this run.
    for level in 0..n_levels {
        if !this_run.iter().any(|o| o.level == level) {
            continue;
        }
        if let Some(w) = window_matches(pattern, &per_level[level]) {
            if w.iter().any(|o| o.run != current) {
                out.push(violation(setting, Scope::AcrossRuns, &w));
            }
        }
    }
    // Across runs and levels: the run-ordered sequence of all results. Only when the
    // window spans runs and levels (otherwise one of the scopes above already said it).
    // Windows may end at any result of this run. Reported only when the rule was not
    // already broken within the run or within a level: the combined reading exists to
    // catch what those miss, not to repeat them.
    let already = out.iter().any(|v| v.rule == setting.rule);
    if n_levels > 1 && !already {
        let first_of_run = history.len() - this_run.len();
        let mut found: Vec<Violation> = Vec::new();
        for end in first_of_run + 1..=history.len() {
            if let Some(w) = window_matches(pattern, &history[..end]) {
                let spans_runs = w.iter().any(|o| o.run != current);
                let spans_levels = w.iter().any(|o| o.level != w[0].level);
                let v = violation(setting, Scope::AcrossRunsAndLevels, &w);
                if spans_runs && spans_levels && !found.contains(&v) {
                    found.push(v);
                }
            }
        }
        out.extend(found);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rule_names_round_trip_and_unknown_is_explained() {
        for r in Rule::ALL {
            assert_eq!(r.code().parse::<Rule>().unwrap(), r);
        }
        assert_eq!("r-4S".parse::<Rule>().unwrap(), Rule::RangeFourS);
        let e = "7-x".parse::<Rule>().unwrap_err();
        assert!(e.contains("10-x"), "{e}");
    }

    #[test]
    fn bad_targets_and_ragged_runs_are_refused() {
        let t = [LevelTarget {
            mean: 100.0,
            sd: 0.0,
        }];
        assert!(evaluate(&t, &[], &[]).unwrap_err().0.contains("levels[0]"));
        let t = [
            LevelTarget {
                mean: 100.0,
                sd: 2.0,
            },
            LevelTarget {
                mean: 200.0,
                sd: 4.0,
            },
        ];
        let e = evaluate(&t, &[vec![Some(1.0)]], &[]).unwrap_err();
        assert!(e.0.contains("runs[0]"), "{}", e.0);
    }

    #[test]
    fn bounded_windows_give_the_verdicts_of_the_whole_history() {
        use rand::{Rng, SeedableRng};
        let rules: Vec<RuleSetting> = Rule::ALL.map(RuleSetting::default_for).to_vec();
        let mut rng = rand::rngs::SmallRng::seed_from_u64(7);
        let mut compared = 0;
        for case in 0..60 {
            let n_levels = 1 + case % 3;
            let targets: Vec<LevelTarget> = (0..n_levels)
                .map(|l| LevelTarget {
                    mean: 50.0 * (l + 1) as f64,
                    sd: 2.0 + l as f64,
                })
                .collect();
            let options = Options {
                restart_after_reject: case % 2 == 1,
            };
            // A drifting process so long same-side and beyond-limit stretches occur.
            let mut shift = 0.0;
            let runs: Vec<Vec<Option<f64>>> = (0..300)
                .map(|_| {
                    shift = (shift + rng.gen_range(-0.4..0.4f64)).clamp(-3.0, 3.0);
                    targets
                        .iter()
                        .map(|t| {
                            (rng.gen_range(0..10) != 0)
                                .then(|| t.mean + t.sd * (shift + rng.gen_range(-1.5..1.5)))
                        })
                        .collect()
                })
                .collect();
            let mut bounded = Judge::new(&targets, &rules, options).unwrap();
            let mut whole = Judge::new(&targets, &rules, options)
                .unwrap()
                .keeping_everything();
            for run in &runs {
                assert_eq!(bounded.judge(run).unwrap(), whole.judge(run).unwrap());
                compared += 1;
            }
            assert!(bounded
                .per_level
                .iter()
                .all(|v| v.len() <= 4 * bounded.keep));
        }
        assert_eq!(compared, 60 * 300);
    }

    #[test]
    fn a_bad_run_leaves_the_judge_as_it_was() {
        let t = [LevelTarget {
            mean: 100.0,
            sd: 2.0,
        }];
        let rules = [RuleSetting::default_for(Rule::TwoTwoS)];
        let mut j = Judge::new(&t, &rules, Options::default()).unwrap();
        j.judge(&[Some(105.0)]).unwrap();
        let e = j.judge(&[Some(f64::NAN)]).unwrap_err();
        assert!(e.0.contains("the run[0] is not a number"), "{}", e.0);
        assert!(j.judge(&[Some(1.0), None]).is_err());
        assert_eq!(j.runs_judged(), 1);
        // The second result beyond +2 SD completes 2-2s with the first.
        assert_eq!(j.judge(&[Some(105.0)]).unwrap().decision, Decision::Reject);
    }
}
