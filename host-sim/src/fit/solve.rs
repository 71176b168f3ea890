//! The least-squares problem and its solution: parameters mapped onto
//! their bounds, Levenberg–Marquardt (the `levenberg-marquardt` crate, a
//! port of MINPACK's `lmder`) with a forward-difference Jacobian, and the
//! statistics at the optimum.
//!
//! **Residuals** `rᵢ = (ĉᵢ − cᵢ)/σᵢ`: the model's estimate at the
//! sample's tick minus the measured value, over the measurement's 1σ.
//!
//! **Bounds** by a change of variable `θ = g(u)`, LM working on `u`:
//! `lo + (hi − lo)/(1 + e^{−u})` with both bounds, `lo + e^u` or
//! `hi − e^u` with one, `u` with none. A rate constant, an activation
//! energy, a feed or initial concentration and an initial holdup have the
//! lower bound 0 when none is written (so a rate constant is searched on
//! a log scale), and a meter bias ±0.5.
//!
//! **Derivatives** by forward differences with the stated step
//! [`FD_STEP`] relative to `max(|u|, 1)` during the search, and central
//! differences in `θ` with step [`SE_STEP`]` · max(|θ|, |guess|)` for the
//! statistics (the model is run in `f64`; the sensitivity test in
//! `host-sim/tests/fit_checks.rs` measures both against a closed form).
//!
//! **Statistics** (common practice for weighted nonlinear least squares,
//! e.g. Bates and Watts, *Nonlinear Regression Analysis*, 1988, ch. 2):
//! `χ² = Σrᵢ²`, `s² = χ²/(m − p)`, covariance `s²·(JᵀJ)⁻¹` with `J` the
//! Jacobian of the residuals in `θ`, standard errors its diagonal's root,
//! 95 % intervals `θ ± t₀.₉₇₅,ₘ₋ₚ · SE` (Student's t). Scaling by `s²`
//! makes the intervals honest when the written lab σ is not.

use std::cell::Cell;

use levenberg_marquardt::{LeastSquaresProblem, LevenbergMarquardt, TerminationReason};
use nalgebra::storage::Owned;
use nalgebra::{DMatrix, DVector, Dyn};

use crate::config::UnknownKind;

/// Relative forward-difference step of the search, in `u`.
pub const FD_STEP: f64 = 1e-7;
/// Relative central-difference step of the statistics, in `θ`.
pub const SE_STEP: f64 = 1e-5;
/// A residual standing in for a model that could not be run at a trial
/// point (LM then shrinks its step).
const FAILED_RESIDUAL: f64 = 1e8;

/// One parameter: its bounds (written or implied) and guess, in its unit.
#[derive(Clone, Debug, PartialEq)]
pub struct Param {
    /// Name (`decay.rate_constant`).
    pub name: String,
    /// What it is.
    pub kind: UnknownKind,
    /// Unit as written (`None`: dimensionless).
    pub unit: Option<String>,
    /// First guess.
    pub guess: f64,
    /// Lower bound (written, or implied by the kind).
    pub lo: Option<f64>,
    /// Upper bound.
    pub hi: Option<f64>,
}

impl Param {
    /// The parameter of an unknown, with the bounds its kind implies.
    pub fn of(u: &crate::config::Unknown) -> Self {
        let (lo, hi) = match u.kind {
            UnknownKind::MeterBias => (u.min.or(Some(-0.5)), u.max.or(Some(0.5))),
            UnknownKind::LevelOffset => (u.min, u.max),
            _ => (
                u.min.or(if u.guess > 0.0 { Some(0.0) } else { None }),
                u.max,
            ),
        };
        Self {
            name: u.name.clone(),
            kind: u.kind.clone(),
            unit: u.unit.clone(),
            guess: u.guess,
            lo,
            hi,
        }
    }

