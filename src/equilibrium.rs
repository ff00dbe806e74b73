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

use crate::linalg::{LinearSolver, Pattern};
use crate::network::Network;
use crate::stoich::{Echelon, Insert, Row, Stoichiometry};

/// K equations that fail to close around a cycle by more than this (in ln K) are inconsistent.
const CYCLE_TOL: f64 = 1e-9;
/// Newton has converged when no concentration would change by more than this fraction.
const STEP_TOL: f64 = 1e-13;
/// A Newton step that stops shrinking below this has met the rounding floor of the totals: the
/// iterate is accepted there (its residuals are reported).
const FLOOR_TOL: f64 = 1e-8;
const MAX_ITERATIONS: usize = 200;
/// Up to this many pure phases, every combination of present phases is tried when the quick
/// path fails (2^12 small solves at most).
const PHASE_SEARCH_LIMIT: usize = 12;
/// A used-up pure phase whose solution is supersaturated by more than this (in ln of its
/// activity) would form again: that assemblage is not the equilibrium.
const SATURATION_TOL: f64 = 1e-6;

/// A sparse linear condition and its right-hand side: a conservation law with its total, or a
/// K equation with ln K.
type Law = (Row, f64);

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
    /// Pure solids and liquids used up at equilibrium (held at zero), by name.
    pub used_up: Vec<String>,
}

/// Why no equilibrium was found.
#[derive(Debug, Clone, PartialEq)]
pub enum NoEquilibrium {
    /// One-way steps (including feeds and sinks) drive the network to exhaustion, not equilibrium.
    OneWaySteps(Vec<String>),
    /// A rate law whose orders differ from the stoichiometry has no equilibrium constant.
    NonMassAction(String),
    /// The K values contradict each other around a cycle (ln of the mismatch given).
    InconsistentCycle { step: String, mismatch: f64 },
    /// The conservation totals cannot be met with non-negative concentrations.
    Infeasible(String),
    /// A pure solid or liquid would be needed in a negative amount.
    PurePhaseUsedUp(String),
    /// A used-up pure solid or liquid would form again from the solution.
    PurePhaseReforms(String),
    /// Newton's method did not meet its tolerance; the figures say how close it came.
    NotConverged {
        iterations: usize,
        /// Largest relative error of a conservation total at the last iterate.
        total_residual: f64,
        /// Largest relative change of a concentration that the last Newton step asked for.
        last_step: f64,
    },
}

impl std::error::Error for NoEquilibrium {}

impl NoEquilibrium {
    /// A stable snake_case tag for scripts (the Display text is for people).
    pub fn tag(&self) -> &'static str {
        match self {
            NoEquilibrium::OneWaySteps(_) => "one_way_steps",
            NoEquilibrium::NonMassAction(_) => "non_mass_action",
            NoEquilibrium::InconsistentCycle { .. } => "inconsistent_cycle",
            NoEquilibrium::Infeasible(_) => "infeasible",
            NoEquilibrium::PurePhaseUsedUp(_) => "pure_phase_used_up",
            NoEquilibrium::PurePhaseReforms(_) => "pure_phase_reforms",
            NoEquilibrium::NotConverged { .. } => "not_converged",
        }
    }
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
                "no consistent set of pure phases found: `{name}` would be needed in a negative amount"
            ),
            NoEquilibrium::PurePhaseReforms(name) => write!(
                f,
                "no consistent set of pure phases found: used-up `{name}` would form again"
            ),
            NoEquilibrium::NotConverged {
                iterations,
                total_residual,
                last_step,
            } => write!(
                f,
                "the equilibrium solve did not converge in {iterations} iterations (largest relative \
                 error of a conservation total {total_residual:.1e}, last Newton step {last_step:.1e} in ln c)"
            ),
        }
    }
}

/// Solves the equilibrium reached from the network's initial state.
pub fn solve(network: &Network, stoich: &Stoichiometry) -> Result<Equilibrium, NoEquilibrium> {
    solve_from(network, stoich, &network.initial_state())
}

