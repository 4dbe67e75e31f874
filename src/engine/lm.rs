//! Levenberg–Marquardt least squares for any model that gives its residuals and Jacobian.
//!
//! The calibration curves (4PL, 5PL) and the NIST reference problems in the tests all
//! go through [`solve`]. A problem is the small [`LeastSquaresProblem`] trait; its
//! evaluations return `Option` so a model can decline a parameter vector (a 4PL with
//! `c <= 0`, say) instead of producing NaN. The solver never panics on bad data: it
//! returns a [`Report`] whose [`Termination`] says why it stopped.
//!
//! Method: Marquardt's damped Gauss–Newton step with Moré's column scaling
//! (Moré 1978, "The Levenberg–Marquardt algorithm: implementation and theory"),
//! solved through the SVD of the scaled Jacobian so that ill-conditioned problems keep
//! their digits, and Nielsen's rule for updating the damping (Nielsen 1999, IMM-REP-1999-05).

use nalgebra::{DMatrix, DVector};

/// A least-squares problem: minimise the sum of squared residuals over the parameters.
pub trait LeastSquaresProblem {
    /// Number of residuals (observations).
    fn n_residuals(&self) -> usize;
    /// Number of parameters.
    fn n_params(&self) -> usize;
    /// Residuals at `params` into `out` (length [`Self::n_residuals`]); `None` if the model
    /// cannot be evaluated there.
    fn residuals(&self, params: &[f64], out: &mut [f64]) -> Option<()>;
    /// Jacobian of the residuals, `out[(i, j)] = d residual_i / d param_j`; `None` if the
    /// model cannot be evaluated there.
    fn jacobian(&self, params: &[f64], out: &mut DMatrix<f64>) -> Option<()>;
}

/// Why the solver stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Termination {
    /// The relative reduction of the sum of squares fell below the tolerance.
    ConvergedSumOfSquares,
    /// The step became negligible against the parameters.
    ConvergedStep,
    /// The gradient is zero to working precision (an exact fit, or a flat optimum).
    ConvergedGradient,
    /// No step reduces the sum of squares any more, and the gradient is small:
    /// the optimum is reached to machine precision.
    NoFurtherReduction,
    /// The evaluation budget ran out before convergence.
    TooManyEvaluations,
    /// The model could not be evaluated at the starting values.
    BadStart,
    /// No step reduces the sum of squares, yet the gradient is not small.
    Stuck,
    /// Input the solver cannot work with (no parameters, fewer residuals than
    /// parameters, non-finite starting values).
    BadInput,
}

impl Termination {
    /// True when the parameters are a (local) least-squares optimum.
    pub fn converged(self) -> bool {
        matches!(
            self,
            Termination::ConvergedSumOfSquares
                | Termination::ConvergedStep
                | Termination::ConvergedGradient
                | Termination::NoFurtherReduction
        )
    }
}

/// Tolerances and budget.
#[derive(Debug, Clone, Copy)]
pub struct Settings {
    /// Stop when both the actual and the predicted relative reduction of the sum of
    /// squares are below this.
    pub ftol: f64,
    /// Stop when the scaled step is below this, relative to the scaled parameters.
    pub xtol: f64,
    /// Stop when the cosine between residuals and every Jacobian column is below this.
    pub gtol: f64,
    /// Most residual evaluations.
    pub max_evaluations: usize,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            ftol: 1e-15,
            xtol: 1e-15,
            gtol: 1e-15,
            max_evaluations: 20_000,
        }
    }
}

/// What the solver found.
#[derive(Debug, Clone)]
pub struct Report {
    pub params: Vec<f64>,
    /// Sum of squared residuals at `params`.
    pub rss: f64,
    pub termination: Termination,
    pub evaluations: usize,
    pub iterations: usize,
    /// Jacobian at `params` (for standard errors).
    pub jacobian: DMatrix<f64>,
}

fn sum_sq(r: &[f64]) -> f64 {
    r.iter().map(|v| v * v).sum()
}

