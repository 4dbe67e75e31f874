//! Helpers shared by the reference tests: where the published data sets live, a reader
//! for NIST StRD files, digit counting, and a bridge to numpy/scipy.
#![allow(dead_code)]

use std::io::Write;
use std::path::PathBuf;
use std::process::{Command, Stdio};

/// The published data sets the tests read: `tests/reference/` in the checkout (see
/// its README for each file's source), or another copy named by `CUVETTE_REFERENCE`.
pub fn reference_dir() -> PathBuf {
    if let Ok(dir) = std::env::var("CUVETTE_REFERENCE") {
        return PathBuf::from(dir);
    }
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/reference")
}

/// A NIST StRD data file: starting values, certified values and the data.
pub struct NistSet {
    pub name: String,
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

/// Read a NIST StRD file (nonlinear "nls" or linear "lls" layout).
pub fn nist(name: &str) -> NistSet {
    let path = reference_dir().join("nist").join(format!("{name}.dat"));
    let text = std::fs::read_to_string(&path)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
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
                if let Some(v) = numbers(rhs) {
                    if v.len() == 4 {
                        starts[0].push(v[0]);
                        starts[1].push(v[1]);
                        certified.push(v[2]);
                        certified_sd.push(v[3]);
                    }
                }
            }
        }
        // lls: "B0   -0.262323073774029     0.232818234301152"
        if t.starts_with('B') && t.len() > 2 && t.as_bytes()[1].is_ascii_digit() {
            let mut parts = t.split_whitespace();
            parts.next();
            if let Some(v) = numbers(&parts.collect::<Vec<_>>().join(" ")) {
                if v.len() == 2 {
                    certified.push(v[0]);
                    certified_sd.push(v[1]);
                }
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
        .expect("a Data: line");
    let mut x = Vec::new();
    let mut y = Vec::new();
    for line in &lines[data_at + 1..] {
        if let Some(v) = numbers(line) {
            assert_eq!(v.len(), 2, "{name}: data row {line:?}");
            y.push(v[0]);
            x.push(v[1]);
        }
    }
    NistSet {
        name: name.to_string(),
        starts,
        certified,
        certified_sd,
        certified_rss,
        x,
        y,
    }
}

/// Number of correct significant digits of `got` against `want` (the log relative
/// error used in NIST StRD evaluations: LRE = −log10(|got − want| / |want|)).
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

/// Run a Python snippet with a JSON value on stdin and parse its JSON answer. The
/// reference libraries (numpy, scipy) come from PyPI; the test command installs them.
pub fn python_json(script: &str, input: &serde_json::Value) -> serde_json::Value {
    let mut child = Command::new("python3")
        .arg("-c")
        .arg(script)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("python3 is needed for the reference checks");
    child
        .stdin
        .take()
        .expect("stdin")
        .write_all(input.to_string().as_bytes())
        .expect("write to python");
    let out = child.wait_with_output().expect("python output");
    assert!(
        out.status.success(),
        "the python reference failed (are numpy, scipy and jsonschema installed? `pip install -r tools/reference-requirements.txt`):\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("python printed JSON")
}
