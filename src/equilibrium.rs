//! The equilibrium composition, solved directly (no integration), and the extents of reaction.
//!
//! At equilibrium every reversible step satisfies Q = K (pure solids and liquids at activity 1)
//! and the conservation totals keep their initial values. Writing ln c = g + Lᵀλ, where g is any
//! solution of the K equations (νᵀg = ln K) and L spans the conservation laws of the dissolved
//! species, satisfies every K equation for any λ; the totals then fix λ as the maximiser of the
//! concave function φ(λ) = λ·T − Σ exp(g + Lᵀλ). Newton's method with a backtracking line search
//! on φ converges from any start, across many orders of magnitude, whenever a positive
//! equilibrium exists (the dual of the free-energy minimisation, common practice in equilibrium
//! solvers).

use crate::network::Network;
use crate::stoich::{Echelon, Insert, Stoichiometry};

/// K equations that fail to close around a cycle by more than this (in ln K) are inconsistent.
const CYCLE_TOL: f64 = 1e-9;
/// Relative tolerance on every conservation total at convergence.
const TOTAL_TOL: f64 = 1e-12;
/// A Newton step that moves no ln c by more than this has reached the rounding floor.
const STALL: f64 = 1e-14;
/// At the rounding floor, totals within this (relative) are accepted.
const STALL_TOTAL_TOL: f64 = 1e-9;
const MAX_ITERATIONS: usize = 500;

/// A solved equilibrium.
#[derive(Debug, Clone, PartialEq)]
pub struct Equilibrium {
    /// Concentrations (dissolved) and amounts (pure phases), mol/L, in species order.
    pub concentrations: Vec<f64>,
    pub iterations: usize,
    /// Largest |ln Q − ln K| over the reversible steps.
    pub max_k_residual: f64,
    /// Largest relative error of a conservation total.
    pub max_total_residual: f64,
}

/// Why no equilibrium was found.
#[derive(Debug, Clone, PartialEq)]
pub enum NoEquilibrium {
    /// One-way steps (including feeds and sinks) drive the network to exhaustion, not equilibrium.
    OneWaySteps(Vec<String>),
    /// A rate law whose orders differ from the stoichiometry has no equilibrium constant.
    NonMassAction(String),
    /// The K values contradict each other around a cycle (ln of the mismatch given).
    InconsistentCycle {
        step: String,
        mismatch: f64,
    },
    /// The conservation totals cannot be met with non-negative concentrations.
    Infeasible(String),
    /// A pure solid or liquid would be used up before equilibrium.
    PurePhaseUsedUp(String),
    NotConverged {
        iterations: usize,
    },
}

impl std::fmt::Display for NoEquilibrium {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            NoEquilibrium::OneWaySteps(steps) => write!(
                f,
                "no equilibrium exists: one-way steps ({}) run until a reactant is exhausted",
                steps.join("; ")
            ),
            NoEquilibrium::NonMassAction(step) => write!(
                f,
                "no equilibrium constant for `{step}`: its rate-law orders differ from its stoichiometry"
            ),
            NoEquilibrium::InconsistentCycle { step, mismatch } => write!(
                f,
                "no equilibrium exists: the equilibrium constants are inconsistent around a cycle through \
                 `{step}` (K off by a factor {:.6}); the network settles into a steady state with a net cycle flux",
                mismatch.exp()
            ),
            NoEquilibrium::Infeasible(why) => write!(f, "no equilibrium exists: {why}"),
            NoEquilibrium::PurePhaseUsedUp(name) => write!(
                f,
                "the pure phase `{name}` would be used up before equilibrium is reached (not yet handled)"
            ),
            NoEquilibrium::NotConverged { iterations } => {
                write!(f, "the equilibrium solve did not converge in {iterations} iterations")
            }
        }
    }
}

/// Solves the equilibrium reached from the network's initial state.
pub fn solve(network: &Network, stoich: &Stoichiometry) -> Result<Equilibrium, NoEquilibrium> {
    solve_from(network, stoich, &network.initial_state())
}

