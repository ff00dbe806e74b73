//! RODAS4 (Hairer & Wanner, *Solving Ordinary Differential Equations II*, 2nd ed., Springer
//! 1996, section IV.7; coefficients of their code RODAS): a six-stage, L-stable, stiffly accurate
//! Rosenbrock method of order 4 with an embedded order-3 error estimate. Each step needs one
//! Jacobian and one LU factorisation of I/(hγ) − J and no Newton iteration.

use std::time::Instant;

use crate::error::IntegrationError;
use crate::kinetics::RateModel;
use crate::linalg::LinearSolver;
use crate::stoich::ConservationLaw;

use super::{
    advanced, equilibrium_test, error_norm, next_move, start, step_within, EquilibriumDetector, Move,
    Options, Projection, Slope, Solution, Start, Stats,
};

/// RODAS4 coefficients in the transformed formulation (Hairer & Wanner 1996, IV.7).
mod rodas4 {
    pub const GAMMA: f64 = 0.25;
    pub const A: [[f64; 5]; 6] = [
        [0.0; 5],
        [1.544, 0.0, 0.0, 0.0, 0.0],
        [0.946_678_528_081_582_6, 0.255_701_169_898_328_4, 0.0, 0.0, 0.0],
        [
            3.314_825_187_068_521,
            2.896_124_015_972_201,
            0.998_641_913_997_781_7,
            0.0,
            0.0,
        ],
        [
            1.221_224_509_226_641,
            6.019_134_481_288_629,
            12.537_083_329_320_87,
            -0.687_886_036_105_895,
            0.0,
        ],
        [
            1.221_224_509_226_641,
            6.019_134_481_288_629,
            12.537_083_329_320_87,
            -0.687_886_036_105_895,
            1.0,
        ],
    ];
    pub const C: [[f64; 5]; 6] = [
        [0.0; 5],
        [-5.6688, 0.0, 0.0, 0.0, 0.0],
        [-2.430_093_356_833_875, -0.206_359_915_709_191_5, 0.0, 0.0, 0.0],
        [
            -0.107_352_905_815_137_5,
            -9.594_562_251_023_355,
            -20.470_286_148_096_16,
            0.0,
            0.0,
        ],
        [
            7.496_443_313_967_647,
            -10.246_804_314_643_52,
            -33.999_903_528_199_05,
            11.708_908_932_061_6,
            0.0,
        ],
        [
            8.083_246_795_921_522,
            -7.981_132_988_064_893,
            -31.521_594_328_743_71,
            16.319_305_431_231_36,
            -6.058_818_238_834_054,
        ],
    ];
}

const SAFETY: f64 = 0.9;
const MAX_GROWTH: f64 = 6.0;
const MAX_SHRINK: f64 = 0.2;

/// Integrates the network from `c0` with RODAS4.
pub(super) fn integrate(
    model: &RateModel,
    laws: &[ConservationLaw],
    c0: &[f64],
    options: &Options,
) -> Result<Solution, IntegrationError> {
    let started = Instant::now();
    let n = model.n_species();
    let jac_pattern = model.pattern().clone();
    let diagonal = jac_pattern.diagonal_positions();
    let mut solver = LinearSolver::new(jac_pattern.clone(), options.force_dense);
    let mut stats = Stats::for_solver(&solver);
    let mut detector = EquilibriumDetector::when_needed(&jac_pattern, laws, options);
    let mut projection = Projection::new(laws, c0);

    let Start {
        max_time,
        mut y,
        mut f,
        mut trajectory,
        mut h,
    } = start(model, c0, options, &mut stats);
    trajectory.push(0.0, &y, Slope::Rate(&f));
    let mut t = 0.0;
    let mut rodas = Rodas4::new(n, jac_pattern.nnz(), diagonal);
    let mut y_new = vec![0.0; n];
    let mut equilibrium_at = None;
    let mut worst_negative: f64 = 0.0;
    let mut rejected_last = false;

    let stop = loop {
        match next_move(options, &stats, started, &y, t, max_time, equilibrium_at) {
            Move::Stop(reason) => break reason,
            Move::AtHorizon => {
                equilibrium_at = Some(t);
                continue;
            }
            Move::Step => {}
        }
        h = step_within(h, t, options.until, max_time)?;

        // One RODAS4 step from (t, y) with step h, kept or retried smaller.
        let computed = rodas.step(model, &mut solver, &y, &f, h, &mut y_new, &mut stats);
        let (err, negative, deeper) = match computed {
            true => error_norm(&rodas.u[5], &y, &y_new, options),
            false => (f64::NAN, 0.0, 0.0), // singular iteration matrix: retry smaller
        };
        if let Some(shrink) = rejection(err, deeper, &mut stats) {
            h *= shrink;
            rejected_last = true;
            continue;
        }

        // Accept.
        t = advanced(t, h, options.until);
        std::mem::swap(&mut y, &mut y_new);
        if let Some(projection) = &mut projection {
            projection.apply(&mut y, &options.atol);
        }
        model.rhs(&y, &mut f);
        stats.rhs_evals += 1;
        stats.steps += 1;
        worst_negative = worst_negative.min(negative);
        trajectory.push(t, &y, Slope::Rate(&f));

        if options.to_equilibrium && equilibrium_at.is_none() {
            // y_new holds the state before the step.
            let reached = equilibrium_test(
                model,
                options,
                detector.as_mut(),
                &mut rodas.jac,
                &mut stats,
                (&y, &y_new, Some(&f)),
                (t, h),
            );
            equilibrium_at = reached.then_some(t);
        }

        let grow = factor(err);
        h *= if rejected_last { grow.min(1.0) } else { grow };
        rejected_last = false;
    };
    Ok(Solution {
        trajectory,
        stats,
        stop,
        equilibrium_at,
        worst_negative,
    })
}

