//! Relaxation analysis: the network linearised at equilibrium.
//!
//! Near a detailed-balance equilibrium c*, mass-action kinetics linearise to
//! dδ/dt = −N R Nᵀ C⁻¹ δ, with R = diag(r_j) the (equal) forward and reverse rates of each step
//! at equilibrium and C = diag(c*). With B = C^(−1/2) N R^(1/2) the matrix is similar to −B Bᵀ, so
//! the relaxation rates are the squared singular values of B and the relaxation times are
//! τ = 1/σ². The left singular vector gives the species that move in the mode (δc = C^(1/2) u);
//! the right singular vector v gives each step's share v_j² of the mode's rate, so the steps with
//! the largest share are the ones that limit it. Zero modes (conservation laws) are left out by
//! keeping exactly rank(N) singular values. Working with singular values rather than eigenvalues
//! keeps time scales twenty decades apart distinguishable.

use serde::Serialize;

use crate::network::Network;
use crate::stoich::Echelon;

/// Above this many species the dense singular value decomposition is skipped.
pub const MAX_SPECIES: usize = 1500;

/// One relaxation mode.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Mode {
    pub tau_seconds: f64,
    /// Species that move in this mode with their share of the displacement (largest first).
    pub species: Vec<Share>,
    /// Steps with their share of the mode's rate (largest first): the ones that limit it.
    pub steps: Vec<Share>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Share {
    pub name: String,
    pub share: f64,
}

/// A step active at equilibrium: its equation, equilibrium rate and net change over the
/// positive species.
type ActiveStep = (String, f64, Vec<(usize, f64)>);

/// The steps active at equilibrium: (equation, equilibrium rate, net change over the positive
/// species). Fails when a step runs one way only (no equilibrium to relax to).
fn active_steps(network: &Network, c_eq: &[f64], column_of: &[usize]) -> Result<Vec<ActiveStep>, String> {
    let mut steps = Vec::new();
    for r in &network.reactions {
        if !r.runs_both_ways() {
            if r.kf > 0.0 {
                return Err("relaxation analysis needs an equilibrium: the network has one-way steps".into());
            }
            continue;
        }
        if r.forward_orders
            .iter()
            .chain(&r.reverse_orders)
            .any(|e| column_of[e.0] == usize::MAX)
        {
            continue; // a species held at zero: the step is idle at equilibrium
        }
        let used_up = |e: &(usize, f64)| !network.species[e.0].in_rate_laws() && c_eq[e.0] <= 0.0;
        if r.reactants.iter().chain(&r.products).any(used_up) {
            continue; // a pure phase that is used up: the step has stopped
        }
        let rate = r.rates(c_eq).0;
        let net = crate::stoich::net_change(&r.reactants, &r.products);
        let column: Vec<(usize, f64)> = net
            .iter()
            .filter(|e| column_of[e.0] != usize::MAX)
            .map(|e| (column_of[e.0], e.1))
            .collect();
        steps.push((r.equation.clone(), rate, column));
    }
    Ok(steps)
}

/// Modes slowest first, at the equilibrium `c_eq`; an explanation when the analysis does not
/// apply.
pub fn modes(network: &Network, c_eq: &[f64]) -> Result<Vec<Mode>, String> {
    let positive: Vec<usize> = (0..network.n_species())
        .filter(|&i| network.species[i].in_rate_laws() && c_eq[i] > 0.0)
        .collect();
    if positive.len() > MAX_SPECIES {
        return Err(format!("relaxation analysis is limited to {MAX_SPECIES} species"));
    }
    let mut column_of = vec![usize::MAX; network.n_species()];
    for (k, &i) in positive.iter().enumerate() {
        column_of[i] = k;
    }
    let steps = active_steps(network, c_eq, &column_of)?;
    let n = positive.len();
    let mut echelon = Echelon::new(n);
    for (_, _, column) in &steps {
        echelon.insert(column, 0.0);
    }
    let rank = echelon.rank();
    if rank == 0 {
        return Ok(Vec::new());
    }
    let mut b = faer::Mat::<f64>::zeros(n, steps.len());
    for (j, (_, rate, column)) in steps.iter().enumerate() {
        for &(k, v) in column {
            b[(k, j)] = v * rate.sqrt() / c_eq[positive[k]].sqrt();
        }
    }
    // A non-finite entry (rates beyond double range) would make the decomposition fail.
    if (0..steps.len()).any(|j| b.col(j).iter().any(|x| !x.is_finite())) {
        return Err("equilibrium rates out of floating-point range; relaxation analysis skipped".into());
    }
    // The thin decomposition (faer's blocked bidiagonalisation): only min(n, steps) singular
    // vectors on each side, where the full one would also build a steps × steps factor. On one
    // thread: runs of a study already share out the cores.
    let size = n.min(steps.len());
    let (mut u, mut v) = (
        faer::Mat::<f64>::zeros(n, size),
        faer::Mat::<f64>::zeros(steps.len(), size),
    );
    let mut sigma = faer::diag::Diag::<f64>::zeros(size);
    let thin = faer::linalg::svd::ComputeSvdVectors::Thin;
    let scratch =
        faer::linalg::svd::svd_scratch::<f64>(n, steps.len(), thin, thin, faer::Par::Seq, Default::default());
    let decomposed = faer::linalg::svd::svd(
        b.as_ref(),
        sigma.as_mut(),
        Some(u.as_mut()),
        Some(v.as_mut()),
        faer::Par::Seq,
        faer::dyn_stack::MemStack::new(&mut faer::dyn_stack::MemBuffer::new(scratch)),
        Default::default(),
    );
    if decomposed.is_err() {
        return Err("singular value decomposition failed".into());
    }
    let sigma = sigma.column_vector();
    let mut order: Vec<usize> = (0..sigma.nrows()).collect();
    order.sort_by(|&x, &y| sigma[y].total_cmp(&sigma[x]));
    order.truncate(rank);
    let mut modes: Vec<Mode> = order
        .iter()
        .map(|&k| {
            let sigma = sigma[k];
            let displacement: Vec<f64> = (0..n)
                .map(|s| (u[(s, k)] * c_eq[positive[s]].sqrt()).abs())
                .collect();
            let total: f64 = displacement.iter().sum();
            let species = top_shares(displacement.iter().map(|d| d / total), |s| {
                network.species[positive[s]].name.clone()
            });
            let steps = top_shares((0..steps.len()).map(|j| v[(j, k)].powi(2)), |j| {
                steps[j].0.clone()
            });
            Mode {
                tau_seconds: 1.0 / (sigma * sigma),
                species,
                steps,
            }
        })
        .collect();
    modes.sort_by(|a, b| b.tau_seconds.total_cmp(&a.tau_seconds));
    if modes
        .first()
        .is_some_and(|m| m.tau_seconds.is_nan() || m.tau_seconds >= 1e300)
    {
        return Err(
            "a mode is too slow for floating-point range (τ beyond 1e300 s): a step is all but frozen".into(),
        );
    }
    Ok(modes)
}

/// The largest shares, up to three, dropping those under 5 %; only those kept are named.
fn top_shares(shares: impl Iterator<Item = f64>, name: impl Fn(usize) -> String) -> Vec<Share> {
    let mut all: Vec<(usize, f64)> = shares.enumerate().collect();
    all.sort_by(|a, b| b.1.total_cmp(&a.1));
    let keep = all.iter().take(3).filter(|s| s.1 >= 0.05).count().max(1);
    all.truncate(keep);
    all.into_iter()
        .map(|(k, share)| Share { name: name(k), share })
        .collect()
}
