//! The JSON protocol of the `cuvette-calc` command-line calculator: one request in, one
//! answer out, both JSON, driving the same engine as the app.
//!
//! Field names are part of the protocol (outside checks drive it); change them only
//! with the README and `--help`. Every error names the field that is wrong.

use chrono::{DateTime, FixedOffset, TimeZone, Utc};
use serde_json::{json, Map, Value};

use crate::engine::calibration::{
    self, CalPoint, Curve, ModelKind, ReplicateUse, ReportableRange, Weighting,
};
use crate::engine::qc::{self, Action, LevelTarget, Rule, RuleSetting};
use crate::engine::readings::{self, Direction, KineticPoint, KineticSettings};
use crate::engine::stability::{self, Material, UsableUntil, WarningWindow};
use crate::engine::{qcstats, units};

/// `cuvette-calc --help`.
pub const HELP: &str = r#"cuvette-calc: Cuvette's calculation engine from the command line.

Reads ONE JSON request on stdin, writes ONE JSON answer on stdout, exit 0.
Bad input: exit 2 and {"error": "..."} naming the field. Indices in answers count
from 0 (runs[0] is the first run).

Check a records file (a backup or a day's records) without opening the app:
  cuvette-calc check-backup < FILE
  -> {"scope","lab_name","records":{kind: n},"versions","first","last",
      "days_covered","chain"} and exit 0, or exit 2 and {"error": "..."} naming the
     entry or field that is wrong (a changed entry, a broken chain, another program's
     JSON).

Operations ("op"):

  fit            {"op":"fit","model":"factor|linear|linear-through-origin|quadratic|4pl|5pl",
                  "weighting":"none|1/x|1/x2|1/y|1/y2","replicates":"individual|mean",
                  "points":[{"conc":0,"signal":0.01},...]}
                 -> {"params":{...},"std_errors":{...},"rss":..,"r_squared":..,
                     "points":[{"conc","signal","fitted","residual","back_calculated","recovery_pct"}]}
                 params: factor {factor} (conc per signal unit); linear and
                 linear-through-origin {slope,intercept} (signal = intercept + slope*conc);
                 quadratic {c0,c1,c2}; 4pl {a,b,c,d}: signal = d + (a-d)/(1+(conc/c)^b);
                 5pl {a,b,c,d,g}: signal = d + (a-d)/(1+(conc/c)^b)^g.
                 weighting and replicates are optional (none, individual).

  inverse        {"op":"inverse","model":..,"params":{..},"range":{"low":..,"high":..},
                  "signals":[..]}
                 -> {"results":[{"signal","conc","flag"}]}, flag null, "below-range",
                    "above-range" or "no-solution" (conc null). range is optional.

  kinetic        {"op":"kinetic","readings":[{"t_s":0,"a":1.2},...],"factor":1768}
                 optional: "linearity_limit_pct" (10), "window_s":[t1,t2],
                 "direction":"increasing|decreasing", "initial_floor" (decreasing only)
                 -> {"delta_a_per_min","activity","linear","max_step_deviation_pct",
                     "steps_per_min","flags"}   (activity = |dA/min| * factor)
                 dA/min is the least-squares slope; each step (A[i+1]-A[i]) per minute is
                 compared with it: max_step_deviation_pct = max |step - slope| / |slope| * 100,
                 linear = max_step_deviation_pct <= linearity_limit_pct

  enzyme-factor  {"op":"enzyme-factor","total_volume_ml":1.1,"sample_volume_ml":0.1,
                  "path_cm":1,"epsilon":6220}
                 -> {"factor": ..}  (U/L per dA/min; epsilon defaults to NADH 340 nm 6220,
                    or give "wavelength_nm": 340|334|365)

  qc             {"op":"qc","rules":["1-2s","1-3s","2-2s","R-4s","4-1s","10-x"],
                  "levels":[{"mean":..,"sd":..},...],"runs":[[v1,v2],[v1,null],...]}
                 a rule may also be {"rule":"2-2s","action":"warning|reject"};
                 rules: 1-2s 1-2.5s 1-3s 1-3.5s 2-2s R-4s 4-1s 2of3-2s 3-1s 6-x 8-x
                 9-x 10-x 12-x (1-2s warns by default, the others reject);
                 optional "restart_after_reject": true starts the across-run windows
                 afresh after a rejected run (default false: every result counts)
                 -> {"runs":[{"decision":"accept|warning|reject",
                     "violations":[{"rule","levels","runs","scope","action"}]}]}

  qc-stats       {"op":"qc-stats","values":[..],"insert":{"mean":..,"sd":..},
                  "excluded":[false,..],"run_rejected":[false,..]}
                 -> {"n","mean","sd","cv_pct","target":{"mean","sd","source","n"}}

  stability      {"op":"stability","now":"2026-12-01T09:00:00+01:00",
                  "time_zone":"Europe/Berlin","warning_hours":48,"warning_fraction":0.25,
                  "material":{"expiry":"2027-03" or "2027-03-31",
                     "opened_at":RFC3339,"in_use_hours":168,
                     "on_board_since":RFC3339,"on_board_hours":..,
                     "frozen":{"frozen_at":..,"frozen_hours":..,"thawed_at":..,
                               "thaw_count":1,"after_thaw_hours":..},
                     "analytes":[{"analyte":"ALT","in_use_hours":48,"after_thaw_hours":..}]}}
                 -> {"material":{"usable_until","governed_by","state","hours_left",
                     "remarks"},"analytes":[{"analyte",...}]}
                 time_zone: an IANA name or an offset like "+03:00" (default UTC);
                 usable_until is given in that zone. state: ok|expiring|expired.

  end-point      {"op":"end-point","sample":..,"reagent_blank":..,"sample_blank":..}
                 -> {"delta_a": ..}
  fixed-time     {"op":"fixed-time","a_t1":..,"a_t2":..,"direction":"increasing|decreasing"}
                 -> {"delta_a","signal","wrong_direction"}
  dilution       {"op":"dilution","estimate":..,"linearity_limit":..}
                 -> {"factor","expected_reading"} or {"factor":null} when none is needed
                 {"op":"dilution","diluted_reading":..,"factor":5,"linearity_limit":..}
                 -> {"result": reading*factor, "diluted_reading_within_limit"}
  flag           {"op":"flag","value":..,"reference":{"low","high"},"critical":{"low","high"}}
                 -> {"flag": "L"|"H"|"LL"|"HH"|null, "meaning"}
  convert        {"op":"convert","analyte":"GLU","value":..,"from":"mg/dL","to":"mmol/L"}
                 -> {"value": ..}
  rejection-probability
                 {"op":"rejection-probability","rules":["1-3s","2-2s",...],"n_per_run":2,
                  "systematic_shift_sd":0,"random_error_factor":1}
                 -> {"probability":p,"std_error":e}: the chance that a run with that error
                    is rejected by the rule set (every listed rule rejects). A single
                    1-ks rule in closed form (e = 0); any other set by seeded Monte Carlo
                    through the bench's rule engine, 12 runs in control then the run
                    under test; optional "trials" (100000) and "seed" (1).
  sigma          {"op":"sigma","tea_pct":..,"bias_pct":..,"cv_pct":..}
                 -> {"sigma": (tea_pct - |bias_pct|) / cv_pct}
"#;

/// `cuvette-calc check-backup`: check a records file (a backup or a day file) and
/// summarise it; exit 0, or exit 2 with `{"error": …}` naming the place.
pub fn check_backup(text: &str) -> (i32, String) {
    match crate::exchange::read(text, usize::MAX) {
        Ok(c) => (
            0,
            serde_json::to_string_pretty(&c.summary).unwrap_or_default(),
        ),
        Err(e) => (2, json!({ "error": e.0 }).to_string()),
    }
}

/// Answer a request: (exit code, JSON text).
pub fn run(input: &str) -> (i32, String) {
    match answer(input) {
        Ok(v) => (0, v.to_string()),
        Err(e) => (2, json!({ "error": e }).to_string()),
    }
}

type R<T> = Result<T, String>;

fn answer(input: &str) -> R<Value> {
    let req: Value = serde_json::from_str(input)
        .map_err(|e| format!("the request is not JSON ({e}); send one JSON object on stdin"))?;
    let obj = req
        .as_object()
        .ok_or("the request must be a JSON object with an \"op\" field")?;
    let op = obj
        .get("op")
        .and_then(Value::as_str)
        .ok_or("op: missing; say which calculation, e.g. {\"op\":\"fit\", ...} (see --help)")?;
    match op {
        "fit" => op_fit(obj),
        "inverse" => op_inverse(obj),
        "kinetic" => op_kinetic(obj),
        "enzyme-factor" => op_enzyme_factor(obj),
        "qc" => op_qc(obj),
        "qc-stats" => op_qc_stats(obj),
        "stability" => op_stability(obj),
        "end-point" => op_end_point(obj),
        "fixed-time" => op_fixed_time(obj),
        "dilution" => op_dilution(obj),
        "flag" => op_flag(obj),
        "convert" => op_convert(obj),
        "rejection-probability" => op_rejection_probability(obj),
        "sigma" => op_sigma(obj),
        other => Err(format!(
            "op: {other:?} is not an operation; use fit, inverse, kinetic, enzyme-factor, qc, \
             qc-stats, stability, end-point, fixed-time, dilution, flag or convert"
        )),
    }
}

fn num(v: Option<&Value>, field: &str) -> R<f64> {
    match v {
        None | Some(Value::Null) => Err(format!("{field}: missing; give a number")),
        Some(x) => x
            .as_f64()
            .filter(|f| f.is_finite())
            .ok_or_else(|| format!("{field}: {x} is not a number")),
    }
}

fn opt_num(v: Option<&Value>, field: &str) -> R<Option<f64>> {
    match v {
        None | Some(Value::Null) => Ok(None),
        Some(_) => num(v, field).map(Some),
    }
}

fn array<'a>(obj: &'a Map<String, Value>, field: &str) -> R<&'a Vec<Value>> {
    obj.get(field)
        .ok_or_else(|| format!("{field}: missing; give a list"))?
        .as_array()
        .ok_or_else(|| format!("{field}: must be a list"))
}

