//! The report of `kinequil equilibrium`: composition, extents of reaction and conversions.

use std::fmt::Write;

use serde::Serialize;

use crate::equilibrium::Equilibrium;
use crate::network::Network;

use super::{with_digits, CAUTIONS};

#[derive(Debug, Serialize)]
pub struct EquilibriumTable {
    pub title: String,
    pub input_file: String,
    pub temperature_k: f64,
    pub species: Vec<SpeciesRow>,
    pub reactions: Vec<ReactionRow>,
    pub newton_iterations: usize,
    pub max_ln_k_residual: f64,
    pub max_total_relative_residual: f64,
    pub cautions: Vec<String>,
}

#[derive(Debug, Serialize)]
pub struct SpeciesRow {
    pub name: String,
    pub initial: f64,
    pub equilibrium: f64,
    /// (initial − equilibrium) / initial, for starting species that are consumed.
    pub conversion: Option<f64>,
}

#[derive(Debug, Serialize)]
pub struct ReactionRow {
    pub equation: String,
    /// Extent of reaction, mol/L (None when not determined).
    pub extent: Option<f64>,
}

impl EquilibriumTable {
    pub fn new(
        network: &Network,
        c0: &[f64],
        solved: &Equilibrium,
        extents: Option<&[f64]>,
    ) -> EquilibriumTable {
        EquilibriumTable {
            title: network.title.clone(),
            input_file: network.source.display().to_string(),
            temperature_k: network.temperature,
            species: network
                .species
                .iter()
                .enumerate()
                .map(|(i, s)| SpeciesRow {
                    name: s.name.clone(),
                    initial: c0[i],
                    equilibrium: solved.concentrations[i],
                    conversion: (c0[i] > solved.concentrations[i])
                        .then(|| (c0[i] - solved.concentrations[i]) / c0[i]),
                })
                .collect(),
            reactions: network
                .reactions
                .iter()
                .enumerate()
                .map(|(j, r)| ReactionRow {
                    equation: r.equation.clone(),
                    extent: extents.map(|x| x[j]),
                })
                .collect(),
            newton_iterations: solved.iterations,
            max_ln_k_residual: solved.max_k_residual,
            max_total_relative_residual: solved.max_total_residual,
            cautions: CAUTIONS.iter().map(|c| c.to_string()).collect(),
        }
    }

    pub fn json(&self) -> String {
        serde_json::to_string_pretty(self).unwrap_or_default() + "\n"
    }

    pub fn text(&self) -> String {
        let mut out = String::new();
        let _ = writeln!(
            out,
            "kinequil {}: equilibrium of {}",
            env!("CARGO_PKG_VERSION"),
            self.title
        );
        let _ = writeln!(
            out,
            "  {} at {:.2} K, solved directly (no integration)",
            self.input_file, self.temperature_k
        );
        let _ = writeln!(out);
        let width = self
            .species
            .iter()
            .map(|s| s.name.len())
            .max()
            .unwrap_or(7)
            .max(7);
        let _ = writeln!(
            out,
            "  {:<width$}  {:>14}  {:>14}  {:>11}",
            "species", "initial mol/L", "equil. mol/L", "conversion"
        );
        for s in &self.species {
            let conversion = s
                .conversion
                .map_or("-".to_string(), |c| format!("{:.2}%", 100.0 * c));
            let _ = writeln!(
                out,
                "  {:<width$}  {:>14}  {:>14}  {:>11}",
                s.name,
                with_digits(s.initial, 7),
                with_digits(s.equilibrium, 7),
                conversion
            );
        }
        let _ = writeln!(out);
        let _ = writeln!(out, "  extent of reaction, mol/L:");
        let width = self.reactions.iter().map(|r| r.equation.len()).max().unwrap_or(8);
        for r in &self.reactions {
            let extent = r.extent.map_or("-".to_string(), |x| with_digits(x, 7));
            let _ = writeln!(out, "    {:<width$}  {:>14}", r.equation, extent);
        }
        let _ = writeln!(
            out,
            "\n  {} Newton iterations; largest |ln Q - ln K| = {:.1e}; totals held to {:.1e} (relative)",
            self.newton_iterations, self.max_ln_k_residual, self.max_total_relative_residual
        );
        let _ = writeln!(out, "\n  Cautions:");
        for c in &self.cautions {
            let _ = writeln!(out, "    - {c}");
        }
        out
    }
}
