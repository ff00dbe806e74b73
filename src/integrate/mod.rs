//! Stiff integration and detection of equilibrium, with two methods behind one entry point:
//! RODAS4 (`rodas.rs`: one-step Rosenbrock, one Jacobian and one factorisation per step, no
//! Newton iteration; cheapest on the smallest networks) and NDF (`bdf.rs`: variable-order
//! multistep with modified Newton, one factorisation for many steps; cheapest from a few dozen
//! species up). [`Method::Auto`] chooses by size and falls back to RODAS4 should NDF fail.
//! Both share the stopping rules, the equilibrium test, the projection and the trajectory below.
//!
//! Equilibrium is declared when every species is within its integration tolerance of the
//! equilibrium solved directly (when the caller has one), or when the linearised distance to the
//! steady state, the solution δ of J δ = −f restricted to the stoichiometric subspace
//! (conservation totals held fixed), is below the integration tolerance for every species at two
//! successive steps. A slow mode cannot hide from the second test: its share of δ is its rate
//! divided by its eigenvalue, however slow it is. The second test is screened by the change over
//! the last step (times t/h, at most 1000), which stays bounded at the rounding floor of large
//! opposing fluxes; a screen on t·|dc/dt| would shrink as 1/t and miss very stiff networks.
//!
//! After every accepted step the state is projected back onto the conservation totals (the
//! smallest change weighted by |c| + atol: Hairer, Lubich & Wanner, *Geometric Numerical
//! Integration*, 2nd ed., 2006, section IV.4), so that rounding in large, nearly cancelling
//! fluxes cannot accumulate, even in laws whose species are traces.

mod bdf;
mod rodas;

use std::time::Instant;

use crate::error::IntegrationError;
use crate::kinetics::RateModel;
use crate::linalg::{LinearSolver, Pattern};
use crate::stoich::ConservationLaw;

/// Integration settings.
#[derive(Debug, Clone)]
pub struct Options {
    /// Relative tolerance.
    pub rtol: f64,
    /// Absolute tolerance per species, mol/L.
    pub atol: Vec<f64>,
    /// Integrate exactly to this time (s); the run still continues to equilibrium detection
    /// when `to_equilibrium` is set.
    pub until: Option<f64>,
    /// Keep going until equilibrium is detected (or `max_time`).
    pub to_equilibrium: bool,
    /// Give up looking for equilibrium at this time, s.
    pub max_time: f64,
    pub max_steps: usize,
    /// Force the dense (true) or sparse (false) linear solver; `None` chooses by size.
    pub force_dense: Option<bool>,
    /// The equilibrium solved directly, when there is one: the run has reached equilibrium as
    /// soon as every species is within its integration tolerance of it.
    pub target: Option<Vec<f64>>,
    /// Wall-clock budget, s: the integration ends cleanly with what it has reached.
    pub max_seconds: Option<f64>,
    /// The integration method (`Auto` chooses by size).
    pub method: Method,
    /// Threads the linear algebra of a large network may use (1: the calling thread only).
    pub threads: usize,
}

impl Options {
    pub fn new(n_species: usize) -> Options {
        Options {
            rtol: DEFAULT_RTOL,
            atol: vec![DEFAULT_ATOL; n_species],
            until: None,
            to_equilibrium: true,
            max_time: DEFAULT_MAX_TIME,
            max_steps: 200_000,
            force_dense: None,
            target: None,
            max_seconds: None,
            method: Method::Auto,
            threads: 1,
        }
    }
}

pub const DEFAULT_RTOL: f64 = 1e-6;
/// Default absolute tolerance, mol/L; trace species can set their own in the network file.
pub const DEFAULT_ATOL: f64 = 1e-12;
/// About 31 700 years: far beyond any batch, still finite.
pub const DEFAULT_MAX_TIME: f64 = 1e12;

/// Why the integration stopped.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum StopReason {
    /// Reached the requested time (and equilibrium, if it was looked for, see `equilibrium_at`).
    ReachedTime,
    /// Equilibrium detected; no end time was requested.
    Equilibrium,
    /// No equilibrium detected by `max_time`.
    MaxTime,
    /// Step budget used up.
    MaxSteps,
    /// Wall-clock budget (`max_seconds`) used up.
    TimeBudget,
}

