//! The directly solved equilibrium and the relaxation analysis against closed forms, and against
//! the integration on random detailed-balance networks.
//!
//! Sources: the equilibrium of A + B <=> C and of 2 A <=> B follows from K and the conservation
//! totals as the root of a quadratic (any physical-chemistry text). The linearised relaxation
//! times 1/τ = kf([A]eq + [B]eq) + kr for A + B <=> C and 1/τ = 4 kf [A]eq + kr for 2 A <=> B
//! (rate of 2 A <=> B counted per reaction event) are standard relaxation-kinetics results
//! (Bernasconi, Relaxation Kinetics, Academic Press 1976, chapter 1; chapter from memory). For
//! consecutive reversible first-order steps A <=> B <=> C the two relaxation rates are the roots
//! λ = (p ± √(p² − 4q))/2, p = k1 + k−1 + k2 + k−2, q = k1k2 + k−1k−2 + k1k−2 (standard textbook
//! result, e.g. Steinfeld, Francisco & Hase, Chemical Kinetics and Dynamics, consecutive
//! reversible reactions). The extent of reaction ξ is defined by n_B = n_B,0 + ν_B ξ (IUPAC Gold
//! Book, "extent of reaction"), per unit volume here: c = c0 + N ξ.

use kinequil::extents;
use kinequil::relaxation_modes;
use kinequil::RateModel;
use kinequil::Stoichiometry;
use kinequil::{integrate, IntegrationOptions as Options};
use kinequil::{solve_equilibrium, NoEquilibrium};

use crate::util::{network, rel, run_with, SplitMix};

fn solve(text: &str) -> Vec<f64> {
    let net = network(text);
    let stoich = Stoichiometry::new(&net);
    solve_equilibrium(&net, &stoich)
        .unwrap_or_else(|e| panic!("{e}"))
        .concentrations
}

fn taus(text: &str, c_eq: &[f64]) -> Vec<f64> {
    relaxation_modes(&network(text), c_eq)
        .unwrap()
        .iter()
        .map(|m| m.tau_seconds)
        .collect()
}

const ASSOCIATION: &str = r#"
[species]
A = 0.8
B = 0.5
C = 0.1

[[reaction]]
scheme = "A + B <=> C"
kf = 3.0
kr = 0.2
"#;

#[test]
fn association_equilibrium_and_relaxation_time() {
    let (kf, kr): (f64, f64) = (3.0, 0.2);
    let k = kf / kr;
    // Totals A + C = 0.9, B + C = 0.6; x = [C]eq solves k (0.9 − x)(0.6 − x) = x.
    let (a, b): (f64, f64) = (0.9, 0.6);
    let p = k * (a + b) + 1.0;
    let x = (p - (p * p - 4.0 * k * k * a * b).sqrt()) / (2.0 * k);
    let c = solve(ASSOCIATION);
    // The solver converges to 1e-13 on the totals; 1e-10 relative is what the closed form's
    // own rounding (cancellation in the quadratic) allows.
    assert!(rel(c[2], x) < 1e-10, "C {} vs {x}", c[2]);
    assert!(rel(c[0], a - x) < 1e-10 && rel(c[1], b - x) < 1e-10);
    let tau = taus(ASSOCIATION, &c);
    assert_eq!(tau.len(), 1, "one reaction, one mode");
    let expected = 1.0 / (kf * (c[0] + c[1]) + kr);
    assert!(rel(tau[0], expected) < 1e-10, "τ {} vs {expected}", tau[0]);
}

/// Starts `eps` along reaction 1 away from equilibrium, integrates tightly and fits the decay
/// rate of the deviation of species `watch` between 0.5 τ and 2.5 τ.
fn fitted_decay_rate(text: &str, direction: &[f64], watch: usize) -> (f64, f64) {
    let c = solve(text);
    let eps = 1e-5;
    let start: Vec<f64> = c.iter().zip(direction).map(|(c, d)| c + eps * d).collect();
    let net = network(text);
    let stoich = Stoichiometry::new(&net);
    let model = RateModel::new(&net);
    let tau = taus(text, &c)[0];
    let options = Options {
        rtol: 1e-12,
        atol: vec![1e-18; c.len()],
        until: Some(3.0 * tau),
        to_equilibrium: false,
        ..Options::new(c.len())
    };
    let solution = integrate(&model, &stoich.conservation, &start, &options).unwrap();
    let (t1, t2) = (0.5 * tau, 2.5 * tau);
    let d1 = c[watch] - solution.trajectory.value_at(watch, t1);
    let d2 = c[watch] - solution.trajectory.value_at(watch, t2);
    ((d1 / d2).ln() / (t2 - t1), 1.0 / tau)
}