    /// `θ = g(u)`.
    pub fn theta(&self, u: f64) -> f64 {
        match (self.lo, self.hi) {
            (Some(lo), Some(hi)) => lo + (hi - lo) / (1.0 + (-u).exp()),
            (Some(lo), None) => lo + u.exp(),
            (None, Some(hi)) => hi - u.exp(),
            (None, None) => u,
        }
    }

    /// `u = g⁻¹(θ)` (θ strictly inside the bounds).
    pub fn u(&self, theta: f64) -> f64 {
        match (self.lo, self.hi) {
            (Some(lo), Some(hi)) => {
                let f = ((theta - lo) / (hi - lo)).clamp(1e-300, 1.0 - 1e-16);
                (f / (1.0 - f)).ln()
            }
            (Some(lo), None) => (theta - lo).max(1e-300).ln(),
            (None, Some(hi)) => (hi - theta).max(1e-300).ln(),
            (None, None) => theta,
        }
    }

    /// True if `θ` sits at a bound (within 1e-6 of the bound's scale).
    pub fn at_bound(&self, theta: f64) -> Option<f64> {
        let near = |b: f64| (theta - b).abs() <= 1e-6 * b.abs().max(self.guess.abs()).max(1e-12);
        self.lo
            .filter(|&b| near(b))
            .or(self.hi.filter(|&b| near(b)))
    }
}

/// The model as the solver sees it: residuals for parameter values.
pub trait Residuals {
    /// Weighted residuals at `theta` (in each parameter's unit), or why
    /// the model cannot be run there.
    fn residuals(&self, theta: &[f64]) -> Result<Vec<f64>, String>;
}

/// What a search found.
#[derive(Clone, Debug)]
pub struct Solution {
    /// Values at the optimum.
    pub theta: Vec<f64>,
    /// Residuals there.
    pub residuals: Vec<f64>,
    /// Whether LM's convergence tests passed, and its word for why it
    /// stopped.
    pub converged: bool,
    /// LM's reason to stop, in words.
    pub termination: String,
    /// Model runs, Jacobians included.
    pub evaluations: usize,
}

/// The problem in LM's terms (on `u`).
struct Problem<'a, M: Residuals> {
    model: &'a M,
    params: &'a [Param],
    u: DVector<f64>,
    r: DVector<f64>,
    evaluations: Cell<usize>,
}

impl<M: Residuals> Problem<'_, M> {
    fn thetas(&self, u: &DVector<f64>) -> Vec<f64> {
        self.params
            .iter()
            .zip(u.iter())
            .map(|(p, &x)| p.theta(x))
            .collect()
    }

    fn run(&self, u: &DVector<f64>) -> Option<DVector<f64>> {
        self.evaluations.set(self.evaluations.get() + 1);
        self.model
            .residuals(&self.thetas(u))
            .ok()
            .filter(|r| r.iter().all(|x| x.is_finite()))
            .map(DVector::from_vec)
    }
}

impl<M: Residuals> LeastSquaresProblem<f64, Dyn, Dyn> for Problem<'_, M> {
    type ResidualStorage = Owned<f64, Dyn>;
    type JacobianStorage = Owned<f64, Dyn, Dyn>;
    type ParameterStorage = Owned<f64, Dyn>;

    fn set_params(&mut self, u: &DVector<f64>) {
        self.u.copy_from(u);
        let m = self.r.len();
        self.r = self
            .run(u)
            .filter(|r| r.len() == m)
            .unwrap_or_else(|| DVector::from_element(m, FAILED_RESIDUAL));
    }

    fn params(&self) -> DVector<f64> {
        self.u.clone()
    }

    fn residuals(&self) -> Option<DVector<f64>> {
        Some(self.r.clone())
    }

    fn jacobian(&self) -> Option<DMatrix<f64>> {
        let (m, n) = (self.r.len(), self.u.len());
        let mut j = DMatrix::zeros(m, n);
        for c in 0..n {
            let h = FD_STEP * self.u[c].abs().max(1.0);
            let mut u = self.u.clone();
            u[c] += h;
            let r = self.run(&u).filter(|r| r.len() == m)?;
            for i in 0..m {
                j[(i, c)] = (r[i] - self.r[i]) / h;
            }
        }
        Some(j)
    }
}