/// Work counters, for the summary and for comparisons between solvers.
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize)]
pub struct Stats {
    pub method: String,
    pub linear_solver: String,
    pub steps: usize,
    pub rejected_steps: usize,
    pub negative_rejections: usize,
    pub rhs_evals: usize,
    pub jacobian_evals: usize,
    pub lu_factorizations: usize,
    pub equilibrium_checks: usize,
    pub seconds: f64,
}

/// The integrated trajectory at every accepted step.
///
/// Between steps it is the cubic Hermite interpolant. Its slope at a step is, from RODAS4, the
/// rate function there, which the method evaluates anyway (kept in single precision: it enters
/// the interpolant only multiplied by the step length, where 6e-8 relative is far below the
/// integration tolerance). The NDF keeps no slopes: a large network's slopes would double the
/// trajectory's memory. Its slope at a step is that of the polynomial through the neighbouring
/// steps, of the degree of the method's order there (at least 2, centred where the steps
/// allow), as the method's own interpolant is a polynomial through its past steps. Evaluating
/// the rate function at the stored states instead would not do for the NDF's long steps: on a
/// stiff component f amplifies the state's error by the stiffness, and the interpolant would
/// wander between steps by that much.
#[derive(Debug, Clone, Default)]
pub struct Trajectory {
    pub times: Vec<f64>,
    pub states: Vec<Vec<f64>>,
    /// Slope at each step, when the method gave it (RODAS4).
    rates: Vec<Vec<f32>>,
    /// Degree of the slope polynomial at each step, when it did not (NDF).
    degrees: Vec<u8>,
}

/// One species' cubic Hermite interpolant on one step interval.
#[derive(Debug, Clone, Copy)]
pub struct Piece {
    t0: f64,
    h: f64,
    y0: f64,
    y1: f64,
    /// Slopes at the two ends times the step length.
    d0: f64,
    d1: f64,
}

impl Piece {
    /// The value at time t (clamped to the interval).
    pub fn at(&self, t: f64) -> f64 {
        let s = ((t - self.t0) / self.h).clamp(0.0, 1.0);
        let s2 = s * s;
        let s3 = s2 * s;
        (2.0 * s3 - 3.0 * s2 + 1.0) * self.y0
            + (s3 - 2.0 * s2 + s) * self.d0
            + (-2.0 * s3 + 3.0 * s2) * self.y1
            + (s3 - s2) * self.d1
    }
}

/// What a method knows of the slope at a step it adds to the trajectory.
pub(crate) enum Slope<'a> {
    /// The rate function at the step.
    Rate(&'a [f64]),
    /// The method's order there.
    Order(usize),
}

impl Stats {
    fn for_solver(solver: &LinearSolver) -> Stats {
        Stats {
            method: "RODAS4 (Rosenbrock, order 4(3), L-stable)".into(),
            linear_solver: match solver.is_sparse() {
                true => "sparse LU",
                false => "dense LU",
            }
            .into(),
            ..Stats::default()
        }
    }
}

impl Trajectory {
    fn push(&mut self, t: f64, state: &[f64], slope: Slope<'_>) {
        self.times.push(t);
        self.states.push(state.to_vec());
        match slope {
            // Clamped so that a rate beyond single range stays finite (it then bends the
            // interpolant on that one step instead of making it infinite).
            Slope::Rate(f) => self.rates.push(
                f.iter()
                    .map(|&d| d.clamp(-f32::MAX as f64, f32::MAX as f64) as f32)
                    .collect(),
            ),
            Slope::Order(order) => self.degrees.push(order.clamp(2, 5) as u8),
        }
    }

    pub fn end_time(&self) -> f64 {
        *self.times.last().expect("trajectory has the initial point")
    }

    pub fn last_state(&self) -> &[f64] {
        self.states.last().expect("trajectory has the initial point")
    }