/// The factor to shrink the step by when a computed step is not kept (error above tolerance,
/// not finite, or a concentration taken more than its tolerance further below zero than at the
/// step's start: `deeper` < −1), counting the rejection; `None` keeps it.
fn rejection(err: f64, deeper: f64, stats: &mut Stats) -> Option<f64> {
    if err <= 1.0 && deeper >= -1.0 {
        return None;
    }
    stats.rejected_steps += 1;
    if err <= 1.0 {
        stats.negative_rejections += 1;
        return Some(0.25);
    }
    Some(if err.is_finite() {
        factor(err).min(1.0)
    } else {
        0.25
    })
}

/// The workspace of RODAS4 steps, allocated once per integration.
struct Rodas4 {
    jac: Vec<f64>,
    matrix: Vec<f64>,
    diagonal: Vec<usize>,
    /// The six stage vectors; after a step, u[5] is the error estimate.
    u: Vec<Vec<f64>>,
    stage: Vec<f64>,
    fs: Vec<f64>,
}

impl Rodas4 {
    fn new(n: usize, nnz: usize, diagonal: Vec<usize>) -> Rodas4 {
        Rodas4 {
            jac: vec![0.0; nnz],
            matrix: vec![0.0; nnz],
            diagonal,
            u: vec![vec![0.0; n]; 6],
            stage: vec![0.0; n],
            fs: vec![0.0; n],
        }
    }

    /// One step of size h from (y, f = f(y)) into `y_new`: one Jacobian, one factorisation of
    /// I/(hγ) − J and six solves. False when the factorisation or a solve failed.
    #[allow(clippy::too_many_arguments)]
    fn step(
        &mut self,
        model: &RateModel,
        solver: &mut LinearSolver,
        y: &[f64],
        f: &[f64],
        h: f64,
        y_new: &mut [f64],
        stats: &mut Stats,
    ) -> bool {
        let n = y.len();
        model.jacobian(y, &mut self.jac);
        stats.jacobian_evals += 1;
        let inv = 1.0 / (h * rodas4::GAMMA);
        for (m, j) in self.matrix.iter_mut().zip(&self.jac) {
            *m = -j;
        }
        for &d in &self.diagonal {
            self.matrix[d] += inv;
        }
        stats.lu_factorizations += 1;
        if solver.factor(&self.matrix).is_err() {
            return false;
        }
        let u = &mut self.u;
        for s in 0..6 {
            if s == 0 {
                u[0].copy_from_slice(f);
            } else {
                for i in 0..n {
                    self.stage[i] = y[i] + (0..s).map(|j| rodas4::A[s][j] * u[j][i]).sum::<f64>();
                }
                model.rhs(&self.stage, &mut self.fs);
                stats.rhs_evals += 1;
                for (i, v) in self.fs.iter_mut().enumerate() {
                    *v += (0..s).map(|j| rodas4::C[s][j] * u[j][i]).sum::<f64>() / h;
                }
                u[s].copy_from_slice(&self.fs);
            }
            if solver.solve(&mut u[s]).is_err() {
                return false;
            }
        }
        // Stiffly accurate: y1 = Y6 + u6, and u6 is the error estimate.
        for i in 0..n {
            y_new[i] = y[i] + (0..5).map(|j| rodas4::A[5][j] * u[j][i]).sum::<f64>() + u[5][i];
        }
        true
    }
}

/// Step-size factor from the error norm for an order-3 embedded estimate.
fn factor(err: f64) -> f64 {
    (SAFETY * err.max(1e-10).powf(-0.25)).clamp(MAX_SHRINK, MAX_GROWTH)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The negativity guard measures how far a step goes below zero from where it started (our
    /// rule): a start already past −1 tolerance, which a fixed limit refused at every step size
    /// (a step-size collapse), is kept while the step stays within one tolerance of it; from a
    /// non-negative start the limit is −1 as before. Values are in units of atol (1e-10 here).
    #[test]
    fn negativity_is_measured_from_the_step_s_start() {
        let options = Options {
            atol: vec![1e-10],
            ..Options::new(1)
        };
        let estimate = [0.0];
        let check = |y: f64, y_new: f64| {
            let (err, _, deeper) = error_norm(&estimate, &[y], &[y_new], &options);
            rejection(err, deeper, &mut Stats::default())
        };
        assert_eq!(
            check(-1.5e-10, -1.6e-10),
            None,
            "stays near a start past the limit"
        );
        assert_eq!(
            check(-1.5e-10, -2.7e-10),
            Some(0.25),
            "goes over one tolerance deeper"
        );
        assert_eq!(check(0.0, -0.9e-10), None, "within the limit from zero");
        assert_eq!(check(0.0, -1.1e-10), Some(0.25), "past the limit from zero");
    }
}