/// Solves the equilibrium reached from the state `c0`.
///
/// Pure solids and liquids are either present (activity 1, any non-negative amount) or used up
/// (amount zero, solution not supersaturated in them). The quick path assumes every phase present
/// and drops, one at a time, any that would be needed in a negative amount. When that fails (two
/// phases that cannot coexist, or a dropped phase that would form again), every combination of
/// present phases is tried, largest first: by the phase rule exactly one gives a valid state.
pub fn solve_from(
    network: &Network,
    stoich: &Stoichiometry,
    c0: &[f64],
) -> Result<Equilibrium, NoEquilibrium> {
    check_mass_action(network)?;
    let pure: Vec<usize> = (0..network.n_species())
        .filter(|&i| !network.species[i].in_rate_laws())
        .collect();
    let mut absent = vec![false; network.n_species()];
    let first_failure = loop {
        match solve_with(network, stoich, c0, &absent) {
            Err(NoEquilibrium::PurePhaseUsedUp(name)) => match network.species_index(&name) {
                Some(i) if !absent[i] => absent[i] = true,
                _ => break NoEquilibrium::PurePhaseUsedUp(name),
            },
            Err(why @ (NoEquilibrium::InconsistentCycle { .. } | NoEquilibrium::PurePhaseReforms(_)))
                if !pure.is_empty() =>
            {
                break why
            }
            other => return other,
        }
    };
    if pure.len() <= PHASE_SEARCH_LIMIT {
        let mut masks: Vec<u32> = (0..1u32 << pure.len()).collect();
        masks.sort_by_key(|m| (std::cmp::Reverse(m.count_ones()), *m));
        for mask in masks {
            let mut absent = vec![false; network.n_species()];
            for (k, &p) in pure.iter().enumerate() {
                absent[p] = mask & (1 << k) == 0;
            }
            if let Ok(found) = solve_with(network, stoich, c0, &absent) {
                return Ok(found);
            }
        }
    }
    Err(first_failure)
}

/// Equilibrium needs every step reversible and rate laws that follow the stoichiometry.
fn check_mass_action(network: &Network) -> Result<(), NoEquilibrium> {
    let one_way: Vec<String> = network
        .reactions
        .iter()
        .filter(|r| r.runs_one_way())
        .map(|r| r.equation.clone())
        .collect();
    if !one_way.is_empty() {
        return Err(NoEquilibrium::OneWaySteps(one_way));
    }
    if let Some(r) = network
        .reactions
        .iter()
        .find(|r| r.kf > 0.0 && !r.follows_stoichiometry(&network.species))
    {
        return Err(NoEquilibrium::NonMassAction(r.equation.clone()));
    }
    Ok(())
}

/// Solves with the pure phases marked in `absent` held at zero and the others present.
fn solve_with(
    network: &Network,
    stoich: &Stoichiometry,
    c0: &[f64],
    absent: &[bool],
) -> Result<Equilibrium, NoEquilibrium> {
    let n = network.n_species();
    let dissolved = |i: usize| network.species[i].in_rate_laws();
    let uses_absent = |j: usize| stoich.columns[j].iter().any(|e| absent[e.0]);
    let active: Vec<usize> = (0..network.reactions.len())
        .filter(|&j| network.reactions[j].kf > 0.0 && !uses_absent(j))
        .collect();
    let present: Vec<usize> = (0..n).filter(|&i| !dissolved(i) && !absent[i]).collect();

    let (reduced, in_a_step, scale) = reduced_laws(network, stoich, c0, absent, &present)?;
    let zero: Vec<bool> = reachable(network, c0)
        .iter()
        .enumerate()
        .map(|(i, r)| dissolved(i) && !r)
        .collect();
    let positive: Vec<usize> = (0..n)
        .filter(|&i| dissolved(i) && !zero[i] && in_a_step[i])
        .collect();
    let mut column_of = vec![usize::MAX; n];
    for (k, &i) in positive.iter().enumerate() {
        column_of[i] = k;
    }

    let (g, k_rows) = k_equations(network, stoich, &active, &zero, &column_of, positive.len())?;

    let laws_pos = independent_laws(reduced, &column_of, positive.len(), scale)?;
    let start: Vec<f64> = positive.iter().map(|&i| c0[i]).collect();
    let (c_pos, iterations) = maximise_dual(&g, &laws_pos, &start)?;

    let mut concentrations: Vec<f64> = (0..n)
        .map(|i| if in_a_step[i] || !dissolved(i) { 0.0 } else { c0[i] })
        .collect();
    for (k, &i) in positive.iter().enumerate() {
        concentrations[i] = c_pos[k];
    }
    let laws = &stoich.conservation;
    let totals: Vec<f64> = laws.iter().map(|l| l.total(c0)).collect();
    pure_amounts(network, laws, &totals, &present, &mut concentrations, scale)?;
    check_saturation(network, stoich, absent, &zero, &concentrations)?;

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
        used_up: (0..n)
            .filter(|&i| absent[i])
            .map(|i| network.species[i].name.clone())
            .collect(),
    })
}