fn text<'a>(obj: &'a Map<String, Value>, field: &str) -> R<Option<&'a str>> {
    match obj.get(field) {
        None | Some(Value::Null) => Ok(None),
        Some(Value::String(s)) => Ok(Some(s.as_str())),
        Some(_) => Err(format!("{field}: must be a string")),
    }
}

fn model_of(obj: &Map<String, Value>) -> R<ModelKind> {
    let m = text(obj, "model")?.ok_or(
        "model: missing; one of factor, linear, linear-through-origin, quadratic, 4pl, 5pl",
    )?;
    ModelKind::from_code(m).ok_or_else(|| {
        format!("model: {m:?} is not a model; use factor, linear, linear-through-origin, quadratic, 4pl or 5pl")
    })
}

fn finite_or_null(v: f64) -> Value {
    if v.is_finite() {
        json!(v)
    } else {
        Value::Null
    }
}

fn op_fit(obj: &Map<String, Value>) -> R<Value> {
    let model = model_of(obj)?;
    let weighting = match text(obj, "weighting")? {
        None => Weighting::None,
        Some(w) => Weighting::from_code(w).ok_or_else(|| {
            format!("weighting: {w:?} is not a weighting; use none, 1/x, 1/x2, 1/y or 1/y2")
        })?,
    };
    let replicates = match text(obj, "replicates")? {
        None | Some("individual") => ReplicateUse::Individual,
        Some("mean") => ReplicateUse::Mean,
        Some(other) => return Err(format!("replicates: {other:?}; use individual or mean")),
    };
    let points = array(obj, "points")?
        .iter()
        .enumerate()
        .map(|(i, p)| {
            Ok(CalPoint {
                conc: num(p.get("conc"), &format!("points[{i}].conc"))?,
                signal: num(p.get("signal"), &format!("points[{i}].signal"))?,
            })
        })
        .collect::<R<Vec<_>>>()?;
    let fit = calibration::fit(model, weighting, replicates, &points)
        .map_err(|e| format!("points: {e}"))?;
    let names = model.param_names();
    let values = fit.curve.param_values();
    let mut params = Map::new();
    let mut se = Map::new();
    for (k, name) in names.iter().enumerate() {
        params.insert(name.to_string(), finite_or_null(values[k]));
        se.insert(
            name.to_string(),
            fit.std_errors[k].map_or(Value::Null, finite_or_null),
        );
    }
    let pts: Vec<Value> = fit
        .points
        .iter()
        .map(|p| {
            json!({
                "conc": p.conc, "signal": p.signal, "fitted": finite_or_null(p.fitted),
                "residual": finite_or_null(p.residual),
                "back_calculated": p.back_calculated, "recovery_pct": p.recovery_pct,
            })
        })
        .collect();
    Ok(json!({
        "model": model.code(), "weighting": weighting.code(),
        "params": params, "std_errors": se, "rss": fit.rss, "r_squared": fit.r_squared,
        "points": pts, "evaluations": fit.evaluations,
    }))
}

