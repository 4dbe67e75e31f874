//! `cuvette-calc`: one JSON request on stdin, one JSON answer on stdout.
//! The protocol lives in `cuvette::calc`; this file only does the I/O.

#[cfg(not(target_arch = "wasm32"))]
fn main() {
    use std::io::{Read, Write};
    if std::env::args().any(|a| a == "--help" || a == "-h") {
        print!("{}", cuvette::calc::HELP);
        return;
    }
    let check_backup = std::env::args().nth(1).as_deref() == Some("check-backup");
    let mut input = String::new();
    let (code, out) = match std::io::stdin().read_to_string(&mut input) {
        Ok(_) if check_backup => cuvette::calc::check_backup(&input),
        Ok(_) => cuvette::calc::run(&input),
        Err(e) => (
            2,
            serde_json::json!({ "error": format!("stdin could not be read as UTF-8 text: {e}") })
                .to_string(),
        ),
    };
    let mut stdout = std::io::stdout();
    let _ = writeln!(stdout, "{out}");
    std::process::exit(code);
}

/// The calculator is a native tool; in a wasm build it does nothing.
#[cfg(target_arch = "wasm32")]
fn main() {}
