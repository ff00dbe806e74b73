//! Which constant is worth measuring better: normalised sensitivities of the hold time and of
//! the equilibrium composition to every constant as given (each step's kf, and its kr or K).
//!
//! - **Time to equilibrium**: d ln t / d ln k by central differences in ln k (step h = 0.01,
//!   truncation error about h²/6 of the third log-derivative), each probe integrated at rtol
//!   1e-9 so integration noise stays near 1e-7 relative, far below the 2h the difference divides
//!   by. A constant is changed the way [`Network::with_factor`] defines it: kf of a step given
//!   with K moves kr with it.
//! - **Equilibrium composition**: d ln c_eq / d ln K analytic, by differentiating the
//!   conditions the solve meets (Σ ν ln c = ln K for each independent step, L c = totals for
//!   each conservation law) at the solved state and solving the linear system once per step.
//!   A step tied to earlier ones by a cycle has no K of its own (detailed balance), and gets no
//!   value. Networks with pure phases or species at zero are differentiated through the solve by
//!   central differences instead (step 1e-3 in ln K; the solve converges to 1e-13).

use nalgebra::{DMatrix, DVector};

use crate::ensemble::{self, Outcome};
use crate::equilibrium;
use crate::network::{net_change, Constant, Network};
use crate::run::RunSettings;
use crate::stoich::{Echelon, Insert, Stoichiometry};

/// Half-width of the central difference in ln k for times to equilibrium.
const TIME_STEP: f64 = 0.01;
/// Half-width of the central difference in ln K through the solve (fallback route).
const SOLVE_STEP: f64 = 1e-3;

/// One constant as given.
#[derive(Debug, Clone, PartialEq)]
pub struct ConstantRef {
    /// `kf[2]`, `kr[1]`, `K[3]`: step numbers from 1 as in the file.
    pub name: String,
    pub step: usize,
    pub constant: Constant,
}

/// Each step's kf, and its kr or K as the file gives it.
pub fn constants(network: &Network) -> Vec<ConstantRef> {
    let mut out = Vec::new();
    for (j, r) in network.reactions.iter().enumerate() {
        let mut push = |name: &str, constant| {
            out.push(ConstantRef {
                name: format!("{name}[{}]", j + 1),
                step: j,
                constant,
            })
        };
        push("kf", Constant::Kf);
        match (r.reversible, &r.kr_spec, &r.k_spec) {
            (true, Some(_), _) => push("kr", Constant::Kr),
            (true, None, Some(_)) => push("K", Constant::K),
            _ => {}
        }
    }
    out
}

/// The sensitivities of one constant.
#[derive(Debug, Clone, PartialEq)]
pub struct Sensitivity {
    pub constant: ConstantRef,
    /// d ln t / d ln k at each tolerance (None where a probe did not reach equilibrium).
    pub time: Vec<Option<f64>>,
    /// d ln c_eq / d ln k per species (None when the step's K is not its own, see module doc).
    pub equilibrium: Option<Vec<f64>>,
}

impl Sensitivity {
    /// The largest |d ln t / d ln k| over the tolerances: what the ranking uses.
    pub fn weight(&self) -> f64 {
        self.time.iter().flatten().fold(0.0, |m: f64, s| m.max(s.abs()))
    }
}

/// How the equilibrium sensitivities were computed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum EquilibriumRoute {
    Analytic,
    DifferencesOfTheSolve,
}

/// Every constant's sensitivities, ranked so the constant that dominates the hold time comes
/// first; probes run on `threads` threads, times judged on the `judged` species (all if None).
pub fn sensitivities(
    network: &Network,
    tolerances: &[f64],
    judged: Option<Vec<usize>>,
    threads: usize,
) -> Result<(Vec<Sensitivity>, EquilibriumRoute), String> {
    let list = constants(network);
    let settings = RunSettings {
        tolerances: tolerances.to_vec(),
        rtol: 1e-9,
        atol: 1e-15,
        settle_on: judged,
        ..RunSettings::default()
    };
    // Probe 2m is constant m scaled by e^(+h), probe 2m + 1 by e^(−h).
    let probes: Vec<usize> = (0..2 * list.len()).collect();
    let probe = |p: usize| {
        let c = &list[p / 2];
        let sign = if p.is_multiple_of(2) { 1.0 } else { -1.0 };
        network
            .with_factor(c.step, c.constant, (sign * TIME_STEP).exp())
            .map_err(|e| e.to_string())
            .and_then(|n| Outcome::of(&n, &settings))
    };
    let outcomes = ensemble::evaluate(&probes, threads, probe, &|_| {});
    let (by_step, route) = equilibrium_by_step(network)?;
    let mut out = Vec::new();
    for (m, c) in list.into_iter().enumerate() {
        let (up, down) = (&outcomes[2 * m], &outcomes[2 * m + 1]);
        let time = (0..tolerances.len())
            .map(|k| {
                let t_up = up.as_ref().ok()?.times[k]?;
                let t_down = down.as_ref().ok()?.times[k]?;
                Some((t_up.ln() - t_down.ln()) / (2.0 * TIME_STEP))
            })
            .collect();
        let equilibrium = equilibrium_of_constant(network, &c, &by_step);
        out.push(Sensitivity {
            constant: c,
            time,
            equilibrium,
        });
    }
    out.sort_by(|a, b| b.weight().total_cmp(&a.weight()));
    Ok((out, route))
}