    /// State at time t by cubic Hermite interpolation between accepted steps (clamped to the
    /// integrated span).
    pub fn state_at(&self, t: f64) -> Vec<f64> {
        let k = self.interval(t);
        // At a step itself (every row of the trajectory table), the stored state as it is.
        if let Some(at) = (k..self.times.len().min(k + 2)).find(|&j| self.times[j] == t) {
            return self.states[at].clone();
        }
        if self.times.len() < 2 {
            return self.states[0].clone();
        }
        let (start, end) = (self.slope_rule(k), self.slope_rule(k + 1));
        (0..self.states[0].len())
            .map(|i| self.piece_with(k, i, &start, &end).at(t))
            .collect()
    }

    /// Folds `visit(accumulator, index, state)` over the states at `times`, shared between
    /// rayon's threads: each folds its run of times, in order, into an accumulator of its own
    /// from `start`, and `merge` joins neighbouring runs' accumulators (earlier first). For the
    /// reports' passes over a large network, thousands of species at thousands of times, where
    /// interpolating the states is most of the work.
    pub fn fold_states<A, S, V, M>(&self, times: &[f64], start: S, visit: V, merge: M) -> A
    where
        A: Send,
        S: Fn() -> A + Sync + Send,
        V: Fn(&mut A, usize, &[f64]) + Sync + Send,
        M: Fn(A, A) -> A + Sync + Send,
    {
        use rayon::prelude::*;
        // Runs of fewer times than this are not worth a thread's wake-up.
        const SHORTEST_RUN: usize = 32;
        times
            .par_iter()
            .enumerate()
            .with_min_len(SHORTEST_RUN)
            .fold(&start, |mut accumulator, (k, &t)| {
                visit(&mut accumulator, k, &self.state_at(t));
                accumulator
            })
            .reduce(&start, merge)
    }

    /// Concentration of species i at time t.
    pub fn value_at(&self, i: usize, t: f64) -> f64 {
        self.piece(self.interval(t), i).at(t)
    }

    /// Index k with times[k] <= t <= times[k+1].
    fn interval(&self, t: f64) -> usize {
        let n = self.times.len();
        if n < 2 {
            return 0;
        }
        match self.times.binary_search_by(|x| x.total_cmp(&t)) {
            Ok(k) => k.min(n - 2),
            Err(k) => k.saturating_sub(1).min(n - 2),
        }
    }

    /// Species i's interpolant on step interval k (times[k]..=times[k+1]), its slopes worked
    /// out once, for callers that evaluate it many times (bisection, sampling a maximum).
    pub fn piece(&self, k: usize, i: usize) -> Piece {
        if self.times.len() < 2 {
            let y = self.states[0][i];
            return Piece {
                t0: self.times[0],
                h: 1.0,
                y0: y,
                y1: y,
                d0: 0.0,
                d1: 0.0,
            };
        }
        self.piece_with(k, i, &self.slope_rule(k), &self.slope_rule(k + 1))
    }

    fn piece_with(&self, k: usize, i: usize, start: &SlopeRule<'_>, end: &SlopeRule<'_>) -> Piece {
        let h = self.times[k + 1] - self.times[k];
        Piece {
            t0: self.times[k],
            h,
            y0: self.states[k][i],
            y1: self.states[k + 1][i],
            d0: start.of(i) * h,
            d1: end.of(i) * h,
        }
    }

    /// How to get dy_i/dt at step n for any species i: the stored rate, or the derivative of
    /// the polynomial through step n and its neighbours (degree/2 steps before it where there
    /// are as many) as weights on their states. The weights depend on the times alone
    /// (derivatives of the Lagrange basis polynomials), so every species shares them.
    fn slope_rule(&self, n: usize) -> SlopeRule<'_> {
        if let Some(rates) = self.rates.get(n) {
            return SlopeRule::Stored(rates);
        }
        let last = self.times.len() - 1;
        let degree = usize::from(self.degrees[n]).min(last);
        let first = n.saturating_sub(degree / 2).min(last - degree);
        let x = &self.times[first..=first + degree];
        let m = n - first;
        let mut weights = [0.0; 6];
        for j in 0..=degree {
            weights[j] = if j == m {
                (0..=degree)
                    .filter(|&l| l != m)
                    .map(|l| 1.0 / (x[m] - x[l]))
                    .sum()
            } else {
                let others = (0..=degree).filter(|&l| l != j && l != m);
                others.clone().map(|l| x[m] - x[l]).product::<f64>()
                    / ((x[j] - x[m]) * others.map(|l| x[j] - x[l]).product::<f64>())
            };
        }
        SlopeRule::Fitted {
            states: &self.states[first..=first + degree],
            weights,
        }
    }
}