#[test]
fn small_perturbations_decay_at_the_relaxation_rate() {
    // The deviation must decay as exp(−t/τ). The nonlinear correction is of the order of the
    // relative perturbation (1e-5), so 1e-3 relative on the fitted rate is a safe bound.
    let (rate, expected) = fitted_decay_rate(ASSOCIATION, &[1.0, 1.0, -1.0], 2);
    assert!(
        rel(rate, expected) < 1e-3,
        "A + B <=> C: fitted {rate} vs 1/τ {expected}"
    );
    let (rate, expected) = fitted_decay_rate(DIMERISATION, &[2.0, -1.0], 1);
    assert!(
        rel(rate, expected) < 1e-3,
        "2 A <=> B: fitted {rate} vs 1/τ {expected}"
    );
}

const DIMERISATION: &str = r#"
[species]
A = 1.0
B = 0.0

[[reaction]]
scheme = "2 A <=> B"
kf = 0.7
kr = 0.1
"#;

#[test]
fn dimerisation_equilibrium_and_relaxation_time() {
    let text = DIMERISATION;
    let (kf, kr): (f64, f64) = (0.7, 0.1);
    let k = kf / kr;
    // A + 2 B = 1: 2 k A² + A − 1 = 0.
    let a = (-1.0 + (1.0 + 8.0 * k).sqrt()) / (4.0 * k);
    let c = solve(text);
    assert!(rel(c[0], a) < 1e-12, "A {} vs {a}", c[0]);
    let tau = taus(text, &c);
    let expected = 1.0 / (4.0 * kf * a + kr);
    assert!(rel(tau[0], expected) < 1e-10, "τ {} vs {expected}", tau[0]);
}

#[test]
fn consecutive_steps_have_the_two_closed_form_relaxation_times() {
    let text = r#"
[species]
A = 1.0
B = 0.0
C = 0.0

[[reaction]]
scheme = "A <=> B"
kf = 2.0
kr = 0.5

[[reaction]]
scheme = "B <=> C"
kf = 0.3
kr = 0.04
"#;
    let (k1, km1, k2, km2): (f64, f64, f64, f64) = (2.0, 0.5, 0.3, 0.04);
    let p = k1 + km1 + k2 + km2;
    let q = k1 * k2 + km1 * km2 + k1 * km2;
    let slow = (p - (p * p - 4.0 * q).sqrt()) / 2.0;
    let fast = (p + (p * p - 4.0 * q).sqrt()) / 2.0;
    let c = solve(text);
    let tau = taus(text, &c);
    assert_eq!(tau.len(), 2);
    // Slowest first; 1e-10 relative: a 2x2 symmetric eigenproblem in double precision.
    assert!(
        rel(tau[0], 1.0 / slow) < 1e-10,
        "slow τ {} vs {}",
        tau[0],
        1.0 / slow
    );
    assert!(
        rel(tau[1], 1.0 / fast) < 1e-10,
        "fast τ {} vs {}",
        tau[1],
        1.0 / fast
    );
    // The slow mode is set mostly by the slow step B <=> C.
    let modes = relaxation_modes(&network(text), &c).unwrap();
    assert_eq!(modes[0].steps[0].name, "B <=> C");
}