/// Conservation laws with no present pure phase and no spectator in them, found directly from N
/// (sparse, independent of the basis shown to the user): what the dissolved species must total.
/// Also which species take part in a step, and the scale of the initial amounts.
fn reduced_laws(
    network: &Network,
    stoich: &Stoichiometry,
    c0: &[f64],
    absent: &[bool],
    present: &[usize],
) -> Result<(Vec<Law>, Vec<bool>, f64), NoEquilibrium> {
    let n = network.n_species();
    let dissolved = |i: usize| network.species[i].in_rate_laws();
    // Conservation laws with no present pure phase in them, found directly from N (sparse,
    // independent of the basis shown to the user): what the dissolved species must total.
    let mut elimination = Echelon::new(n);
    for column in &stoich.columns {
        elimination.insert(column, 0.0);
    }
    // Species in no step (spectators) keep their initial amount: held fixed like the present
    // pure phases, they drop out of the laws, so a large list of them costs nothing.
    let mut in_a_step = vec![false; n];
    for column in &stoich.columns {
        for e in column {
            in_a_step[e.0] = true;
        }
    }
    for i in (0..n).filter(|&i| present.contains(&i) || !in_a_step[i]) {
        elimination.insert(&[(i, 1.0)], 0.0);
    }
    let scale = c0
        .iter()
        .fold(0.0_f64, |m, c| m.max(c.abs()))
        .max(f64::MIN_POSITIVE);
    let mut reduced: Vec<(Row, f64)> = Vec::new();
    for law in elimination.null_space() {
        let total: f64 = law.iter().map(|&(i, v)| v * c0[i]).sum();
        let row: Row = law
            .iter()
            .copied()
            .filter(|e| dissolved(e.0) && e.1 != 0.0)
            .collect();
        if !row.is_empty() {
            reduced.push((row, total));
        } else if total.abs() > 1e-12 * scale {
            // Only used-up phases in a law with a non-zero total: one of them must be there.
            let p = law.iter().find(|e| absent[e.0]).map_or(0, |e| e.0);
            return Err(NoEquilibrium::PurePhaseReforms(network.species[p].name.clone()));
        }
    }
    Ok((reduced, in_a_step, scale))
}