fn op_inverse(obj: &Map<String, Value>) -> R<Value> {
    let model = model_of(obj)?;
    let params = obj
        .get("params")
        .and_then(Value::as_object)
        .ok_or("params: missing; give the curve's parameters as an object")?;
    let curve = Curve::from_params(model, |name| params.get(name).and_then(Value::as_f64))
        .map_err(|e| e.message)?;
    let range = match obj.get("range") {
        None | Some(Value::Null) => None,
        Some(r) => {
            let low = num(r.get("low"), "range.low")?;
            let high = num(r.get("high"), "range.high")?;
            if low > high {
                return Err("range: low is above high".into());
            }
            Some(ReportableRange { low, high })
        }
    };
    let results = array(obj, "signals")?
        .iter()
        .enumerate()
        .map(|(i, s)| {
            let signal = num(Some(s), &format!("signals[{i}]"))?;
            let reading = match range {
                Some(r) => curve.read(signal, r),
                None => {
                    let c = curve.conc_at(signal, 0.0);
                    calibration::Reading {
                        conc: c,
                        flag: c.is_none().then_some(calibration::ConcFlag::NoSolution),
                    }
                }
            };
            Ok(json!({
                "signal": signal, "conc": reading.conc,
                "flag": reading.flag.map(|f| f.code()),
            }))
        })
        .collect::<R<Vec<_>>>()?;
    Ok(json!({ "results": results }))
}