/// Minimise the sum of squared residuals of `problem` starting from `start`.
pub fn solve<P: LeastSquaresProblem + ?Sized>(
    problem: &P,
    start: &[f64],
    settings: &Settings,
) -> Report {
    let m = problem.n_residuals();
    let n = problem.n_params();
    let mut params = start.to_vec();
    let fail = |termination, params: Vec<f64>, evaluations| Report {
        params,
        rss: f64::NAN,
        termination,
        evaluations,
        iterations: 0,
        jacobian: DMatrix::zeros(m, n),
    };
    if n == 0 || m < n || start.len() != n || start.iter().any(|v| !v.is_finite()) {
        return fail(Termination::BadInput, params, 0);
    }
    let mut r = vec![0.0; m];
    let mut evaluations = 1;
    if problem.residuals(&params, &mut r).is_none() || r.iter().any(|v| !v.is_finite()) {
        return fail(Termination::BadStart, params, evaluations);
    }
    let mut jac = DMatrix::zeros(m, n);
    if problem.jacobian(&params, &mut jac).is_none() || jac.iter().any(|v| !v.is_finite()) {
        return fail(Termination::BadStart, params, evaluations);
    }
    let mut cost = sum_sq(&r);
    let mut scale = vec![0.0_f64; n];
    let mut mu = -1.0_f64; // set from the first Jacobian
    let mut nu = 2.0_f64;
    let mut iterations = 0;
    let mut r_trial = vec![0.0; m];
    let mut p_trial = vec![0.0; n];
    let mut need_svd = true;
    let mut svd_parts: Option<(DMatrix<f64>, DVector<f64>, DMatrix<f64>)> = None;
    let mut ut_r = DVector::zeros(n);
    let mut step_scaled = DVector::zeros(n);
    let mut jac_trial = DMatrix::zeros(m, n);

    let termination = loop {
        if need_svd {
            // Moré's scaling: column norms of J, never decreasing.
            for j in 0..n {
                let norm = jac.column(j).norm();
                scale[j] = scale[j].max(norm);
                if scale[j] == 0.0 {
                    scale[j] = 1.0;
                }
            }
            if cost == 0.0 {
                break Termination::ConvergedGradient;
            }
            // Gradient test: cosine between r and each column of J.
            if relative_gradient(&jac, &r) <= settings.gtol {
                break Termination::ConvergedGradient;
            }
            let mut scaled = jac.clone();
            for j in 0..n {
                let s = scale[j];
                scaled.column_mut(j).iter_mut().for_each(|v| *v /= s);
            }
            let svd = scaled.svd(true, true);
            let (Some(u), Some(v_t)) = (svd.u, svd.v_t) else {
                break Termination::Stuck;
            };
            let sigma = svd.singular_values;
            ut_r = u.tr_mul(&DVector::from_column_slice(&r));
            if mu < 0.0 {
                let smax = sigma.iter().cloned().fold(0.0, f64::max);
                mu = 1e-3 * smax * smax;
                if mu == 0.0 {
                    mu = 1e-3;
                }
            }
            svd_parts = Some((u, sigma, v_t));
            need_svd = false;
        }
        let Some((_, sigma, v_t)) = svd_parts.as_ref() else {
            break Termination::Stuck;
        };
        iterations += 1;
        // Scaled step: delta~ = -sum_i sigma_i/(sigma_i^2 + mu) (u_i . r) v_i.
        let k = sigma.len();
        step_scaled.fill(0.0);
        for i in 0..k {
            let s = sigma[i];
            let coef = -s / (s * s + mu) * ut_r[i];
            for j in 0..n {
                step_scaled[j] += v_t[(i, j)] * coef;
            }
        }
        // Predicted reduction from the linear model: ||r||^2 - ||r + J step||^2.
        let mut predicted = 0.0;
        for i in 0..k {
            let s = sigma[i];
            let b = ut_r[i];
            let shrink = mu / (s * s + mu); // component left of u_i.r
            predicted += b * b * (1.0 - shrink * shrink);
        }
        let xnorm: f64 = (0..n)
            .map(|j| (params[j] * scale[j]).powi(2))
            .sum::<f64>()
            .sqrt();
        let snorm = step_scaled.norm();
        for j in 0..n {
            p_trial[j] = params[j] + step_scaled[j] / scale[j];
        }
        evaluations += 1;
        let ok = problem.residuals(&p_trial, &mut r_trial).is_some()
            && r_trial.iter().all(|v| v.is_finite());
        let cost_trial = if ok { sum_sq(&r_trial) } else { f64::INFINITY };
        let actual = cost - cost_trial;
        let rho = if predicted > 0.0 {
            actual / predicted
        } else {
            -1.0
        };
        if ok && actual > 0.0 && rho > 1e-4 {
            if problem.jacobian(&p_trial, &mut jac_trial).is_none()
                || jac_trial.iter().any(|v| !v.is_finite())
            {
                // Treat like a failed step.
                mu *= nu;
                nu *= 2.0;
            } else {
                std::mem::swap(&mut params, &mut p_trial);
                std::mem::swap(&mut r, &mut r_trial);
                std::mem::swap(&mut jac, &mut jac_trial);
                let old_cost = cost;
                cost = cost_trial;
                mu *= f64::max(1.0 / 3.0, 1.0 - (2.0 * rho - 1.0).powi(3));
                nu = 2.0;
                need_svd = true;
                if actual <= settings.ftol * old_cost && predicted <= settings.ftol * old_cost {
                    break Termination::ConvergedSumOfSquares;
                }
                if snorm <= settings.xtol * (xnorm + settings.xtol) {
                    break Termination::ConvergedStep;
                }
            }
        } else {
            mu *= nu;
            nu *= 2.0;
            if snorm <= settings.xtol * (xnorm + settings.xtol) || !mu.is_finite() || mu > 1e300 {
                // Nothing reduces the sum of squares any more.
                break if relative_gradient(&jac, &r) < 1e-6 {
                    Termination::NoFurtherReduction
                } else {
                    Termination::Stuck
                };
            }
        }
        if evaluations >= settings.max_evaluations {
            break Termination::TooManyEvaluations;
        }
    };
    Report {
        params,
        rss: cost,
        termination,
        evaluations,
        iterations,
        jacobian: jac,
    }
}