#[test]
fn pure_solid_stays_out_of_k() {
    // S(s) <=> A + B with K = [A][B] = 0.04 (the solid's activity is 1), A0 = 0.1, B0 = 0:
    // by hand, B (0.1 + B) = 0.04, so B = (−0.1 + √(0.01 + 0.16)) / 2; the solid loses B.
    let text = r#"
[species]
S = { initial = 1.0, phase = "solid" }
A = 0.1
B = 0.0

[[reaction]]
scheme = "S <=> A + B"
kf = 0.02
K = 0.04
"#;
    let b = (-0.1 + (0.01f64 + 0.16).sqrt()) / 2.0;
    let c = solve(text);
    assert!(rel(c[2], b) < 1e-12, "B {} vs {b}", c[2]);
    assert!(rel(c[1], 0.1 + b) < 1e-12);
    assert!(rel(c[0], 1.0 - b) < 1e-12, "solid left {}", c[0]);
    // The integration reaches the same state (1e-6: rtol 1e-8 with margin for the global error).
    let result = run_with(text, 1e-8, 1e-14, None);
    let integrated = result.equilibrium.as_ref().unwrap();
    for i in 0..3 {
        assert!(
            rel(integrated[i], c[i]) < 1e-6,
            "species {i}: {} vs {}",
            integrated[i],
            c[i]
        );
    }
    assert!(!result.disagrees);
}

#[test]
fn says_clearly_when_there_is_no_equilibrium() {
    let one_way = "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A => B\"\nkf = 1.0\n";
    let net = network(one_way);
    let err = solve_equilibrium(&net, &Stoichiometry::new(&net)).unwrap_err();
    assert!(matches!(err, NoEquilibrium::OneWaySteps(_)), "{err}");

    // A cycle whose K product is 2, not 1 (Wegscheider condition broken).
    let cycle = r#"
[species]
A = 1.0
B = 0.0
C = 0.0

[[reaction]]
scheme = "A <=> B"
kf = 1.0
K = 2.0

[[reaction]]
scheme = "B <=> C"
kf = 1.0
K = 1.0

[[reaction]]
scheme = "C <=> A"
kf = 1.0
K = 1.0
"#;
    let net = network(cycle);
    let err = solve_equilibrium(&net, &Stoichiometry::new(&net)).unwrap_err();
    match err {
        NoEquilibrium::InconsistentCycle { mismatch, .. } => {
            assert!((mismatch.abs() - 2f64.ln()).abs() < 1e-12)
        }
        other => panic!("expected an inconsistent cycle, got {other}"),
    }
}

