//! Timing of the engine's hot paths: a 4PL and a 5PL fit of the ryegrass dose–response
//! set (24 points, the same curve `tools/bench-4pl.sh` times with scipy), linear and
//! quadratic fits of NIST StRD Norris (36 points) and Pontius (40 points), the sets the
//! same script times with numpy.polyfit, and a year of two-level QC runs through the
//! multirule set. The same 4PL and 5PL curves are also fitted by the
//! `levenberg-marquardt` crate (MINPACK's algorithm on nalgebra) from scipy's starting
//! point, and both fits' residual sums of squares are printed once, untimed, so the
//! times compare fits of the same accuracy. The three solvers alone (the fixed-size one
//! the calibrations use, the SVD one the NIST checks use, the crate) are timed from
//! scipy's p0 on the same 24 residuals.

use criterion::{black_box, criterion_group, criterion_main, Criterion};
use cuvette::engine::calibration::{fit, CalPoint, ModelKind, ReplicateUse, Weighting};
use cuvette::engine::qc::{evaluate, LevelTarget, Rule, RuleSetting};
use levenberg_marquardt::{LeastSquaresProblem, LevenbergMarquardt};
use nalgebra::{storage::Owned, DVector, Dyn, OMatrix, OVector, U4, U5};

/// The 4PL curve d + (a − d) / (1 + (x/c)^b) and, with g, the 5PL
/// d + (a − d) / (1 + (x/c)^b)^g, as the crate's least-squares problem, with the
/// analytic Jacobian of the residuals f(x) − y.
struct Logistic<const N: usize> {
    x: Vec<f64>,
    y: Vec<f64>,
    p: [f64; N],
}

impl<const N: usize> Logistic<N> {
    /// Per point: f, and the derivatives by a, b, c, d (and g).
    fn each(&self) -> impl Iterator<Item = (f64, [f64; 5])> + '_ {
        self.x.iter().map(move |&x| self.point(x))
    }

    fn point(&self, x: f64) -> (f64, [f64; 5]) {
        let (a, b, c, d) = (self.p[0], self.p[1], self.p[2], self.p[3]);
        let g = if N == 5 { self.p[4] } else { 1.0 };
        let (u, ln) = if x > 0.0 {
            let ln = (x / c).ln();
            ((b * ln).exp(), ln)
        } else {
            (0.0, 0.0)
        };
        let den = 1.0 + u;
        let w = den.powf(-g);
        let f = d + (a - d) * w;
        let common = (a - d) * g * w / den * u;
        (
            f,
            [
                w,
                -common * ln,
                common * b / c,
                1.0 - w,
                -(a - d) * w * den.ln(),
            ],
        )
    }
}

macro_rules! logistic_problem {
    ($n:literal, $u:ty) => {
        impl LeastSquaresProblem<f64, Dyn, $u> for Logistic<$n> {
            type ParameterStorage = Owned<f64, $u>;
            type ResidualStorage = Owned<f64, Dyn>;
            type JacobianStorage = Owned<f64, Dyn, $u>;
            fn set_params(&mut self, p: &OVector<f64, $u>) {
                self.p.copy_from_slice(p.as_slice());
            }
            fn params(&self) -> OVector<f64, $u> {
                OVector::<f64, $u>::from_column_slice(&self.p)
            }
            fn residuals(&self) -> Option<DVector<f64>> {
                let r: Vec<f64> = self.each().zip(&self.y).map(|((f, _), y)| f - y).collect();
                Some(DVector::from_vec(r))
            }
            fn jacobian(&self) -> Option<OMatrix<f64, Dyn, $u>> {
                let mut j = OMatrix::<f64, Dyn, $u>::zeros(self.x.len());
                for (i, (_, d)) in self.each().enumerate() {
                    for k in 0..$n {
                        j[(i, k)] = d[k];
                    }
                }
                Some(j)
            }
        }
    };
}
logistic_problem!(4, U4);
logistic_problem!(5, U5);

/// The same problem for the engine's own solver, so the two solvers are timed on the
/// same residuals from the same start.
impl<const N: usize> cuvette::engine::lm::LeastSquaresProblem for Logistic<N> {
    fn n_residuals(&self) -> usize {
        self.x.len()
    }
    fn n_params(&self) -> usize {
        N
    }
    fn residuals(&self, params: &[f64], out: &mut [f64]) -> Option<()> {
        let at = Logistic::<N> {
            x: Vec::new(),
            y: Vec::new(),
            p: params.try_into().ok()?,
        };
        for (i, &x) in self.x.iter().enumerate() {
            out[i] = at.point(x).0 - self.y[i];
        }
        Some(())
    }
    fn jacobian(&self, params: &[f64], out: &mut nalgebra::DMatrix<f64>) -> Option<()> {
        let at = Logistic::<N> {
            x: Vec::new(),
            y: Vec::new(),
            p: params.try_into().ok()?,
        };
        for (i, &x) in self.x.iter().enumerate() {
            let d = at.point(x).1;
            for k in 0..N {
                out[(i, k)] = d[k];
            }
        }
        Some(())
    }
}

