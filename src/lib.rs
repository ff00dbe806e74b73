//! kinequil: reversible reaction networks in closed, isothermal batches.
//!
//! Data flows one way: a network file (or a [`NetworkBuilder`]) gives a [`Network`], its
//! [`Stoichiometry`] and [`RateModel`] are built, [`integrate`] runs the stiff integration, the
//! equilibrium is solved on its own by [`solve_equilibrium`], and the report renders the files.
//!
//! The library's surface is this page; the modules behind it are private.
//! - **A network**: [`Network::from_file`] or [`NetworkBuilder`] in code;
//!   [`Network::at_temperature`] and [`Network::with_factor`] give the same network at another
//!   temperature or with a constant scaled, without reading text again.
//! - **A run** (integration to equilibrium, times to equilibrium, the solve and the audit):
//!   [`run()`] with [`RunSettings`], giving a [`RunResult`].
//! - **The equilibrium alone**: [`solve_equilibrium`]; **the consistency audit**: [`audit()`].
//! - **The engine underneath**, for driving the integration yourself: [`RateModel`] (rates and
//!   analytic Jacobian), [`integrate`] with [`IntegrationOptions`], [`relaxation_modes`].
//! - **Studies** (many members of one network, in-process on every core): [`Axis`], [`grid`]
//!   and [`at_point`] for sweeps, [`Sampler`] for uncertainty ensembles, [`Outcome::of`] for
//!   one member, [`tabulate`] for a [`StudyTable`], [`merge_shards`] and [`render_study`].
//! - **Reports**: [`render_run`] gives every output file ([`ReportContent`]: bytes, or a table
//!   streamed when written), [`write_run_folder`] writes them whole or not at all; [`Summary`], [`terminal_text`], [`audit_text`], [`EquilibriumTable`] for text.
//!
//! The README's example (kept identical by `tests/docs.rs`):
//!
//! ```
//! # fn main() -> Result<(), Box<dyn std::error::Error>> {
//! use kinequil::{Constant, NetworkBuilder};
//!
//! let network = NetworkBuilder::new("isomerisation")
//!     .species("A", 1.0)
//!     .species("B", 0.0)
//!     .reaction("A <=> B", 2.0)
//!     .kr(1.0)
//!     .build()?;
//! let warmer = network.at_temperature(333.15)?;              // constants re-evaluated, no text
//! let faster = network.with_factor(0, Constant::Kf, 2.0)?;   // kf × 2 at every temperature
//! let result = kinequil::run(faster, &kinequil::RunSettings::default())?;
//! # assert!(result.solution.equilibrium_at.is_some() && warmer.temperature == 333.15);
//! # Ok(())
//! # }
//! ```

mod analysis;
mod audit;
mod constants;
mod ensemble;
mod equilibrium;
mod error;
mod format;
mod integrate;
mod kinetics;
mod linalg;
mod network;
mod relaxation;
mod report;
mod run;
mod sensitivity;
mod stoich;
mod study;
mod sweep;
mod uncertainty;
mod units;
mod verdict;

/// The command line behind the `kinequil` binary; not part of the library's surface.
#[doc(hidden)]
pub mod cli;

pub use audit::{audit, corrected_network_text, Adjust, Audit, DEFAULT_TOL_KJ};
pub use constants::GAS_CONSTANT;
pub use ensemble::{evaluate as evaluate_members, Outcome};
pub use equilibrium::{extents, solve as solve_equilibrium, Equilibrium, NoEquilibrium};
pub use error::{Error, InputError, IntegrationError};
pub use format::number as format_number;
pub use integrate::{
    integrate, Method as IntegrationMethod, Options as IntegrationOptions, Solution, StopReason, Trajectory,
    DEFAULT_ATOL, DEFAULT_MAX_TIME, DEFAULT_RTOL,
};
pub use kinetics::RateModel;
pub use network::{
    parse_equation, parse_formula, Constant, Formula, Network, NetworkBuilder, ParsedEquation, Phase,
    Reaction, Species,
};
pub use relaxation::{modes as relaxation_modes, Mode};
pub use report::study::render_study;
pub use report::summary::Summary;
pub use report::{
    audit_table::render as audit_text, chart::ChartOptions, chart::TimeAxis,
    equilibrium_table::EquilibriumTable, render_run, terminal::render as terminal_text,
    write_all as write_run_folder, Content as ReportContent, RUN_MARKER,
};
pub use run::{run, RunResult, RunSettings};
pub use sensitivity::{
    constants as sensitivity_constants, differences_of_the_solve, equilibrium_by_step, sensitivities,
    EquilibriumRoute, Sensitivity,
};
pub use stoich::{ConservationLaw, Stoichiometry};
pub use study::{
    merge as merge_shards, tabulate, time_header, Study, Table as StudyTable, UncertaintySummary,
};
pub use sweep::{at_point, grid, Axis, Varied};
pub use uncertainty::Sampler;
pub use units::parse_quantity;
pub use verdict::{limiting_reagent, Conversion, HoldVerdict, NetFlux, Peak, Yield};

/// The cautions every report carries.
pub const CAUTIONS: [&str; 4] = [
    "Isothermal, ideal model: constant temperature and volume, ideal mass-action kinetics, perfectly mixed batch.",
    "No heat release, runaway, mixing or mass-transfer limits are modelled.",
    "Verify results against plant and laboratory data before use.",
    "Defer to process-safety review, local codes and licensed engineering practice for plant decisions.",
];
