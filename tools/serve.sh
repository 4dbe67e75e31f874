#!/usr/bin/env bash
# Command 1: install what is missing, build dist/cuvette.html and serve it.
source "$(dirname "$0")/setup.sh"
need_build_tools
build_bundle
echo
echo "Single file for the USB stick: $ROOT/dist/cuvette.html"
echo "  (copy it anywhere and open it by double-click; it needs no server)"
echo "Serving on http://127.0.0.1:8080/cuvette.html  (Ctrl-C to stop)"
echo "  Set-up > Load demo lab gives an invented lab to try every view."
exec python3 -m http.server 8080 --bind 127.0.0.1 --directory "$ROOT/dist"
