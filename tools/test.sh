#!/usr/bin/env bash
# Command 2: install what the tests need, then run every test: formatting and lints,
# native unit tests, reference checks (NIST StRD, numpy, scipy), and the end-to-end
# tests of dist/cuvette.html in headless Chromium.
source "$(dirname "$0")/setup.sh"
started=$(date +%s)
need_build_tools
need_test_tools

say "cargo fmt --check"
cargo fmt --all -- --check
say "cargo clippy"
cargo clippy --locked --all-targets -q -- -D warnings
say "native unit tests and reference checks"
cargo test --locked -q
build_bundle
say "browser tests (headless Chromium, file://)"
(cd tests/e2e && npm test --silent)
say "benchmark smoke runs (tiny sizes, so none rots; their figures are not checked)"
BENCH_SCALE=64 cargo bench --locked -q --bench rules
cargo bench --locked -q --bench fit -- --test
BENCH_DAYS=20 cargo bench --locked -q --bench records
(cd tests/e2e && node bench-views.mjs && node bench-save.mjs && node bench-import.mjs) >/dev/null
echo
echo "All tests passed in $(( $(date +%s) - started )) s."
