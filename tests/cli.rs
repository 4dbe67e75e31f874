//! `cuvette-calc` as an outside program sees it: a process, JSON on stdin and stdout,
//! exit codes 0 and 2. Reference values: scipy.optimize.curve_fit on the ryegrass set
//! (Inderjit et al. 2002, R package drc), and the enzyme-factor worked arithmetic.

mod common;

use serde_json::{json, Value};
use std::io::Write;
use std::process::{Command, Stdio};

fn calc(input: &str) -> (i32, Value) {
    let mut child = Command::new(env!("CARGO_BIN_EXE_cuvette-calc"))
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .spawn()
        .expect("run cuvette-calc");
    child
        .stdin
        .take()
        .unwrap()
        .write_all(input.as_bytes())
        .unwrap();
    let out = child.wait_with_output().unwrap();
    let v: Value = serde_json::from_slice(&out.stdout).expect("JSON on stdout");
    (out.status.code().unwrap_or(-1), v)
}

#[test]
fn help_lists_every_operation() {
    let out = Command::new(env!("CARGO_BIN_EXE_cuvette-calc"))
        .arg("--help")
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    for op in [
        "fit",
        "inverse",
        "kinetic",
        "enzyme-factor",
        "qc",
        "stability",
        "qc-stats",
        "end-point",
        "fixed-time",
        "dilution",
        "flag",
        "convert",
        "sigma",
    ] {
        assert!(text.contains(&format!("  {op} ")), "--help misses {op}");
    }
    assert!(text.contains("  rejection-probability\n"));
}