/// Minimise `Σ r²` over `params` from `start` (values in their units),
/// with at most about `max_evaluations` model runs.
pub fn minimise<M: Residuals>(
    model: &M,
    params: &[Param],
    start: &[f64],
    max_evaluations: u32,
) -> Result<Solution, String> {
    let r0 = model.residuals(start)?;
    if let Some(i) = r0.iter().position(|x| !x.is_finite()) {
        return Err(format!(
            "the model gives no number for observation {} at the starting values",
            i + 1
        ));
    }
    let u0 = DVector::from_iterator(params.len(), params.iter().zip(start).map(|(p, &t)| p.u(t)));
    let problem = Problem {
        model,
        params,
        u: u0,
        r: DVector::from_vec(r0),
        evaluations: Cell::new(1),
    };
    let n = params.len().max(1);
    // MINPACK counts residual evaluations only, at most patience·(n + 1);
    // each Jacobian costs n more here.
    let patience = (max_evaluations as usize / (2 * n + 1)).max(1);
    let (problem, report) = LevenbergMarquardt::new()
        .with_ftol(1e-12)
        .with_xtol(1e-12)
        .with_gtol(1e-12)
        .with_patience(patience)
        .minimize(problem);
    let theta = problem.thetas(&problem.u);
    let converged = report.termination.was_successful();
    let termination = match &report.termination {
        TerminationReason::Converged { .. } => "converged".to_string(),
        TerminationReason::Orthogonal => "converged (gradient zero)".to_string(),
        TerminationReason::ResidualsZero => "converged (residuals zero)".to_string(),
        TerminationReason::LostPatience => {
            format!("stopped at the evaluation limit ({max_evaluations})")
        }
        TerminationReason::NoImprovementPossible(w) => {
            format!("stopped: no further improvement possible ({w})")
        }
        other => format!("stopped: {other:?}"),
    };
    let residuals = problem.r.iter().copied().collect();
    Ok(Solution {
        theta,
        residuals,
        converged,
        termination,
        evaluations: problem.evaluations.get(),
    })
}

/// The Jacobian of the residuals in `θ` by central differences (one-sided
/// where a step would cross a bound), the residuals at `theta`, and the
/// model runs it took.
pub fn jacobian<M: Residuals>(
    model: &M,
    params: &[Param],
    theta: &[f64],
) -> Result<(DMatrix<f64>, Vec<f64>, usize), String> {
    let r0 = model.residuals(theta)?;
    let m = r0.len();
    let mut j = DMatrix::zeros(m, params.len());
    let mut runs = 1;
    for (c, p) in params.iter().enumerate() {
        let scale = theta[c].abs().max(p.guess.abs());
        let scale = if scale > 0.0 {
            scale
        } else {
            match (p.lo, p.hi) {
                (Some(lo), Some(hi)) => hi - lo,
                _ => 1.0,
            }
        };
        let h = SE_STEP * scale;
        let inside = |x: f64| p.lo.is_none_or(|lo| x > lo) && p.hi.is_none_or(|hi| x < hi);
        let at = |x: f64| -> Result<Vec<f64>, String> {
            let mut t = theta.to_vec();
            t[c] = x;
            model.residuals(&t)
        };
        let (plus, minus) = (theta[c] + h, theta[c] - h);
        let col: Vec<f64> = match (inside(plus), inside(minus)) {
            (true, true) => {
                let (a, b) = (at(plus)?, at(minus)?);
                runs += 2;
                a.iter().zip(&b).map(|(x, y)| (x - y) / (2.0 * h)).collect()
            }
            (true, false) => {
                runs += 1;
                at(plus)?
                    .iter()
                    .zip(&r0)
                    .map(|(x, y)| (x - y) / h)
                    .collect()
            }
            _ => {
                runs += 1;
                r0.iter()
                    .zip(&at(minus)?)
                    .map(|(x, y)| (x - y) / h)
                    .collect()
            }
        };
        if col.len() != m {
            return Err("the number of residuals changed between runs".into());
        }
        for (i, x) in col.into_iter().enumerate() {
            j[(i, c)] = x;
        }
    }
    Ok((j, r0, runs))
}

