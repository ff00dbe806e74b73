//! Uncertainty ensembles: members of a network whose constants and initial amounts are drawn
//! from the spreads the file gives, each thermodynamically consistent.
//!
//! A factor f on a constant is log-normal with σ(ln k) = ln f / 1.96, so 95 % of draws fall
//! between k/f and k·f; a standard deviation σ_G of a step's ΔG° makes ln K normal with
//! σ = σ_G/(RT). Every step's change of ln K (from its K spread, or from its kf and kr draws when
//! kr is given) is projected onto the changes that keep detailed balance round every cycle (the
//! row space of the stoichiometric matrix: the least change that closes each cycle), and kr
//! follows as kf/K, so no member violates detailed balance. Initial amounts with a relative
//! uncertainty are normal, cut at zero.

use nalgebra::{DMatrix, DVector};

use crate::constants::GAS_CONSTANT;
use crate::ensemble::Normals;
use crate::network::{Constant, Network, UncertainValue};

/// The two-sided 95 % point of the standard normal distribution.
const Z95: f64 = 1.959_963_984_540_054;

/// Draws members of one network.
#[derive(Debug, Clone)]
pub struct Sampler {
    network: Network,
    /// Projection onto the detailed-balance-preserving changes of ln K (reversible steps).
    projection: DMatrix<f64>,
    /// The reversible steps, in the projection's order.
    reversible: Vec<usize>,
}

impl Sampler {
    /// A sampler, or a message when the network gives no uncertainty at all.
    pub fn new(network: &Network) -> Result<Sampler, String> {
        let any = network.reactions.iter().any(|r| {
            let u = &r.uncertainty;
            u.kf.is_some() || u.kr.is_some() || u.k.is_some()
        }) || network.species.iter().any(|s| s.initial_uncertainty.is_some());
        if !any {
            return Err(
                "the network gives no uncertainty: add `uncertainty = { kf = 2.0 }` to a step or `uncertainty = 0.05` to a species"
                    .into(),
            );
        }
        let reversible: Vec<usize> = (0..network.reactions.len())
            .filter(|&j| network.reactions[j].runs_both_ways())
            .collect();
        Ok(Sampler {
            projection: detailed_balance_projection(network, &reversible),
            network: network.clone(),
            reversible,
        })
    }

    /// Member `index` of the ensemble drawn with `seed`: the same network for the same pair,
    /// whatever else is drawn.
    pub fn member(&self, seed: u64, index: usize) -> Result<Network, String> {
        let mut normals = Normals::for_member(seed, index);
        let rt = GAS_CONSTANT * self.network.temperature;
        let sigma = |spread: Option<UncertainValue>| match spread {
            Some(UncertainValue::Factor(f)) => f.ln() / Z95,
            Some(UncertainValue::GibbsSd(sd)) => sd / rt,
            None => 0.0,
        };
        // Three draws per step and one per species, always, so each draw keeps its meaning.
        let mut ln_kf = Vec::new();
        let mut ln_k = Vec::new();
        for r in &self.network.reactions {
            let (zf, zr, zk) = (normals.next(), normals.next(), normals.next());
            let u = &r.uncertainty;
            let f = sigma(u.kf) * zf;
            ln_kf.push(f);
            ln_k.push(match r.kr_spec {
                Some(_) => f - sigma(u.kr) * zr,
                None => sigma(u.k) * zk,
            });
        }
        let amounts: Vec<(usize, f64)> = self
            .network
            .species
            .iter()
            .enumerate()
            .map(|(i, s)| {
                let z = normals.next();
                (
                    i,
                    (s.initial * (1.0 + s.initial_uncertainty.unwrap_or(0.0) * z)).max(0.0),
                )
            })
            .filter(|(i, _)| self.network.species[*i].initial_uncertainty.is_some())
            .collect();
        let wanted = DVector::from_iterator(self.reversible.len(), self.reversible.iter().map(|&j| ln_k[j]));
        let closed = &self.projection * wanted;
        for (slot, &j) in self.reversible.iter().enumerate() {
            ln_k[j] = closed[slot];
        }
        let mut factors = Vec::new();
        for (j, r) in self.network.reactions.iter().enumerate() {
            factors.push((j, Constant::Kf, ln_kf[j].exp()));
            match (&r.kr_spec, &r.k_spec) {
                // kr = kf/K: the reverse constant moves with kf and against K.
                (Some(_), _) => factors.push((j, Constant::Kr, (ln_kf[j] - ln_k[j]).exp())),
                (None, Some(_)) => factors.push((j, Constant::K, ln_k[j].exp())),
                (None, None) => {}
            }
        }
        let network = self.network.with_factors(&factors).map_err(|e| e.to_string())?;
        match amounts.is_empty() {
            true => Ok(network),
            false => network.with_initials(&amounts).map_err(|e| e.to_string()),
        }
    }
}

