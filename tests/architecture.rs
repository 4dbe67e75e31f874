//! Keeps the code map's invariants true: the engine is plain Rust (no browser crate, no
//! storage), and only the store module touches localStorage.

use std::path::Path;

fn rust_files(dir: &Path, out: &mut Vec<std::path::PathBuf>) {
    for entry in std::fs::read_dir(dir).expect("read src") {
        let path = entry.expect("entry").path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

fn code_lines(text: &str) -> impl Iterator<Item = &str> {
    text.lines()
        .map(str::trim_start)
        .filter(|l| !l.starts_with("//"))
}

#[test]
fn engine_imports_no_browser_crate_and_no_storage() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("src/engine");
    let mut files = Vec::new();
    rust_files(&root, &mut files);
    assert!(files.len() >= 5, "engine files not found");
    let forbidden = [
        "leptos",
        "web_sys",
        "wasm_bindgen",
        "js_sys",
        "gloo",
        "plotters",
        "crate::store",
        "crate::ui",
    ];
    for f in files {
        let text = std::fs::read_to_string(&f).expect("read");
        for line in code_lines(&text) {
            for word in forbidden {
                assert!(
                    !line.contains(word),
                    "{} uses {word}: the engine must stay plain Rust ({line})",
                    f.display()
                );
            }
            assert!(
                !line.contains("Utc::now") && !line.contains("Local::now"),
                "{}: the engine reads no clock",
                f.display()
            );
        }
    }
}

#[test]
fn only_the_store_touches_local_storage() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    rust_files(&root, &mut files);
    for f in files {
        if f.ends_with("store.rs") {
            continue;
        }
        let text = std::fs::read_to_string(&f).expect("read");
        for line in code_lines(&text) {
            assert!(
                !line.contains("LocalStorage") && !line.contains("local_storage"),
                "{} touches storage outside src/store.rs",
                f.display()
            );
        }
    }
}