/// Statistics at an optimum.
#[derive(Clone, Debug)]
pub struct Statistics {
    /// `Σ r²`.
    pub chi2: f64,
    /// `m − p`.
    pub dof: usize,
    /// `χ²/(m − p)`.
    pub s2: f64,
    /// Standard errors (NaN for a parameter the data do not determine).
    pub se: Vec<f64>,
    /// Student's `t₀.₉₇₅` for `m − p` degrees of freedom.
    pub t975: f64,
    /// Correlation matrix.
    pub correlation: Vec<Vec<f64>>,
    /// Directions of `θ` (scaled by each parameter's size) along which
    /// the data give no curvature: unit vectors, with their relative
    /// eigenvalue.
    pub flat: Vec<(Vec<f64>, f64)>,
}

/// Relative eigenvalue of `JᵀJ` (in scaled parameters) below which a
/// direction counts as flat.
pub const FLAT_EIGENVALUE: f64 = 1e-10;

/// A parameter takes part in a flat direction when its component of the
/// unit vector exceeds this.
pub const FLAT_COMPONENT: f64 = 0.1;

/// The statistics of residuals `r` with Jacobian `j` (in `θ`).
pub fn statistics(r: &[f64], j: &DMatrix<f64>) -> Result<Statistics, String> {
    let (m, p) = (j.nrows(), j.ncols());
    if m <= p {
        return Err(format!(
            "{m} observations for {p} unknowns: a fit needs more observations than unknowns"
        ));
    }
    let dof = m - p;
    let chi2: f64 = r.iter().map(|x| x * x).sum();
    let s2 = chi2 / dof as f64;
    // Scale the columns so the eigenvalues compare parameters of any size.
    let scale: Vec<f64> = (0..p)
        .map(|c| {
            let n = j.column(c).norm();
            if n > 0.0 {
                1.0 / n
            } else {
                1.0
            }
        })
        .collect();
    let mut js = j.clone();
    for (c, s) in scale.iter().enumerate() {
        js.column_mut(c).scale_mut(*s);
    }
    let a = js.transpose() * &js;
    let eig = a.clone().symmetric_eigen();
    let largest = eig.eigenvalues.iter().fold(0.0f64, |x, &y| x.max(y));
    let mut flat: Vec<(Vec<f64>, f64)> = Vec::new();
    // Pseudo-inverse over the directions with curvature.
    let mut inv = DMatrix::zeros(p, p);
    for k in 0..p {
        let lambda = eig.eigenvalues[k];
        let v = eig.eigenvectors.column(k);
        if lambda > FLAT_EIGENVALUE * largest && lambda > 0.0 {
            inv += (v * v.transpose()) / lambda;
        } else {
            flat.push((
                v.iter().copied().collect(),
                lambda / largest.max(f64::MIN_POSITIVE),
            ));
        }
    }
    let mut se = vec![f64::NAN; p];
    for c in 0..p {
        let var = s2 * inv[(c, c)] * scale[c] * scale[c];
        let undetermined = flat.iter().any(|(v, _)| v[c].abs() > FLAT_COMPONENT);
        if var > 0.0 && !undetermined {
            se[c] = var.sqrt();
        }
    }
    let mut correlation = vec![vec![0.0; p]; p];
    for a_ in 0..p {
        for b in 0..p {
            let d = (inv[(a_, a_)] * inv[(b, b)]).sqrt();
            correlation[a_][b] = if a_ == b {
                1.0
            } else if d > 0.0 {
                (inv[(a_, b)] / d).clamp(-1.0, 1.0)
            } else {
                f64::NAN
            };
        }
    }
    let t975 = student_t975(dof);
    Ok(Statistics {
        chi2,
        dof,
        s2,
        se,
        t975,
        correlation,
        flat,
    })
}

