//! One integration-test binary (faster to build than one per file).

mod util;

mod analytic;
mod architecture;
mod audit;
mod cli;
mod conditions;
mod docs;
mod equilibrium;
mod explicit_reference;
mod fuzz;
mod hardening;
mod input_errors;
mod model;
mod practice;
mod report;
mod robertson;
mod robustness;
mod studies;
