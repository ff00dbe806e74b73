//! Properties of the model itself: the analytic Jacobian against finite differences on random
//! states, and conservation laws held along the trajectory.

use kinequil::RateModel;
use kinequil::Stoichiometry;

use crate::util::{network, run_with, SplitMix};

/// Mass action, fractional orders, a user-given order on a catalyst, a feed and a sink.
const MIXED: &str = r#"
[species]
A = 1.0
B = 0.5
C = 0.1
D = 0.0
Cat = 0.01

[[reaction]]
scheme = "A + 2 B <=> C"
kf = 3.0
kr = 0.7

[[reaction]]
scheme = "C <=> D"
kf = 0.4
K = 3.0
order_in = { C = 0.5, Cat = 1.0 }
reverse_order_in = { D = 1.5 }

[[reaction]]
scheme = "0 => A"
kf = 0.01

[[reaction]]
scheme = "D => 0"
kf = 0.02

[[reaction]]
scheme = "2 A <=> B"
kf = 0.9
kr = 0.2
"#;

/// The right-hand side against the law of mass action written out by hand for MIXED (textbook
/// definition: each step's rate kf Π c^order − kr Π c^order, dc/dt = Σ ν r). It covers both of
/// the model's forms: steps of total order ≤ 2 in integer orders (zero-order feed, first-order
/// sink, 2 A <=> B) and the rest (third order, fractional orders). The two sides multiply in
/// different orders, so they agree to rounding: 1e-14 relative to the largest term.
#[test]
fn right_hand_side_is_mass_action_written_out() {
    let net = network(MIXED);
    let model = RateModel::new(&net);
    let n = net.n_species();
    let mut rng = SplitMix(11);
    let mut f = vec![0.0; n];
    for _ in 0..50 {
        let y: Vec<f64> = (0..n).map(|_| 0.05 + 2.0 * rng.next_f64()).collect();
        let [a, b, c, d, cat] = [y[0], y[1], y[2], y[3], y[4]];
        let r1 = 3.0 * a * b * b - 0.7 * c;
        let r2 = 0.4 * c.sqrt() * cat - 0.4 / 3.0 * d.powf(1.5);
        let (r3, r4) = (0.01, 0.02 * d);
        let r5 = 0.9 * a * a - 0.2 * b;
        let expected = [-r1 + r3 - 2.0 * r5, -2.0 * r1 + r5, r1 - r2, r2 - r4, 0.0];
        model.rhs(&y, &mut f);
        let scale = [r1, r2, r3, r4, r5]
            .iter()
            .fold(1e-300_f64, |m, r| m.max(r.abs()));
        for (i, (&got, &want)) in f.iter().zip(&expected).enumerate() {
            assert!(
                (got - want).abs() <= 1e-14 * scale,
                "dc/dt[{i}] = {got}, mass action gives {want}"
            );
        }
    }
}

#[test]
fn analytic_jacobian_matches_central_differences() {
    let net = network(MIXED);
    let model = RateModel::new(&net);
    let pattern = model.pattern().clone();
    let n = net.n_species();
    let mut rng = SplitMix(7);
    let mut jac = vec![0.0; pattern.nnz()];
    let (mut fp, mut fm) = (vec![0.0; n], vec![0.0; n]);
    for _ in 0..50 {
        let y: Vec<f64> = (0..n).map(|_| 0.05 + 2.0 * rng.next_f64()).collect();
        model.jacobian(&y, &mut jac);
        for k in 0..n {
            let h = 1e-6 * y[k];
            let (mut yp, mut ym) = (y.clone(), y.clone());
            yp[k] += h;
            ym[k] -= h;
            model.rhs(&yp, &mut fp);
            model.rhs(&ym, &mut fm);
            for i in 0..n {
                let fd = (fp[i] - fm[i]) / (2.0 * h);
                let analytic = pattern.position(i, k).map_or(0.0, |p| jac[p]);
                // Central differences with h = 1e-6·y are accurate to about 1e-9 relative
                // (truncation h², rounding ε/h); 1e-6 of the column scale leaves ample margin.
                let scale = 1.0 + analytic.abs();
                assert!(
                    (fd - analytic).abs() < 1e-6 * scale,
                    "J[{i},{k}] = {analytic}, differences give {fd}"
                );
            }
        }
    }
}

#[test]
fn every_conservation_law_annihilates_the_stoichiometry() {
    let net = network(MIXED);
    let stoich = Stoichiometry::new(&net);
    // The feed and sink break A, B, C, D totals; only the catalyst is conserved.
    assert_eq!(stoich.conservation.len(), 1);
    for law in &stoich.conservation {
        for column in &stoich.columns {
            let dot: f64 = column
                .iter()
                .map(|&(i, v)| v * law.coefficients.iter().find(|e| e.0 == i).map_or(0.0, |e| e.1))
                .sum();
            assert!(dot.abs() < 1e-12);
        }
    }
}

#[test]
fn conservation_totals_hold_along_the_trajectory() {
    // A closed network with three independent totals. Rosenbrock methods keep linear invariants
    // exactly in exact arithmetic (every stage lies in the range of N), so the drift is rounding
    // only: 1e-12 relative is ten thousand times the unit roundoff times the step count here.
    let text = r#"
[species]
A = 1.0
B = 0.5
C = 0.0
D = 0.2
E = 0.0

[[reaction]]
scheme = "A + B <=> C"
kf = 50.0
kr = 1.0

[[reaction]]
scheme = "C + D <=> E"
kf = 4.0
kr = 0.01

[[reaction]]
scheme = "2 A <=> D"
kf = 1.0e-3
K = 0.5
"#;
    let result = run_with(text, 1e-6, 1e-12, None);
    assert_eq!(result.stoichiometry.conservation.len(), 2);
    for drift in &result.drift {
        assert!(*drift < 1e-12, "drift {drift}");
    }
    assert!(result.equilibrium.is_some());
}

#[test]
fn the_integrator_form_of_the_rate_law_is_the_reaction_s_own() {
    // kinetics holds the rate law in differentiable form; network::Reaction::rates is the one
    // definition the rest of the program asks. They must agree at random states (1e-14
    // relative: the same products in another order). MIXED has no pure phase, so the presence
    // switch of kinetics is not involved.
    let net = network(MIXED);
    let model = RateModel::new(&net);
    let m = net.reactions.len();
    let mut forward = vec![0.0; m];
    let mut rng = SplitMix(11);
    for _ in 0..50 {
        let y: Vec<f64> = (0..net.n_species())
            .map(|_| 0.05 + 2.0 * rng.next_f64())
            .collect();
        model.forward_rates(&y, &mut forward);
        for (j, r) in net.reactions.iter().enumerate() {
            let (f, b) = r.rates(&y);
            let (model_f, model_b) = model.step_rate(j, &y);
            let close = |a: f64, b: f64| (a - b).abs() <= 1e-14 * a.abs().max(b.abs());
            assert!(
                close(f, model_f) && close(b, model_b) && close(f, forward[j]),
                "step {}: {}",
                j + 1,
                r.equation
            );
        }
    }
}
