//! A variable-order (1-5), variable-step numerical differentiation formula method with a
//! modified Newton iteration that keeps one Jacobian and one factorisation over many steps.
//!
//! The method is NDF as in Shampine & Reichelt, "The MATLAB ODE Suite", SIAM J. Sci. Comput. 18
//! (1997) 1-22: the solution history is kept as backward differences D (scaled to the current
//! step), a step-size change multiplies D by R(ρ)U (their eq. 2.4-2.6), κ = (−0.1850, −1/9,
//! −0.0823, −0.0415, 0) improves stability over plain BDF at orders 1-4, and the error estimate
//! of order k is (κγ_k + 1/(k+1))·∇^{k+1}y. Step size and order are reconsidered after k + 1
//! steps of equal size; a growth below 1.5 is not taken, and the higher order's error estimate
//! is weighted against raising the order (both as in CVODE). The iteration matrix I − (h/α_k) J
//! is refactored only when h/α_k has moved by a factor of more than 1.3 either way (1.6 for
//! large factors) from the value it was factored with; in between, each Newton correction is
//! scaled by 2/(1 + ratio) of the two values, as in CVODE (Hindmarsh et al., ACM TOMS 31, 2005,
//! section 2.1) so that the stale matrix does not slow convergence. The Jacobian
//! is re-evaluated only when Newton fails to converge with an old one. Newton stops when the
//! estimated remaining error is 6 % of the error tolerance; on the first iteration the estimate
//! is the correction times the rate remembered for the matrix (CVODE's test and its rule that
//! the remembered rate falls by at most a factor 0.3 per iteration).
//!
//! Linear invariants (the conservation laws) are kept by the method itself: every correction
//! lies in the span of the stoichiometric columns, since (I − cJ)⁻¹ maps that span to itself.

use std::time::Instant;

use crate::error::IntegrationError;
use crate::kinetics::RateModel;
use crate::linalg::LinearSolver;
use crate::stoich::ConservationLaw;

use super::{
    equilibrium_test, next_move, start, EquilibriumDetector, Move, Options, Projection, Slope, Solution,
    Start, Stats,
};

const MAX_ORDER: usize = 5;
const NEWTON_MAXITER: usize = 4;
/// The step landing on the end time is polished until Newton's remaining error is this
/// fraction of the usual convergence test's (see [`polish`]).
const LANDING_TOLERANCE: f64 = 1e-6;
const MIN_FACTOR: f64 = 0.2;
const MAX_FACTOR: f64 = 10.0;
/// A step may grow only by at least this factor (CVODE's 1.5, Hindmarsh et al. 2005): each
/// change of h moves h/α, and enough of them force a refactorisation. Measured on the peer
/// networks: 5-14 % fewer factorisations and 3-5 % fewer rate evaluations, same accuracy.
const MIN_GROWTH: f64 = 1.5;
/// Refactor when h/α has moved by this factor less one, up or down, from the factored value
/// (CVODE's 0.3, Hindmarsh et al. 2005; measured as a ratio either way up, so that a limit of 1
/// or more still refactors when the step shrinks), or by [`REFACTOR_RATIO_LARGE`] when the
/// factors hold more than [`LARGE_FACTORS`] entries: a factorisation then costs as much as some
/// twenty Newton iterations (syn_N5000: 37 ms against 1.6 ms), and the stale matrix's slower
/// convergence is the cheaper side. Measured on syn_N5000 (1.16 million entries): 0.3 -> 0.6
/// took the factorisations from 146 to 102 for 1502 -> 1528 rate evaluations; 1.0 and 1.5 gave
/// 104 and 88 for 1648 and 1660. On syn_N100 (3,000 entries) 0.6 cost 15 % more rate
/// evaluations.
const REFACTOR_RATIO: f64 = 0.3;
const REFACTOR_RATIO_LARGE: f64 = 0.6;
const LARGE_FACTORS: usize = 1 << 19;
/// The error estimate for the next higher order (from ∇^{k+2} y, the least settled of the
/// differences) counts this many times over when the order is reconsidered, so the order rises
/// only when it clearly pays; CVODE weights it 10 against 6 for the current order (Hindmarsh et
/// al. 2005). Measured on the peer networks with the rate floor below: 2 against 5, syn_N1000
/// steps 877+10 -> 852+10 and rate evaluations 2015 -> 1900, syn_N5000 factorisations 129 ->
/// 122; 1.67 and 3 were no better over the three networks.
const ORDER_UP_BIAS: f64 = 2.0;
/// The convergence rate remembered for a matrix decays by at most this factor per observed
/// iteration (CVODE's CRDOWN, Hindmarsh et al. 2005, section 2.1: crate = max(0.3 crate,
/// ratio)). Taking the last observed ratio alone let a step stop after one iteration on a rate
/// seen once and since outdated, and the unconverged remainder then entered the error estimate:
/// on syn_N1000, 81 rejected steps and 192 factorisations, against 10 and 137 with the floor.
const RATE_DECAY: f64 = 0.3;
const KAPPA: [f64; MAX_ORDER + 1] = [0.0, -0.1850, -1.0 / 9.0, -0.0823, -0.0415, 0.0];