/// dy_i/dt at one step for every species (see [`Trajectory::slope_rule`]).
enum SlopeRule<'a> {
    Stored(&'a [f32]),
    Fitted {
        states: &'a [Vec<f64>],
        weights: [f64; 6],
    },
}

impl SlopeRule<'_> {
    fn of(&self, i: usize) -> f64 {
        match self {
            SlopeRule::Stored(rates) => f64::from(rates[i]),
            SlopeRule::Fitted { states, weights } => states.iter().zip(weights).map(|(y, w)| w * y[i]).sum(),
        }
    }
}

/// Integrates the network from `c0` (see the module documentation for the method).
pub fn integrate(
    model: &RateModel,
    laws: &[ConservationLaw],
    c0: &[f64],
    options: &Options,
) -> Result<Solution, IntegrationError> {
    let started = Instant::now();
    let mut solution = match options.method.chosen(model.n_species()) {
        Method::Rodas4 => rodas::integrate(model, laws, c0, options),
        // NDF failing (its step collapsing on a pathological network) is not the end: the
        // one-step method starts again from the beginning, as `Auto` promises an answer
        // whenever either method gives one.
        Method::Ndf if options.method == Method::Auto => {
            bdf::integrate(model, laws, c0, options).or_else(|_| rodas::integrate(model, laws, c0, options))
        }
        _ => bdf::integrate(model, laws, c0, options),
    }?;
    // Wall time of the whole integration, a fallback included.
    solution.stats.seconds = started.elapsed().as_secs_f64();
    Ok(solution)
}

/// Which integration method runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Method {
    /// NDF from `NDF_FROM` species up (fewer factorisations and rate evaluations), RODAS4 below
    /// (one-step, cheapest on the smallest networks); measured with `cargo bench`.
    #[default]
    Auto,
    Rodas4,
    Ndf,
}

/// From this many species `Auto` chooses NDF: on the peer networks NDF is 2-3.5 times faster
/// from 100 species up, 1.4 times on a 20-species ensemble member, and on syn_N10 about 1.35
/// times (0.9-1.1 against 1.3-1.5 ms, three interleaved pairs, 688 against 1254 rate
/// evaluations; it was no faster there before the NDF rules of 2026-12-02/03); RODAS4 stays
/// faster on 2 and 3 species (rev_first 0.05 against 0.1 ms, Robertson 0.6 against 0.8 ms).
pub const NDF_FROM: usize = 10;

impl Method {
    /// The method that runs for a network of `n` species.
    pub fn chosen(self, n: usize) -> Method {
        match self {
            Method::Auto if n >= NDF_FROM => Method::Ndf,
            Method::Auto => Method::Rodas4,
            other => other,
        }
    }
}

/// Result of an integration.
#[derive(Debug, Clone)]
pub struct Solution {
    pub trajectory: Trajectory,
    pub stats: Stats,
    pub stop: StopReason,
    /// Time at which equilibrium was detected, if it was.
    pub equilibrium_at: Option<f64>,
    /// Most negative concentration accepted, relative to its tolerance (≥ -1 by construction).
    pub worst_negative: f64,
}

