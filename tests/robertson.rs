//! The Robertson stiff problem (Robertson 1966) as a network of three one-way steps.
//!
//! Reference values:
//! - t = 1e11: IVP test set for stiff ODE solvers (Mazzia & Magherini, University of Bari,
//!   problem ROBER): y = (0.2083340149701255e-07, 0.8333360770334713e-13, 0.9999999791665050).
//! - t = 40: the published example output of the ODEPACK/CVODE Robertson demonstration,
//!   y = (7.158271e-01, 9.185535e-06, 2.841637e-01) (7 significant digits).

// Reference values are kept digit for digit as published.
#![allow(clippy::excessive_precision)]

use kinequil::RateModel;
use kinequil::Stoichiometry;
use kinequil::{integrate, IntegrationOptions as Options};

use crate::util::{network, rel};

const ROBERTSON: &str = include_str!("data/robertson.toml");

/// The IVP test set's values at t = 1e11 and the published ones at t = 40 (see the module doc).
const AT_1E11: [f64; 3] = [0.2083340149701255e-07, 0.8333360770334713e-13, 0.9999999791665050];
const AT_40: [f64; 3] = [7.158271e-01, 9.185535e-06, 2.841637e-01];

/// The state at `until` with the method `Auto` chooses (RODAS4 for three species).
fn solve_at(until: f64, rtol: f64, atol: [f64; 3], force_dense: Option<bool>) -> Vec<f64> {
    solve_with(until, rtol, atol, force_dense, kinequil::IntegrationMethod::Auto)
}

fn solve_with(
    until: f64,
    rtol: f64,
    atol: [f64; 3],
    force_dense: Option<bool>,
    method: kinequil::IntegrationMethod,
) -> Vec<f64> {
    let net = network(ROBERTSON);
    let stoich = Stoichiometry::new(&net);
    let model = RateModel::new(&net);
    let options = Options {
        rtol,
        atol: atol.to_vec(),
        until: Some(until),
        to_equilibrium: false,
        force_dense,
        method,
        ..Options::new(3)
    };
    let solution =
        integrate(&model, &stoich.conservation, &net.initial_state(), &options).expect("integrates");
    assert!((solution.trajectory.end_time() - until).abs() <= 1e-12 * until);
    if method == kinequil::IntegrationMethod::Ndf {
        assert!(solution.stats.method.starts_with("NDF"), "the forced method ran");
    }
    solution.trajectory.last_state().to_vec()
}

#[test]
fn matches_the_ivp_test_set_at_1e11() {
    let reference = AT_1E11;
    let y = solve_at(1e11, 1e-10, [1e-16, 1e-22, 1e-16], None);
    // rtol 1e-10 over 1e11 s: 1e-7 relative on each component is a hundredfold margin over what
    // was measured (7e-11) and still far below anything a report would show.
    assert!(rel(y[0], reference[0]) < 1e-7, "y1 {}", y[0]);
    assert!(rel(y[1], reference[1]) < 1e-7, "y2 {}", y[1]);
    assert!((y[2] - reference[2]).abs() < 1e-12, "y3 {}", y[2]);
}

#[test]
fn matches_the_published_values_at_40() {
    let reference = AT_40;
    let y = solve_at(40.0, 1e-10, [1e-16, 1e-22, 1e-16], None);
    // The reference has 7 significant digits: agreement within 1e-6 relative is all it can show.
    for i in 0..3 {
        assert!(
            rel(y[i], reference[i]) < 1e-6,
            "y{} {} vs {}",
            i + 1,
            y[i],
            reference[i]
        );
    }
}

#[test]
fn default_tolerances_stay_accurate_with_a_trace_species_tolerance() {
    // Default rtol 1e-6, with atol 1e-20 for the trace species B as a user would set it:
    // 1e-4 relative at 1e11 (global error of a few hundred rtol over 13 decades of time).
    let reference = AT_1E11;
    let y = solve_at(1e11, 1e-6, [1e-12, 1e-20, 1e-12], None);
    assert!(rel(y[0], reference[0]) < 1e-4, "y1 {}", y[0]);
    assert!(rel(y[1], reference[1]) < 1e-4, "y2 {}", y[1]);
}

#[test]
fn dense_and_sparse_linear_algebra_agree() {
    // Same method, different LU: only rounding differs, which the step control can amplify a
    // little; 1e-8 relative is far below the 1e-7 accuracy of the run itself.
    let dense = solve_at(1e11, 1e-10, [1e-16, 1e-22, 1e-16], Some(true));
    let sparse = solve_at(1e11, 1e-10, [1e-16, 1e-22, 1e-16], Some(false));
    for i in 0..3 {
        assert!(
            rel(sparse[i], dense[i]) < 1e-8,
            "y{}: {} vs {}",
            i + 1,
            sparse[i],
            dense[i]
        );
    }
}

#[test]
fn the_ndf_method_matches_the_ivp_test_set_and_the_published_values() {
    // rtol 1e-10: a multistep method's global error is a few hundred to a few thousand rtol over
    // 13 decades of time; 1e-6 relative still tells a wrong method from a right one by orders.
    let reference = AT_1E11;
    let ndf = kinequil::IntegrationMethod::Ndf;
    let y = solve_with(1e11, 1e-10, [1e-16, 1e-22, 1e-16], None, ndf);
    assert!(rel(y[0], reference[0]) < 1e-6, "y1 {}", y[0]);
    assert!(rel(y[1], reference[1]) < 1e-6, "y2 {}", y[1]);
    assert!((y[2] - reference[2]).abs() < 1e-12, "y3 {}", y[2]);
    let reference = AT_40;
    let y = solve_with(40.0, 1e-10, [1e-16, 1e-22, 1e-16], None, ndf);
    for i in 0..3 {
        // 7 significant digits published: 1e-6 relative is all they can show.
        assert!(
            rel(y[i], reference[i]) < 1e-6,
            "y{} {} vs {}",
            i + 1,
            y[i],
            reference[i]
        );
    }
}