/// d ln c_eq / d ln k for one constant, from the steps' d ln c_eq / d ln K: K itself, kf of a
/// step given with kr (K = kf/kr rises with kf), kr (K falls); kf of a step given with K leaves
/// the equilibrium alone.
fn equilibrium_of_constant(
    network: &Network,
    c: &ConstantRef,
    by_step: &[Option<Vec<f64>>],
) -> Option<Vec<f64>> {
    let r = &network.reactions[c.step];
    let per_k = by_step[c.step].as_ref();
    match (c.constant, r.kr_spec.is_some()) {
        (Constant::K, _) => per_k.cloned(),
        (Constant::Kf, true) => per_k.cloned(),
        (Constant::Kr, _) => per_k.map(|v| v.iter().map(|x| -x).collect()),
        (Constant::Kf, false) if r.reversible => Some(vec![0.0; network.n_species()]),
        (Constant::Kf, false) => None,
    }
}

/// Per step, d ln c_eq / d ln K_step for every species (None for a step without a K of its own).
pub type BySteps = Vec<Option<Vec<f64>>>;

/// [`BySteps`] at the network's solved equilibrium, and the route used.
pub fn equilibrium_by_step(network: &Network) -> Result<(BySteps, EquilibriumRoute), String> {
    let solved = equilibrium::solve(network, &Stoichiometry::new(network)).map_err(|e| e.to_string())?;
    let c = &solved.concentrations;
    let plain = network
        .species
        .iter()
        .zip(c)
        .all(|(s, &c)| s.in_rate_laws() && c > 0.0)
        && network.reactions.iter().all(|r| r.runs_both_ways());
    if plain {
        if let Some(analytic) = analytic(network, c) {
            return Ok((analytic, EquilibriumRoute::Analytic));
        }
    }
    Ok((
        differences_of_the_solve(network, c),
        EquilibriumRoute::DifferencesOfTheSolve,
    ))
}

/// The implicit-function route: M dy = e_j with y = ln c, rows Σ ν_ij dy_i (independent steps)
/// and Σ l_i c_i dy_i (conservation laws). None when the system is singular.
fn analytic(network: &Network, c: &[f64]) -> Option<BySteps> {
    let n = network.n_species();
    let (echelon, independent) = independent_steps(network);
    let mut rows: Vec<Vec<(usize, f64)>> = Vec::new();
    let mut row_of_step = vec![None; network.reactions.len()];
    for (j, r) in network.reactions.iter().enumerate() {
        if independent[j] {
            row_of_step[j] = Some(rows.len());
            rows.push(net_change(&r.reactants, &r.products));
        }
    }
    for law in echelon.null_space() {
        rows.push(law.iter().map(|&(i, l)| (i, l * c[i])).collect());
    }
    if rows.len() != n {
        return None;
    }
    let mut m = DMatrix::zeros(n, n);
    for (k, row) in rows.iter().enumerate() {
        for &(i, v) in row {
            m[(k, i)] = v;
        }
    }
    let lu = m.lu();
    let mut out = Vec::new();
    for row in &row_of_step {
        out.push(match row {
            Some(k) => {
                let mut e = DVector::zeros(n);
                e[*k] = 1.0;
                Some(lu.solve(&e)?.iter().copied().collect())
            }
            None => None,
        });
    }
    Some(out)
}

/// Which steps (reversible, in file order) are independent of the earlier ones; a step that is
/// not closes a cycle, and its K follows from the others'.
fn independent_steps(network: &Network) -> (Echelon, Vec<bool>) {
    let mut echelon = Echelon::new(network.n_species());
    let independent = network
        .reactions
        .iter()
        .map(|r| {
            r.runs_both_ways()
                && echelon.insert(&net_change(&r.reactants, &r.products), 0.0) == Insert::Independent
        })
        .collect();
    (echelon, independent)
}

/// The fallback route: solve again with K × e^(±h) and difference ln c.
pub fn differences_of_the_solve(network: &Network, c: &[f64]) -> BySteps {
    let solve_with = |j: usize, sign: f64| -> Option<Vec<f64>> {
        let r = &network.reactions[j];
        let factor = (sign * SOLVE_STEP).exp();
        // K rises by the factor: through K when given, else by lowering kr.
        let changed = match (&r.k_spec, &r.kr_spec) {
            (Some(_), None) => network.with_factor(j, Constant::K, factor),
            _ => network.with_factor(j, Constant::Kr, 1.0 / factor),
        }
        .ok()?;
        equilibrium::solve(&changed, &Stoichiometry::new(&changed))
            .ok()
            .map(|e| e.concentrations)
    };
    let (_, independent) = independent_steps(network);
    (0..network.reactions.len())
        .map(|j| {
            if !independent[j] {
                return None;
            }
            let (up, down) = (solve_with(j, 1.0)?, solve_with(j, -1.0)?);
            Some(
                (0..c.len())
                    .map(|i| match up[i] > 0.0 && down[i] > 0.0 {
                        true => (up[i].ln() - down[i].ln()) / (2.0 * SOLVE_STEP),
                        false => 0.0,
                    })
                    .collect(),
            )
        })
        .collect()
}