/// The linearised equilibrium test runs only once the change over the last step, times t/h (at
/// most `SCREEN_RATIO`), is within this many tolerances: a cheap screen that skips the test
/// during the transient.
const EQUILIBRIUM_SCREEN: f64 = 1e4;
const SCREEN_RATIO: f64 = 1e3;
/// Within this many integration tolerances of the solved equilibrium, the run has reached it.
/// Not one: on very stiff networks rounding in large opposing fluxes keeps the integrated state
/// a few tolerances from the exact one along the slowest modes.
const TARGET_BAND: f64 = 10.0;
/// At the horizon, the band within which the state counts as the solved equilibrium: the band
/// in which the run says the two routes agree (100 tolerances, see `run`).
const HORIZON_BAND: f64 = 100.0;

/// The step cut so it ends at the requested time while that is still ahead, else at the
/// horizon; an error when it has shrunk to rounding.
fn step_within(h: f64, t: f64, until: Option<f64>, max_time: f64) -> Result<f64, IntegrationError> {
    let target = until.filter(|&u| t < u).unwrap_or(max_time);
    let h = h.min(target - t);
    if h <= 1e-14 * t.max(1e-300) || !h.is_finite() {
        return Err(IntegrationError { time: t, step: h });
    }
    Ok(h)
}

/// t + h, landing exactly on the requested time when within rounding of it.
fn advanced(t: f64, h: f64, until: Option<f64>) -> f64 {
    match until {
        Some(u) if (t + h - u).abs() <= 1e-12 * u => u,
        _ => t + h,
    }
}

/// What the integration does next.
enum Move {
    Stop(StopReason),
    /// At the horizon, within the rounding floor of the solved equilibrium: reached.
    AtHorizon,
    Step,
}

/// Whether to stop before the next step: the requested time and equilibrium reached, the
/// horizon, the step budget (rejections count too, so no input loops for ever) or the
/// wall-clock budget.
fn next_move(
    options: &Options,
    stats: &Stats,
    started: Instant,
    y: &[f64],
    t: f64,
    max_time: f64,
    equilibrium_at: Option<f64>,
) -> Move {
    let until_ahead = options.until.filter(|&u| t < u);
    let when_done = |otherwise: StopReason| {
        if options.until.is_some() {
            StopReason::ReachedTime
        } else {
            otherwise
        }
    };
    if until_ahead.is_none() && (!options.to_equilibrium || equilibrium_at.is_some()) {
        return Move::Stop(when_done(StopReason::Equilibrium));
    }
    if t >= max_time {
        // At the horizon every mode has decayed (the caller sets it to many slowest relaxation
        // times): a state within the rounding floor of the solved equilibrium has reached it,
        // however slowly the last tolerances were approached.
        let scale = |c: &[f64], i: usize| options.atol[i] + options.rtol * c[i].abs();
        let at_floor = options
            .target
            .as_ref()
            .is_some_and(|c| (0..y.len()).all(|i| (y[i] - c[i]).abs() <= HORIZON_BAND * scale(c, i)));
        if options.to_equilibrium && equilibrium_at.is_none() && at_floor {
            return Move::AtHorizon;
        }
        return Move::Stop(when_done(StopReason::MaxTime));
    }
    if stats.steps >= options.max_steps || stats.rejected_steps >= options.max_steps {
        return Move::Stop(StopReason::MaxSteps);
    }
    if options
        .max_seconds
        .is_some_and(|budget| started.elapsed().as_secs_f64() > budget)
    {
        return Move::Stop(StopReason::TimeBudget);
    }
    Move::Step
}

/// The weighted RMS norm of the error estimate, the most negative new concentration in units of
/// its tolerance, and how far that lies below the most negative at the step's start (the
/// rejection test: from a start already at the limit, a fixed limit would refuse every step size).
fn error_norm(estimate: &[f64], y: &[f64], y_new: &[f64], options: &Options) -> (f64, f64, f64) {
    let n = y.len();
    let scale = |i: usize| options.atol[i] + options.rtol * y[i].abs().max(y_new[i].abs());
    let err = estimate
        .iter()
        .enumerate()
        .map(|(i, e)| (e / scale(i)).powi(2))
        .sum::<f64>();
    let err = (err / n as f64).sqrt();
    let negative = (0..n).map(|i| y_new[i] / scale(i)).fold(0.0_f64, f64::min);
    let start = (0..n).map(|i| y[i] / scale(i)).fold(0.0_f64, f64::min);
    (err, negative, negative - start)
}

