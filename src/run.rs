//! One run of a network: build the model, integrate, analyse. No I/O here; the result is plain
//! data for the reports.

use crate::analysis::{self, Settling};
use crate::audit::{self, Audit};
use crate::equilibrium::{self, Equilibrium, NoEquilibrium};
use crate::error::Error;
use crate::integrate::{self, Method, Options, Solution};
use crate::kinetics::RateModel;
use crate::network::Network;
use crate::relaxation::{self, Mode};
use crate::stoich::Stoichiometry;
use crate::units::{ConcentrationUnit, TimeUnit};
use crate::verdict::{self, Conversion, HoldVerdict, NetFlux, Peak};

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
    /// The integration method (`Auto` chooses by size).
    pub method: Method,
    /// Units of time and concentration in tables and charts.
    pub units: OutputUnits,
    /// Extra output times for `table_at_times.csv`, s (empty for none).
    pub output_times: Vec<f64>,
    /// Also write `table_at_times.csv` rows every this many seconds up to the final time.
    pub output_every: Option<f64>,
    /// Wall-clock budget for the integration, s (None: no limit).
    pub max_seconds: Option<f64>,
    /// Species that judge time to equilibrium and the hold-time verdict (None: every species).
    pub settle_on: Option<Vec<usize>>,
    /// Threads the linear algebra of a large network may use (studies run members side by
    /// side instead, one thread each).
    pub threads: usize,
}

/// Units of time and concentration for tables and charts (the JSON summary stays in s and mol/L).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OutputUnits {
    pub time: TimeUnit,
    pub concentration: ConcentrationUnit,
}

impl Default for OutputUnits {
    fn default() -> Self {
        OutputUnits {
            time: TimeUnit::S,
            concentration: ConcentrationUnit::MolPerL,
        }
    }
}