/// The same problem for the engine's fixed-size solver (the one the calibrations use),
/// from the point-by-point residuals f(x) − y: no pooling of replicates here, so the
/// solvers alone are compared on the same 24 residuals.
impl<const N: usize> cuvette::engine::small_lm::SmallProblem<N> for Logistic<N> {
    fn sums(
        &self,
        params: &[f64; N],
        out: &mut cuvette::engine::small_lm::NormalSums<N>,
    ) -> Option<()> {
        let at = Logistic::<N> {
            x: Vec::new(),
            y: Vec::new(),
            p: *params,
        };
        *out = Default::default();
        for (&x, &y) in self.x.iter().zip(&self.y) {
            let (f, d) = at.point(x);
            let r = f - y;
            out.cost += r * r;
            for j in 0..N {
                out.jtr[j] += d[j] * r;
                for k in 0..N {
                    out.jtj[(j, k)] += d[j] * d[k];
                }
            }
        }
        Some(())
    }
}

/// The fixed-size solver from the same start with the tolerances the fits use.
fn small_solve<const N: usize>(problem: &Logistic<N>) -> cuvette::engine::small_lm::SmallReport<N> {
    let settings = cuvette::engine::lm::Settings {
        ftol: 1e-12,
        xtol: 1e-14,
        gtol: 1e-14,
        max_evaluations: 5_000,
    };
    cuvette::engine::small_lm::solve(problem, problem.p, &settings)
}

/// The engine's SVD solver (kept for the NIST problems) from the same start.
fn engine_solve<const N: usize>(problem: &Logistic<N>) -> cuvette::engine::lm::Report {
    let settings = cuvette::engine::lm::Settings {
        ftol: 1e-14,
        xtol: 1e-14,
        gtol: 1e-14,
        max_evaluations: 5_000,
    };
    cuvette::engine::lm::solve(problem, &problem.p, &settings)
}

fn rss<const N: usize>(p: &Logistic<N>) -> f64 {
    p.each().zip(&p.y).map(|((f, _), y)| (f - y).powi(2)).sum()
}

/// The crate's 4PL fit from scipy's p0 [8, 2, 3, 0.5] (`tools/bench-4pl.sh`).
fn crate_4pl(pts: &[CalPoint]) -> Logistic<4> {
    let problem = Logistic {
        x: pts.iter().map(|p| p.conc).collect(),
        y: pts.iter().map(|p| p.signal).collect(),
        p: [8.0, 2.0, 3.0, 0.5],
    };
    LevenbergMarquardt::new().minimize(problem).0
}

/// The crate's 5PL fit from its 4PL optimum and g = 1 (as the scipy script starts).
fn crate_5pl(pts: &[CalPoint]) -> Logistic<5> {
    let four = crate_4pl(pts);
    let [a, b, c, d] = four.p;
    let problem = Logistic {
        x: four.x,
        y: four.y,
        p: [a, b, c, d, 1.0],
    };
    LevenbergMarquardt::new().minimize(problem).0
}

fn ryegrass() -> Vec<CalPoint> {
    let dir = std::env::var("CUVETTE_REFERENCE")
        .unwrap_or_else(|_| concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference").to_string());
    let text =
        std::fs::read_to_string(format!("{dir}/dose-response/ryegrass.csv")).expect("ryegrass.csv");
    text.lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| {
            let (r, c) = l.split_once(',').expect("two columns");
            CalPoint {
                conc: c.trim().parse().expect("conc"),
                signal: r.trim().parse().expect("rootl"),
            }
        })
        .collect()
}

