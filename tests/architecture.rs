//! Keeps the code map's invariants true: the engine and the journal's logic are plain
//! Rust (no browser crate, no storage), and only `src/store/` touches browser storage.

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
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    rust_files(&src.join("engine"), &mut files);
    assert!(files.len() >= 5, "engine files not found");
    // The journal's logic and its localStorage layout are plain Rust too.
    files.push(src.join("journal.rs"));
    files.push(src.join("mirror.rs"));
    // What the board and the runs view conclude from the records, likewise.
    files.push(src.join("board.rs"));
    files.push(src.join("corrective.rs"));
    files.push(src.join("due.rs"));
    files.push(src.join("usage.rs"));
    files.push(src.join("period.rs"));
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
    // Browser storage: gloo's localStorage, web-sys's Storage and IndexedDB.
    let touches = [
        "gloo_storage",
        "local_storage()",
        "indexed_db()",
        ".set_item(",
        ".get_item(",
        "Idb",
    ];
    for f in files {
        if f.starts_with(root.join("store")) {
            continue;
        }
        let text = std::fs::read_to_string(&f).expect("read");
        for line in code_lines(&text) {
            for word in touches {
                assert!(
                    !line.contains(word),
                    "{} touches browser storage ({word}) outside src/store/",
                    f.display()
                );
            }
        }
    }
}