/// γ_k = Σ_{j≤k} 1/j, α_k = (1 − κ_k) γ_k and the error constants κ_k γ_k + 1/(k + 1).
struct Coefficients {
    gamma: [f64; MAX_ORDER + 2],
    alpha: [f64; MAX_ORDER + 2],
    error: [f64; MAX_ORDER + 2],
}

impl Coefficients {
    fn new() -> Coefficients {
        let mut c = Coefficients {
            gamma: [0.0; MAX_ORDER + 2],
            alpha: [0.0; MAX_ORDER + 2],
            error: [0.0; MAX_ORDER + 2],
        };
        for k in 1..=MAX_ORDER + 1 {
            c.gamma[k] = c.gamma[k - 1] + 1.0 / k as f64;
        }
        for k in 0..=MAX_ORDER + 1 {
            let kappa = KAPPA.get(k).copied().unwrap_or(0.0);
            c.alpha[k] = (1.0 - kappa) * c.gamma[k];
            c.error[k] = kappa * c.gamma[k] + 1.0 / (k + 1) as f64;
        }
        c
    }
}

/// R(ρ) of Shampine & Reichelt: R[i][j] = Π_{l=1..i} (l − 1 − ρ j)/l, with R[0][j] = 1.
type Small = [[f64; MAX_ORDER + 1]; MAX_ORDER + 1];

fn r_matrix(order: usize, factor: f64) -> Small {
    let mut r = [[0.0; MAX_ORDER + 1]; MAX_ORDER + 1];
    r[0][..=order].fill(1.0);
    for i in 1..=order {
        let above = r[i - 1];
        for (j, value) in r[i].iter_mut().enumerate().take(order + 1).skip(1) {
            *value = above[j] * (i as f64 - 1.0 - factor * j as f64) / i as f64;
        }
    }
    r
}

/// Rescales the differences to a step `factor` times the current one: D ← (R U)ᵀ D, using
/// `scratch` (as many rows as D) for the new rows.
fn change_differences(d: &mut [Vec<f64>], scratch: &mut [Vec<f64>], order: usize, factor: f64) {
    let r = r_matrix(order, factor);
    let u = r_matrix(order, 1.0);
    let mut ru = [[0.0; MAX_ORDER + 1]; MAX_ORDER + 1];
    for (i, row) in ru.iter_mut().enumerate().take(order + 1) {
        for (j, value) in row.iter_mut().enumerate().take(order + 1) {
            *value = (0..=order).map(|k| r[i][k] * u[k][j]).sum();
        }
    }
    for (j, row) in scratch.iter_mut().enumerate().take(order + 1) {
        row.fill(0.0);
        for (k, dk) in d.iter().take(order + 1).enumerate() {
            let w = ru[k][j];
            if w != 0.0 {
                row.iter_mut().zip(dk).for_each(|(x, v)| *x += w * v);
            }
        }
    }
    for (row, new) in d.iter_mut().zip(scratch.iter_mut()).take(order + 1) {
        std::mem::swap(row, new);
    }
}

