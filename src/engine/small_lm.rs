//! Levenberg–Marquardt for curves with a handful of parameters (the 4PL and 5PL
//! calibrations), on the normal equations in fixed-size matrices.
//!
//! The problem hands back, for one parameter vector, the three sums a step needs:
//! the sum of squared residuals, JᵀJ and Jᵀr ([`NormalSums`]); it never stores the
//! Jacobian, so one pass over the calibrators costs one `exp` per distinct
//! concentration and nothing is allocated between the start and the answer. The step
//! solves (D⁻¹JᵀJD⁻¹ + μI) δ̃ = −D⁻¹Jᵀr by Cholesky on an N×N stack matrix, with Moré's
//! column scaling D (never decreasing) and Nielsen's damping update — the method of
//! [`super::lm`], whose SVD keeps more digits on the ill-conditioned NIST problems but
//! costs far more per step. Forming JᵀJ squares the condition number of the scaled
//! Jacobian; a calibration curve's is far below where that loses the optimum (the
//! gradient and the sum of squares are exact sums either way, so the tests below stop
//! at the same point), and a step whose Cholesky fails is damped harder.
//!
//! Convergence tests are those of [`super::lm`]: relative reduction of the sum of
//! squares (actual and predicted), relative step, and the cosine between the residuals
//! and each Jacobian column, all from the sums. Never panics: a bad start or a model
//! that declines a trial point ends in a [`Termination`].

use nalgebra::{SMatrix, SVector};

pub use super::lm::{Settings, Termination};

/// What a step needs at one parameter vector, for residuals rᵢ and their Jacobian J.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NormalSums<const N: usize> {
    /// Σ rᵢ², including any constant part of the model's sum of squares.
    pub cost: f64,
    /// JᵀJ.
    pub jtj: SMatrix<f64, N, N>,
    /// Jᵀr.
    pub jtr: SVector<f64, N>,
}

impl<const N: usize> Default for NormalSums<N> {
    fn default() -> Self {
        NormalSums {
            cost: 0.0,
            jtj: SMatrix::zeros(),
            jtr: SVector::zeros(),
        }
    }
}

impl<const N: usize> NormalSums<N> {
    /// Every entry finite. The diagonal stands for JᵀJ: |Σ gⱼgₖ| ≤ (Σ gⱼ² + Σ gₖ²)/2,
    /// so an infinite or NaN entry shows on the diagonal.
    fn is_finite(&self) -> bool {
        self.cost.is_finite()
            && (0..N).all(|j| self.jtj[(j, j)].is_finite() && self.jtr[j].is_finite())
    }

    /// Largest cosine between the residual vector and a Jacobian column.
    fn relative_gradient(&self) -> f64 {
        let rnorm = self.cost.sqrt();
        (0..N)
            .map(|j| {
                let cn = self.jtj[(j, j)].sqrt();
                if cn == 0.0 || rnorm == 0.0 {
                    0.0
                } else {
                    (self.jtr[j] / (cn * rnorm)).abs()
                }
            })
            .fold(0.0, f64::max)
    }
}

/// A least-squares problem that reports its [`NormalSums`].
pub trait SmallProblem<const N: usize> {
    /// The sums at `params` into `out`; `None` if the model cannot be evaluated there.
    fn sums(&self, params: &[f64; N], out: &mut NormalSums<N>) -> Option<()>;
}

/// What the solver found.
#[derive(Debug, Clone, Copy)]
pub struct SmallReport<const N: usize> {
    pub params: [f64; N],
    /// Sum of squared residuals at `params`.
    pub rss: f64,
    pub termination: Termination,
    pub evaluations: usize,
    pub iterations: usize,
    /// The sums at `params` (JᵀJ for the standard errors).
    pub sums: NormalSums<N>,
}

