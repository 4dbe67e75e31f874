#!/usr/bin/env python3
"""Trunk post-build hook: turn trunk's output into one self-contained offline file.

Reads $TRUNK_STAGING_DIR/index.html and writes $TRUNK_STAGING_DIR/cuvette.html with
the stylesheet, icon, JS glue and wasm inlined, because browsers block module imports
and fetch() from file:// pages. The wasm is deflated (zlib) before it is base64-encoded
and inflated at start by the browser's own DecompressionStream: the file is about half
the size of the raw wasm in base64. Fails loudly if the glue imports anything
else (a snippet module would not load from file://).
"""
import base64
import os
import zlib
import re
import sys
from pathlib import Path


def fail(msg):
    print(f"single_file.py: {msg}", file=sys.stderr)
    sys.exit(1)


staging = Path(os.environ.get("TRUNK_STAGING_DIR") or (sys.argv[1] if len(sys.argv) > 1 else "dist"))
index = staging / "index.html"
if not index.is_file():
    fail(f"{index} not found: run through trunk build")
html = index.read_text(encoding="utf-8")


def local(href):
    name = href.split("?")[0].lstrip("./").lstrip("/")
    path = staging / name
    if not path.is_file():
        fail(f"{href} referenced by index.html is missing in {staging}")
    return path


# Trunk's loader: import init from the glue, then init with the wasm path.
loader = re.search(r"<script type=\"module\"[^>]*>(.*?)</script>", html, re.S)
if not loader:
    fail("trunk's module loader script not found in index.html")
js_href = re.search(r"from ['\"]([^'\"]+\.js)['\"]", loader.group(1))
wasm_href = re.search(r"['\"]([^'\"]+_bg\.wasm)['\"]", loader.group(1))
if not js_href or not wasm_href:
    fail("could not find the glue .js and .wasm names in trunk's loader")
glue = local(js_href.group(1)).read_text(encoding="utf-8")
wasm = local(wasm_href.group(1)).read_bytes()
if re.search(r"^\s*import\s", glue, re.M):
    fail("the wasm-bindgen glue imports another module (a snippet?); it would not load from file://")

deflated = zlib.compress(wasm, 9)
wasm_b64 = base64.b64encode(deflated).decode("ascii")
boot = f"""
<script id="cuvette-wasm" type="application/octet-stream">{wasm_b64}</script>
<script type="module">
{glue}
const b64 = document.getElementById("cuvette-wasm").textContent;
const bin = atob(b64);
const packed = new Uint8Array(bin.length);
for (let i = 0; i < bin.length; i++) packed[i] = bin.charCodeAt(i);
if (typeof DecompressionStream === "undefined") {{
  document.body.textContent = "This browser is too old for Cuvette: open this file in Chrome or Edge 80 or later, or Firefox 113 or later. Nothing was changed.";
}} else {{
  const inflated = new Blob([packed]).stream().pipeThrough(new DecompressionStream("deflate"));
  const exports = initSync({{ module: new Uint8Array(await new Response(inflated).arrayBuffer()) }});
  // For the benchmarks: the size of the app's memory (read only by tests/e2e/bench-*.mjs).
  globalThis.cuvetteWasmMemory = exports.memory;
}}
</script>
"""

out = html
# Drop preload hints for the glue and wasm, and trunk's loader.
out = re.sub(r"<link[^>]*rel=\"(?:modulepreload|preload)\"[^>]*>\s*", "", out)
out = out.replace(loader.group(0), "")


def inline_css(m):
    href = re.search(r"href=\"([^\"]+)\"", m.group(0)).group(1)
    return "<style>\n" + local(href).read_text(encoding="utf-8") + "\n</style>"


out = re.sub(r"<link[^>]*rel=\"stylesheet\"[^>]*>", inline_css, out)


def inline_icon(m):
    href = re.search(r"href=\"([^\"]+)\"", m.group(0)).group(1)
    data = base64.b64encode(local(href).read_bytes()).decode("ascii")
    mime = "image/svg+xml" if href.endswith(".svg") else "image/png"
    return f'<link rel="icon" href="data:{mime};base64,{data}">'


out = re.sub(r"<link[^>]*rel=\"icon\"[^>]*>", inline_icon, out)
if "</body>" not in out:
    fail("index.html has no </body>")
out = out.replace("</body>", boot + "</body>")
leftover = re.findall(r"(?:src|href)=\"(?!data:|#)([^\"]+)\"", out)
if leftover:
    fail(f"references left that file:// cannot load: {leftover}")
(staging / "cuvette.html").write_text(out, encoding="utf-8")
print(f"single_file.py: wrote cuvette.html ({len(out.encode())} bytes, wasm {len(wasm)} bytes, deflated {len(deflated)})")
