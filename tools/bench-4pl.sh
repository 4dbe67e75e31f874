#!/usr/bin/env bash
# Times one 4PL fit of the ryegrass set with Cuvette (criterion) and with
# scipy.optimize.curve_fit (timeit) in the same run, and prints the ratio.
set -euo pipefail
cd "$(dirname "$0")/.."
REF="${CUVETTE_REFERENCE:-$PWD/tests/reference}"
cargo bench --bench fit -- --noplot --warm-up-time 1 --measurement-time 3 fit_4pl_ryegrass >/dev/null
ours_ns=$(python3 -c "import json;print(json.load(open('target/criterion/fit_4pl_ryegrass/new/estimates.json'))['mean']['point_estimate'])")
scipy_ns=$(REF="$REF" python3 - <<'PY'
import os, timeit, warnings
import numpy as np
from scipy.optimize import curve_fit
rows = [l.strip().split(",") for l in open(os.environ["REF"] + "/dose-response/ryegrass.csv").read().splitlines()[1:] if l.strip()]
y = np.array([float(r[0]) for r in rows]); x = np.array([float(r[1]) for r in rows])
f = lambda x, a, b, c, d: d + (a - d) / (1 + (x / c) ** b)
warnings.simplefilter("ignore")
fit = lambda: curve_fit(f, x, y, p0=[8, 2, 3, 0.5])
n, t = timeit.Timer(fit).autorange()
best = min(timeit.repeat(fit, number=n, repeat=5)) / n
print(best * 1e9)
PY
)
python3 - "$ours_ns" "$scipy_ns" <<'PY'
import sys
ours, scipy = float(sys.argv[1]), float(sys.argv[2])
print(f"4PL fit of ryegrass (24 points): cuvette {ours/1000:.1f} µs (5 starts, analytic Jacobian), "
      f"scipy curve_fit {scipy/1000:.1f} µs (1 start from a hand p0)")
print(f"ratio scipy / cuvette = {scipy/ours:.2f}")
PY