/// Minimise the sum of squared residuals of `problem` from `start`.
pub fn solve<const N: usize, P: SmallProblem<N> + ?Sized>(
    problem: &P,
    start: [f64; N],
    settings: &Settings,
) -> SmallReport<N> {
    let mut report = SmallReport {
        params: start,
        rss: f64::NAN,
        termination: Termination::BadInput,
        evaluations: 0,
        iterations: 0,
        sums: NormalSums::default(),
    };
    if N == 0 || start.iter().any(|v| !v.is_finite()) {
        return report;
    }
    report.evaluations = 1;
    let mut sums = NormalSums::default();
    if problem.sums(&start, &mut sums).is_none() || !sums.is_finite() {
        report.termination = Termination::BadStart;
        return report;
    }
    let mut params = start;
    let mut scale = [0.0_f64; N];
    let mut mu = -1.0_f64; // set from the first JᵀJ
    let mut nu = 2.0_f64;
    let mut trial_sums = NormalSums::default();
    let mut evaluations = 1;
    let mut iterations = 0;
    let termination = 'outer: loop {
        // Moré's scaling: column norms of J, never decreasing.
        for (j, s) in scale.iter_mut().enumerate() {
            *s = s.max(sums.jtj[(j, j)].sqrt());
            if *s == 0.0 {
                *s = 1.0;
            }
        }
        if sums.cost == 0.0 || sums.relative_gradient() <= settings.gtol {
            break Termination::ConvergedGradient;
        }
        let a = SMatrix::<f64, N, N>::from_fn(|i, j| sums.jtj[(i, j)] / (scale[i] * scale[j]));
        let g = SVector::<f64, N>::from_fn(|j, _| sums.jtr[j] / scale[j]);
        if mu < 0.0 {
            mu = 1e-3 * (0..N).map(|j| a[(j, j)]).fold(0.0, f64::max);
            if mu == 0.0 {
                mu = 1e-3;
            }
        }
        let xnorm = (0..N)
            .map(|j| (params[j] * scale[j]).powi(2))
            .sum::<f64>()
            .sqrt();
        // Try steps from this point, damping harder after each rejected one.
        loop {
            iterations += 1;
            let mut damped = a;
            for j in 0..N {
                damped[(j, j)] += mu;
            }
            let step = damped.cholesky().map(|c| -c.solve(&g));
            let accepted = step
                .filter(|s| s.iter().all(|v| v.is_finite()))
                .and_then(|s| {
                    // ‖r‖² − ‖r + Jδ‖² = δ̃ᵀAδ̃ + 2μ‖δ̃‖² for the damped step.
                    let predicted = (s.transpose() * a * s)[(0, 0)] + 2.0 * mu * s.norm_squared();
                    let trial: [f64; N] = std::array::from_fn(|j| params[j] + s[j] / scale[j]);
                    evaluations += 1;
                    let ok =
                        problem.sums(&trial, &mut trial_sums).is_some() && trial_sums.is_finite();
                    let actual = sums.cost - trial_sums.cost;
                    let rho = if predicted > 0.0 {
                        actual / predicted
                    } else {
                        -1.0
                    };
                    (ok && actual > 0.0 && rho > 1e-4).then_some((
                        trial,
                        s.norm(),
                        actual,
                        predicted,
                        rho,
                    ))
                });
            let snorm = match accepted {
                Some((trial, snorm, actual, predicted, rho)) => {
                    let old_cost = sums.cost;
                    params = trial;
                    sums = trial_sums;
                    mu *= f64::max(1.0 / 3.0, 1.0 - (2.0 * rho - 1.0).powi(3));
                    nu = 2.0;
                    if actual <= settings.ftol * old_cost && predicted <= settings.ftol * old_cost {
                        break 'outer Termination::ConvergedSumOfSquares;
                    }
                    if snorm <= settings.xtol * (xnorm + settings.xtol) {
                        break 'outer Termination::ConvergedStep;
                    }
                    if evaluations >= settings.max_evaluations {
                        break 'outer Termination::TooManyEvaluations;
                    }
                    continue 'outer;
                }
                None => step.map_or(f64::INFINITY, |s| s.norm()),
            };
            mu *= nu;
            nu *= 2.0;
            if snorm <= settings.xtol * (xnorm + settings.xtol) || !mu.is_finite() || mu > 1e300 {
                // Nothing reduces the sum of squares any more.
                break 'outer if sums.relative_gradient() < 1e-6 {
                    Termination::NoFurtherReduction
                } else {
                    Termination::Stuck
                };
            }
            if evaluations >= settings.max_evaluations {
                break 'outer Termination::TooManyEvaluations;
            }
        }
    };
    SmallReport {
        params,
        rss: sums.cost,
        termination,
        evaluations,
        iterations,
        sums,
    }
}