/// Whether equilibrium is reached after an accepted step from `before` to `y` (see the module
/// comment): within `TARGET_BAND` tolerances of the solved state, or the linearised distance
/// within tolerance at two successive screened steps.
fn equilibrium_test(
    model: &RateModel,
    options: &Options,
    detector: Option<&mut EquilibriumDetector>,
    jac: &mut [f64],
    stats: &mut Stats,
    (y, before, f): (&[f64], &[f64], Option<&[f64]>),
    (t, h): (f64, f64),
) -> bool {
    let n = y.len();
    let scale = |c: &[f64], i: usize| options.atol[i] + options.rtol * c[i].abs();
    let at_target = options
        .target
        .as_ref()
        .is_some_and(|c| (0..n).all(|i| (y[i] - c[i]).abs() <= TARGET_BAND * scale(c, i)));
    if at_target {
        return true;
    }
    let Some(detector) = detector else {
        return false;
    };
    let ratio = (t / h).min(SCREEN_RATIO);
    let screened = (0..n).all(|i| (y[i] - before[i]).abs() * ratio <= EQUILIBRIUM_SCREEN * scale(y, i));
    if !screened {
        detector.reset();
        return false;
    }
    stats.equilibrium_checks += 1;
    model.jacobian(y, jac);
    stats.jacobian_evals += 1;
    let tol: Vec<f64> = (0..n).map(|i| scale(y, i)).collect();
    // A method that carries no f(y) evaluates it here, only when the screen has passed.
    let evaluated;
    let f = match f {
        Some(f) => f,
        None => {
            let mut rates = vec![0.0; n];
            model.rhs(y, &mut rates);
            stats.rhs_evals += 1;
            evaluated = rates;
            &evaluated
        }
    };
    detector.check(jac, f, &tol)
}

/// What both methods start from: the horizon (never before the requested time), the state and
/// its rate at t = 0, an empty trajectory and a first step size.
struct Start {
    max_time: f64,
    y: Vec<f64>,
    f: Vec<f64>,
    trajectory: Trajectory,
    h: f64,
}

fn start(model: &RateModel, c0: &[f64], options: &Options, stats: &mut Stats) -> Start {
    let max_time = options.max_time.max(options.until.unwrap_or(0.0));
    let end = options.until.unwrap_or(max_time);
    let y = c0.to_vec();
    let mut f = vec![0.0; y.len()];
    model.rhs(&y, &mut f);
    stats.rhs_evals += 1;
    let trajectory = Trajectory::default();
    let h = initial_step(&y, &f, options, end);
    Start {
        max_time,
        y,
        f,
        trajectory,
        h,
    }
}

/// A first step from the size of the state and its rate of change (Hairer-Wanner style).
fn initial_step(y: &[f64], f: &[f64], options: &Options, end: f64) -> f64 {
    let n = y.len() as f64;
    let sc = |i: usize| options.atol[i] + options.rtol * y[i].abs();
    let rms = |v: &[f64]| {
        (v.iter()
            .enumerate()
            .map(|(i, v)| (v / sc(i)).powi(2))
            .sum::<f64>()
            / n)
            .sqrt()
    };
    let (d0, d1) = (rms(y), rms(f));
    let h = if d0 < 1e-5 || d1 < 1e-5 {
        1e-6
    } else {
        0.01 * d0 / d1
    };
    h.min(end).max(1e-12 * end.min(1.0))
}

/// Holds the conservation totals at their initial values: after a step, y moves by the smallest
/// change, weighted by |y| + atol, that restores every total (y ← y − W Lᵀ (L W Lᵀ)⁻¹ (L y − T)).
/// The weights make each species' correction proportional to its own size, so trace species
/// tied by a law stay tied to rounding relative to themselves.
struct Projection {
    laws: Vec<Vec<(usize, f64)>>,
    totals: Vec<f64>,
    /// Residuals, weights, L W Lᵀ and the correction of one application, kept between steps (on
    /// a 10-species network, allocating them each step cost about a tenth of the integration).
    residual: Vec<f64>,
    weights: Vec<f64>,
    gram: Vec<f64>,
    correction: Vec<f64>,
}

