#!/usr/bin/env bash
# Times the 4PL and 5PL fits of the ryegrass set with Cuvette (criterion) and with
# scipy.optimize.curve_fit (method 'lm', timeit) in the same run, and prints the ratios.
set -euo pipefail
cd "$(dirname "$0")/.."
REF="${CUVETTE_REFERENCE:-$PWD/tests/reference}"
cargo bench --bench fit -- --noplot --warm-up-time 1 --measurement-time 3 'fit_[45]pl_ryegrass' >/dev/null
ours() { python3 -c "import json;print(json.load(open('target/criterion/$1/new/estimates.json'))['mean']['point_estimate'])"; }
ours4=$(ours fit_4pl_ryegrass)
ours5=$(ours fit_5pl_ryegrass)
read -r scipy4 scipy5 < <(REF="$REF" python3 - <<'PY'
import os, timeit, warnings
import numpy as np
from scipy.optimize import curve_fit
rows = [l.strip().split(",") for l in open(os.environ["REF"] + "/dose-response/ryegrass.csv").read().splitlines()[1:] if l.strip()]
y = np.array([float(r[0]) for r in rows]); x = np.array([float(r[1]) for r in rows])
f4 = lambda x, a, b, c, d: d + (a - d) / (1 + (x / c) ** b)
f5 = lambda x, a, b, c, d, g: d + (a - d) / (1 + (x / c) ** b) ** g
warnings.simplefilter("ignore")
p4, _ = curve_fit(f4, x, y, p0=[8, 2, 3, 0.5], method="lm")
def best(fit):
    n, t = timeit.Timer(fit).autorange()
    return min(timeit.repeat(fit, number=n, repeat=5)) / n * 1e9
print(best(lambda: curve_fit(f4, x, y, p0=[8, 2, 3, 0.5], method="lm")),
      best(lambda: curve_fit(f5, x, y, p0=list(p4) + [1.0], method="lm", maxfev=20000)))
PY
)
python3 - "$ours4" "$scipy4" "$ours5" "$scipy5" <<'PY'
import sys
o4, s4, o5, s5 = map(float, sys.argv[1:])
print(f"4PL fit of ryegrass (24 points): cuvette {o4/1000:.1f} µs, scipy curve_fit {s4/1000:.1f} µs (from a hand p0); ratio scipy / cuvette = {s4/o4:.2f}")
print(f"5PL fit of ryegrass (24 points): cuvette {o5/1000:.1f} µs (4PL first, then 5PL), scipy curve_fit {s5/1000:.1f} µs (from the 4PL optimum); ratio scipy / cuvette = {s5/o5:.2f}")
PY
