//! kinequil: reversible reaction networks in closed, isothermal batches.
//!
//! Data flows one way: a network file is read into a [`network::Network`], its
//! [`stoich::Stoichiometry`] and [`kinetics::RateModel`] are built, [`integrate`] runs the stiff
//! integration, [`analysis`] derives time to equilibrium, and [`report`] writes the files.
//!
//! Entry points for using kinequil as a library:
//! - a network: [`network::Network::from_file`], or [`network::NetworkBuilder`] in code;
//!   [`network::Network::at_temperature`] and [`network::Network::with_factor`] give the same
//!   network at another temperature or with a constant scaled, without reading text again;
//! - a run (integration to equilibrium, times to equilibrium, the solve and the audit):
//!   [`run::run`] with [`run::RunSettings`];
//! - the equilibrium alone: [`equilibrium::solve`]; the consistency audit: [`audit::audit`].
//!
//! The README's example (kept identical by `tests/docs.rs`):
//!
//! ```
//! # fn main() -> Result<(), Box<dyn std::error::Error>> {
//! use kinequil::network::{Constant, NetworkBuilder};
//!
//! let network = NetworkBuilder::new("isomerisation")
//!     .species("A", 1.0)
//!     .species("B", 0.0)
//!     .reaction("A <=> B", 2.0)
//!     .kr(1.0)
//!     .build()?;
//! let warmer = network.at_temperature(333.15)?;              // constants re-evaluated, no text
//! let faster = network.with_factor(0, Constant::Kf, 2.0)?;   // kf × 2 at every temperature
//! let result = kinequil::run::run(&faster, &kinequil::run::RunSettings::default())?;
//! # assert!(result.solution.equilibrium_at.is_some() && warmer.temperature == 333.15);
//! # Ok(())
//! # }
//! ```

pub mod analysis;
pub mod audit;
pub mod cli;
pub mod constants;
pub mod equilibrium;
pub mod error;
pub mod format;
pub mod integrate;
pub mod kinetics;
pub mod linalg;
pub mod network;
pub mod relaxation;
pub mod report;
pub mod run;
pub mod stoich;
pub mod units;

/// The cautions every report carries.
pub const CAUTIONS: [&str; 4] = [
    "Isothermal, ideal model: constant temperature and volume, ideal mass-action kinetics, perfectly mixed batch.",
    "No heat release, runaway, mixing or mass-transfer limits are modelled.",
    "Verify results against plant and laboratory data before use.",
    "Defer to process-safety review, local codes and licensed engineering practice for plant decisions.",
];
