//! Many members of one study (sweep points, uncertainty samples, sensitivity probes), each one
//! network run in-process to equilibrium and boiled down to an [`Outcome`], on every core.
//!
//! A member depends only on its index, so the results are the same for any number of threads
//! and any sharding: [`evaluate`] hands indices to threads dynamically and puts the outcomes
//! back in index order; [`shard`] picks the i-th share of the indices.

use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

use crate::network::Network;
use crate::run::{self, RunSettings};

/// What a study keeps of one member's run.
#[derive(Debug, Clone, PartialEq)]
pub struct Outcome {
    /// Time to equilibrium at each of the settings' tolerances, s (None: not reached).
    pub times: Vec<Option<f64>>,
    /// The solved equilibrium composition, mol/L (None when there is none).
    pub equilibrium: Option<Vec<f64>>,
    /// Per species, the fraction of its initial amount used up at equilibrium, 1 − c_eq/c0
    /// (None for species that start at zero or without an equilibrium).
    pub conversion: Vec<Option<f64>>,
    /// The slowest relaxation time at the solved equilibrium, s.
    pub slowest_tau: Option<f64>,
    /// Whether the integrated and solved equilibria agree (None: only one route answered).
    pub routes_agree: Option<bool>,
}

impl Outcome {
    /// Runs one member to equilibrium and keeps what a study needs; the message says why a
    /// member failed.
    pub fn of(network: &Network, settings: &RunSettings) -> Result<Outcome, String> {
        let result = run::run(network.clone(), settings).map_err(|e| e.to_string())?;
        let times = result.settling.iter().map(|s| s.seconds).collect();
        let equilibrium = result.solved.as_ref().ok().map(|e| e.concentrations.clone());
        let conversion = network
            .initial_state()
            .iter()
            .enumerate()
            .map(|(i, &c0)| {
                let c_eq = equilibrium.as_ref()?[i];
                (c0 > 0.0).then(|| 1.0 - c_eq / c0)
            })
            .collect();
        Ok(Outcome {
            times,
            equilibrium,
            conversion,
            slowest_tau: result
                .relaxation
                .as_ref()
                .ok()
                .and_then(|modes| modes.first())
                .map(|m| m.tau_seconds),
            routes_agree: result.disagreement.map(|_| !result.disagrees),
        })
    }
}

/// The indices of share `part` (1-based) of `n_parts` among `total` members: every n-th index,
/// so each share has a fair mix of the study's points.
pub fn shard(total: usize, part: usize, n_parts: usize) -> Vec<usize> {
    (0..total).filter(|i| i % n_parts == part - 1).collect()
}

/// `member(i)` for every index on `threads` threads, in the order of `indices`; `progress` is
/// told how many are done after each one.
pub fn evaluate<T, F>(
    indices: &[usize],
    threads: usize,
    member: F,
    progress: &(dyn Fn(usize) + Sync),
) -> Vec<T>
where
    T: Send,
    F: Fn(usize) -> T + Sync,
{
    let next = AtomicUsize::new(0);
    let done = AtomicUsize::new(0);
    let results: Mutex<Vec<(usize, T)>> = Mutex::new(Vec::with_capacity(indices.len()));
    std::thread::scope(|scope| {
        for _ in 0..threads.clamp(1, indices.len().max(1)) {
            scope.spawn(|| loop {
                let position = next.fetch_add(1, Ordering::Relaxed);
                let Some(&index) = indices.get(position) else {
                    break;
                };
                let value = member(index);
                results
                    .lock()
                    .unwrap_or_else(|p| p.into_inner())
                    .push((position, value));
                progress(done.fetch_add(1, Ordering::Relaxed) + 1);
            });
        }
    });
    let mut results = results.into_inner().unwrap_or_else(|p| p.into_inner());
    results.sort_by_key(|(position, _)| *position);
    results.into_iter().map(|(_, value)| value).collect()
}

/// The threads to use when the user does not say: every core the system offers.
pub fn default_threads() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

/// A reproducible stream of standard normal numbers for one member: SplitMix64 (Steele, Lea &
/// Flood, "Fast splittable pseudorandom number generators", OOPSLA 2014) seeded from the study's
/// seed and the member's index, and the Box-Muller transform (Box & Muller, Ann. Math. Statist.
/// 29, 1958).
#[derive(Debug, Clone)]
pub struct Normals {
    state: u64,
}

impl Normals {
    pub fn for_member(seed: u64, index: usize) -> Normals {
        let mut stream = Normals {
            state: seed ^ (index as u64).wrapping_mul(0xD1B5_4A32_D192_ED03),
        };
        stream.next_u64(); // decorrelate neighbouring indices
        Normals {
            state: stream.next_u64(),
        }
    }

    fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform on (0, 1), never 0.
    fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    /// One standard normal number (the cosine half of Box-Muller; the sine half is dropped so
    /// the k-th number of a stream never depends on how many were drawn in pairs).
    pub fn next(&mut self) -> f64 {
        let (u, v) = (self.uniform(), self.uniform());
        (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * v).cos()
    }
}

/// The q-quantile (0..=1) of sorted finite values, linear between order statistics (the
/// "type 7" definition, Hyndman & Fan, Am. Statist. 50, 1996); None for no values.
pub fn quantile(sorted: &[f64], q: f64) -> Option<f64> {
    let last = sorted.len().checked_sub(1)?;
    let position = q.clamp(0.0, 1.0) * last as f64;
    let below = position.floor() as usize;
    let above = (below + 1).min(last);
    let w = position - below as f64;
    Some(sorted[below] * (1.0 - w) + sorted[above] * w)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn outcomes_come_back_in_index_order_for_any_thread_count() {
        let indices: Vec<usize> = (0..50).collect();
        let square = |i: usize| i * i;
        let one = evaluate(&indices, 1, square, &|_| {});
        let four = evaluate(&indices, 4, square, &|_| {});
        assert_eq!(one, four);
        assert_eq!(one[7], 49);
    }

    #[test]
    fn shards_partition_the_members() {
        let mut all: Vec<usize> = (1..=3).flat_map(|part| shard(10, part, 3)).collect();
        all.sort();
        assert_eq!(all, (0..10).collect::<Vec<_>>());
    }

    #[test]
    fn normals_have_unit_variance_and_are_reproducible() {
        // 20,000 draws: the sample mean has standard error 0.007 and the variance 0.01, so
        // 0.03 is over four standard errors.
        let mut stream = Normals::for_member(7, 3);
        let draws: Vec<f64> = (0..20_000).map(|_| stream.next()).collect();
        let mean = draws.iter().sum::<f64>() / draws.len() as f64;
        let var = draws.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / draws.len() as f64;
        assert!(mean.abs() < 0.03 && (var - 1.0).abs() < 0.03, "{mean} {var}");
        assert_eq!(Normals::for_member(7, 3).next(), draws[0]);
        assert_ne!(Normals::for_member(7, 4).next(), draws[0]);
    }

    #[test]
    fn quantiles_interpolate_between_order_statistics() {
        let v = [1.0, 2.0, 3.0, 4.0, 5.0];
        assert_eq!(quantile(&v, 0.5), Some(3.0));
        assert_eq!(quantile(&v, 0.25), Some(2.0));
        assert_eq!(quantile(&v, 0.1), Some(1.4));
        assert_eq!(quantile(&[], 0.5), None);
    }
}
