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

/// A NIST StRD data file, read by the same parser the app's verification report uses.
pub use cuvette::verification::StrdSet as NistSet;

/// Read a NIST StRD file (nonlinear "nls" or linear "lls" layout).
pub fn nist(name: &str) -> NistSet {
    let path = reference_dir().join("nist").join(format!("{name}.dat"));
    let text = std::fs::read_to_string(&path)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
    cuvette::verification::parse_strd(&text).unwrap_or_else(|e| panic!("{name}: {e}"))
}

#[allow(unused_imports)]
pub use cuvette::verification::correct_digits;

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