fn direction(obj: &Map<String, Value>) -> R<Option<Direction>> {
    Ok(match text(obj, "direction")? {
        None => None,
        Some("increasing") => Some(Direction::Increasing),
        Some("decreasing") => Some(Direction::Decreasing),
        Some(d) => return Err(format!("direction: {d:?}; use increasing or decreasing")),
    })
}

fn op_kinetic(obj: &Map<String, Value>) -> R<Value> {
    let points = array(obj, "readings")?
        .iter()
        .enumerate()
        .map(|(i, p)| {
            Ok(KineticPoint {
                t_s: num(p.get("t_s"), &format!("readings[{i}].t_s"))?,
                a: num(p.get("a"), &format!("readings[{i}].a"))?,
            })
        })
        .collect::<R<Vec<_>>>()?;
    let mut settings = KineticSettings {
        direction: direction(obj)?,
        ..Default::default()
    };
    if let Some(l) = opt_num(obj.get("linearity_limit_pct"), "linearity_limit_pct")? {
        settings.linearity_limit_pct = l;
    }
    settings.initial_floor = opt_num(obj.get("initial_floor"), "initial_floor")?;
    if let Some(w) = obj.get("window_s").filter(|w| !w.is_null()) {
        let w = w
            .as_array()
            .filter(|w| w.len() == 2)
            .ok_or("window_s: give [start, end] in seconds")?;
        settings.window_s = Some((
            num(w.first(), "window_s[0]")?,
            num(w.get(1), "window_s[1]")?,
        ));
    }
    let factor = opt_num(obj.get("factor"), "factor")?;
    let r = readings::kinetic(&points, &settings).map_err(|e| e.0)?;
    Ok(json!({
        "delta_a_per_min": r.delta_a_per_min,
        "activity": factor.map(|f| r.delta_a_per_min.abs() * f),
        "linear": r.linear,
        "max_step_deviation_pct": r.max_step_deviation_pct,
        "steps_per_min": r.steps_per_min,
        "flags": r.flags,
        "readings_used": r.readings_used,
    }))
}

fn op_enzyme_factor(obj: &Map<String, Value>) -> R<Value> {
    let epsilon = match opt_num(obj.get("epsilon"), "epsilon")? {
        Some(e) => e,
        None => match opt_num(obj.get("wavelength_nm"), "wavelength_nm")? {
            None => readings::NADH_EPSILON_340,
            Some(340.0) => readings::NADH_EPSILON_340,
            Some(334.0) => readings::NADH_EPSILON_334,
            Some(365.0) => readings::NADH_EPSILON_365,
            Some(w) => {
                return Err(format!(
                    "wavelength_nm: no NADH value for {w} nm; give epsilon"
                ))
            }
        },
    };
    let f = readings::enzyme_factor(
        num(obj.get("total_volume_ml"), "total_volume_ml")?,
        num(obj.get("sample_volume_ml"), "sample_volume_ml")?,
        num(obj.get("path_cm"), "path_cm")?,
        epsilon,
    )
    .map_err(|e| e.0)?;
    Ok(json!({ "factor": f, "epsilon": epsilon }))
}