#[test]
fn random_detailed_balance_networks_end_where_the_solver_says() {
    // Seeded random networks of 30 species built to satisfy detailed balance: species carry a
    // size (1 to 3) that every step conserves; each species has a free energy g_i and every step
    // K = exp(−Σ ν g). Property: the integrated end state equals the solved equilibrium and
    // satisfies every step's K. Tolerances: rtol 1e-8 gives end states within 1e-6 relative of
    // the steady state (the detector stops within the integration tolerance, and the global
    // error is a modest multiple of it).
    for seed in 1..=6u64 {
        let mut rng = SplitMix(seed);
        let n = 30;
        let size: Vec<usize> = (0..n).map(|i| 1 + i % 3).collect();
        let g: Vec<f64> = (0..n).map(|_| 4.0 * rng.next_f64() - 2.0).collect();
        let mut text = String::from("[species]\n");
        for i in 0..n {
            text += &format!("X{i} = {}\n", 0.05 + rng.next_f64());
        }
        let step = |lhs: &[usize], rhs: &[usize], rng: &mut SplitMix| {
            let kf = 10f64.powf(4.0 * rng.next_f64() - 2.0);
            let dg: f64 = rhs.iter().map(|&i| g[i]).sum::<f64>() - lhs.iter().map(|&i| g[i]).sum::<f64>();
            let side = |s: &[usize]| s.iter().map(|i| format!("X{i}")).collect::<Vec<_>>().join(" + ");
            format!(
                "\n[[reaction]]\nscheme = \"{} <=> {}\"\nkf = {kf:e}\nK = {:e}\n",
                side(lhs),
                side(rhs),
                (-dg).exp()
            )
        };
        // Isomerisations within each size class (a chain), then associations that add sizes.
        for i in 0..n {
            if i + 3 < n {
                text += &step(&[i], &[i + 3], &mut rng);
            }
        }
        for _ in 0..15 {
            let a = (rng.next_f64() * n as f64) as usize % n;
            let b = (rng.next_f64() * n as f64) as usize % n;
            if size[a] + size[b] <= 3 {
                let candidates: Vec<usize> = (0..n).filter(|&k| size[k] == size[a] + size[b]).collect();
                let target = candidates[(rng.next_f64() * candidates.len() as f64) as usize];
                text += &step(&[a, b], &[target], &mut rng);
            }
        }
        let result = run_with(&text, 1e-8, 1e-14, None);
        let solved = result
            .solved
            .as_ref()
            .unwrap_or_else(|e| panic!("seed {seed}: {e}"));
        let integrated = result.equilibrium.as_ref().expect("equilibrium detected");
        for (i, (got, want)) in integrated.iter().zip(&solved.concentrations).enumerate() {
            assert!(rel(*got, *want) < 1e-6, "seed {seed}, X{i}: {got} vs {want}");
        }
        assert!(!result.disagrees, "seed {seed}");
        // Every step's K holds at the solved equilibrium (ln Q − ln K within 1e-9).
        assert!(
            solved.max_k_residual < 1e-9,
            "seed {seed}: {}",
            solved.max_k_residual
        );
        for r in &result.network.reactions {
            let ln_q: f64 = r
                .products
                .iter()
                .map(|&(i, v)| v * solved.concentrations[i].ln())
                .sum::<f64>()
                - r.reactants
                    .iter()
                    .map(|&(i, v)| v * solved.concentrations[i].ln())
                    .sum::<f64>();
            assert!(
                (ln_q - (r.kf / r.kr).ln()).abs() < 1e-9,
                "seed {seed}: {}",
                r.equation
            );
        }
        // The relaxation rates are the non-zero eigenvalues of the Jacobian at equilibrium,
        // computed here the plain way (dense, general eigenvalues): 1e-6 relative covers the
        // conditioning of a non-symmetric eigenproblem with rates spread over several decades.
        let modes = result.relaxation.as_ref().expect("relaxation modes");
        let model = RateModel::new(&result.network);
        let pattern = model.pattern().clone();
        let mut values = vec![0.0; pattern.nnz()];
        model.jacobian(&solved.concentrations, &mut values);
        let mut dense = nalgebra::DMatrix::<f64>::zeros(n, n);
        for col in 0..n {
            for k in pattern.col_ptr[col]..pattern.col_ptr[col + 1] {
                dense[(pattern.row_idx[k], col)] = values[k];
            }
        }
        let mut rates: Vec<f64> = dense.complex_eigenvalues().iter().map(|l| -l.re).collect();
        rates.sort_by(|a, b| b.total_cmp(a));
        rates.truncate(modes.len());
        let mut from_modes: Vec<f64> = modes.iter().map(|m| 1.0 / m.tau_seconds).collect();
        from_modes.sort_by(|a, b| b.total_cmp(a));
        for (a, b) in rates.iter().zip(&from_modes) {
            assert!(rel(*b, *a) < 1e-6, "seed {seed}: eigenvalue {a} vs mode rate {b}");
        }
    }
}

/// c0 + N ξ, the composition the extents say the network reached.
fn recomposed(stoich: &Stoichiometry, c0: &[f64], xi: &[f64]) -> Vec<f64> {
    let mut c = c0.to_vec();
    for (column, x) in stoich.columns.iter().zip(xi) {
        for &(i, v) in column {
            c[i] += v * x;
        }
    }
    c
}

