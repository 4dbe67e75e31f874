# Shared by tools/serve.sh and tools/test.sh: install what is missing, skip what is
# already there at the right version, build the single-file bundle. Source it.
set -euo pipefail

ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
cd "$ROOT"
export PATH="$HOME/.cargo/bin:$PATH"

TRUNK_VERSION="0.21.14"
# The wasm-bindgen CLI must equal the library in Cargo.lock exactly.
WASM_BINDGEN_VERSION="$(awk '/^name = "wasm-bindgen"$/ { getline; gsub(/[^0-9.]/, ""); print; exit }' Cargo.lock)"

say() { printf '\n== %s\n' "$*"; }

as_root() {
  if [ "$(id -u)" = 0 ]; then "$@"; else sudo "$@"; fi
}

need_build_tools() {
  if ! grep -q "^wasm_bindgen = \"$WASM_BINDGEN_VERSION\"" Trunk.toml; then
    echo "Trunk.toml [tools] wasm_bindgen must equal the wasm-bindgen in Cargo.lock ($WASM_BINDGEN_VERSION)" >&2
    exit 1
  fi
  if ! rustup target list --installed | grep -qx wasm32-unknown-unknown; then
    say "adding the wasm32 target"
    rustup target add wasm32-unknown-unknown
  fi
  if ! trunk --version 2>/dev/null | grep -q "trunk $TRUNK_VERSION"; then
    say "installing trunk $TRUNK_VERSION (a few minutes, once)"
    cargo install trunk --locked --version "=$TRUNK_VERSION"
  fi
  if ! wasm-bindgen --version 2>/dev/null | grep -q "wasm-bindgen $WASM_BINDGEN_VERSION"; then
    say "installing wasm-bindgen-cli $WASM_BINDGEN_VERSION (a few minutes, once)"
    # Not --locked: its lock file names a crate version the registry no longer carries.
    cargo install wasm-bindgen-cli --version "=$WASM_BINDGEN_VERSION"
  fi
  command -v python3 >/dev/null || { echo "python3 is needed by the bundle step" >&2; exit 1; }
}

need_test_tools() {
  if ! command -v chromium >/dev/null || ! command -v chromedriver >/dev/null \
    || ! command -v pdftotext >/dev/null; then
    say "installing Debian's chromium, chromium-driver and poppler-utils (the day sheet's PDF)"
    as_root apt-get update -q
    DEBIAN_FRONTEND=noninteractive as_root apt-get install -y -q chromium chromium-driver poppler-utils
  fi
  if ! python3 -c "import numpy, scipy, jsonschema" 2>/dev/null; then
    say "installing the reference libraries numpy, scipy and jsonschema"
    python3 -m pip install -q -r tools/reference-requirements.txt
  fi
  if ! (cd tests/e2e && npm ls --depth=0 >/dev/null 2>&1); then
    say "installing playwright-core for the browser tests"
    (cd tests/e2e && npm ci --no-audit --no-fund)
  fi
}

build_bundle() {
  say "building dist/cuvette.html"
  cargo fetch --locked -q
  trunk build --release
  test -s dist/cuvette.html || { echo "dist/cuvette.html was not written" >&2; exit 1; }
}