/// Largest cosine between the residual vector and a Jacobian column.
fn relative_gradient(jac: &DMatrix<f64>, r: &[f64]) -> f64 {
    let rnorm = sum_sq(r).sqrt();
    if rnorm == 0.0 {
        return 0.0;
    }
    (0..jac.ncols())
        .map(|j| {
            let col = jac.column(j);
            let cn = col.norm();
            if cn == 0.0 {
                0.0
            } else {
                (col.iter().zip(r).map(|(a, b)| a * b).sum::<f64>() / (cn * rnorm)).abs()
            }
        })
        .fold(0.0, f64::max)
}

/// Standard errors of the parameters: sqrt of the diagonal of s² (JᵀJ)⁻¹ with
/// s² = RSS / (n − p). `None` when there are no degrees of freedom left or JᵀJ is
/// singular (the data do not determine every parameter).
pub fn standard_errors(jacobian: &DMatrix<f64>, rss: f64) -> Option<Vec<f64>> {
    let m = jacobian.nrows();
    let n = jacobian.ncols();
    if m <= n || !rss.is_finite() {
        return None;
    }
    let s2 = rss / (m - n) as f64;
    // Scale columns to unit norm before the SVD so the condition test is fair.
    let mut scaled = jacobian.clone();
    let mut norms = vec![0.0; n];
    for j in 0..n {
        norms[j] = scaled.column(j).norm();
        if norms[j] == 0.0 {
            return None;
        }
        let s = norms[j];
        scaled.column_mut(j).iter_mut().for_each(|v| *v /= s);
    }
    let svd = scaled.svd(false, true);
    let v_t = svd.v_t?;
    let sigma = svd.singular_values;
    let smax = sigma.iter().cloned().fold(0.0, f64::max);
    if sigma.iter().any(|&s| s <= smax * 1e-13) {
        return None;
    }
    let mut out = vec![0.0; n];
    for (j, o) in out.iter_mut().enumerate() {
        let mut var = 0.0;
        for i in 0..sigma.len() {
            let v = v_t[(i, j)];
            var += v * v / (sigma[i] * sigma[i]);
        }
        *o = (s2 * var).sqrt() / norms[j];
    }
    Some(out)
}