/// The weighted RMS norm used for errors and Newton corrections.
fn norm(v: &[f64], scale: &[f64]) -> f64 {
    let sum: f64 = v.iter().zip(scale).map(|(x, s)| (x / s).powi(2)).sum();
    (sum / v.len().max(1) as f64).sqrt()
}

/// The most negative entry of y in units of its scale (0 when none is negative).
fn most_negative(y: &[f64], scale: &[f64]) -> f64 {
    y.iter().zip(scale).map(|(y, s)| y / s).fold(0.0_f64, f64::min)
}

/// The iteration matrix I − cJ, its factorisation and the Jacobian it came from.
struct Iteration {
    solver: LinearSolver,
    jac: Vec<f64>,
    matrix: Vec<f64>,
    diagonal: Vec<usize>,
    /// The c = h/α the matrix was factored with (None: must refactor).
    factored_c: Option<f64>,
    /// The Jacobian was evaluated at the current step's prediction.
    jac_current: bool,
    /// The Newton convergence rate observed with this matrix, decaying by at most
    /// [`RATE_DECAY`] per iteration (CVODE's `crate`): lets a step stop after one iteration
    /// when the previous ones converged fast.
    rate: Option<f64>,
}

impl Iteration {
    fn refactor(&mut self, c: f64, stats: &mut Stats) -> bool {
        for (m, j) in self.matrix.iter_mut().zip(&self.jac) {
            *m = -c * j;
        }
        for &d in &self.diagonal {
            self.matrix[d] += 1.0;
        }
        stats.lu_factorizations += 1;
        let ok = self.solver.factor(&self.matrix).is_ok();
        self.factored_c = ok.then_some(c);
        self.rate = None;
        ok
    }

    fn jacobian(&mut self, model: &RateModel, y: &[f64], stats: &mut Stats) {
        model.jacobian(y, &mut self.jac);
        stats.jacobian_evals += 1;
        self.jac_current = true;
        self.factored_c = None;
    }
}

/// The buffers of one step, allocated once per integration.
struct Work {
    y_predict: Vec<f64>,
    psi: Vec<f64>,
    scale: Vec<f64>,
    /// The Newton iterate, its correction from the prediction, f(y) and the last increment.
    y: Vec<f64>,
    d: Vec<f64>,
    f: Vec<f64>,
    dy: Vec<f64>,
    error: Vec<f64>,
}

impl Work {
    fn new(n: usize) -> Work {
        Work {
            y_predict: vec![0.0; n],
            psi: vec![0.0; n],
            scale: vec![0.0; n],
            y: vec![0.0; n],
            d: vec![0.0; n],
            f: vec![0.0; n],
            dy: vec![0.0; n],
            error: vec![0.0; n],
        }
    }

    fn apply_correction(&mut self) {
        for ((y, d), dy) in self.y.iter_mut().zip(self.d.iter_mut()).zip(&self.dy) {
            *y += dy;
            *d += dy;
        }
    }
}

/// Solves y = y_pred + d with d − c f(y) + ψ = 0 by modified Newton (at most four iterations),
/// stopping early when the observed rate says it will not converge in time. Returns the
/// iterations used when it converged (y and d in `work`).
fn newton(
    model: &RateModel,
    iteration: &mut Iteration,
    work: &mut Work,
    c: f64,
    tol: f64,
    stats: &mut Stats,
) -> Option<usize> {
    work.y.copy_from_slice(&work.y_predict);
    work.d.fill(0.0);
    let mut old_norm: Option<f64> = None;
    for k in 0..NEWTON_MAXITER {
        let dy_norm = correction(model, iteration, work, c, stats)?;
        let observed = old_norm.map(|old| dy_norm / old);
        if let Some(rate) = observed {
            if rate >= 1.0 || rate.powi((NEWTON_MAXITER - k) as i32) / (1.0 - rate) * dy_norm > tol {
                iteration.rate = None;
                return None;
            }
            iteration.rate = Some(rate.max(RATE_DECAY * iteration.rate.unwrap_or(1.0)));
        }
        work.apply_correction();
        // With a rate observed, the remaining error is rate/(1 − rate) of this correction; on
        // the first iteration, as in CVODE, the correction itself scaled by the rate last seen
        // with this matrix (1 after a refactorisation).
        let converged = match observed {
            Some(rate) => rate / (1.0 - rate) * dy_norm < tol,
            None => dy_norm * iteration.rate.unwrap_or(1.0).min(1.0) < tol,
        };
        if dy_norm == 0.0 || converged {
            return Some(k + 1);
        }
        old_norm = Some(dy_norm);
    }
    None
}

