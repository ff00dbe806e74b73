//! A non-stiff reversible network against an independent explicit integrator: ode_solvers'
//! Dop853 (Dormand-Prince 8(5,3), Hairer-Nørsett-Wanner) from crates.io at tight tolerance.
//! Its step-by-step ("sparse") output is used; its dense output at the end of the span was seen
//! to be unreliable. The right-hand side is written out by hand here, not taken from kinequil.

use ode_solvers::{DVector, Dop853, OutputType, System};

use crate::util::run_with;

const NETWORK: &str = r#"
[species]
A = 1.0
B = 0.8
C = 0.0
D = 0.1
E = 0.0

[[reaction]]
scheme = "A + B <=> C"
kf = 1.2
kr = 0.3

[[reaction]]
scheme = "C <=> D"
kf = 0.5
K = 2.5

[[reaction]]
scheme = "2 A <=> E"
kf = 0.4
kr = 0.1
"#;

/// The same network, by hand: r1 = 1.2 A B − 0.3 C, r2 = 0.5 C − 0.2 D, r3 = 0.4 A² − 0.1 E.
struct ByHand;

impl System<f64, DVector<f64>> for ByHand {
    fn system(&self, _t: f64, y: &DVector<f64>, dy: &mut DVector<f64>) {
        let (a, b, c, d, e) = (y[0], y[1], y[2], y[3], y[4]);
        let r1 = 1.2 * a * b - 0.3 * c;
        let r2 = 0.5 * c - 0.5 / 2.5 * d;
        let r3 = 0.4 * a * a - 0.1 * e;
        dy[0] = -r1 - 2.0 * r3;
        dy[1] = -r1;
        dy[2] = r1 - r2;
        dy[3] = r2;
        dy[4] = r3;
    }
}

#[test]
fn agrees_with_dop853_along_the_trajectory() {
    let result = run_with(NETWORK, 1e-10, 1e-14, Some(20.0));
    let traj = &result.solution.trajectory;
    let y0 = DVector::from_vec(vec![1.0, 0.8, 0.0, 0.1, 0.0]);
    let mut reference = Dop853::from_param(
        ByHand,
        0.0,
        20.0,
        0.0,
        y0,
        1e-13,
        1e-15,
        0.9,
        0.0,
        0.333,
        6.0,
        20.0,
        0.0,
        100_000,
        1000,
        OutputType::Sparse,
    );
    reference
        .integrate()
        .expect("Dop853 integrates the non-stiff case");
    let mut compared = 0;
    for (t, y) in reference.x_out().iter().zip(reference.y_out()) {
        let ours = traj.state_at(*t);
        for i in 0..5 {
            // Both at tight tolerance; 1e-8 absolute on concentrations of order 1 allows for our
            // rtol 1e-10 accumulated over the run and the Hermite interpolation between steps.
            assert!(
                (ours[i] - y[i]).abs() < 1e-8,
                "species {i} at t={t}: {} vs {}",
                ours[i],
                y[i]
            );
        }
        compared += 1;
    }
    assert!(compared > 20, "only {compared} reference points");
}