/// The `rules` field: names, or `{"rule","action"}`; the default multirule set when
/// absent.
fn rule_settings(obj: &Map<String, Value>) -> R<Vec<RuleSetting>> {
    match obj.get("rules") {
        None | Some(Value::Null) => Ok(["1-2s", "1-3s", "2-2s", "R-4s", "4-1s", "10-x"]
            .iter()
            .filter_map(|c| c.parse::<Rule>().ok().map(RuleSetting::default_for))
            .collect()),
        Some(_) => array(obj, "rules")?
            .iter()
            .enumerate()
            .map(|(i, r)| match r {
                Value::String(s) => s
                    .parse::<Rule>()
                    .map(RuleSetting::default_for)
                    .map_err(|e| format!("rules[{i}]: {e}")),
                Value::Object(o) => {
                    let rule = o
                        .get("rule")
                        .and_then(Value::as_str)
                        .ok_or_else(|| format!("rules[{i}].rule: missing"))?
                        .parse::<Rule>()
                        .map_err(|e| format!("rules[{i}].rule: {e}"))?;
                    let action = match o.get("action").and_then(Value::as_str) {
                        None => rule.default_action(),
                        Some("warning") => Action::Warning,
                        Some("reject") => Action::Reject,
                        Some(a) => {
                            return Err(format!("rules[{i}].action: {a:?}; use warning or reject"))
                        }
                    };
                    Ok(RuleSetting { rule, action })
                }
                _ => Err(format!("rules[{i}]: give a rule name such as \"2-2s\"")),
            })
            .collect::<R<Vec<_>>>(),
    }
}

fn op_qc(obj: &Map<String, Value>) -> R<Value> {
    let rules = rule_settings(obj)?;
    let levels = array(obj, "levels")?
        .iter()
        .enumerate()
        .map(|(i, l)| {
            Ok(LevelTarget {
                mean: num(l.get("mean"), &format!("levels[{i}].mean"))?,
                sd: num(l.get("sd"), &format!("levels[{i}].sd"))?,
            })
        })
        .collect::<R<Vec<_>>>()?;
    let runs = array(obj, "runs")?
        .iter()
        .enumerate()
        .map(|(r, run)| {
            run.as_array()
                .ok_or_else(|| format!("runs[{r}]: give a list with one value per level"))?
                .iter()
                .enumerate()
                .map(|(l, v)| opt_num(Some(v), &format!("runs[{r}][{l}]")))
                .collect::<R<Vec<_>>>()
        })
        .collect::<R<Vec<_>>>()?;
    let options = qc::Options {
        restart_after_reject: match obj.get("restart_after_reject") {
            None | Some(Value::Null) => false,
            Some(Value::Bool(b)) => *b,
            Some(_) => return Err("restart_after_reject: true or false".into()),
        },
    };
    let verdicts = qc::evaluate_with(&levels, &runs, &rules, options).map_err(|e| e.0)?;
    let runs: Vec<Value> = verdicts
        .iter()
        .map(|v| {
            json!({
                "decision": v.decision.code(),
                "violations": v.violations.iter().map(|x| json!({
                    "rule": x.rule.code(), "levels": x.levels, "runs": x.runs,
                    "scope": x.scope, "action": x.action,
                })).collect::<Vec<_>>(),
            })
        })
        .collect();
    Ok(json!({ "runs": runs }))
}