/// Dense solves of the m×m system stay cheap up to this many laws; beyond, no projection.
const PROJECTION_LIMIT: usize = 400;

impl Projection {
    fn new(laws: &[ConservationLaw], c0: &[f64]) -> Option<Projection> {
        if laws.is_empty() || laws.len() > PROJECTION_LIMIT {
            return None;
        }
        Some(Projection {
            laws: laws.iter().map(|l| l.coefficients.clone()).collect(),
            totals: laws.iter().map(|l| l.total(c0)).collect(),
            residual: Vec::with_capacity(laws.len()),
            weights: Vec::with_capacity(c0.len()),
            gram: Vec::with_capacity(laws.len() * laws.len()),
            correction: vec![0.0; c0.len()],
        })
    }

    fn apply(&mut self, y: &mut [f64], atol: &[f64]) {
        let m = self.laws.len();
        let Projection {
            laws,
            totals,
            residual,
            weights,
            gram,
            correction,
        } = self;
        residual.clear();
        residual.extend(
            laws.iter()
                .zip(totals.iter())
                .map(|(law, total)| law.iter().map(|&(i, v)| v * y[i]).sum::<f64>() - total),
        );
        if residual.iter().all(|r| *r == 0.0) {
            return;
        }
        weights.clear();
        weights.extend(y.iter().zip(atol).map(|(y, a)| y.abs() + a));
        let weight = |i: usize| weights[i];
        // L W Lᵀ, column-major.
        gram.clear();
        gram.resize(m * m, 0.0);
        for a in 0..m {
            for b in a..m {
                let (la, lb) = (&laws[a], &laws[b]);
                let mut sum = 0.0;
                let (mut p, mut q) = (0, 0);
                while p < la.len() && q < lb.len() {
                    match la[p].0.cmp(&lb[q].0) {
                        std::cmp::Ordering::Less => p += 1,
                        std::cmp::Ordering::Greater => q += 1,
                        std::cmp::Ordering::Equal => {
                            sum += la[p].1 * lb[q].1 * weight(la[p].0);
                            p += 1;
                            q += 1;
                        }
                    }
                }
                gram[a + b * m] = sum;
                gram[b + a * m] = sum;
            }
        }
        // μ = (L W Lᵀ)⁻¹ r in place of r; one law (the common case) needs no LU: μ = r / g,
        // the division the LU's solve would do.
        if m == 1 {
            if gram[0] == 0.0 {
                return;
            }
            residual[0] /= gram[0];
        } else {
            let matrix = nalgebra::DMatrix::from_column_slice(m, m, gram);
            let Some(mu) = matrix.lu().solve(&nalgebra::DVector::from_column_slice(residual)) else {
                return;
            };
            residual.copy_from_slice(mu.as_slice());
        }
        let mu = &residual[..];
        correction.fill(0.0);
        for (law, m) in laws.iter().zip(mu.iter()) {
            for &(i, v) in law {
                correction[i] += v * m;
            }
        }
        for (i, c) in correction.iter().enumerate() {
            if *c != 0.0 {
                y[i] -= weight(i) * c;
            }
        }
    }
}

/// Solves the bordered system [J Lᵀ; L 0] [δ; μ] = [−f; 0]: the Newton step to the steady state
/// that keeps every conservation total fixed. It is non-singular exactly when the steady state
/// is isolated within its stoichiometric class.
struct EquilibriumDetector {
    n: usize,
    jac_positions: Vec<usize>,
    pattern: Pattern,
    values: Vec<f64>,
    solver: LinearSolver,
    passes: usize,
}

impl EquilibriumDetector {
    /// The detector, unless the run has a solved equilibrium to stop at and the network is large:
    /// there a conservation law over many species puts a dense row and column in the bordered
    /// matrix, whose factorisation would then cost more than the whole integration.
    fn when_needed(
        jac: &Pattern,
        laws: &[ConservationLaw],
        options: &Options,
    ) -> Option<EquilibriumDetector> {
        let large = jac.n > crate::linalg::DENSE_LIMIT;
        (options.target.is_none() || !large).then(|| EquilibriumDetector::new(jac, laws, options.force_dense))
    }

