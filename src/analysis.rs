//! What the trajectory means: time to equilibrium at each tolerance and conservation drift.
//!
//! Time to equilibrium at tolerance `tol` is the earliest time after which every species stays
//! within `tol` of its total change from its equilibrium value:
//! |c_i(t) − c_i,eq| ≤ tol · s_i for all later t, where s_i = |c_i,eq − c_i(0)|. A species whose
//! total change is within noise (below 100 integration tolerances) but which moves on the way
//! (an intermediate that returns to its start) is judged against its largest excursion instead;
//! a species that never moves beyond noise is left out.

use serde::Serialize;

use crate::integrate::Trajectory;
use crate::stoich::ConservationLaw;

/// Default tolerances for time to equilibrium: 10 %, 1 % and 0.1 % of the total change.
pub const DEFAULT_TOLERANCES: [f64; 3] = [0.1, 0.01, 0.001];

/// Multiple of the integration tolerance below which a change is noise.
const NOISE_MULTIPLE: f64 = 100.0;

/// Time to equilibrium at one tolerance.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Settling {
    pub tolerance: f64,
    /// Seconds, or None when not reached within the integrated span.
    pub seconds: Option<f64>,
    /// The species that arrives last, by name.
    pub limiting_species: Option<String>,
}

/// The size of each species' change that tolerances are fractions of (see the module comment):
/// the total change, or the largest excursion when the total change is noise, or None for a
/// species that never moves beyond noise.
pub fn change_scales(trajectory: &Trajectory, equilibrium: &[f64], noise: &[f64]) -> Vec<Option<f64>> {
    (0..equilibrium.len())
        .map(|i| {
            let floor = NOISE_MULTIPLE * noise[i];
            let total = (equilibrium[i] - trajectory.states[0][i]).abs();
            let excursion = trajectory
                .states
                .iter()
                .fold(0.0_f64, |m, s| m.max((s[i] - equilibrium[i]).abs()));
            if total > floor {
                Some(total)
            } else if excursion > floor {
                Some(excursion)
            } else {
                None
            }
        })
        .collect()
}

/// For each tolerance, the earliest time after which every species stays within the band.
/// `equilibrium` is the reference composition; `noise` the integration tolerance per species.
/// Only the species in `judged` count when it is given (a trace side product need not set the
/// hold time).
pub fn time_to_equilibrium(
    trajectory: &Trajectory,
    equilibrium: &[f64],
    noise: &[f64],
    tolerances: &[f64],
    names: &[String],
    judged: Option<&[usize]>,
) -> Vec<Settling> {
    let mut scales = change_scales(trajectory, equilibrium, noise);
    if let Some(judged) = judged {
        for (i, scale) in scales.iter_mut().enumerate() {
            if !judged.contains(&i) {
                *scale = None;
            }
        }
    }
    tolerances
        .iter()
        .map(|&tol| {
            // (time, species) of the species that settles last, or of the first one that never does.
            let mut last: Option<(f64, usize)> = None;
            let mut reached = true;
            for (i, scale) in scales.iter().enumerate() {
                let Some(scale) = scale else { continue };
                match settle_time(trajectory, i, equilibrium[i], tol * scale) {
                    // Species that settle together (tied by a conservation law) name the first.
                    Some(t) if last.is_none_or(|(worst, _)| t > worst * (1.0 + 1e-9)) => last = Some((t, i)),
                    Some(_) => {}
                    None => {
                        reached = false;
                        last = Some((f64::NAN, i));
                        break;
                    }
                }
            }
            Settling {
                tolerance: tol,
                seconds: if reached {
                    Some(last.map_or(0.0, |(t, _)| t))
                } else {
                    None
                },
                limiting_species: last.and_then(|(_, i)| names.get(i).cloned()),
            }
        })
        .collect()
}

/// Earliest time after which species i stays within `band` of `target`, or None if it is
/// still outside at the end of the trajectory.
fn settle_time(trajectory: &Trajectory, i: usize, target: f64, band: f64) -> Option<f64> {
    let outside = |k: usize| (trajectory.states[k][i] - target).abs() > band;
    let last = trajectory.states.len() - 1;
    if outside(last) {
        return None;
    }
    let Some(k) = (0..last).rev().find(|&k| outside(k)) else {
        return Some(0.0);
    };
    // The crossing lies in (t_k, t_{k+1}]: bisect on that interval's Hermite interpolant.
    let (mut lo, mut hi) = (trajectory.times[k], trajectory.times[k + 1]);
    let piece = trajectory.piece(k, i);
    // Down to 1e-13 of the time: far below the nine digits any output shows.
    while hi - lo > 1e-13 * hi {
        let mid = 0.5 * (lo + hi);
        if (piece.at(mid) - target).abs() > band {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Some(hi)
}

/// Largest relative drift of each conservation total along the trajectory, judged at each time
/// against the species in the law at that time: |lᵀc(t) − lᵀc(0)| / Σ|l_i c_i(t)|. A law whose
/// species are all traces is measured against those traces, not against the largest total.
pub fn conservation_drift(trajectory: &Trajectory, laws: &[ConservationLaw]) -> Vec<f64> {
    laws.iter()
        .map(|law| {
            let start = law.total(&trajectory.states[0]);
            trajectory.states.iter().fold(0.0_f64, |worst, s| {
                let size = law.magnitude(s).max(start.abs());
                if size == 0.0 {
                    worst
                } else {
                    worst.max((law.total(s) - start).abs() / size)
                }
            })
        })
        .collect()
}