#[test]
fn extents_of_a_cycle_put_the_dependent_step_at_zero() {
    // A <=> B, B <=> C, A <=> C: the third step is the sum of the first two, so it reports zero
    // and the first two carry the change: ξ1 = A0 − A, ξ2 = C − C0 (definition of the extent).
    let text = r#"
[species]
A = 1.0
B = 0.2
C = 0.0

[[reaction]]
scheme = "A <=> B"
kf = 2.0
kr = 1.0

[[reaction]]
scheme = "B <=> C"
kf = 3.0
kr = 1.0

[[reaction]]
scheme = "A <=> C"
kf = 6.0
kr = 1.0
"#;
    let net = network(text);
    let stoich = Stoichiometry::new(&net);
    assert_eq!(stoich.independent, vec![0, 1]);
    let c0 = net.initial_state();
    let c = solve_equilibrium(&net, &stoich).unwrap().concentrations;
    let xi = extents(&stoich, &c0, &c).expect("the equilibrium is reachable");
    // Rounding only: three species of order one.
    assert!((xi[0] - (c0[0] - c[0])).abs() < 1e-12, "{xi:?}");
    assert!((xi[1] - (c[2] - c0[2])).abs() < 1e-12, "{xi:?}");
    assert_eq!(xi[2], 0.0);
    // A change the steps cannot make (A gained from nothing) has no extents.
    assert!(extents(&stoich, &c0, &[c[0] + 0.5, c[1], c[2]]).is_none());
}

#[test]
fn extents_of_a_large_network_recompose_its_equilibrium() {
    // 2000 species built like the detailed-balance networks above (a size of 1 to 3 every step
    // conserves, K = exp(−Σ ν g)): chains of isomerisations X_i <=> X_(i+3) (all independent)
    // and 2000 associations that add sizes (many of them combinations of earlier steps). The
    // solved equilibrium must be c0 + N ξ with ξ zero on every dependent step. Gauss-Jordan
    // elimination of N filled in to dense rows at this size (minutes and hundreds of MB on the
    // 5000-species benchmark network); the normal equations do not.
    let n = 2000;
    let mut rng = SplitMix(7);
    let size: Vec<usize> = (0..n).map(|i| 1 + i % 3).collect();
    let g: Vec<f64> = (0..n).map(|_| 2.0 * rng.next_f64() - 1.0).collect();
    let mut text = String::from("[species]\n");
    for i in 0..n {
        text += &format!("X{i} = {}\n", 0.01 + rng.next_f64());
    }
    let mut step = |lhs: &[usize], rhs: usize, rng: &mut SplitMix| {
        let dg = g[rhs] - lhs.iter().map(|&i| g[i]).sum::<f64>();
        let side = lhs
            .iter()
            .map(|i| format!("X{i}"))
            .collect::<Vec<_>>()
            .join(" + ");
        text += &format!(
            "[[reaction]]\nscheme = \"{side} <=> X{rhs}\"\nkf = {:e}\nK = {:e}\n",
            0.5 + rng.next_f64(),
            (-dg).exp()
        );
    };
    for i in 0..n - 3 {
        step(&[i], i + 3, &mut rng);
    }
    let mut added = 0;
    while added < n {
        let a = (rng.next_f64() * n as f64) as usize % n;
        let b = (rng.next_f64() * n as f64) as usize % n;
        if a != b && size[a] + size[b] <= 3 {
            let class = size[a] + size[b] - 1; // species of that size are class, class + 3, ...
            let target = class + 3 * ((rng.next_f64() * ((n - class) / 3) as f64) as usize);
            step(&[a, b], target, &mut rng);
            added += 1;
        }
    }
    let net = network(&text);
    let stoich = Stoichiometry::new(&net);
    let c0 = net.initial_state();
    let c = solve_equilibrium(&net, &stoich).unwrap().concentrations;
    let xi = extents(&stoich, &c0, &c).expect("the equilibrium is reachable");
    let scale = c0.iter().chain(&c).fold(0.0_f64, |m, v| m.max(v.abs()));
    // Within 1e-11 of the largest concentration: rounding of sums over thousands of steps after
    // one refinement (the check inside `extents` allows 1e-8).
    for (i, (got, want)) in recomposed(&stoich, &c0, &xi).iter().zip(&c).enumerate() {
        assert!((got - want).abs() < 1e-11 * scale, "X{i}: {got} vs {want}");
    }
    let dependent: Vec<usize> = (0..xi.len())
        .filter(|j| !stoich.independent.contains(j))
        .collect();
    assert!(!dependent.is_empty(), "the test network has cycles");
    assert!(dependent.iter().all(|&j| xi[j] == 0.0));
}