#[test]
fn bad_input_exits_2_with_the_field() {
    let (code, v) =
        calc(r#"{"op":"kinetic","readings":[{"t_s":0,"a":1.0},{"t_s":60}],"factor":1}"#);
    assert_eq!(code, 2);
    assert!(
        v["error"].as_str().unwrap().contains("readings[1].a"),
        "{v}"
    );
    let (code, v) = calc("[1,2]");
    assert_eq!(code, 2);
    assert!(v["error"].is_string());
}

#[test]
fn ryegrass_4pl_through_the_cli_matches_scipy() {
    let text = std::fs::read_to_string(common::reference_dir().join("dose-response/ryegrass.csv"))
        .unwrap();
    let (mut x, mut y) = (vec![], vec![]);
    let mut points = vec![];
    for line in text.lines().skip(1).filter(|l| !l.is_empty()) {
        let (r, c) = line.split_once(',').unwrap();
        let (r, c): (f64, f64) = (r.parse().unwrap(), c.parse().unwrap());
        points.push(json!({"conc": c, "signal": r}));
        x.push(c);
        y.push(r);
    }
    let (code, v) = calc(&json!({"op":"fit","model":"4pl","points":points}).to_string());
    assert_eq!(code, 0, "{v}");
    let scipy = common::python_json(
        "import json,sys,numpy as np\nfrom scipy.optimize import curve_fit\nd=json.load(sys.stdin)\n\
         f=lambda x,a,b,c,dd: dd+(a-dd)/(1+(x/c)**b)\n\
         p,_=curve_fit(f,np.array(d['x']),np.array(d['y']),p0=[8,2,3,0.5])\n\
         print(json.dumps([float(v) for v in p]))",
        &json!({"x": x, "y": y}),
    );
    for (k, name) in ["a", "b", "c", "d"].iter().enumerate() {
        let ours = v["params"][name].as_f64().unwrap();
        let theirs = scipy[k].as_f64().unwrap();
        assert!(
            (ours - theirs).abs() <= 1e-5 * theirs.abs(),
            "{name}: {ours} vs {theirs}"
        );
    }
    assert_eq!(v["points"].as_array().unwrap().len(), 24);
    assert!(v["std_errors"]["c"].as_f64().unwrap() > 0.0);
}

/// ΔA/min −0.050 with the 1768.49 factor of 1.1 mL / 0.1 mL / 1 cm / ε 6220 → 88.4 U/L
/// (worked arithmetic).
#[test]
fn kinetic_and_enzyme_factor_chain() {
    let (_, f) = calc(
        r#"{"op":"enzyme-factor","total_volume_ml":1.1,"sample_volume_ml":0.1,"path_cm":1,"epsilon":6220}"#,
    );
    let factor = f["factor"].as_f64().unwrap();
    assert!((factor - 1768.488745980707).abs() < 1e-9);
    let req = json!({"op":"kinetic","factor":factor,"readings":[
        {"t_s":0,"a":1.500},{"t_s":60,"a":1.450},{"t_s":120,"a":1.400},{"t_s":180,"a":1.350}]});
    let (code, k) = calc(&req.to_string());
    assert_eq!(code, 0);
    assert!((k["delta_a_per_min"].as_f64().unwrap() + 0.05).abs() < 1e-12);
    assert!((k["activity"].as_f64().unwrap() - 88.4244).abs() < 1e-3);
    assert_eq!(k["linear"], true);
    assert!(k["max_step_deviation_pct"].as_f64().unwrap() < 1e-9);
}

#[test]
fn qc_through_the_cli() {
    // Level 1 at +2.5 SD twice: 1-2s warns on run 0, 2-2s rejects run 1.
    let req = json!({"op":"qc","rules":["1-2s","1-3s","2-2s","R-4s"],
        "levels":[{"mean":100,"sd":2},{"mean":200,"sd":5}],
        "runs":[[105,200],[105,null]]});
    let (code, v) = calc(&req.to_string());
    assert_eq!(code, 0, "{v}");
    assert_eq!(v["runs"][0]["decision"], "warning");
    assert_eq!(v["runs"][1]["decision"], "reject");
    let viol = &v["runs"][1]["violations"];
    assert!(
        viol.as_array().unwrap().iter().any(|x| x["rule"] == "2-2s"
            && x["runs"] == json!([0, 1])
            && x["levels"] == json!([0])),
        "{viol}"
    );
}

fn check_backup(input: &[u8]) -> (i32, Value) {
    let mut child = Command::new(env!("CARGO_BIN_EXE_cuvette-calc"))
        .arg("check-backup")
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .spawn()
        .expect("run cuvette-calc check-backup");
    child.stdin.take().unwrap().write_all(input).unwrap();
    let out = child.wait_with_output().unwrap();
    let v: Value = serde_json::from_slice(&out.stdout).expect("JSON on stdout");
    (out.status.code().unwrap_or(-1), v)
}

/// The committed example backup checks; a tampered copy, broken UTF-8 and another
/// program's JSON exit 2 with the place named.
#[test]
fn check_backup_summarises_a_valid_file_and_names_the_place_in_a_bad_one() {
    let text = include_str!("../demo-data/demo-backup.json");
    let (code, v) = check_backup(text.as_bytes());
    assert_eq!(code, 0, "{v}");
    assert_eq!(v["scope"], "backup");
    assert!(v["chain"].as_str().unwrap().starts_with("intact"));
    assert!(v["records"]["QC run"].as_u64().unwrap() > 10);
    assert!(v["days_covered"].as_u64().unwrap() >= 3);
    let tampered = text.replacen("\"by\":\"", "\"by\":\"X", 3);
    let (code, v) = check_backup(tampered.as_bytes());
    assert_eq!(code, 2);
    assert!(v["error"].as_str().unwrap().starts_with("entry "), "{v}");
    let (code, v) = check_backup(&[0x7b, 0xff, 0xfe, 0x7d]);
    assert_eq!(code, 2);
    assert!(v["error"].as_str().unwrap().contains("UTF-8"), "{v}");
    let (code, v) = check_backup(br#"{"name":"x","version":"1.0.0","dependencies":{}}"#);
    assert_eq!(code, 2);
    assert!(
        v["error"]
            .as_str()
            .unwrap()
            .contains("not a Cuvette records file"),
        "{v}"
    );
}