/// Solves the equilibrium reached from the state `c0`. A pure solid or liquid that would be
/// needed in a negative amount is used up: it is set to zero, the steps it takes part in drop out
/// of the equilibrium conditions, and the rest is solved again (one phase at a time).
pub fn solve_from(
    network: &Network,
    stoich: &Stoichiometry,
    c0: &[f64],
) -> Result<Equilibrium, NoEquilibrium> {
    let mut absent = vec![false; network.n_species()];
    loop {
        match solve_with(network, stoich, c0, &absent) {
            Err(NoEquilibrium::PurePhaseUsedUp(name)) => match network.species_index(&name) {
                Some(i) if !absent[i] => absent[i] = true,
                _ => return Err(NoEquilibrium::PurePhaseUsedUp(name)),
            },
            other => return other,
        }
    }
}

/// Solves with the pure phases marked in `absent` held at zero.
fn solve_with(
    network: &Network,
    stoich: &Stoichiometry,
    c0: &[f64],
    absent: &[bool],
) -> Result<Equilibrium, NoEquilibrium> {
    let n = network.n_species();
    let dissolved = |i: usize| network.species[i].in_rate_laws();
    let one_way: Vec<String> = network
        .reactions
        .iter()
        .filter(|r| (r.kf > 0.0) != (r.reversible && r.kr > 0.0))
        .map(|r| r.equation.clone())
        .collect();
    if !one_way.is_empty() {
        return Err(NoEquilibrium::OneWaySteps(one_way));
    }
    let uses_absent = |j: usize| {
        let r = &network.reactions[j];
        r.reactants.iter().chain(&r.products).any(|e| absent[e.0])
    };
    let active: Vec<usize> = (0..network.reactions.len())
        .filter(|&j| network.reactions[j].kf > 0.0 && !uses_absent(j))
        .collect();
    for &j in &active {
        let r = &network.reactions[j];
        let mut order_change: Vec<(usize, f64)> = stoich.columns[j]
            .iter()
            .copied()
            .filter(|e| dissolved(e.0))
            .collect();
        for &(i, a) in &r.forward_orders {
            add(&mut order_change, i, a);
        }
        for &(i, b) in &r.reverse_orders {
            add(&mut order_change, i, -b);
        }
        if order_change.iter().any(|e| e.1.abs() > 1e-12) {
            return Err(NoEquilibrium::NonMassAction(r.equation.clone()));
        }
    }

    // Conservation totals, and the laws of the dissolved species alone (pure phases eliminated).
    let laws = &stoich.conservation;
    let totals: Vec<f64> = laws.iter().map(|l| l.total(c0)).collect();
    let pure: Vec<usize> = (0..n).filter(|&i| !dissolved(i) && !absent[i]).collect();
    let mut eliminate = Echelon::new(laws.len());
    for &p in &pure {
        let row: Vec<(usize, f64)> = laws
            .iter()
            .enumerate()
            .filter_map(|(l, law)| law.coefficients.iter().find(|e| e.0 == p).map(|e| (l, e.1)))
            .collect();
        eliminate.insert(&row, 0.0);
    }
    let mut reduced: Vec<(Vec<(usize, f64)>, f64)> = eliminate
        .null_space()
        .iter()
        .map(|w| {
            let mut row: Vec<(usize, f64)> = Vec::new();
            let mut total = 0.0;
            for &(l, wl) in w {
                total += wl * totals[l];
                for &(i, c) in &laws[l].coefficients {
                    if dissolved(i) {
                        add(&mut row, i, wl * c);
                    }
                }
            }
            row.retain(|e| e.1.abs() > 1e-12);
            (row, total)
        })
        .filter(|(row, _)| !row.is_empty())
        .collect();

    // Species forced to zero: a one-signed law with a zero total.
    let scale = c0
        .iter()
        .fold(0.0_f64, |m, c| m.max(c.abs()))
        .max(f64::MIN_POSITIVE);
    let mut zero = vec![false; n];
    for (row, total) in &reduced {
        let same_sign = row.iter().all(|e| e.1 > 0.0) || row.iter().all(|e| e.1 < 0.0);
        let sign = if row[0].1 > 0.0 { 1.0 } else { -1.0 };
        if same_sign && sign * total <= 1e-14 * scale {
            if sign * total < -1e-12 * scale {
                return Err(NoEquilibrium::Infeasible(
                    "a conservation total is negative where every concentration in it must be positive"
                        .into(),
                ));
            }
            for e in row {
                zero[e.0] = true;
            }
        }
    }
    let positive: Vec<usize> = (0..n).filter(|&i| dissolved(i) && !zero[i]).collect();
    let mut column_of = vec![usize::MAX; n];
    for (k, &i) in positive.iter().enumerate() {
        column_of[i] = k;
    }

    // g: one solution of νᵀ g = ln K over the positive dissolved species.
    let mut k_equations = Echelon::new(positive.len());
    let mut k_rows = Vec::new();
    for &j in &active {
        let r = &network.reactions[j];
        let touches_zero = |side: &[(usize, f64)]| side.iter().any(|e| zero[e.0]);
        match (touches_zero(&r.forward_orders), touches_zero(&r.reverse_orders)) {
            (true, true) => continue, // both rates vanish
            (false, false) => {}
            _ => {
                return Err(NoEquilibrium::Infeasible(format!(
                    "`{}` cannot balance: one side needs a species that conservation holds at zero",
                    r.equation
                )))
            }
        }
        let row: Vec<(usize, f64)> = stoich.columns[j]
            .iter()
            .filter(|e| column_of[e.0] != usize::MAX)
            .map(|e| (column_of[e.0], e.1))
            .collect();
        let ln_k = (r.kf / r.kr).ln();
        if let Insert::Dependent { residual } = k_equations.insert(&row, ln_k) {
            if residual.abs() > CYCLE_TOL * (1.0 + ln_k.abs()) {
                return Err(NoEquilibrium::InconsistentCycle {
                    step: r.equation.clone(),
                    mismatch: residual,
                });
            }
        }
        k_rows.push((row, ln_k));
    }
    let g = k_equations.particular_solution();

    // Dual Newton on λ for the reduced laws over the positive species.
    let laws_pos: Vec<(Vec<(usize, f64)>, f64)> = reduced
        .drain(..)
        .filter_map(|(row, total)| {
            let row: Vec<(usize, f64)> = row
                .iter()
                .filter(|e| column_of[e.0] != usize::MAX)
                .map(|e| (column_of[e.0], e.1))
                .collect();
            (!row.is_empty()).then_some((row, total))
        })
        .collect();
    let (c_pos, iterations) = maximise_dual(&g, &laws_pos, c0, &positive)?;

    let mut concentrations = vec![0.0; n];
    for (k, &i) in positive.iter().enumerate() {
        concentrations[i] = c_pos[k];
    }
    // Pure-phase amounts from the totals that remain.
    if !pure.is_empty() {
        let mut amounts = Echelon::new(n);
        for (law, total) in laws.iter().zip(&totals) {
            let rest: f64 = law
                .coefficients
                .iter()
                .filter(|e| dissolved(e.0))
                .map(|e| e.1 * concentrations[e.0])
                .sum();
            let row: Vec<(usize, f64)> = law
                .coefficients
                .iter()
                .copied()
                .filter(|e| !dissolved(e.0) && !absent[e.0])
                .collect();
            amounts.insert(&row, total - rest);
        }
        let x = amounts.particular_solution();
        for &p in &pure {
            concentrations[p] = x[p];
            let size = laws.iter().zip(&totals).fold(0.0_f64, |m, (_, t)| m.max(t.abs()));
            if x[p] < -1e-12 * size.max(scale) {
                return Err(NoEquilibrium::PurePhaseUsedUp(network.species[p].name.clone()));
            }
            concentrations[p] = x[p].max(0.0);
        }
    }
    let max_k_residual = k_rows
        .iter()
        .map(|(row, ln_k)| (row.iter().map(|&(k, v)| v * c_pos[k].ln()).sum::<f64>() - ln_k).abs())
        .fold(0.0, f64::max);
    let max_total_residual = laws
        .iter()
        .zip(&totals)
        .map(|(law, t)| {
            (law.total(&concentrations) - t).abs()
                / law
                    .magnitude(c0)
                    .max(law.magnitude(&concentrations))
                    .max(f64::MIN_POSITIVE)
        })
        .fold(0.0, f64::max);
    Ok(Equilibrium {
        concentrations,
        iterations,
        max_k_residual,
        max_total_residual,
    })
}