/// A model y = f(x; p) with its gradient in the parameters, fitted by [`CurveProblem`].
pub trait CurveModel {
    fn n_params(&self) -> usize;
    /// f(x; p); `None` if the model is undefined there.
    fn value(&self, x: f64, p: &[f64]) -> Option<f64>;
    /// df/dp_j into `grad`; `None` if undefined.
    fn gradient(&self, x: f64, p: &[f64], grad: &mut [f64]) -> Option<()>;
}

/// Weighted curve fit: residual_i = sqrt(w_i) · (y_i − f(x_i; p)).
pub struct CurveProblem<'a, M: CurveModel + ?Sized> {
    pub model: &'a M,
    pub x: &'a [f64],
    pub y: &'a [f64],
    /// Weights, or `None` for all 1.
    pub weights: Option<&'a [f64]>,
}

impl<M: CurveModel + ?Sized> CurveProblem<'_, M> {
    fn root_weight(&self, i: usize) -> f64 {
        self.weights.map_or(1.0, |w| w[i].sqrt())
    }
}

impl<M: CurveModel + ?Sized> LeastSquaresProblem for CurveProblem<'_, M> {
    fn n_residuals(&self) -> usize {
        self.x.len()
    }
    fn n_params(&self) -> usize {
        self.model.n_params()
    }
    fn residuals(&self, p: &[f64], out: &mut [f64]) -> Option<()> {
        for i in 0..self.x.len() {
            out[i] = self.root_weight(i) * (self.y[i] - self.model.value(self.x[i], p)?);
        }
        Some(())
    }
    fn jacobian(&self, p: &[f64], out: &mut DMatrix<f64>) -> Option<()> {
        let mut g = vec![0.0; self.model.n_params()];
        for i in 0..self.x.len() {
            self.model.gradient(self.x[i], p, &mut g)?;
            let w = self.root_weight(i);
            for (j, gj) in g.iter().enumerate() {
                out[(i, j)] = -w * gj;
            }
        }
        Some(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// y = p0 · exp(p1 · x), data generated exactly from p = (2, -0.5): the solver must
    /// recover the generating parameters (an exact fit has RSS 0).
    struct Exp;
    impl CurveModel for Exp {
        fn n_params(&self) -> usize {
            2
        }
        fn value(&self, x: f64, p: &[f64]) -> Option<f64> {
            Some(p[0] * (p[1] * x).exp())
        }
        fn gradient(&self, x: f64, p: &[f64], g: &mut [f64]) -> Option<()> {
            g[0] = (p[1] * x).exp();
            g[1] = p[0] * x * (p[1] * x).exp();
            Some(())
        }
    }

    #[test]
    fn recovers_exact_exponential() {
        let x: Vec<f64> = (0..10).map(|i| i as f64 * 0.5).collect();
        let y: Vec<f64> = x.iter().map(|&x| 2.0 * (-0.5 * x).exp()).collect();
        let prob = CurveProblem {
            model: &Exp,
            x: &x,
            y: &y,
            weights: None,
        };
        let rep = solve(&prob, &[1.0, -0.1], &Settings::default());
        assert!(rep.termination.converged(), "{:?}", rep.termination);
        assert!((rep.params[0] - 2.0).abs() < 1e-10 && (rep.params[1] + 0.5).abs() < 1e-10);
    }

    #[test]
    fn bad_input_is_reported_not_panicked() {
        let x = [1.0];
        let y = [1.0];
        let prob = CurveProblem {
            model: &Exp,
            x: &x,
            y: &y,
            weights: None,
        };
        assert_eq!(
            solve(&prob, &[1.0, 1.0], &Settings::default()).termination,
            Termination::BadInput
        );
        let x = [1.0, 2.0, 3.0];
        let y = [1.0, 2.0, 3.0];
        let prob = CurveProblem {
            model: &Exp,
            x: &x,
            y: &y,
            weights: None,
        };
        assert_eq!(
            solve(&prob, &[f64::NAN, 1.0], &Settings::default()).termination,
            Termination::BadInput
        );
    }
}