fn op_qc_stats(obj: &Map<String, Value>) -> R<Value> {
    let values = array(obj, "values")?
        .iter()
        .enumerate()
        .map(|(i, v)| num(Some(v), &format!("values[{i}]")))
        .collect::<R<Vec<_>>>()?;
    let flags = |field: &str| -> R<Vec<bool>> {
        match obj.get(field) {
            None | Some(Value::Null) => Ok(vec![false; values.len()]),
            Some(Value::Array(a)) if a.len() == values.len() => a
                .iter()
                .enumerate()
                .map(|(i, b)| {
                    b.as_bool()
                        .ok_or_else(|| format!("{field}[{i}]: true or false"))
                })
                .collect(),
            Some(_) => Err(format!("{field}: give one true/false per value")),
        }
    };
    let excluded = flags("excluded")?;
    let rejected = flags("run_rejected")?;
    let at = Utc.timestamp_opt(0, 0).single().ok_or("clock")?;
    let results: Vec<qcstats::ControlResult> = values
        .iter()
        .enumerate()
        .map(|(i, &value)| qcstats::ControlResult {
            at,
            value,
            run_rejected: rejected[i],
            excluded: excluded[i],
        })
        .collect();
    let insert = match obj.get("insert") {
        None | Some(Value::Null) => None,
        Some(t) => Some(LevelTarget {
            mean: num(t.get("mean"), "insert.mean")?,
            sd: num(t.get("sd"), "insert.sd")?,
        }),
    };
    let s = qcstats::cumulative(&results);
    let target = qcstats::choose_target(insert, &results).map(|t| {
        let (source, n) = match t.source {
            qcstats::TargetSource::Lab { n } => ("lab", n),
            qcstats::TargetSource::Insert { n } => ("insert", n),
        };
        json!({ "mean": t.mean, "sd": t.sd, "source": source, "n": n })
    });
    Ok(json!({
        "n": s.map_or(0, |s| s.n), "mean": s.map(|s| s.mean), "sd": s.and_then(|s| s.sd),
        "cv_pct": s.and_then(|s| s.cv_pct), "target": target,
    }))
}

fn op_stability(obj: &Map<String, Value>) -> R<Value> {
    let now_text = text(obj, "now")?
        .ok_or("now: missing; give the current time as RFC 3339, e.g. 2026-12-01T09:00:00+01:00")?;
    let now = DateTime::parse_from_rfc3339(now_text)
        .map_err(|e| format!("now: {now_text:?} is not an RFC 3339 time ({e})"))?
        .with_timezone(&Utc);
    let material: Material =
        serde_json::from_value(obj.get("material").cloned().ok_or("material: missing")?)
            .map_err(|e| format!("material: {e}"))?;
    let mut warning = WarningWindow::default();
    if let Some(h) = opt_num(obj.get("warning_hours"), "warning_hours")? {
        warning.hours = h;
    }
    if let Some(f) = opt_num(obj.get("warning_fraction"), "warning_fraction")? {
        warning.fraction = f;
    }
    let zone = text(obj, "time_zone")?.unwrap_or("UTC");
    if let Ok(tz) = zone.parse::<chrono_tz::Tz>() {
        return stability_answer(&material, now, &tz, warning);
    }
    let offset = DateTime::parse_from_rfc3339(&format!("2000-01-01T00:00:00{zone}"))
        .map(|d| *d.offset())
        .map_err(|_| format!("time_zone: {zone:?} is neither an IANA zone (Europe/Berlin) nor an offset (+03:00)"))?;
    stability_answer::<FixedOffset>(&material, now, &offset, warning)
}

fn stability_answer<Tz: TimeZone>(
    m: &Material,
    now: DateTime<Utc>,
    tz: &Tz,
    w: WarningWindow,
) -> R<Value>
where
    Tz::Offset: std::fmt::Display,
{
    let report = stability::evaluate(m, now, tz, w).map_err(|e| format!("material: {}", e.0))?;
    let one = |u: &UsableUntil| {
        json!({
            "usable_until": u.until.with_timezone(tz).to_rfc3339(),
            "usable_until_utc": u.until.to_rfc3339(),
            "governed_by": u.governed_by, "limit": u.governed_by.describe(),
            "state": u.state, "hours_left": u.hours_left, "remarks": u.remarks,
        })
    };
    let analytes: Vec<Value> = report
        .analytes
        .iter()
        .map(|(name, u)| {
            let mut v = one(u);
            v["analyte"] = json!(name);
            v
        })
        .collect();
    Ok(json!({ "material": one(&report.material), "analytes": analytes }))
}

fn op_end_point(obj: &Map<String, Value>) -> R<Value> {
    let d = readings::end_point_delta(
        num(obj.get("sample"), "sample")?,
        num(obj.get("reagent_blank"), "reagent_blank")?,
        opt_num(obj.get("sample_blank"), "sample_blank")?,
    )
    .map_err(|e| e.0)?;
    Ok(json!({ "delta_a": d }))
}