/// A NIST StRD set's (x, y) as calibration points (x = concentration).
fn nist(name: &str) -> Vec<CalPoint> {
    let dir = std::env::var("CUVETTE_REFERENCE")
        .unwrap_or_else(|_| concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference").to_string());
    let text = std::fs::read_to_string(format!("{dir}/nist/{name}.dat")).expect("NIST set");
    let set = cuvette::verification::parse_strd(&text).expect("StRD");
    set.x
        .iter()
        .zip(&set.y)
        .map(|(&conc, &signal)| CalPoint { conc, signal })
        .collect()
}

fn bench(c: &mut Criterion) {
    for (name, model, set) in [
        ("fit_linear_norris", ModelKind::Linear, "Norris"),
        ("fit_quadratic_pontius", ModelKind::Quadratic, "Pontius"),
    ] {
        let pts = nist(set);
        c.bench_function(name, |b| {
            b.iter(|| {
                fit(
                    model,
                    Weighting::None,
                    ReplicateUse::Individual,
                    black_box(&pts),
                )
                .expect("fit")
            })
        });
    }
    let pts = ryegrass();
    c.bench_function("fit_4pl_ryegrass", |b| {
        b.iter(|| {
            fit(
                ModelKind::FourPl,
                Weighting::None,
                ReplicateUse::Individual,
                black_box(&pts),
            )
            .expect("fit")
        })
    });
    c.bench_function("fit_4pl_ryegrass_lm_crate", |b| {
        b.iter(|| crate_4pl(black_box(&pts)))
    });
    c.bench_function("fit_5pl_ryegrass_lm_crate", |b| {
        b.iter(|| crate_5pl(black_box(&pts)))
    });
    let hand = crate_4pl(&pts);
    let start = Logistic {
        p: [8.0, 2.0, 3.0, 0.5],
        ..hand
    };
    c.bench_function("solve_4pl_ryegrass_engine_from_p0", |b| {
        b.iter(|| engine_solve(black_box(&start)))
    });
    c.bench_function("solve_4pl_ryegrass_small_from_p0", |b| {
        b.iter(|| small_solve(black_box(&start)))
    });
    c.bench_function("solve_4pl_ryegrass_lm_crate_from_p0", |b| {
        b.iter(|| {
            let problem = Logistic {
                x: start.x.clone(),
                y: start.y.clone(),
                p: start.p,
            };
            LevenbergMarquardt::new().minimize(black_box(problem)).0
        })
    });
    let engine = engine_solve(&start);
    let small = small_solve(&start);
    eprintln!(
        "4PL ryegrass from p0, solvers alone: fixed-size RSS {:.12e} in {} evaluations, SVD RSS {:.12e} in {} iterations, crate RSS {:.12e}",
        small.rss,
        small.evaluations,
        engine.rss,
        engine.iterations,
        rss(&crate_4pl(&pts))
    );
    // The same accuracy: each fit's residual sum of squares, once, untimed.
    for (model, theirs) in [
        (ModelKind::FourPl, rss(&crate_4pl(&pts))),
        (ModelKind::FivePl, rss(&crate_5pl(&pts))),
    ] {
        let ours = fit(model, Weighting::None, ReplicateUse::Individual, &pts).expect("fit");
        let ours_rss: f64 = pts
            .iter()
            .map(|p| (ours.curve.signal_at(p.conc) - p.signal).powi(2))
            .sum();
        eprintln!(
            "{model:?} ryegrass RSS: cuvette {ours_rss:.12e}, levenberg-marquardt crate {theirs:.12e}, relative difference {:.1e}",
            (ours_rss - theirs) / theirs
        );
    }
    c.bench_function("fit_5pl_ryegrass", |b| {
        b.iter(|| {
            fit(
                ModelKind::FivePl,
                Weighting::None,
                ReplicateUse::Individual,
                black_box(&pts),
            )
            .expect("fit")
        })
    });
    // 365 runs of two levels, deterministic pseudo-random z in [-2.5, 2.5].
    let targets = [
        LevelTarget {
            mean: 100.0,
            sd: 2.0,
        },
        LevelTarget {
            mean: 250.0,
            sd: 5.0,
        },
    ];
    let mut state = 12345u64;
    let mut z = || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((state >> 33) as f64 / (1u64 << 31) as f64) * 5.0 - 2.5
    };
    let runs: Vec<Vec<Option<f64>>> = (0..365)
        .map(|_| vec![Some(100.0 + 2.0 * z()), Some(250.0 + 5.0 * z())])
        .collect();
    let rules: Vec<RuleSetting> = ["1-2s", "1-3s", "2-2s", "R-4s", "4-1s", "10-x"]
        .iter()
        .map(|r| RuleSetting::default_for(r.parse::<Rule>().expect("rule")))
        .collect();
    c.bench_function("qc_year_of_runs", |b| {
        b.iter(|| evaluate(&targets, black_box(&runs), &rules).expect("qc"))
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
