#!/usr/bin/env bash
# What each crate adds to the app's WebAssembly: builds the bundle once with names kept
# (not stripped, into target/size-report/), runs twiggy over the wasm and sums the
# code and data of each crate (our own modules one by one), largest first, with the
# single file's raw and gzip size beside the budget. Installs twiggy when missing.
# Not part of the test suite (a build of its own takes minutes).
set -euo pipefail
source "$(dirname "$0")/setup.sh"
need_build_tools
if ! command -v twiggy >/dev/null; then
  say "installing twiggy (once)"
  cargo install twiggy --locked
fi
out="$ROOT/target/size-report"
say "building the bundle with names into $out/dist"
CARGO_PROFILE_RELEASE_STRIP=false CARGO_TARGET_DIR="$out/cargo" \
  trunk build --release --dist "$out/dist" >"$out.log" 2>&1 || { cat "$out.log"; exit 1; }
wasm=$(ls "$out"/dist/*_bg.wasm)
twiggy top -n 1000000 -f csv "$wasm" >"$out/top.csv"
python3 - "$out/top.csv" "$ROOT/dist/cuvette.html" <<'PY'
import csv, collections, gzip, os, re, sys
rows = list(csv.DictReader(open(sys.argv[1])))
by = collections.Counter()
for r in rows:
    name, size = r["Name"], int(r["ShallowSize"])
    if name.startswith(("custom section", "data segment")) or "subsection" in name:
        by[name[:40]] += size
        continue
    m = re.search(r"([A-Za-z_][A-Za-z0-9_]*)::", name)
    crate = m.group(1) if m else "(no path)"
    if crate == "cuvette":
        m = re.search(r"cuvette::([a-z_]+)(?:::([a-z_]+))?", name)
        sub = m.group(2) if m and m.group(1) in ("engine", "ui", "store") and m.group(2) else None
        crate = "cuvette::" + (m.group(1) if m else "?") + (f"::{sub}" if sub else "")
    by[crate] += size
total = sum(by.values())
print(f"wasm with names: {total:,} bytes (names are stripped from the shipped build)")
for k, v in by.most_common(40):
    print(f"{v:>10,} {100 * v / total:5.1f}%  {k}")
single = sys.argv[2]
if os.path.exists(single):
    raw = open(single, "rb").read()
    print(f"\ndist/cuvette.html: {len(raw):,} bytes raw (budget 1.6 MB), "
          f"{len(gzip.compress(raw, 9)):,} gzip (budget 450 KB)")
PY