fn op_fixed_time(obj: &Map<String, Value>) -> R<Value> {
    let dir = direction(obj)?.ok_or("direction: missing; increasing or decreasing")?;
    let f = readings::fixed_time(
        num(obj.get("a_t1"), "a_t1")?,
        num(obj.get("a_t2"), "a_t2")?,
        dir,
    )
    .map_err(|e| e.0)?;
    Ok(json!({ "delta_a": f.delta_a, "signal": f.signal, "wrong_direction": f.wrong_direction }))
}

fn op_dilution(obj: &Map<String, Value>) -> R<Value> {
    // The result of a dilution already made: reading × factor.
    if let Some(reading) = opt_num(obj.get("diluted_reading"), "diluted_reading")? {
        let factor = num(obj.get("factor"), "factor")?;
        let result =
            readings::undiluted(reading, factor).map_err(|e| format!("factor: {}", e.0))?;
        let mut answer = json!({ "result": result, "factor": factor });
        if let Some(limit) = opt_num(obj.get("linearity_limit"), "linearity_limit")? {
            answer["diluted_reading_within_limit"] = json!(reading <= limit);
        }
        return Ok(answer);
    }
    let estimate = num(obj.get("estimate"), "estimate")?;
    let limit = num(obj.get("linearity_limit"), "linearity_limit")?;
    if limit <= 0.0 {
        return Err("linearity_limit: must be above 0".into());
    }
    Ok(match readings::dilution_for(estimate, limit) {
        Some(d) => json!({ "factor": d.factor, "expected_reading": d.expected_reading }),
        None if estimate <= limit => {
            json!({ "factor": null, "reason": "within the linearity limit" })
        }
        None => json!({ "factor": null, "reason": "more than 1:100 needed: dilute in steps" }),
    })
}

fn limits(obj: &Map<String, Value>, field: &str) -> R<readings::Limits> {
    match obj.get(field) {
        None | Some(Value::Null) => Ok(readings::Limits::default()),
        Some(l) => Ok(readings::Limits {
            low: opt_num(l.get("low"), &format!("{field}.low"))?,
            high: opt_num(l.get("high"), &format!("{field}.high"))?,
        }),
    }
}

fn op_flag(obj: &Map<String, Value>) -> R<Value> {
    let value = num(obj.get("value"), "value")?;
    let f = readings::flag(value, limits(obj, "reference")?, limits(obj, "critical")?);
    Ok(json!({
        "flag": f.map(|f| f.letter()),
        "meaning": f.map(|f| match f {
            readings::ResultFlag::Low => "below the reference interval",
            readings::ResultFlag::High => "above the reference interval",
            readings::ResultFlag::CriticalLow => "below the critical limit: tell the clinician now",
            readings::ResultFlag::CriticalHigh => "above the critical limit: tell the clinician now",
        }),
    }))
}

fn op_convert(obj: &Map<String, Value>) -> R<Value> {
    let analyte = text(obj, "analyte")?.unwrap_or("");
    let from = text(obj, "from")?.ok_or("from: missing unit")?;
    let to = text(obj, "to")?.ok_or("to: missing unit")?;
    let v = units::convert(analyte, num(obj.get("value"), "value")?, from, to)?;
    Ok(json!({ "value": v }))
}

fn op_rejection_probability(obj: &Map<String, Value>) -> R<Value> {
    use crate::engine::planning;
    let rules: Vec<Rule> = rule_settings(obj)?.into_iter().map(|r| r.rule).collect();
    let n = num(obj.get("n_per_run"), "n_per_run")?;
    if n.fract() != 0.0 || !(1.0..=6.0).contains(&n) {
        return Err("n_per_run: give 1 to 6 control results per run".into());
    }
    let error = planning::Error {
        shift_sd: opt_num(obj.get("systematic_shift_sd"), "systematic_shift_sd")?.unwrap_or(0.0),
        random_factor: opt_num(obj.get("random_error_factor"), "random_error_factor")?
            .unwrap_or(1.0),
    };
    let trials = opt_num(obj.get("trials"), "trials")?.unwrap_or(100_000.0);
    let seed = opt_num(obj.get("seed"), "seed")?.unwrap_or(1.0);
    if trials.fract() != 0.0 || !(1_000.0..=10_000_000.0).contains(&trials) {
        return Err("trials: give a whole number from 1000 to 10 000 000".into());
    }
    if seed.fract() != 0.0 || !(0.0..=9_007_199_254_740_992.0).contains(&seed) {
        return Err("seed: give a whole number from 0".into());
    }
    let p =
        planning::rejection_probability(&rules, n as usize, error, trials as usize, seed as u64)?;
    Ok(json!({ "probability": p.p, "std_error": p.std_error }))
}