/// Student's t quantile 0.975 for `dof` degrees of freedom (statrs).
pub fn student_t975(dof: usize) -> f64 {
    use statrs::distribution::{ContinuousCDF, StudentsT};
    StudentsT::new(0.0, 1.0, dof.max(1) as f64)
        .map(|t| t.inverse_cdf(0.975))
        .unwrap_or(f64::NAN)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// `y = a·e^{−b·x}` sampled exactly: the optimum is the truth.
    struct Decay {
        x: Vec<f64>,
        y: Vec<f64>,
    }

    impl Residuals for Decay {
        fn residuals(&self, t: &[f64]) -> Result<Vec<f64>, String> {
            Ok(self
                .x
                .iter()
                .zip(&self.y)
                .map(|(x, y)| (t[0] * (-t[1] * x).exp() - y) / 0.01)
                .collect())
        }
    }

    fn param(name: &str, guess: f64, lo: Option<f64>, hi: Option<f64>) -> Param {
        Param {
            name: name.into(),
            kind: UnknownKind::Feed,
            unit: Some("1".into()),
            guess,
            lo,
            hi,
        }
    }

    #[test]
    fn transforms_invert_and_respect_bounds() {
        for p in [
            param("a", 0.3, Some(0.0), Some(1.0)),
            param("b", 2e-4, Some(0.0), None),
            param("c", -3.0, None, Some(1.0)),
            param("d", 5.0, None, None),
        ] {
            let u = p.u(p.guess);
            assert!((p.theta(u) - p.guess).abs() <= 1e-12 * p.guess.abs().max(1.0));
            for x in [-50.0, -1.0, 0.0, 1.0, 50.0] {
                let t = p.theta(x);
                assert!(p.lo.is_none_or(|lo| t >= lo) && p.hi.is_none_or(|hi| t <= hi));
            }
        }
    }

    #[test]
    fn recovers_an_exact_exponential_and_its_curvature() {
        let x: Vec<f64> = (0..20).map(|i| i as f64 * 0.25).collect();
        let y = x.iter().map(|x| 2.0 * (-0.7 * x).exp()).collect();
        let d = Decay { x, y };
        let ps = [
            param("a", 1.0, Some(0.0), None),
            param("b", 0.2, Some(0.0), Some(5.0)),
        ];
        let s = minimise(&d, &ps, &[1.0, 0.2], 400).unwrap();
        assert!(s.converged, "{}", s.termination);
        assert!((s.theta[0] - 2.0).abs() < 1e-8 && (s.theta[1] - 0.7).abs() < 1e-8);
        let (j, _, _) = jacobian(&d, &ps, &s.theta).unwrap();
        // ∂r/∂a = e^{−bx}/σ, by hand.
        for (i, x) in d.x.iter().enumerate() {
            let exact = (-0.7 * x).exp() / 0.01;
            assert!((j[(i, 0)] - exact).abs() < 1e-6 * exact.abs().max(1.0));
        }
    }

    #[test]
    fn a_parameter_the_data_ignore_is_flat() {
        struct Ignores;
        impl Residuals for Ignores {
            fn residuals(&self, t: &[f64]) -> Result<Vec<f64>, String> {
                Ok((0..5).map(|i| t[0] - f64::from(i)).collect())
            }
        }
        let ps = [param("a", 1.0, None, None), param("z", 1.0, None, None)];
        let (j, r, _) = jacobian(&Ignores, &ps, &[2.0, 1.0]).unwrap();
        assert_eq!(r, Ignores.residuals(&[2.0, 1.0]).unwrap());
        let st = statistics(&r, &j).unwrap();
        assert_eq!(st.flat.len(), 1);
        assert!(st.se[1].is_nan() && st.se[0].is_finite());
        // Student's t for 3 degrees of freedom, 0.975: 3.182 (any table).
        assert!((student_t975(3) - 3.182).abs() < 1e-3);
    }
}
