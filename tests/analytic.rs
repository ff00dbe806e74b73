//! Checks against closed-form solutions of textbook kinetics.
//!
//! Source: first-order reversible reaction A <=> B, c_A(t) = c_A,eq + (c_A(0) − c_A,eq)
//! exp(−(kf + kr) t) with c_A,eq = kr (c_A(0) + c_B(0)) / (kf + kr) (standard textbook result,
//! e.g. Atkins' Physical Chemistry, "reactions approaching equilibrium"; Espenson, Chemical
//! Kinetics and Reaction Mechanisms, ch. 3). Every species then relaxes as one exponential, so the
//! time to come within a fraction `tol` of the total change is ln(1/tol) / (kf + kr).

use crate::util::{rel, run_with};

const A_TO_B: &str = r#"
[species]
A = 1.0
B = 0.0

[[reaction]]
scheme = "A <=> B"
kf = 2.0
kr = 1.0
"#;

fn a_exact(t: f64) -> f64 {
    1.0 / 3.0 + (2.0 / 3.0) * (-3.0 * t).exp()
}

#[test]
fn first_order_reversible_follows_the_closed_form() {
    // rtol 1e-9: the global error stays within a few hundred rtol over a short run, so 1e-7 absolute
    // (on concentrations of order 1) leaves margin while catching any real defect.
    let result = run_with(A_TO_B, 1e-9, 1e-14, None);
    let traj = &result.solution.trajectory;
    for (t, c) in traj.times.iter().zip(&traj.states) {
        assert!(
            (c[0] - a_exact(*t)).abs() < 1e-7,
            "A at t={t}: {} vs {}",
            c[0],
            a_exact(*t)
        );
        assert!((c[1] - (1.0 - a_exact(*t))).abs() < 1e-7);
    }
    // Between steps the Hermite interpolant is accurate to the same order.
    for k in 1..50 {
        let t = 0.05 * k as f64;
        assert!(
            (traj.value_at(0, t) - a_exact(t)).abs() < 1e-7,
            "interpolated A at t={t}"
        );
    }
    let eq = result.equilibrium.as_ref().expect("equilibrium detected");
    assert!((eq[0] - 1.0 / 3.0).abs() < 1e-9, "equilibrium A = {}", eq[0]);
}

/// Every time to equilibrium of A_TO_B within `tolerance` (relative) of ln(1/tol)/(kf + kr).
fn assert_closed_form_times(result: &kinequil::RunResult, tolerance: f64, what: &str) {
    for s in &result.settling {
        let expected = (1.0 / s.tolerance).ln() / 3.0;
        let got = s.seconds.expect("reached");
        assert!(
            rel(got, expected) < tolerance,
            "{what} tol {}: {got} vs {expected}",
            s.tolerance
        );
    }
}

#[test]
fn time_to_equilibrium_is_ln_one_over_tol_over_kf_plus_kr() {
    // Tolerance 1e-5 relative: the crossing is bisected on a Hermite interpolant whose error in c is
    // below 1e-9 at rtol 1e-9; divided by the slope at the crossing (≥ 2e-3 /s) that is < 1e-6 s on
    // times of 0.77-2.3 s.
    let result = run_with(A_TO_B, 1e-9, 1e-14, None);
    assert_closed_form_times(&result, 1e-5, "");
}

#[test]
fn default_tolerances_give_three_good_digits_of_time_to_equilibrium() {
    // At the default rtol 1e-6 the same times must hold to 1e-3 relative (what a report quotes).
    let result = run_with(A_TO_B, 1e-6, 1e-12, None);
    assert_closed_form_times(&result, 1e-3, "");
}

#[test]
fn ndf_interpolant_between_steps_follows_the_closed_form() {
    // The NDF keeps no slopes; its interpolant takes them from polynomials through neighbouring
    // steps. At rtol 1e-9 it must hold A(t) between steps to 1e-8 absolute (measured: 2e-9; the
    // steps themselves are within 1e-9), checked at 400 times that are not steps.
    let settings = kinequil::RunSettings {
        method: kinequil::IntegrationMethod::Ndf,
        rtol: 1e-9,
        atol: 1e-14,
        ..kinequil::RunSettings::default()
    };
    let result = kinequil::run(crate::util::network(A_TO_B), &settings).expect("run succeeds");
    let traj = &result.solution.trajectory;
    for k in 1..=400 {
        let t = 0.01 * k as f64 + 1e-4;
        assert!(
            (traj.value_at(0, t) - a_exact(t)).abs() < 1e-8,
            "A at t={t}: {} vs {}",
            traj.value_at(0, t),
            a_exact(t)
        );
    }
}

#[test]
fn both_integration_methods_give_three_good_digits_of_time_to_equilibrium() {
    // The same closed form through each method forced (Auto picks RODAS4 for two species).
    for method in [
        kinequil::IntegrationMethod::Rodas4,
        kinequil::IntegrationMethod::Ndf,
    ] {
        let settings = kinequil::RunSettings {
            method,
            ..kinequil::RunSettings::default()
        };
        let result = kinequil::run(crate::util::network(A_TO_B), &settings).expect("run succeeds");
        assert!(
            result.solution.equilibrium_at.is_some() && !result.disagrees,
            "{method:?}"
        );
        assert_closed_form_times(&result, 1e-3, &format!("{method:?}"));
    }
}

#[test]
fn a_slow_mode_does_not_stop_the_run_early() {
    // A <=> B fast (kf + kr = 2e3 /s), B <=> C slow (kf + kr = 2e-6 /s). The equilibrium (all
    // K = 1) is A = B = C = 1/3 of the total (closed form of consecutive reversible first-order
    // steps, standard textbook result). With A <=> B pre-equilibrated the slow eigenvalue is
    // 1e-6/2 + 1e-6 = 1.5e-6 /s, a relaxation time of 6.7e5 s; stopping before 1e6 s would leave C
    // far from 1/3.
    let text = r#"
[species]
A = 1.0
B = 0.0
C = 0.0

[[reaction]]
scheme = "A <=> B"
kf = 1.0e3
kr = 1.0e3

[[reaction]]
scheme = "B <=> C"
kf = 1.0e-6
K = 1.0
"#;
    let result = run_with(text, 1e-8, 1e-14, None);
    let eq = result.equilibrium.as_ref().expect("equilibrium detected");
    for (i, c) in eq.iter().enumerate() {
        // 1e-6 relative: the detector stops within the integration tolerance (1e-8) of the steady
        // state; the margin covers the accumulated global error.
        assert!(rel(*c, 1.0 / 3.0) < 1e-6, "species {i}: {c}");
    }
    let detected = result.solution.equilibrium_at.unwrap();
    assert!(
        detected > 1e6,
        "stopped at {detected} s, before the slow mode relaxed"
    );
}

#[test]
fn a_feed_has_no_equilibrium_and_says_so() {
    let text = r#"
[species]
A = 0.0

[[reaction]]
scheme = "0 => A"
kf = 1.0e-3
"#;
    let result = run_with(text, 1e-6, 1e-12, None);
    assert!(result.equilibrium.is_none());
    assert!(result.settling.iter().all(|s| s.seconds.is_none()));
    assert!(result.stoichiometry.conservation.is_empty());
    // Zeroth-order feed: A(t) = kf t exactly (any consistent integrator reproduces a linear solution).
    let t = result.final_time;
    assert!(rel(result.final_state[0], 1e-3 * t) < 1e-9);
}