fn op_sigma(obj: &Map<String, Value>) -> R<Value> {
    let sigma = crate::engine::planning::sigma(
        num(obj.get("tea_pct"), "tea_pct")?,
        num(obj.get("bias_pct"), "bias_pct")?,
        num(obj.get("cv_pct"), "cv_pct")?,
    )?;
    Ok(json!({ "sigma": sigma }))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ok(req: Value) -> Value {
        let (code, out) = run(&req.to_string());
        assert_eq!(code, 0, "{out}");
        serde_json::from_str(&out).unwrap()
    }

    fn err(req: &str) -> String {
        let (code, out) = run(req);
        assert_eq!(code, 2, "{out}");
        let v: Value = serde_json::from_str(&out).unwrap();
        v["error"].as_str().unwrap().to_string()
    }

    #[test]
    fn errors_name_the_field() {
        assert!(err("not json").contains("not JSON"));
        assert!(err("{}").starts_with("op:"));
        assert!(
            err(r#"{"op":"fit","model":"linear","points":[{"conc":1,"signal":"x"}]}"#)
                .contains("points[0].signal")
        );
        assert!(err(r#"{"op":"fit","model":"cubic","points":[]}"#).starts_with("model:"));
        assert!(
            err(r#"{"op":"qc","rules":["7-x"],"levels":[{"mean":1,"sd":1}],"runs":[]}"#)
                .starts_with("rules[0]")
        );
        assert!(
            err(r#"{"op":"qc","levels":[{"mean":1,"sd":1}],"runs":[[1,2]]}"#).contains("runs[0]")
        );
        assert!(
            err(r#"{"op":"stability","now":"yesterday","material":{"expiry":"2027-01"}}"#)
                .starts_with("now:")
        );
        assert!(
            err(r#"{"op":"enzyme-factor","total_volume_ml":1.1,"path_cm":1}"#)
                .starts_with("sample_volume_ml")
        );
    }

    #[test]
    fn fit_then_inverse_round_trip() {
        let fit = ok(json!({"op":"fit","model":"linear","points":[
            {"conc":0,"signal":0.02},{"conc":50,"signal":0.27},{"conc":100,"signal":0.52}]}));
        assert!((fit["params"]["slope"].as_f64().unwrap() - 0.005).abs() < 1e-12);
        let inv = ok(
            json!({"op":"inverse","model":"linear","params":fit["params"],
            "range":{"low":0,"high":100},"signals":[0.27, 0.9, -1.0]}),
        );
        let r = &inv["results"];
        assert!((r[0]["conc"].as_f64().unwrap() - 50.0).abs() < 1e-9);
        assert_eq!(r[0]["flag"], Value::Null);
        assert_eq!(r[1]["flag"], "above-range");
        assert_eq!(r[2]["flag"], "below-range");
    }

    #[test]
    fn dilution_and_flag() {
        let v = ok(json!({"op":"dilution","estimate":1150,"linearity_limit":500}));
        assert_eq!(v["factor"], 3);
        let v = ok(json!({"op":"dilution","diluted_reading":212,"factor":5,"linearity_limit":500}));
        assert_eq!(v["result"], 1060.0);
        assert_eq!(v["diluted_reading_within_limit"], true);
        let v = ok(
            json!({"op":"flag","value":35,"reference":{"low":70,"high":110},"critical":{"low":40}}),
        );
        assert_eq!(v["flag"], "LL");
        let v = ok(json!({"op":"flag","value":90,"reference":{"low":70,"high":110}}));
        assert_eq!(v["flag"], Value::Null);
    }

    #[test]
    fn stability_in_a_named_zone() {
        let v = ok(
            json!({"op":"stability","now":"2026-03-28T10:00:00+01:00","time_zone":"Europe/Berlin",
            "material":{"expiry":"2027-01","opened_at":"2026-03-28T10:00:00+01:00","in_use_hours":48}}),
        );
        assert_eq!(v["material"]["usable_until"], "2026-03-30T11:00:00+02:00");
        assert_eq!(v["material"]["governed_by"], "in-use");
        assert_eq!(v["material"]["state"], "ok");
    }
}