/// P = V_r V_rᵀ from the singular value decomposition N = U Σ Vᵀ of the net stoichiometry of
/// the reversible steps over the species in rate laws: the orthogonal projection onto the row
/// space of N, which is exactly the set of ln K changes that keep every cycle closed (a change
/// of ln K along a cycle vector, N c = 0, would break detailed balance).
fn detailed_balance_projection(network: &Network, steps: &[usize]) -> DMatrix<f64> {
    let species: Vec<usize> = (0..network.n_species())
        .filter(|&i| network.species[i].in_rate_laws())
        .collect();
    let mut n = DMatrix::zeros(species.len().max(1), steps.len());
    for (col, &j) in steps.iter().enumerate() {
        let r = &network.reactions[j];
        for (i, v) in crate::network::net_change(&r.reactants, &r.products) {
            if let Some(row) = species.iter().position(|&s| s == i) {
                n[(row, col)] = v;
            }
        }
    }
    if steps.is_empty() {
        return DMatrix::zeros(0, 0);
    }
    let svd = n.svd(false, true);
    let v_t = svd.v_t.expect("requested");
    let largest = svd.singular_values.max();
    let mut p = DMatrix::zeros(steps.len(), steps.len());
    for (k, &s) in svd.singular_values.iter().enumerate() {
        if s > 1e-10 * largest.max(1.0) {
            let v = v_t.row(k).transpose();
            p += &v * v.transpose();
        }
    }
    p
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cycle(text_uncertainty: &str) -> Network {
        let text = format!(
            "[species]\nA = 1.0\nB = 0.0\nC = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 1.0\nK = 2.0\n{text_uncertainty}\n\n[[reaction]]\nscheme = \"B <=> C\"\nkf = 1.0\nK = 3.0\n\n[[reaction]]\nscheme = \"A <=> C\"\nkf = 1.0\nK = 6.0\n"
        );
        Network::from_text(&text, std::path::Path::new("cycle.toml")).unwrap()
    }

    #[test]
    fn sampled_cycles_keep_detailed_balance() {
        // K1·K2 = K3 (Wegscheider's condition for the cycle A → B → C → A, standard result).
        let sampler = Sampler::new(&cycle("uncertainty = { K = \"3 kJ/mol\", kf = 3.0 }")).unwrap();
        for index in 0..20 {
            let m = sampler.member(11, index).unwrap();
            let k: Vec<f64> = m.reactions.iter().map(|r| r.kf / r.kr).collect();
            assert!(
                ((k[0] * k[1]).ln() - k[2].ln()).abs() < 1e-9,
                "member {index}: {k:?}"
            );
            assert!(k[0] != 2.0, "K of step 1 varies");
        }
    }

    #[test]
    fn members_are_reproducible_and_distinct() {
        let sampler = Sampler::new(&cycle("uncertainty = { kf = 2.0 }")).unwrap();
        assert_eq!(sampler.member(5, 3), sampler.member(5, 3));
        assert_ne!(sampler.member(5, 3), sampler.member(5, 4));
        assert!(Sampler::new(&cycle("")).is_err());
    }
}