fn add(row: &mut Vec<(usize, f64)>, i: usize, v: f64) {
    match row.iter_mut().find(|e| e.0 == i) {
        Some(e) => e.1 += v,
        None => row.push((i, v)),
    }
}

/// Maximises φ(λ) = λ·T − Σ exp(g + Lᵀλ); returns the concentrations exp(g + Lᵀλ).
fn maximise_dual(
    g: &[f64],
    laws: &[(Vec<(usize, f64)>, f64)],
    c0: &[f64],
    positive: &[usize],
) -> Result<(Vec<f64>, usize), NoEquilibrium> {
    let m = laws.len();
    let n = g.len();
    let log_c = |lambda: &[f64]| -> Vec<f64> {
        let mut x = g.to_vec();
        for (l, (row, _)) in laws.iter().enumerate() {
            for &(k, v) in row {
                x[k] += v * lambda[l];
            }
        }
        x
    };
    if m == 0 {
        return Ok((g.iter().map(|x| x.exp()).collect(), 0));
    }
    // Start where concentrations are of the size of the initial ones (least squares on ln c).
    let typical = {
        let present: Vec<f64> = positive.iter().map(|&i| c0[i]).filter(|&c| c > 0.0).collect();
        if present.is_empty() {
            1.0
        } else {
            present.iter().map(|c| c.ln()).sum::<f64>() / present.len() as f64
        }
    };
    let mut normal = nalgebra::DMatrix::<f64>::zeros(m, m);
    let mut rhs = nalgebra::DVector::<f64>::zeros(m);
    let dense_rows: Vec<Vec<f64>> = laws
        .iter()
        .map(|(row, _)| {
            let mut d = vec![0.0; n];
            for &(k, v) in row {
                d[k] = v;
            }
            d
        })
        .collect();
    for a in 0..m {
        for b in 0..m {
            normal[(a, b)] = (0..n).map(|k| dense_rows[a][k] * dense_rows[b][k]).sum();
        }
        rhs[a] = (0..n).map(|k| dense_rows[a][k] * (typical - g[k])).sum();
    }
    let mut lambda: Vec<f64> = normal
        .clone()
        .lu()
        .solve(&rhs)
        .map_or(vec![0.0; m], |v| v.iter().copied().collect());
    let phi = |lambda: &[f64]| -> f64 {
        let x = log_c(lambda);
        let linear: f64 = laws.iter().zip(lambda).map(|((_, t), l)| t * l).sum();
        linear - x.iter().map(|v| v.exp()).sum::<f64>()
    };
    for iteration in 1..=MAX_ITERATIONS {
        let c: Vec<f64> = log_c(&lambda).iter().map(|x| x.exp()).collect();
        let mut gradient = nalgebra::DVector::<f64>::zeros(m);
        let mut sizes = vec![0.0; m];
        for (l, (row, total)) in laws.iter().enumerate() {
            let value: f64 = row.iter().map(|&(k, v)| v * c[k]).sum();
            sizes[l] = row
                .iter()
                .map(|&(k, v)| (v * c[k]).abs())
                .sum::<f64>()
                .max(total.abs());
            gradient[l] = total - value;
        }
        let within = |tol: f64| {
            gradient
                .iter()
                .zip(&sizes)
                .all(|(g, s)| g.abs() <= tol * s.max(f64::MIN_POSITIVE))
        };
        let converged = within(TOTAL_TOL);
        if converged {
            return Ok((c, iteration - 1));
        }
        let mut hessian = nalgebra::DMatrix::<f64>::zeros(m, m);
        for a in 0..m {
            for b in a..m {
                let h: f64 = (0..n).map(|k| dense_rows[a][k] * dense_rows[b][k] * c[k]).sum();
                hessian[(a, b)] = h;
                hessian[(b, a)] = h;
            }
        }
        let Some(step) = hessian.lu().solve(&gradient) else {
            return Err(NoEquilibrium::Infeasible(
                "the conservation totals cannot be met with positive concentrations".into(),
            ));
        };
        // Backtracking: ascend φ; cap the change of any ln c at 5 per step (exp is steep).
        let largest_log_change = (0..n)
            .map(|k| (0..m).map(|l| dense_rows[l][k] * step[l]).sum::<f64>().abs())
            .fold(0.0, f64::max);
        if largest_log_change < STALL {
            return if within(STALL_TOTAL_TOL) {
                Ok((c, iteration))
            } else {
                Err(NoEquilibrium::NotConverged {
                    iterations: iteration,
                })
            };
        }
        let mut t = if largest_log_change > 5.0 {
            5.0 / largest_log_change
        } else {
            1.0
        };
        let current = phi(&lambda);
        let slope: f64 = gradient.dot(&step);
        loop {
            let trial: Vec<f64> = lambda.iter().zip(step.iter()).map(|(l, s)| l + t * s).collect();
            let value = phi(&trial);
            if value.is_finite() && value >= current + 1e-4 * t * slope {
                lambda = trial;
                break;
            }
            t *= 0.5;
            if t < 1e-12 {
                // No further ascent possible at double precision: accept if already close.
                let close = gradient
                    .iter()
                    .zip(laws)
                    .all(|(gr, (_, total))| gr.abs() <= 1e-9 * total.abs().max(1e-300));
                if close {
                    return Ok((c, iteration));
                }
                return Err(NoEquilibrium::NotConverged {
                    iterations: iteration,
                });
            }
        }
        if lambda.iter().any(|l| !l.is_finite() || l.abs() > 1e4) {
            return Err(NoEquilibrium::Infeasible(
                "the conservation totals cannot be met with positive concentrations".into(),
            ));
        }
    }
    Err(NoEquilibrium::NotConverged {
        iterations: MAX_ITERATIONS,
    })
}

/// Extents of reaction ξ (mol/L) with c − c0 = N ξ. Returns None when the change is not a
/// combination of the reactions (it always is for a state reached by the network). With cycles
/// the extents are not unique; the steps of a cycle then report zero for the dependent ones.
pub fn extents(stoich: &Stoichiometry, c0: &[f64], c: &[f64]) -> Option<Vec<f64>> {
    let n_steps = stoich.columns.len();
    let mut rows: Vec<Vec<(usize, f64)>> = vec![Vec::new(); stoich.n_species];
    for (j, column) in stoich.columns.iter().enumerate() {
        for &(i, v) in column {
            rows[i].push((j, v));
        }
    }
    let mut echelon = Echelon::new(n_steps);
    let scale = c0
        .iter()
        .chain(c)
        .fold(0.0_f64, |m, v| m.max(v.abs()))
        .max(f64::MIN_POSITIVE);
    for (i, row) in rows.iter().enumerate() {
        if let Insert::Dependent { residual } = echelon.insert(row, c[i] - c0[i]) {
            if residual.abs() > 1e-8 * scale {
                return None;
            }
        }
    }
    Some(echelon.particular_solution())
}
