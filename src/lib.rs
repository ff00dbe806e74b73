//! kinequil: reversible reaction networks in closed, isothermal batches.
//!
//! Data flows one way: a network file is read into a [`network::Network`], its
//! [`stoich::Stoichiometry`] and [`kinetics::RateModel`] are built, [`integrate`] runs the stiff
//! integration, [`analysis`] derives time to equilibrium, and [`report`] writes the files.

pub mod analysis;
pub mod audit;
pub mod cli;
pub mod constants;
pub mod equilibrium;
pub mod error;
pub mod integrate;
pub mod kinetics;
pub mod linalg;
pub mod network;
pub mod relaxation;
pub mod report;
pub mod run;
pub mod stoich;
pub mod units;