impl Default for RunSettings {
    fn default() -> Self {
        RunSettings {
            until: None,
            tolerances: analysis::DEFAULT_TOLERANCES.to_vec(),
            rtol: integrate::DEFAULT_RTOL,
            atol: integrate::DEFAULT_ATOL,
            force_dense: None,
            method: Method::Auto,
            units: OutputUnits::default(),
            output_times: Vec::new(),
            output_every: None,
            max_seconds: None,
            settle_on: None,
            threads: 1,
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
    /// The equilibrium solved directly, independent of the integration.
    pub solved: Result<Equilibrium, NoEquilibrium>,
    /// Largest relative difference between the integrated equilibrium and the solved one, over
    /// species above 1e-9 of the largest concentration.
    pub disagreement: Option<f64>,
    /// True when the two routes differ by more than the tolerances in force allow.
    pub disagrees: bool,
    /// Relaxation modes at the solved equilibrium, slowest first.
    pub relaxation: Result<Vec<Mode>, String>,
    /// Per species, the fraction of its total change completed at `final_time` (None where the
    /// species hardly changes or no equilibrium is known).
    pub progress: Vec<Option<f64>>,
    /// The consistency audit of the rate constants (default tolerance).
    pub audit: Audit,
    /// How far from equilibrium at the hold time (`until`), when one was given and reached.
    pub verdict: Option<HoldVerdict>,
    /// Conversion of the main reaction's limiting reagent and its yields.
    pub conversion: Option<Conversion>,
    /// Species passing through a maximum above both their start and their end.
    pub peaks: Vec<Peak>,
    /// Net step rates at a steady state that is not an equilibrium (empty otherwise).
    pub net_fluxes: Vec<NetFlux>,
}

impl RunResult {
    pub fn species_names(&self) -> Vec<String> {
        self.network.species.iter().map(|s| s.name.clone()).collect()
    }

    /// Partial pressures of the gases (bar) and their total, in a closed rigid vessel:
    /// p = c R T with c in mol/m³. None when the network has no gas.
    pub fn pressures_bar(&self, c: &[f64]) -> Option<(Vec<(String, f64)>, f64)> {
        if !self.network.has_gas() {
            return None;
        }
        let factor = 1000.0 * crate::constants::GAS_CONSTANT * self.network.temperature / 1e5;
        let partial: Vec<(String, f64)> = self
            .network
            .species
            .iter()
            .zip(c)
            .filter(|(s, _)| s.phase == crate::network::Phase::Gas)
            .map(|(s, c)| (s.name.clone(), c * factor))
            .collect();
        let total = partial.iter().map(|p| p.1).sum();
        Some((partial, total))
    }
}

/// Integrates a network and analyses the trajectory. The result keeps the network (taken, not
/// copied: a network of thousands of steps is megabytes).
pub fn run(owned: Network, settings: &RunSettings) -> Result<RunResult, Error> {
    let network = &owned;
    if settings.until.is_some_and(|t| !(t > 0.0 && t.is_finite())) {
        return Err(Error::Setting {
            setting: "until",
            message: "must be a positive number of seconds".into(),
        });
    }
    let model = RateModel::new(network);
    let atol: Vec<f64> = network
        .species
        .iter()
        .map(|s| s.atol.unwrap_or(settings.atol))
        .collect();
    // The audit needs the network alone, so it runs beside the equilibrium solve.
    let (audit, (stoichiometry, solved, relaxation)) = side_by_side(
        settings.threads,
        || audit::audit(network, audit::DEFAULT_TOL_KJ, audit::Adjust::Kr),
        || solve_first(network),
    );
    let options = integration_options(network, settings, &atol, &solved, &relaxation);
    let solution = integrate::integrate(
        &model,
        &stoichiometry.local_conservation,
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
    let (disagreement, disagrees) = match (&equilibrium, &solved) {
        (Some(integrated), Ok(exact)) => compare(integrated, &exact.concentrations, &atol, settings.rtol),
        _ => (None, false),
    };
    let settle_reference = settle_reference(equilibrium.as_ref(), &solved, disagrees);
    let reference = solved
        .as_ref()
        .ok()
        .map(|e| e.concentrations.as_slice())
        .or(equilibrium.as_deref());
    let end = reference.unwrap_or(trajectory.last_state());
    // Two passes over the trajectory that need nothing from each other.
    let (settling, peaks) = side_by_side(
        settings.threads,
        || {
            settling(
                trajectory,
                settle_reference.map(|c| c.as_slice()),
                &atol,
                settings,
                &names,
            )
        },
        || verdict::peaks(trajectory, end, &atol, settings.rtol, &names),
    );
    let drift = analysis::conservation_drift(trajectory, &stoichiometry.conservation);
    let progress = progress(
        &trajectory.states[0],
        &final_state,
        reference,
        &atol,
        settings.rtol,
    );
    let verdict = settings
        .until
        .filter(|&t| t == final_time)
        .and_then(|t| verdict::hold_verdict(t, &progress, settings.settle_on.as_deref(), &names));
    let conversion = verdict::conversion(network, &final_state, reference);
    let net_fluxes = match (&solved, &equilibrium) {
        (Err(_), Some(steady)) => verdict::net_fluxes(network, steady),
        _ => Vec::new(),
    };
    let settings = with_output_times(settings, final_time);
    Ok(RunResult {
        network: owned,
        stoichiometry,
        solution,
        settings,
        atol,
        final_time,
        final_state,
        equilibrium,
        settling,
        drift,
        solved,
        disagreement,
        disagrees,
        relaxation,
        progress,
        audit,
        verdict,
        conversion,
        peaks,
        net_fluxes,
    })
}

/// The conservation laws, the equilibrium solved directly and its relaxation modes: solved
/// before integrating, as the equilibrium tells the integration where equilibrium is, and its
/// slowest relaxation time how long the approach takes.
fn solve_first(
    network: &Network,
) -> (
    Stoichiometry,
    Result<Equilibrium, NoEquilibrium>,
    Result<Vec<Mode>, String>,
) {
    let stoichiometry = Stoichiometry::new(network);
    let solved = equilibrium::solve(network, &stoichiometry);
    let relaxation = match &solved {
        Ok(exact) => relaxation::modes(network, &exact.concentrations),
        Err(_) => Err("needs an equilibrium (see the equilibrium line)".to_string()),
    };
    (stoichiometry, solved, relaxation)
}

/// `a` on a thread of its own beside `b` on this one when the run may use more than one thread
/// (a study's members run one thread each, side by side already), else one after the other.
/// `b` stays on this thread so that what it allocates, and later frees, is in the memory the
/// integration reuses (on another thread it would add that much to the run's peak).
fn side_by_side<A: Send, B>(threads: usize, a: impl FnOnce() -> A + Send, b: impl FnOnce() -> B) -> (A, B) {
    if threads > 1 {
        std::thread::scope(|scope| {
            let beside = scope.spawn(a);
            let here = b();
            let there = beside
                .join()
                .unwrap_or_else(|panic| std::panic::resume_unwind(panic));
            (there, here)
        })
    } else {
        (a(), b())
    }
}

/// The integration's settings from the run's: per-species tolerances, the solved equilibrium
/// as the target, and a horizon long enough for the slowest relaxation.
fn integration_options(
    network: &Network,
    settings: &RunSettings,
    atol: &[f64],
    solved: &Result<Equilibrium, NoEquilibrium>,
    relaxation: &Result<Vec<Mode>, String>,
) -> Options {
    Options {
        rtol: settings.rtol,
        atol: atol.to_vec(),
        until: settings.until,
        force_dense: settings.force_dense,
        method: settings.method,
        target: solved.as_ref().ok().map(|e| e.concentrations.clone()),
        max_time: horizon(relaxation),
        max_seconds: settings.max_seconds,
        threads: settings.threads,
        ..Options::new(network.n_species())
    }
}

/// What times to equilibrium are measured against: the solved equilibrium when the routes
/// agree (it is exact), else the integrated end state; nothing when equilibrium was not reached.
fn settle_reference<'a>(
    integrated: Option<&'a Vec<f64>>,
    solved: &'a Result<Equilibrium, NoEquilibrium>,
    disagrees: bool,
) -> Option<&'a Vec<f64>> {
    match (integrated, solved) {
        (Some(_), Ok(exact)) if !disagrees => Some(&exact.concentrations),
        (integrated, _) => integrated,
    }
}

/// Times to equilibrium at each tolerance against `reference` (none without one).
fn settling(
    trajectory: &integrate::Trajectory,
    reference: Option<&[f64]>,
    atol: &[f64],
    settings: &RunSettings,
    names: &[String],
) -> Vec<Settling> {
    match reference {
        Some(eq) => {
            let noise = noise_levels(eq, atol, settings.rtol);
            analysis::time_to_equilibrium(
                trajectory,
                eq,
                &noise,
                &settings.tolerances,
                names,
                settings.settle_on.as_deref(),
            )
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
    }
}

/// Per species, the fraction of its total change completed at the final time (None where the
/// change is within 100 tolerances or no equilibrium is known).
fn progress(
    c0: &[f64],
    last: &[f64],
    reference: Option<&[f64]>,
    atol: &[f64],
    rtol: f64,
) -> Vec<Option<f64>> {
    (0..c0.len())
        .map(|i| {
            let target = reference?[i];
            let change = target - c0[i];
            let noise = atol[i] + rtol * target.abs();
            (change.abs() > 100.0 * noise).then(|| (last[i] - c0[i]) / change)
        })
        .collect()
}

/// The settings with `output_every` spelled out into sorted output times (at most 100 000 rows,
/// however small the interval).
fn with_output_times(settings: &RunSettings, final_time: f64) -> RunSettings {
    let mut settings = settings.clone();
    if let Some(every) = settings.output_every {
        let count = ((final_time / every).floor() as usize).min(100_000);
        settings
            .output_times
            .extend((0..=count).map(|k| k as f64 * every));
    }
    settings.output_times.sort_by(f64::total_cmp);
    settings.output_times.dedup();
    settings
}

/// How many slowest relaxation times the integration allows before it gives up. The linearised
/// estimate can be far too short when the approach starts far from equilibrium (seeded random
/// networks in tests/robustness.rs need up to about 50 τ for 0.1 %); implicit steps grow
/// geometrically, so a generous horizon costs only a few steps.
const HORIZON_TAUS: f64 = 1000.0;
/// The automatic horizon never goes beyond this (about 3e8 years); `--until` can.
pub const LONGEST_HORIZON: f64 = 1e16;

/// The time after which the integration stops looking for equilibrium: the default 1e12 s, or
/// 1000 slowest relaxation times when that is longer (up to 1e16 s).
fn horizon(relaxation: &Result<Vec<Mode>, String>) -> f64 {
    let slowest = relaxation
        .as_ref()
        .ok()
        .and_then(|modes| modes.first())
        .map_or(0.0, |m| m.tau_seconds);
    (HORIZON_TAUS * slowest).clamp(integrate::DEFAULT_MAX_TIME, LONGEST_HORIZON)
}

/// The integration tolerance of each species at a composition: what counts as noise.
pub fn noise_levels(c: &[f64], atol: &[f64], rtol: f64) -> Vec<f64> {
    c.iter().zip(atol).map(|(c, a)| a + rtol * c.abs()).collect()
}

/// Largest relative difference over species above 1e-9 of the largest concentration, and whether
/// any species differs by more than 100 times its integration tolerance (the global error of a
/// long integration is a modest multiple of the local tolerance; common practice).
fn compare(integrated: &[f64], solved: &[f64], atol: &[f64], rtol: f64) -> (Option<f64>, bool) {
    let largest = solved.iter().fold(0.0_f64, |m, c| m.max(c.abs()));
    let mut worst: f64 = 0.0;
    let mut disagrees = false;
    for i in 0..solved.len() {
        let diff = (integrated[i] - solved[i]).abs();
        if solved[i].abs() > 1e-9 * largest {
            worst = worst.max(diff / solved[i].abs());
        }
        if diff > 100.0 * (atol[i] + rtol * solved[i].abs()) {
            disagrees = true;
        }
    }
    (Some(worst), disagrees)
}