/// Iterates a converged step further, with a fresh Jacobian, while each correction is smaller
/// than the last, down to `tol`. Used on the step that lands on the end time: a converged step
/// may sit anywhere within 6 % of the tolerance of its solution, and that offset would be the
/// end state's error even where the solution has long settled (seen as 1e-8-1e-7 relative on a
/// 1000-species network at equilibrium). It never fails the step: a correction that does not
/// shrink is not applied.
fn polish(
    model: &RateModel,
    iteration: &mut Iteration,
    work: &mut Work,
    c: f64,
    tol: f64,
    stats: &mut Stats,
) {
    // A Jacobian at the converged point makes the iteration contract fast (one more
    // factorisation per end time).
    iteration.jacobian(model, &work.y, stats);
    if !iteration.refactor(c, stats) {
        return;
    }
    let mut last = f64::INFINITY;
    for _ in 0..NEWTON_MAXITER {
        match correction(model, iteration, work, c, stats) {
            Some(dy_norm) if dy_norm < last => {
                work.apply_correction();
                if dy_norm < tol {
                    return;
                }
                last = dy_norm;
            }
            _ => return,
        }
    }
}

/// One modified-Newton correction into `work.dy` (scaled for a matrix factored at another c,
/// CVODE's 2/(1 + ratio)); returns its weighted norm, or None when f or the solve fails.
fn correction(
    model: &RateModel,
    iteration: &mut Iteration,
    work: &mut Work,
    c: f64,
    stats: &mut Stats,
) -> Option<f64> {
    model.rhs(&work.y, &mut work.f);
    stats.rhs_evals += 1;
    if !work.f.iter().all(|v| v.is_finite()) {
        return None;
    }
    for i in 0..work.y.len() {
        work.dy[i] = c * work.f[i] - work.psi[i] - work.d[i];
    }
    iteration.solver.solve(&mut work.dy).ok()?;
    let stale = 2.0 / (1.0 + c / iteration.factored_c.unwrap_or(c));
    work.dy.iter_mut().for_each(|v| *v *= stale);
    Some(norm(&work.dy, &work.scale))
}

