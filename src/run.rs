//! One run of a network: build the model, integrate, analyse. No I/O here; the result is plain
//! data for the reports.

use crate::analysis::{self, Settling};
use crate::error::Error;
use crate::integrate::{self, Options, Solution};
use crate::kinetics::RateModel;
use crate::network::Network;
use crate::stoich::Stoichiometry;

/// What the user asked for.
#[derive(Debug, Clone)]
pub struct RunSettings {
    /// Report the state at this time (s) instead of at equilibrium.
    pub until: Option<f64>,
    /// Tolerances (fractions of the total change) for time to equilibrium.
    pub tolerances: Vec<f64>,
    pub rtol: f64,
    /// Absolute tolerance for species that set none in the file, mol/L.
    pub atol: f64,
    /// Force the dense (true) or sparse (false) linear algebra; None chooses by size.
    pub force_dense: Option<bool>,
}

impl Default for RunSettings {
    fn default() -> Self {
        RunSettings {
            until: None,
            tolerances: analysis::DEFAULT_TOLERANCES.to_vec(),
            rtol: integrate::DEFAULT_RTOL,
            atol: integrate::DEFAULT_ATOL,
            force_dense: None,
        }
    }
}

/// Everything a report needs about one run.
#[derive(Debug, Clone)]
pub struct RunResult {
    pub network: Network,
    pub stoichiometry: Stoichiometry,
    pub solution: Solution,
    pub settings: RunSettings,
    /// Per-species absolute tolerance used, mol/L.
    pub atol: Vec<f64>,
    /// Time of the reported state, s.
    pub final_time: f64,
    pub final_state: Vec<f64>,
    /// The integrated equilibrium composition, when equilibrium was detected.
    pub equilibrium: Option<Vec<f64>>,
    pub settling: Vec<Settling>,
    /// Largest relative drift of each conservation total.
    pub drift: Vec<f64>,
}

impl RunResult {
    pub fn species_names(&self) -> Vec<String> {
        self.network.species.iter().map(|s| s.name.clone()).collect()
    }
}

/// Integrates a network and analyses the trajectory.
pub fn run(network: &Network, settings: &RunSettings) -> Result<RunResult, Error> {
    if settings.until.is_some_and(|t| !(t > 0.0 && t.is_finite())) {
        return Err(Error::Option {
            option: "--until".into(),
            message: "must be a positive number of seconds".into(),
        });
    }
    let stoichiometry = Stoichiometry::new(network);
    let model = RateModel::new(network);
    let atol: Vec<f64> = network
        .species
        .iter()
        .map(|s| s.atol.unwrap_or(settings.atol))
        .collect();
    let options = Options {
        rtol: settings.rtol,
        atol: atol.clone(),
        until: settings.until,
        force_dense: settings.force_dense,
        ..Options::new(network.n_species())
    };
    let solution = integrate::integrate(
        &model,
        &stoichiometry.conservation,
        &network.initial_state(),
        &options,
    )?;
    let trajectory = &solution.trajectory;
    let final_time = match settings.until {
        Some(t) if trajectory.end_time() >= t => t,
        _ => trajectory.end_time(),
    };
    let final_state = trajectory.state_at(final_time);
    let equilibrium = solution.equilibrium_at.map(|_| trajectory.last_state().to_vec());
    let names: Vec<String> = network.species.iter().map(|s| s.name.clone()).collect();
    let settling = match &equilibrium {
        Some(eq) => {
            let noise: Vec<f64> = (0..eq.len())
                .map(|i| atol[i] + settings.rtol * eq[i].abs())
                .collect();
            analysis::time_to_equilibrium(trajectory, eq, &noise, &settings.tolerances, &names)
        }
        None => settings
            .tolerances
            .iter()
            .map(|&tolerance| Settling {
                tolerance,
                seconds: None,
                limiting_species: None,
            })
            .collect(),
    };
    let drift = analysis::conservation_drift(trajectory, &stoichiometry.conservation);
    Ok(RunResult {
        network: network.clone(),
        stoichiometry,
        solution,
        settings: settings.clone(),
        atol,
        final_time,
        final_state,
        equilibrium,
        settling,
        drift,
    })
}