/// g, one solution of νᵀ g = ln K over the positive dissolved species, and the K rows; fails
/// when the equilibrium constants contradict each other around a cycle.
fn k_equations(
    network: &Network,
    stoich: &Stoichiometry,
    active: &[usize],
    zero: &[bool],
    column_of: &[usize],
    n_positive: usize,
) -> Result<(Vec<f64>, Vec<Law>), NoEquilibrium> {
    // g: one solution of νᵀ g = ln K over the positive dissolved species.
    let mut k_equations = Echelon::new(n_positive);
    let mut k_rows = Vec::new();
    for &j in active {
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
        let row: Row = stoich.columns[j]
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
    Ok((g, k_rows))
}

/// The laws over the positive species; with the zero species left out some coincide, so only
/// independent ones are kept (a dependent one must agree on its total).
fn independent_laws(
    reduced: Vec<(Row, f64)>,
    column_of: &[usize],
    n_positive: usize,
    scale: f64,
) -> Result<Vec<(Row, f64)>, NoEquilibrium> {
    // The laws over the positive species; with the zero species left out some coincide, so
    // only independent ones are kept (a dependent one must agree on its total).
    let mut independent = Echelon::new(n_positive);
    let mut laws_pos: Vec<(Row, f64)> = Vec::new();
    for (row, total) in reduced {
        let row: Row = row
            .iter()
            .filter(|e| column_of[e.0] != usize::MAX)
            .map(|e| (column_of[e.0], e.1))
            .collect();
        let size = row.iter().fold(total.abs(), |m, e| m.max(e.1.abs() * scale));
        match independent.insert(&row, total) {
            Insert::Independent => laws_pos.push((row, total)),
            Insert::Dependent { residual } if residual.abs() > 1e-9 * size => return Err(infeasible()),
            Insert::Dependent { .. } => {}
        }
    }
    Ok(laws_pos)
}

/// Species that can ever be present: those there at the start and those a step can make from
/// species that can be present (its reactants, or for the reverse direction its products, all
/// present). Mass action keeps every other species at exactly zero, so they are zero at
/// equilibrium too; deciding this from the network rather than from a basis of laws does not
/// depend on which basis elimination happens to produce.
fn reachable(network: &Network, c0: &[f64]) -> Vec<bool> {
    let mut present: Vec<bool> = c0.iter().map(|&c| c > 0.0).collect();
    loop {
        let mut changed = false;
        for r in &network.reactions {
            let directions = [
                (r.kf > 0.0, &r.reactants, &r.products),
                (r.runs_both_ways(), &r.products, &r.reactants),
            ];
            for (runs, from, to) in directions {
                if runs && from.iter().all(|e| present[e.0]) {
                    for e in to.iter() {
                        if !present[e.0] {
                            present[e.0] = true;
                            changed = true;
                        }
                    }
                }
            }
        }
        if !changed {
            return present;
        }
    }
}

/// Amounts of the present pure phases from the totals the dissolved species leave over; a
/// phase needed in a negative amount is used up.
fn pure_amounts(
    network: &Network,
    laws: &[crate::stoich::ConservationLaw],
    totals: &[f64],
    present: &[usize],
    concentrations: &mut [f64],
    scale: f64,
) -> Result<(), NoEquilibrium> {
    if present.is_empty() {
        return Ok(());
    }
    let is_present = |i: usize| present.contains(&i);
    let mut amounts = Echelon::new(concentrations.len());
    for (law, total) in laws.iter().zip(totals) {
        let rest: f64 = law
            .coefficients
            .iter()
            .filter(|e| !is_present(e.0))
            .map(|e| e.1 * concentrations[e.0])
            .sum();
        let row: Row = law
            .coefficients
            .iter()
            .copied()
            .filter(|e| is_present(e.0))
            .collect();
        amounts.insert(&row, total - rest);
    }
    let x = amounts.particular_solution();
    let size = totals.iter().fold(scale, |m, t| m.max(t.abs()));
    // The most negative first, so the quick path drops the phase that runs out first.
    if let Some(&p) = present
        .iter()
        .filter(|&&p| x[p] < -1e-12 * size)
        .min_by(|&&a, &&b| x[a].total_cmp(&x[b]))
    {
        return Err(NoEquilibrium::PurePhaseUsedUp(network.species[p].name.clone()));
    }
    for &p in present {
        concentrations[p] = x[p].max(0.0);
    }
    Ok(())
}

/// A used-up phase must not be supersaturated: for a step that forms it from species whose
/// activities are known, ln a = (ln K − Σ ν ln a_other)/ν must not exceed zero.
fn check_saturation(
    network: &Network,
    stoich: &Stoichiometry,
    absent: &[bool],
    zero: &[bool],
    c: &[f64],
) -> Result<(), NoEquilibrium> {
    for p in (0..absent.len()).filter(|&p| absent[p]) {
        for (j, column) in stoich.columns.iter().enumerate() {
            let Some(&(_, nu_p)) = column.iter().find(|e| e.0 == p) else {
                continue;
            };
            let known = column.iter().all(|&(i, _)| {
                i == p
                    || (network.species[i].in_rate_laws() && !zero[i])
                    || (!network.species[i].in_rate_laws() && !absent[i])
            });
            let r = &network.reactions[j];
            if !known || r.kf <= 0.0 || r.kr <= 0.0 {
                continue;
            }
            let others: f64 = column
                .iter()
                .filter(|e| e.0 != p && network.species[e.0].in_rate_laws())
                .map(|&(i, v)| v * c[i].ln())
                .sum();
            let ln_activity = ((r.kf / r.kr).ln() - others) / nu_p;
            if ln_activity > SATURATION_TOL {
                return Err(NoEquilibrium::PurePhaseReforms(network.species[p].name.clone()));
            }
            break;
        }
    }
    Ok(())
}

/// Maximises φ(λ) = λ·T − Σ exp(g + Lᵀλ) by Newton's method; returns the concentrations
/// exp(g + Lᵀλ) and the number of iterations.
///
/// The iterate is kept as x = ln c itself (the Newton step in λ moves it by Δx = Lᵀδλ), so its
/// size never grows with λ, and the change of φ along a step is evaluated without cancellation:
/// φ(t) − φ(0) = t·δλ·r − Σ c (e^(tΔx) − 1 − tΔx), with r = T − Lc. Convergence is judged on
/// Δx, the relative change of every concentration that Newton still asks for: that test does
/// not depend on the basis of the laws or on the order of the species. The Hessian L C Lᵀ is
/// scaled symmetrically to unit diagonal before its LU factorisation.
fn maximise_dual(g: &[f64], laws: &[(Row, f64)], c0: &[f64]) -> Result<(Vec<f64>, usize), NoEquilibrium> {
    let m = laws.len();
    let n = g.len();
    if m == 0 {
        return Ok((g.iter().map(|x| x.exp()).collect(), 0));
    }
    let by_species = LawsBySpecies::new(laws, n);
    let laws_of = &by_species.of;
    let mut x = starting_point(g, laws, laws_of, c0);
    let mut previous_step = f64::INFINITY;
    let mut flat = 0;
    for iteration in 1..=MAX_ITERATIONS {
        let c: Vec<f64> = x.iter().map(|v| v.exp()).collect();
        if c.iter().any(|v| !v.is_finite()) {
            return Err(infeasible());
        }
        let (r, total_residual) = by_species.residual(&c);
        let Some((delta_lambda, dx)) = newton_step(laws_of, m, &c, &r) else {
            return Err(infeasible());
        };
        let step = dx.iter().fold(0.0_f64, |s, v| s.max(v.abs()));
        if !step.is_finite() {
            return Err(infeasible());
        }
        if step <= STEP_TOL {
            x.iter_mut().zip(&dx).for_each(|(x, d)| *x += d);
            return Ok((x.iter().map(|v| v.exp()).collect(), iteration));
        }
        // At the rounding floor the step stops shrinking: accept once it has stalled there.
        flat = if step < FLOOR_TOL && step > 0.5 * previous_step {
            flat + 1
        } else {
            0
        };
        if flat >= 3 {
            return Ok((c, iteration));
        }
        previous_step = step;
        let slope: f64 = delta_lambda.iter().zip(&r).map(|(a, b)| a * b).sum();
        let not_converged = || NoEquilibrium::NotConverged {
            iterations: iteration,
            total_residual,
            last_step: step,
        };
        if slope.is_nan() || slope <= 0.0 {
            return if step < FLOOR_TOL {
                Ok((c, iteration))
            } else {
                Err(not_converged())
            };
        }
        let Some(t) = line_search(&c, &dx, slope, step) else {
            return Err(not_converged());
        };
        x.iter_mut().zip(&dx).for_each(|(x, d)| *x += t * d);
        if x.iter().any(|v| *v > 700.0) {
            return Err(infeasible());
        }
    }
    let c: Vec<f64> = x.iter().map(|v| v.exp()).collect();
    let (_, total_residual) = by_species.residual(&c);
    Err(NoEquilibrium::NotConverged {
        iterations: MAX_ITERATIONS,
        total_residual,
        last_step: previous_step,
    })
}

/// The conservation laws seen from the species: for each species the laws it is in (the
/// Hessian's sparsity), and each law's total.
struct LawsBySpecies {
    of: Vec<Vec<(usize, f64)>>,
    totals: Vec<f64>,
}

impl LawsBySpecies {
    fn new(laws: &[(Row, f64)], n: usize) -> LawsBySpecies {
        let mut of: Vec<Vec<(usize, f64)>> = vec![Vec::new(); n];
        for (l, (row, _)) in laws.iter().enumerate() {
            for &(k, v) in row {
                of[k].push((l, v));
            }
        }
        let totals = laws.iter().map(|(_, t)| *t).collect();
        LawsBySpecies { of, totals }
    }

    /// Each law's total minus its value at c, and the largest of them relative to the size of
    /// the law's terms (so a law of trace species is judged on its own scale).
    fn residual(&self, c: &[f64]) -> (Vec<f64>, f64) {
        let mut r = self.totals.clone();
        let mut size: Vec<f64> = self.totals.iter().map(|t| t.abs()).collect();
        for (k, list) in self.of.iter().enumerate() {
            for &(l, v) in list {
                r[l] -= v * c[k];
                size[l] += (v * c[k]).abs();
            }
        }
        let worst = r
            .iter()
            .zip(&size)
            .map(|(r, s)| r.abs() / s.max(f64::MIN_POSITIVE))
            .fold(0.0, f64::max);
        (r, worst)
    }
}

/// The Newton step of the dual: δλ from (L C Lᵀ) δλ = r, the Hessian scaled to unit diagonal
/// before its LU, and Δx = Lᵀ δλ, the change of ln c it asks for. None when singular.
fn newton_step(
    laws_of: &[Vec<(usize, f64)>],
    m: usize,
    c: &[f64],
    r: &[f64],
) -> Option<(Vec<f64>, Vec<f64>)> {
    let mut hessian = nalgebra::DMatrix::<f64>::zeros(m, m);
    for (k, list) in laws_of.iter().enumerate() {
        for &(a, va) in list {
            for &(b, vb) in list {
                hessian[(a, b)] += va * vb * c[k];
            }
        }
    }
    let d: Vec<f64> = (0..m)
        .map(|a| 1.0 / hessian[(a, a)].sqrt().max(f64::MIN_POSITIVE))
        .collect();
    let scaled = nalgebra::DMatrix::from_fn(m, m, |a, b| d[a] * hessian[(a, b)] * d[b]);
    let rhs = nalgebra::DVector::from_fn(m, |a, _| d[a] * r[a]);
    let z = scaled.full_piv_lu().solve(&rhs)?;
    let delta_lambda: Vec<f64> = (0..m).map(|a| d[a] * z[a]).collect();
    let dx: Vec<f64> = laws_of
        .iter()
        .map(|list| list.iter().map(|&(l, v)| v * delta_lambda[l]).sum())
        .collect();
    Some((delta_lambda, dx))
}

fn infeasible() -> NoEquilibrium {
    NoEquilibrium::Infeasible("the conservation totals cannot be met with positive concentrations".into())
}

/// Backtracking (Armijo) on φ along Δx, from the full step or the one that moves ln c by 5
/// (exp is steep); the gain t·slope − Σ c (e^(tΔ) − 1 − tΔ) is evaluated without cancellation.
/// None when no step of at least 1e-10 gains.
fn line_search(c: &[f64], dx: &[f64], slope: f64, step: f64) -> Option<f64> {
    let mut t = (5.0 / step).min(1.0);
    loop {
        let curvature: f64 = c.iter().zip(dx).map(|(c, d)| c * exp_remainder(t * d)).sum();
        if t * slope - curvature >= 1e-4 * t * slope {
            return Some(t);
        }
        t *= 0.5;
        if t < 1e-10 {
            return None;
        }
    }
}

/// e^u − 1 − u without cancellation for small u.
fn exp_remainder(u: f64) -> f64 {
    if u.abs() < 1e-3 {
        u * u * (0.5 + u * (1.0 / 6.0 + u / 24.0))
    } else {
        u.exp_m1() - u
    }
}

/// A start where concentrations are of the size of the initial ones: x = g + Lᵀλ with λ the
/// least-squares fit of x to the mean log of the initial concentrations.
fn starting_point(g: &[f64], laws: &[(Row, f64)], laws_of: &[Vec<(usize, f64)>], c0: &[f64]) -> Vec<f64> {
    let m = laws.len();
    let present: Vec<f64> = c0.iter().copied().filter(|&c| c > 0.0).collect();
    let typical = if present.is_empty() {
        0.0
    } else {
        present.iter().map(|c| c.ln()).sum::<f64>() / present.len() as f64
    };
    let mut normal = nalgebra::DMatrix::<f64>::zeros(m, m);
    let mut rhs = nalgebra::DVector::<f64>::zeros(m);
    for (k, list) in laws_of.iter().enumerate() {
        for &(a, va) in list {
            rhs[a] += va * (typical - g[k]);
            for &(b, vb) in list {
                normal[(a, b)] += va * vb;
            }
        }
    }
    let lambda = normal
        .full_piv_lu()
        .solve(&rhs)
        .unwrap_or_else(|| nalgebra::DVector::zeros(m));
    let mut x = g.to_vec();
    for (l, (row, _)) in laws.iter().enumerate() {
        for &(k, v) in row {
            x[k] += v * lambda[l];
        }
    }
    x
}

/// Extents of reaction ξ (mol/L) with c − c0 = N ξ. Returns None when the change is not a
/// combination of the reactions (it always is for a state reached by the network). With cycles
/// the extents are not unique; a step that is a combination of the steps before it in the file
/// then reports zero.
///
/// On the independent steps B the extents are unique: the normal equations N_Bᵀ N_B ξ = N_Bᵀ Δc
/// are solved by the sparse LU (N_Bᵀ N_B is symmetric positive definite and as sparse as the
/// steps' sharing of species), with one step of iterative refinement on the residual of
/// N_B ξ = Δc, the usual remedy for the squared condition number of normal equations (Björck,
/// Numerical Methods for Least Squares Problems, SIAM 1996, §2.1.4 and §2.9). Gauss-Jordan
/// elimination of N fills in on networks of thousands of steps; this does not.
pub fn extents(stoich: &Stoichiometry, c0: &[f64], c: &[f64]) -> Option<Vec<f64>> {
    let basis = &stoich.independent;
    let change: Vec<f64> = c.iter().zip(c0).map(|(a, b)| a - b).collect();
    let scale = c0
        .iter()
        .chain(c)
        .fold(0.0_f64, |m, v| m.max(v.abs()))
        .max(f64::MIN_POSITIVE);
    // N_B ξ and N_Bᵀ v on the basis columns.
    let apply = |xi: &[f64]| -> Vec<f64> {
        let mut out = vec![0.0; stoich.n_species];
        for (&j, &x) in basis.iter().zip(xi) {
            for &(i, v) in &stoich.columns[j] {
                out[i] += v * x;
            }
        }
        out
    };
    let apply_transposed = |v: &[f64]| -> Vec<f64> {
        basis
            .iter()
            .map(|&j| stoich.columns[j].iter().map(|&(i, a)| a * v[i]).sum())
            .collect()
    };
    let mut solver = normal_equations(stoich)?;
    let mut xi = apply_transposed(&change);
    solver.solve(&mut xi).ok()?;
    let residual: Vec<f64> = change.iter().zip(apply(&xi)).map(|(d, a)| d - a).collect();
    let mut correction = apply_transposed(&residual);
    solver.solve(&mut correction).ok()?;
    xi.iter_mut().zip(&correction).for_each(|(x, d)| *x += d);
    let worst = change
        .iter()
        .zip(apply(&xi))
        .fold(0.0_f64, |m, (d, a)| m.max((d - a).abs()));
    if worst > 1e-8 * scale {
        return None;
    }
    let mut extents = vec![0.0; stoich.columns.len()];
    for (&j, x) in basis.iter().zip(xi) {
        extents[j] = x;
    }
    Some(extents)
}

/// N_Bᵀ N_B on the independent steps, factored; None if it cannot be (it is nonsingular in
/// exact arithmetic, as those columns are independent).
fn normal_equations(stoich: &Stoichiometry) -> Option<LinearSolver> {
    let mut of_species: Vec<Vec<(usize, f64)>> = vec![Vec::new(); stoich.n_species];
    for (k, &j) in stoich.independent.iter().enumerate() {
        for &(i, v) in &stoich.columns[j] {
            of_species[i].push((k, v));
        }
    }
    // (column, row, value) of every product of two coefficients of one species, summed by entry.
    let mut products: Vec<(usize, usize, f64)> = of_species
        .iter()
        .flat_map(|list| {
            list.iter()
                .flat_map(move |&(a, va)| list.iter().map(move |&(b, vb)| (b, a, va * vb)))
        })
        .collect();
    products.sort_unstable_by_key(|&(col, row, _)| (col, row));
    let mut entries: Vec<(usize, usize)> = Vec::with_capacity(products.len());
    let mut values: Vec<f64> = Vec::with_capacity(products.len());
    for (col, row, v) in products {
        if entries.last() == Some(&(row, col)) {
            *values.last_mut().expect("an entry was pushed") += v;
        } else {
            entries.push((row, col));
            values.push(v);
        }
    }
    let mut solver = LinearSolver::new(Pattern::from_entries(stoich.independent.len(), entries), None);
    solver.factor(&values).ok()?;
    Some(solver)
}