/// Standard errors of the parameters from JᵀJ at the optimum: sqrt of the diagonal of
/// s² (JᵀJ)⁻¹ with s² = RSS / dof. `None` without degrees of freedom, or when JᵀJ,
/// scaled to a unit diagonal, has a 1-norm condition number beyond 1e13 (the scaled Jacobian's
/// beyond about 3·10⁶): the data do not determine every parameter. JᵀJ cannot resolve
/// the finer line that [`super::lm::standard_errors`] draws on the Jacobian itself.
pub fn standard_errors<const N: usize>(
    jtj: &SMatrix<f64, N, N>,
    rss: f64,
    dof: usize,
) -> Option<[f64; N]> {
    if dof == 0 || !rss.is_finite() {
        return None;
    }
    let d: [f64; N] = std::array::from_fn(|j| jtj[(j, j)].sqrt());
    if d.iter().any(|&v| v == 0.0 || !v.is_finite()) {
        return None;
    }
    let scaled = SMatrix::<f64, N, N>::from_fn(|i, j| jtj[(i, j)] / (d[i] * d[j]));
    let inverse = scaled.cholesky()?.inverse();
    // The 1-norm condition number, exact here since the whole inverse is at hand.
    let norm1 = |m: &SMatrix<f64, N, N>| {
        (0..N)
            .map(|j| m.column(j).iter().map(|v| v.abs()).sum::<f64>())
            .fold(0.0, f64::max)
    };
    let condition = norm1(&scaled) * norm1(&inverse);
    if !condition.is_finite() || condition > 1e13 {
        return None;
    }
    let s2 = rss / dof as f64;
    Some(std::array::from_fn(|j| {
        (s2 * inverse[(j, j)]).sqrt() / d[j]
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// y = p0 · exp(p1 · x): the sums of its residuals yᵢ − f(xᵢ) and Jacobian −∂f/∂p.
    struct Exp {
        x: Vec<f64>,
        y: Vec<f64>,
    }

    impl SmallProblem<2> for Exp {
        fn sums(&self, p: &[f64; 2], out: &mut NormalSums<2>) -> Option<()> {
            *out = NormalSums::default();
            for (&x, &y) in self.x.iter().zip(&self.y) {
                let e = (p[1] * x).exp();
                let r = y - p[0] * e;
                let j = SVector::<f64, 2>::new(-e, -p[0] * x * e);
                out.cost += r * r;
                out.jtj += j * j.transpose();
                out.jtr += j * r;
            }
            Some(())
        }
    }

    /// Data generated exactly from p = (2, −0.5): the solver must recover them.
    #[test]
    fn recovers_exact_exponential() {
        let x: Vec<f64> = (0..10).map(|i| i as f64 * 0.5).collect();
        let y: Vec<f64> = x.iter().map(|&x| 2.0 * (-0.5 * x).exp()).collect();
        let rep = solve(&Exp { x, y }, [1.0, -0.1], &Settings::default());
        assert!(rep.termination.converged(), "{:?}", rep.termination);
        assert!((rep.params[0] - 2.0).abs() < 1e-10 && (rep.params[1] + 0.5).abs() < 1e-10);
    }

    /// The same noisy problem through both solvers ends at the same optimum, and the
    /// standard errors agree with the SVD route's.
    #[test]
    fn agrees_with_the_svd_solver() {
        use super::super::lm::{self, CurveModel, CurveProblem};
        struct ExpCurve;
        impl CurveModel for ExpCurve {
            fn n_params(&self) -> usize {
                2
            }
            fn value(&self, x: f64, p: &[f64]) -> Option<f64> {
                Some(p[0] * (p[1] * x).exp())
            }
            fn gradient(&self, x: f64, p: &[f64], g: &mut [f64]) -> Option<()> {
                g[0] = (p[1] * x).exp();
                g[1] = p[0] * x * g[0];
                Some(())
            }
        }
        let x: Vec<f64> = (0..12).map(|i| i as f64 * 0.4).collect();
        let noise = [
            0.01, -0.02, 0.015, 0.0, -0.01, 0.02, -0.005, 0.01, -0.015, 0.005, 0.0, -0.01,
        ];
        let y: Vec<f64> = x
            .iter()
            .zip(noise)
            .map(|(&x, n)| 3.0 * (-0.7 * x).exp() + n)
            .collect();
        let small = solve(
            &Exp {
                x: x.clone(),
                y: y.clone(),
            },
            [1.0, -0.1],
            &Settings::default(),
        );
        let problem = CurveProblem {
            model: &ExpCurve,
            x: &x,
            y: &y,
            weights: None,
        };
        let svd = lm::solve(&problem, &[1.0, -0.1], &Settings::default());
        assert!(small.termination.converged() && svd.termination.converged());
        assert!((small.rss - svd.rss).abs() <= 1e-12 * svd.rss);
        for j in 0..2 {
            assert!((small.params[j] - svd.params[j]).abs() <= 1e-8 * svd.params[j].abs());
        }
        let ours = standard_errors(&small.sums.jtj, small.rss, x.len() - 2).expect("se");
        let theirs = lm::standard_errors(&svd.jacobian, svd.rss).expect("se");
        for j in 0..2 {
            assert!(
                (ours[j] - theirs[j]).abs() <= 1e-6 * theirs[j],
                "{ours:?} {theirs:?}"
            );
        }
    }

    #[test]
    fn bad_start_and_singular_information_are_reported_not_panicked() {
        let p = Exp {
            x: vec![1.0, 2.0],
            y: vec![1.0, 2.0],
        };
        assert_eq!(
            solve(&p, [f64::NAN, 1.0], &Settings::default()).termination,
            Termination::BadInput
        );
        assert_eq!(
            solve(&p, [1.0, 1e308], &Settings::default()).termination,
            Termination::BadStart
        );
        let singular = SMatrix::<f64, 2, 2>::new(1.0, 1.0, 1.0, 1.0);
        assert_eq!(standard_errors(&singular, 1.0, 3), None);
        assert_eq!(
            standard_errors(&SMatrix::<f64, 2, 2>::identity(), 1.0, 0),
            None
        );
    }
}