    fn new(jac: &Pattern, laws: &[ConservationLaw], force_dense: Option<bool>) -> EquilibriumDetector {
        let n = jac.n;
        let mut entries = Vec::new();
        for col in 0..n {
            for k in jac.col_ptr[col]..jac.col_ptr[col + 1] {
                entries.push((jac.row_idx[k], col));
            }
        }
        for (l, law) in laws.iter().enumerate() {
            for &(i, _) in &law.coefficients {
                entries.push((n + l, i));
                entries.push((i, n + l));
            }
        }
        let pattern = Pattern::from_entries(n + laws.len(), entries);
        let mut values = vec![0.0; pattern.nnz()];
        for (l, law) in laws.iter().enumerate() {
            let norm = law.coefficients.iter().fold(0.0_f64, |m, e| m.max(e.1.abs()));
            for &(i, c) in &law.coefficients {
                values[pattern.position(n + l, i).expect("in pattern")] = c / norm;
                values[pattern.position(i, n + l).expect("in pattern")] = c / norm;
            }
        }
        let mut jac_positions = Vec::with_capacity(jac.nnz());
        for col in 0..n {
            for k in jac.col_ptr[col]..jac.col_ptr[col + 1] {
                jac_positions.push(pattern.position(jac.row_idx[k], col).expect("in pattern"));
            }
        }
        let solver = LinearSolver::new(pattern.clone(), force_dense);
        EquilibriumDetector {
            n,
            jac_positions,
            pattern,
            values,
            solver,
            passes: 0,
        }
    }

    fn reset(&mut self) {
        self.passes = 0;
    }

    /// True when the linearised distance to equilibrium has been within `tol` (per species) at
    /// two successive checks.
    fn check(&mut self, jac: &[f64], f: &[f64], tol: &[f64]) -> bool {
        for (&pos, &v) in self.jac_positions.iter().zip(jac) {
            self.values[pos] = v;
        }
        let close = match self.newton_step(f) {
            Some(delta) => delta.iter().zip(tol).all(|(d, t)| d.abs() <= *t),
            None => false,
        };
        self.passes = if close { self.passes + 1 } else { 0 };
        self.passes >= 2
    }

    /// δ for the current values, or None when the bordered matrix is singular.
    fn newton_step(&mut self, f: &[f64]) -> Option<Vec<f64>> {
        self.solver.factor(&self.values).ok()?;
        let mut rhs: Vec<f64> = f.iter().map(|v| -v).collect();
        rhs.resize(self.pattern.n, 0.0);
        self.solver.solve(&mut rhs).ok()?;
        rhs.truncate(self.n);
        Some(rhs)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The parallel fold sees every time once, with its index, and joins the threads' runs in
    /// time order: collecting the states gives exactly the sequential pass.
    #[test]
    fn folding_the_states_matches_one_pass_in_order() {
        let mut trajectory = Trajectory::default();
        for k in 0..400 {
            let t = k as f64 * 0.5;
            let state = [(-0.01 * t).exp(), 1.0 - (-0.01 * t).exp(), t.sin()];
            trajectory.push(t, &state, Slope::Order(3));
        }
        // Between and on the steps, enough times for several threads' runs.
        let times: Vec<f64> = (0..1500).map(|k| k as f64 * 0.133).collect();
        let folded = trajectory.fold_states(
            &times,
            Vec::new,
            |rows: &mut Vec<(usize, Vec<f64>)>, k, state| rows.push((k, state.to_vec())),
            |mut earlier, later| {
                earlier.extend(later);
                earlier
            },
        );
        let sequential: Vec<(usize, Vec<f64>)> = times
            .iter()
            .enumerate()
            .map(|(k, &t)| (k, trajectory.state_at(t)))
            .collect();
        assert_eq!(folded, sequential);
    }
}
