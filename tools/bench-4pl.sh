#!/usr/bin/env bash
# Times the 4PL and 5PL fits of the ryegrass set with Cuvette (criterion) and with
# scipy.optimize.curve_fit (method 'lm', timeit), and the linear (NIST Norris) and
# quadratic (NIST Pontius) fits against numpy.polyfit, in the same run; prints ratios.
# Also the levenberg-marquardt crate (MINPACK on nalgebra) on the same curves, and the
# two solvers alone from scipy's p0 (criterion prints both fits' RSS beside them).
set -euo pipefail
cd "$(dirname "$0")/.."
REF="${CUVETTE_REFERENCE:-$PWD/tests/reference}"
cargo bench --bench fit -- --noplot --warm-up-time 1 --measurement-time 3 '^(fit|solve)_' >/dev/null
ours() { python3 -c "import json;print(json.load(open('target/criterion/$1/new/estimates.json'))['mean']['point_estimate'])"; }
ours4=$(ours fit_4pl_ryegrass)
ours5=$(ours fit_5pl_ryegrass)
oursl=$(ours fit_linear_norris)
oursq=$(ours fit_quadratic_pontius)
crate4=$(ours fit_4pl_ryegrass_lm_crate)
crate5=$(ours fit_5pl_ryegrass_lm_crate)
solve_ours=$(ours solve_4pl_ryegrass_engine_from_p0)
solve_small=$(ours solve_4pl_ryegrass_small_from_p0)
solve_crate=$(ours solve_4pl_ryegrass_lm_crate_from_p0)
read -r scipy4 scipy5 numpyl numpyq < <(REF="$REF" python3 - <<'PY'
import os, timeit, warnings
import numpy as np
def strd(name):
    lines = open(os.environ["REF"] + f"/nist/{name}.dat").read().splitlines()
    # The data follow the last "Data:" line (the first one describes the set).
    start = [i for i, l in enumerate(lines) if l.strip().startswith("Data:")][-1] + 1
    rows = [l.split() for l in lines[start:] if len(l.split()) == 2]
    return np.array([float(r[1]) for r in rows]), np.array([float(r[0]) for r in rows])
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
xn, yn = strd("Norris")
xp, yp = strd("Pontius")
print(best(lambda: curve_fit(f4, x, y, p0=[8, 2, 3, 0.5], method="lm")),
      best(lambda: curve_fit(f5, x, y, p0=list(p4) + [1.0], method="lm", maxfev=20000)),
      best(lambda: np.polyfit(xn, yn, 1)),
      best(lambda: np.polyfit(xp, yp, 2)))
PY
)
python3 - "$ours4" "$scipy4" "$ours5" "$scipy5" "$oursl" "$numpyl" "$oursq" "$numpyq" "$crate4" "$crate5" "$solve_ours" "$solve_crate" "$solve_small" <<'PY'
import sys
o4, s4, o5, s5, ol, nl, oq, nq, c4, c5, so, sc, ss = map(float, sys.argv[1:])
print(f"4PL fit of ryegrass (24 points): cuvette {o4/1000:.1f} µs, scipy curve_fit {s4/1000:.1f} µs (from a hand p0); ratio scipy / cuvette = {s4/o4:.2f}")
print(f"5PL fit of ryegrass (24 points): cuvette {o5/1000:.1f} µs (4PL first, then 5PL), scipy curve_fit {s5/1000:.1f} µs (from the 4PL optimum); ratio scipy / cuvette = {s5/o5:.2f}")
print(f"linear fit of NIST Norris (36 points): cuvette {ol/1000:.2f} µs, numpy.polyfit {nl/1000:.2f} µs; ratio numpy / cuvette = {nl/ol:.2f}")
print(f"levenberg-marquardt crate: 4PL {c4/1000:.1f} µs, 5PL {c5/1000:.1f} µs (from scipy's starts); ratio crate / cuvette = {c4/o4:.2f} and {c5/o5:.2f}")
print(f"the solvers alone, 4PL from scipy's p0 on the 24 residuals: cuvette's fixed-size {ss/1000:.1f} µs, its SVD one (NIST checks) {so/1000:.1f} µs, crate {sc/1000:.1f} µs; ratio crate / fixed-size = {sc/ss:.2f}, crate / SVD = {sc/so:.2f}")
print(f"quadratic fit of NIST Pontius (40 points): cuvette {oq/1000:.2f} µs, numpy.polyfit {nq/1000:.2f} µs; ratio numpy / cuvette = {nq/oq:.2f}")
PY
