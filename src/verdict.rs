//! The practitioner's reading of a run: how far the batch is from equilibrium at the hold time,
//! the conversion of the limiting reagent with the yields of the main reaction, and species
//! that pass through a maximum above both where they start and where they end (an overshooting
//! product, an intermediate).

use serde::Serialize;

use crate::integrate::Trajectory;
use crate::network::Network;

/// How far the batch is at the hold time (`--until`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct HoldVerdict {
    /// The hold time, s.
    pub time: f64,
    /// The largest share of its total change any judged species still has to make.
    pub remaining: f64,
    /// The species furthest from equilibrium.
    pub furthest: String,
}

/// Conversion of the limiting reagent of the main reaction (the first in the file) and the
/// yields of that reaction's products, at the reported time and at equilibrium.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Conversion {
    pub reagent: String,
    /// 1 − c/c0 at the reported time.
    pub at_final: f64,
    pub at_equilibrium: Option<f64>,
    pub yields: Vec<Yield>,
}

/// A product's yield: the amount formed over the amount the limiting reagent could give.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Yield {
    pub product: String,
    pub at_final: f64,
    pub at_equilibrium: Option<f64>,
}

/// A species' maximum above both its start and its end value.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Peak {
    pub species: String,
    /// The maximum concentration, mol/L, and when, s.
    pub value: f64,
    pub time: f64,
    /// Where the species ends: its equilibrium when known, else its last integrated value.
    pub end_value: f64,
}

/// A peak is reported when it stands above both ends by more than this share of itself: smaller
/// bumps are not worth a line (common practice, our choice).
const PEAK_SHARE: f64 = 0.01;

/// The limiting reagent of the main reaction (the first in the file): among its reactants that
/// are present at the start, the one with the least initial amount per stoichiometric
/// coefficient. Returns (species, coefficient).
pub fn limiting_reagent(network: &Network) -> Option<(usize, f64)> {
    let c0 = network.initial_state();
    let main = network.reactions.first()?;
    main.reactants
        .iter()
        .copied()
        .filter(|&(i, nu)| c0[i] > 0.0 && nu > 0.0)
        .min_by(|a, b| (c0[a.0] / a.1).total_cmp(&(c0[b.0] / b.1)))
}

/// The hold-time verdict from the share of each species' change completed (`progress`, None
/// for species that hardly change), over the species `judged` (all when None).
pub fn hold_verdict(
    time: f64,
    progress: &[Option<f64>],
    judged: Option<&[usize]>,
    names: &[String],
) -> Option<HoldVerdict> {
    let remaining = |i: usize| progress[i].map(|p| (1.0 - p).abs());
    let candidates: Vec<usize> = match judged {
        Some(list) => list.to_vec(),
        None => (0..progress.len()).collect(),
    };
    let (furthest, remaining) = candidates
        .into_iter()
        .filter_map(|i| remaining(i).map(|r| (i, r)))
        .max_by(|a, b| a.1.total_cmp(&b.1))?;
    Some(HoldVerdict {
        time,
        remaining,
        furthest: names[furthest].clone(),
    })
}

/// Conversion and yields at the reported state and at the equilibrium `reference`.
pub fn conversion(network: &Network, last: &[f64], reference: Option<&[f64]>) -> Option<Conversion> {
    let (limiting, nu_limiting) = limiting_reagent(network)?;
    let c0 = network.initial_state();
    let converted = |c: &[f64]| 1.0 - c[limiting] / c0[limiting];
    let theoretical = c0[limiting] / nu_limiting;
    let main = &network.reactions[0];
    let yields = main
        .products
        .iter()
        .filter(|&&(_, nu)| nu > 0.0)
        .map(|&(p, nu)| {
            let formed = |c: &[f64]| (c[p] - c0[p]) / (nu * theoretical);
            Yield {
                product: network.species[p].name.clone(),
                at_final: formed(last),
                at_equilibrium: reference.map(formed),
            }
        })
        .collect();
    Some(Conversion {
        reagent: network.species[limiting].name.clone(),
        at_final: converted(last),
        at_equilibrium: reference.map(converted),
        yields,
    })
}

/// Species whose maximum over the trajectory stands above both their start and their end by
/// more than [`PEAK_SHARE`] of the maximum and by more than 100 integration tolerances.
pub fn peaks(trajectory: &Trajectory, end: &[f64], atol: &[f64], rtol: f64, names: &[String]) -> Vec<Peak> {
    let start = &trajectory.states[0];
    (0..start.len())
        .filter_map(|i| {
            let (k, value) = trajectory
                .states
                .iter()
                .map(|s| s[i])
                .enumerate()
                .max_by(|a, b| a.1.total_cmp(&b.1))?;
            let above = value - start[i].max(end[i]);
            let noise = atol[i] + rtol * value.abs();
            if !(above > PEAK_SHARE * value && above > 100.0 * noise) {
                return None;
            }
            let (time, value) = refine_maximum(trajectory, i, k, value);
            Some(Peak {
                species: names[i].clone(),
                value,
                time,
                end_value: end[i],
            })
        })
        .collect()
}

/// The maximum of species i's interpolant over the steps on either side of step k (where the
/// stored states peak), sampled finely: the stored steps of a stiff integrator can be far
/// apart just where a curve is flat.
fn refine_maximum(trajectory: &Trajectory, i: usize, k: usize, at_k: f64) -> (f64, f64) {
    const SAMPLES: usize = 64;
    let mut best = (trajectory.times[k], at_k);
    let last = trajectory.times.len() - 1;
    for interval in [k.checked_sub(1), (k < last).then_some(k)].into_iter().flatten() {
        let (t0, t1) = (trajectory.times[interval], trajectory.times[interval + 1]);
        let piece = trajectory.piece(interval, i);
        for s in 1..SAMPLES {
            let t = t0 + (t1 - t0) * s as f64 / SAMPLES as f64;
            let c = piece.at(t);
            if c > best.1 {
                best = (t, c);
            }
        }
    }
    best
}

/// A step's net rate at the end of a run that settled into a steady state rather than an
/// equilibrium (a cycle whose constants break detailed balance keeps a flux turning).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct NetFlux {
    pub step: usize,
    pub scheme: String,
    /// Forward minus reverse rate, mol/(L s).
    pub net_rate: f64,
}

/// The reversible steps still running net at the steady state `state`, largest first: those
/// whose net rate exceeds 1e-6 of their forward rate (below that it is the integration's noise,
/// common practice). Empty at an equilibrium.
pub fn net_fluxes(network: &Network, state: &[f64]) -> Vec<NetFlux> {
    let mut fluxes: Vec<NetFlux> = network
        .reactions
        .iter()
        .enumerate()
        .filter(|(_, r)| r.reversible)
        .filter_map(|(j, r)| {
            let (forward, reverse) = r.rates(state);
            let net = forward - reverse;
            (net.abs() > 1e-6 * forward.max(reverse)).then(|| NetFlux {
                step: j + 1,
                scheme: r.equation.clone(),
                net_rate: net,
            })
        })
        .collect();
    fluxes.sort_by(|a, b| b.net_rate.abs().total_cmp(&a.net_rate.abs()));
    fluxes
}