/// Integrates the network from `c0` with the NDF method.
pub(super) fn integrate(
    model: &RateModel,
    laws: &[ConservationLaw],
    c0: &[f64],
    options: &Options,
) -> Result<Solution, IntegrationError> {
    let started = Instant::now();
    let n = model.n_species();
    let pattern = model.pattern().clone();
    let mut iteration = Iteration {
        solver: LinearSolver::for_newton(pattern.clone(), options.force_dense, options.threads),
        jac: vec![0.0; pattern.nnz()],
        matrix: vec![0.0; pattern.nnz()],
        diagonal: pattern.diagonal_positions(),
        factored_c: None,
        jac_current: false,
        rate: None,
    };
    let refactor_ratio = if iteration.solver.factor_entries() > LARGE_FACTORS {
        REFACTOR_RATIO_LARGE
    } else {
        REFACTOR_RATIO
    };
    let mut stats = Stats::for_solver(&iteration.solver);
    stats.method = "NDF (variable order 1-5, modified Newton)".into();
    let mut detector = EquilibriumDetector::when_needed(&pattern, laws, options);
    let mut projection = Projection::new(laws, c0);
    let coefficients = Coefficients::new();
    // Newton stops when its remaining error is 6 % of the local error tolerance (the norm is
    // scaled by atol + rtol|y|, in which the error test asks for ≤ 1): small beside the
    // truncation error. Measured on the peer networks with the rate floor (RATE_DECAY): against
    // 3 %, rate evaluations syn_N100 1042 -> 964, syn_N1000 1900 -> 1840, syn_N5000 1580 ->
    // 1548, errors against the references unchanged in size (1e-10-1e-13).
    let newton_tol = 0.06;

    let Start {
        max_time,
        mut y,
        f,
        mut trajectory,
        mut h,
    } = start(model, c0, options, &mut stats);
    trajectory.push(0.0, &y, Slope::Order(1));
    let mut t = 0.0;
    iteration.jacobian(model, &y, &mut stats);

    let mut d: Vec<Vec<f64>> = vec![vec![0.0; n]; MAX_ORDER + 3];
    let mut scratch = d.clone();
    d[0].copy_from_slice(&y);
    d[1] = f.iter().map(|v| v * h).collect();
    let mut order = 1;
    let mut n_equal_steps = 0;
    let mut equilibrium_at = None;
    let mut worst_negative: f64 = 0.0;
    let mut check_jac = vec![0.0; pattern.nnz()];
    let mut work = Work::new(n);
    let mut before = vec![0.0; n];

    let stop = loop {
        match next_move(options, &stats, started, &y, t, max_time, equilibrium_at) {
            Move::Stop(reason) => break reason,
            Move::AtHorizon => {
                equilibrium_at = Some(t);
                continue;
            }
            Move::Step => {}
        }
        // Land on the requested time while it is ahead, else on the horizon.
        let target = options.until.filter(|&u| t < u).unwrap_or(max_time);
        if t + h > target {
            let cut = (target - t) / h;
            change_differences(&mut d, &mut scratch, order, cut);
            h = target - t;
            n_equal_steps = 0;
        }
        if h <= 1e-14 * t.max(1e-300) || !h.is_finite() {
            return Err(IntegrationError { time: t, step: h });
        }
        let t_new = if t + h >= target * (1.0 - 1e-15) {
            target
        } else {
            t + h
        };

        work.y_predict.copy_from_slice(&d[0]);
        work.psi.fill(0.0);
        for (j, row) in d.iter().enumerate().take(order + 1).skip(1) {
            let g = coefficients.gamma[j] / coefficients.alpha[order];
            for ((p, q), v) in work.y_predict.iter_mut().zip(work.psi.iter_mut()).zip(row) {
                *p += v;
                *q += g * v;
            }
        }
        for i in 0..n {
            work.scale[i] = options.atol[i] + options.rtol * work.y_predict[i].abs();
        }
        let c = h / coefficients.alpha[order];

        // Newton with the matrix in hand; on failure a fresh Jacobian, then a smaller step.
        let mut result = None;
        loop {
            let stale = iteration
                .factored_c
                .is_none_or(|fc| (c / fc).max(fc / c) > 1.0 + refactor_ratio);
            if stale && !iteration.refactor(c, &mut stats) {
                break;
            }
            if let Some(iterations) = newton(model, &mut iteration, &mut work, c, newton_tol, &mut stats) {
                result = Some(iterations);
                break;
            }
            if iteration.jac_current {
                break;
            }
            iteration.jacobian(model, &work.y_predict, &mut stats);
        }
        let Some(iterations) = result else {
            stats.rejected_steps += 1;
            change_differences(&mut d, &mut scratch, order, 0.5);
            h *= 0.5;
            n_equal_steps = 0;
            iteration.factored_c = None;
            continue;
        };
        if t_new == target {
            polish(
                model,
                &mut iteration,
                &mut work,
                c,
                newton_tol * LANDING_TOLERANCE,
                &mut stats,
            );
        }

        let safety = 0.9 * (2 * NEWTON_MAXITER + 1) as f64 / (2 * NEWTON_MAXITER + iterations) as f64;
        for i in 0..n {
            work.scale[i] = options.atol[i] + options.rtol * work.y[i].abs();
            work.error[i] = coefficients.error[order] * work.d[i];
        }
        let error_norm = norm(&work.error, &work.scale);
        let negative = most_negative(&work.y, &work.scale);
        // A step is refused for going negative when it takes a species more than one tolerance
        // unit further below zero than the state it started from (from a non-negative start:
        // below −1). A fixed limit of −1 refused every step size down to nothing once a start
        // sat at the limit, as the solution kept drifting by rounding (seen on syn_N1000 with
        // a looser refactorisation rule).
        let start_negative = most_negative(&y, &work.scale);
        if error_norm > 1.0 || negative < start_negative - 1.0 {
            stats.rejected_steps += 1;
            let factor = if error_norm > 1.0 {
                MIN_FACTOR.max(safety * error_norm.powf(-1.0 / (order as f64 + 1.0)))
            } else {
                stats.negative_rejections += 1;
                0.25
            };
            change_differences(&mut d, &mut scratch, order, factor);
            h *= factor;
            n_equal_steps = 0;
            continue;
        }

        // Accept: update the differences (∇^{k+2} y_n = d − ∇^{k+1} y_{n−1}, and so down).
        stats.steps += 1;
        n_equal_steps += 1;
        iteration.jac_current = false;
        before.copy_from_slice(&y);
        // The projection's change joins the step's correction, so that the differences below
        // (and the next predictor) carry it: a change to y alone would be undone by the next
        // predictor, step after step, and hold the solution off equilibrium at the level of
        // the linear solves' rounding (seen as a 1e-8 floor on a 1000-species network).
        if let Some(projection) = &mut projection {
            work.error.copy_from_slice(&work.y);
            projection.apply(&mut work.y, &options.atol);
            for ((d, y), unprojected) in work.d.iter_mut().zip(&work.y).zip(&work.error) {
                *d += y - unprojected;
            }
        }
        y.copy_from_slice(&work.y);
        worst_negative = worst_negative.min(negative);
        {
            let (low, high) = d.split_at_mut(order + 2);
            for ((top, next), new) in high[0].iter_mut().zip(low[order + 1].iter_mut()).zip(&work.d) {
                *top = new - *next;
                *next = *new;
            }
        }
        for j in (0..=order).rev() {
            let (low, high) = d.split_at_mut(j + 1);
            low[j].iter_mut().zip(&high[0]).for_each(|(x, v)| *x += v);
        }
        d[0].copy_from_slice(&y);
        t = t_new;
        trajectory.push(t, &y, Slope::Order(order));

        if options.to_equilibrium && equilibrium_at.is_none() {
            let reached = equilibrium_test(
                model,
                options,
                detector.as_mut(),
                &mut check_jac,
                &mut stats,
                (&y, &before, None),
                (t, h),
            );
            equilibrium_at = reached.then_some(t);
        }

        if n_equal_steps < order + 1 {
            continue;
        }
        let order_error = |k: usize, row: &[f64]| coefficients.error[k] * norm(row, &work.scale);
        let error_m = if order > 1 {
            order_error(order - 1, &d[order])
        } else {
            f64::INFINITY
        };
        let error_p = if order < MAX_ORDER {
            order_error(order + 1, &d[order + 2])
        } else {
            f64::INFINITY
        };
        let factors = [
            error_m.powf(-1.0 / order as f64),
            error_norm.powf(-1.0 / (order as f64 + 1.0)),
            (ORDER_UP_BIAS * error_p).powf(-1.0 / (order as f64 + 2.0)),
        ];
        let (best, &largest) = factors
            .iter()
            .enumerate()
            .max_by(|a, b| a.1.total_cmp(b.1))
            .expect("three factors");
        let factor = MAX_FACTOR.min(safety * largest);
        // As in CVODE: a growth too small to pay for a new factorisation is not taken (the
        // order stays too); a shrink is always taken.
        if (1.0..MIN_GROWTH).contains(&factor) {
            continue;
        }
        order = order + best - 1;
        change_differences(&mut d, &mut scratch, order, factor);
        h *= factor;
        n_equal_steps = 0;
    };
    Ok(Solution {
        trajectory,
        stats,
        stop,
        equilibrium_at,
        worst_negative,
    })
}
