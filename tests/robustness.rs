//! The equilibrium engine across the range of ordinary networks: the direct solve against closed
//! forms in every species order, seeded random detailed-balance networks (solve, permutation
//! invariance, detection by the integration, agreement of the two routes), conservation among
//! trace species, pure phases by the phase rule, and the bundled cases.
//!
//! Sources: the equilibria of A + B <=> C, 2 A <=> B and A <=> B + C are roots of quadratics
//! (any physical-chemistry text), written here in the forms that avoid cancellation (the root
//! for the species left over, then the product from K). Detailed balance holds by construction
//! when every K is exp(−Σ ν g) from one free energy per species (the Wegscheider condition,
//! common practice). The phase rule (a pure phase is either present at activity 1 or absent with
//! the solution undersaturated in it) is standard chemical thermodynamics.

use kinequil::solve_equilibrium;
use kinequil::Stoichiometry;
use kinequil::{run, RunSettings};

use crate::util::{network, rel, SplitMix};

/// Species lines in the given order, then the reactions.
fn text(species: &[(&str, f64)], order: &[usize], reactions: &str) -> String {
    let mut t = String::from("[species]\n");
    for &k in order {
        t += &format!("{} = {:e}\n", species[k].0, species[k].1);
    }
    t + reactions
}

fn solve_named(text: &str) -> Vec<(String, f64)> {
    let net = network(text);
    let solved = solve_equilibrium(&net, &Stoichiometry::new(&net)).unwrap_or_else(|e| panic!("{e}\n{text}"));
    net.species
        .iter()
        .zip(solved.concentrations)
        .map(|(s, c)| (s.name.clone(), c))
        .collect()
}

fn permutations(n: usize) -> Vec<Vec<usize>> {
    if n == 1 {
        return vec![vec![0]];
    }
    let mut out = Vec::new();
    for p in permutations(n - 1) {
        for k in 0..n {
            let mut q = p.clone();
            q.insert(k, n - 1);
            out.push(q);
        }
    }
    out
}

/// For a step X + Y <=> Z with K from totals x ≤ y of X and Y (Z = 0 otherwise), the
/// leftover [X] solves K x̂² + (K(y − x) + 1) x̂ − x = 0, taken in the form without cancellation.
fn leftover(k: f64, small: f64, large: f64) -> f64 {
    let p = k * (large - small) + 1.0;
    2.0 * small / (p + (p * p + 4.0 * k * small).sqrt())
}

/// Decades from 1e-6 to 1e6.
fn decades() -> impl Iterator<Item = f64> {
    (-6..=6).map(|e| 10f64.powi(e))
}

/// Checks a solved equilibrium against the closed form, species by species. Tolerance 1e-10
/// relative: the solver stops when Newton asks for less than 1e-13 change in any ln c, and the
/// closed forms are free of cancellation, so only rounding over a few operations remains.
fn assert_matches(got: &[(String, f64)], want: &[(&str, f64)], case: &str) {
    for (name, value) in want {
        let c = got.iter().find(|(n, _)| n == name).unwrap().1;
        assert!(
            rel(c, *value) < 1e-10,
            "{case}: {name} = {c:e}, closed form {value:e}"
        );
    }
}

#[test]
fn association_scan_in_every_species_order() {
    // A + B <=> C from A = 1, B = r, C = 0. For a ≤ b the leftover y = [A] solves
    // K y² + (K(b − a) + 1) y − a = 0; then [B] = b − a + y and [C] = K [A][B].
    for k in decades() {
        for r in decades() {
            // Amounts at most 1 mol/L (the reader refuses above 1e4), ratio b/a = r.
            let (a, b) = (1f64.min(1.0 / r), r.min(1.0));
            let (small, large) = if a <= b { (a, b) } else { (b, a) };
            let y = leftover(k, small, large);
            let other = large - small + y;
            let c = k * y * other;
            let (ca, cb) = if a <= b { (y, other) } else { (other, y) };
            let reactions = format!("\n[[reaction]]\nscheme = \"A + B <=> C\"\nkf = 1.0\nK = {k:e}\n");
            for order in permutations(3) {
                let t = text(&[("A", a), ("B", b), ("C", 0.0)], &order, &reactions);
                let case = format!("A + B <=> C, K = {k:e}, B0/A0 = {r:e}, order {order:?}");
                assert_matches(&solve_named(&t), &[("A", ca), ("B", cb), ("C", c)], &case);
            }
        }
    }
}

#[test]
fn dimerisation_scan_in_every_species_order() {
    // 2 A <=> B from A = 1, B = r: a = A + 2 B is conserved and [A] = 2a/(1 + √(1 + 8Ka)),
    // [B] = K [A]².
    for k in decades() {
        for r in decades() {
            let (a0, b0) = (1f64.min(1.0 / r), r.min(1.0));
            let a = a0 + 2.0 * b0;
            let ca = 2.0 * a / (1.0 + (1.0 + 8.0 * k * a).sqrt());
            let reactions = format!("\n[[reaction]]\nscheme = \"2 A <=> B\"\nkf = 1.0\nK = {k:e}\n");
            for order in permutations(2) {
                let t = text(&[("A", a0), ("B", b0)], &order, &reactions);
                let case = format!("2 A <=> B, K = {k:e}, B0/A0 = {r:e}, order {order:?}");
                assert_matches(&solve_named(&t), &[("A", ca), ("B", k * ca * ca)], &case);
            }
        }
    }
}

#[test]
fn dissociation_scan_in_every_species_order() {
    // A <=> B + C from A = 0, B = 1, C = r. For b ≤ c the leftover y = [B] solves
    // y² + (c − b + K) y − K b = 0; then [C] = c − b + y and [A] = [B][C]/K.
    for k in decades() {
        for r in decades() {
            let (b, c) = (1f64.min(1.0 / r), r.min(1.0));
            let (small, large) = if b <= c { (b, c) } else { (c, b) };
            // The reverse of an association with constant 1/K.
            let y = leftover(1.0 / k, small, large);
            let other = large - small + y;
            let ca = y * other / k;
            let (cb, cc) = if b <= c { (y, other) } else { (other, y) };
            let reactions = format!("\n[[reaction]]\nscheme = \"A <=> B + C\"\nkf = 1.0\nK = {k:e}\n");
            for order in permutations(3) {
                let t = text(&[("A", 0.0), ("B", b), ("C", c)], &order, &reactions);
                let case = format!("A <=> B + C, K = {k:e}, C0/B0 = {r:e}, order {order:?}");
                assert_matches(&solve_named(&t), &[("A", ca), ("B", cb), ("C", cc)], &case);
            }
        }
    }
}

#[test]
fn single_association_step_converges_in_every_order_and_start() {
    // A + E <=> B over K from 0.1 to 1e3, five initial states and every species order: the
    // closed form as in the association scan (E plays B's part).
    let starts: [(f64, f64, f64); 5] = [
        (0.3, 0.0, 0.7),
        (1.0, 0.0, 1.0),
        (0.3, 0.2, 0.7),
        (1e-3, 0.0, 2.0),
        (0.5, 1.0, 1e-4),
    ];
    for k in [0.1f64, 1.0, 10.0, 100.0, 1000.0] {
        for &(a0, b0, e0) in &starts {
            let (a, e) = (a0 + b0, e0 + b0);
            let (small, large) = if a <= e { (a, e) } else { (e, a) };
            let y = leftover(k, small, large);
            let other = large - small + y;
            let cb = k * y * other;
            let (ca, ce) = if a <= e { (y, other) } else { (other, y) };
            let reactions = format!("\n[[reaction]]\nscheme = \"A + E <=> B\"\nkf = 10\nK = {k:e}\n");
            for order in permutations(3) {
                let t = text(&[("A", a0), ("B", b0), ("E", e0)], &order, &reactions);
                let case = format!("A + E <=> B, K = {k}, start {:?}, order {order:?}", (a0, b0, e0));
                assert_matches(&solve_named(&t), &[("A", ca), ("B", cb), ("E", ce)], &case);
            }
        }
    }
}

/// A seeded random network that satisfies detailed balance, as (species, reactions) text parts.
/// Species carry a size (1 to 3) that every step conserves and a free energy g (in RT) spread
/// over ±14, so equilibrium constants span about 24 decades; rate constants span 12 decades.
fn random_network(seed: u64) -> (Vec<(String, f64)>, String) {
    let mut rng = SplitMix(seed);
    let n = 3 + (rng.next_f64() * 58.0) as usize;
    let size: Vec<usize> = (0..n).map(|i| 1 + i % 3).collect();
    let g: Vec<f64> = (0..n).map(|_| 28.0 * rng.next_f64() - 14.0).collect();
    let species: Vec<(String, f64)> = (0..n)
        .map(|i| {
            let c0 = if i == 0 || rng.next_f64() < 0.6 {
                10f64.powf(-4.0 * rng.next_f64())
            } else {
                0.0
            };
            (format!("S{i}"), c0)
        })
        .collect();
    let mut reactions = String::new();
    let step = |reactions: &mut String, lhs: &[usize], rhs: &[usize], rng: &mut SplitMix| {
        let dg: f64 = rhs.iter().map(|&i| g[i]).sum::<f64>() - lhs.iter().map(|&i| g[i]).sum::<f64>();
        // kf over 12 decades, held so that kr = kf/K stays within the reader's 1e25 limit.
        let kf = 10f64.powf(12.0 * rng.next_f64() - 4.0).min(1e20 * (-dg).exp());
        let side = |s: &[usize]| s.iter().map(|i| format!("S{i}")).collect::<Vec<_>>().join(" + ");
        *reactions += &format!(
            "\n[[reaction]]\nscheme = \"{} <=> {}\"\nkf = {kf:e}\nK = {:e}\n",
            side(lhs),
            side(rhs),
            (-dg).exp()
        );
    };
    // Isomerisations along each size class, then associations and dimerisations that add sizes.
    for i in 0..n.saturating_sub(3) {
        step(&mut reactions, &[i], &[i + 3], &mut rng);
    }
    for _ in 0..(n / 2).max(1) {
        let a = (rng.next_f64() * n as f64) as usize % n;
        let b = (rng.next_f64() * n as f64) as usize % n;
        if size[a] + size[b] <= 3 {
            let candidates: Vec<usize> = (0..n).filter(|&k| size[k] == size[a] + size[b]).collect();
            let target = candidates[(rng.next_f64() * candidates.len() as f64) as usize % candidates.len()];
            step(&mut reactions, &[a, b], &[target], &mut rng);
        }
    }
    if reactions.is_empty() {
        // Three species and no association drawn: a dimerisation keeps the network non-empty.
        reactions = format!(
            "\n[[reaction]]\nscheme = \"2 S0 <=> S1\"\nkf = 1.0\nK = {:e}\n",
            (2.0 * g[0] - g[1]).exp()
        );
    }
    (species, reactions)
}

#[test]
fn random_detailed_balance_networks_solve_detect_and_agree() {
    let mut detected = 0;
    let mut beyond_horizon = 0;
    let mut widest_stiffness: f64 = 0.0;
    for seed in 1..=200u64 {
        let (species, reactions) = random_network(seed);
        let named: Vec<(&str, f64)> = species.iter().map(|(n, c)| (n.as_str(), *c)).collect();
        let identity: Vec<usize> = (0..named.len()).collect();
        let mut shuffled = identity.clone();
        let mut rng = SplitMix(seed ^ 0xABCD);
        for i in (1..shuffled.len()).rev() {
            let j = (rng.next_f64() * (i + 1) as f64) as usize % (i + 1);
            shuffled.swap(i, j);
        }
        let original = text(&named, &identity, &reactions);
        let permuted = text(&named, &shuffled, &reactions);

        // The solve converges in both orders and gives the same composition to 1e-10 relative
        // (the convergence test asks for 1e-13 in ln c; species order only changes rounding).
        let a = solve_named(&original);
        let b = solve_named(&permuted);
        for (name, c) in &a {
            let other = b.iter().find(|(n, _)| n == name).unwrap().1;
            assert!(
                other == *c || rel(other, *c) < 1e-10,
                "seed {seed}: {name} {c:e} vs {other:e} after permutation"
            );
        }

        let result = run(network(&original), &RunSettings::default()).expect("run succeeds");
        let solved = result
            .solved
            .as_ref()
            .unwrap_or_else(|e| panic!("seed {seed}: {e}"));
        assert!(
            solved.max_k_residual < 1e-9,
            "seed {seed}: ln Q − ln K {}",
            solved.max_k_residual
        );
        // A mode slower than 1e300 s (a step all but frozen at trace concentrations) is
        // reported as such instead of a time; such a network is beyond any horizon.
        let modes = match result.relaxation.as_ref() {
            Ok(modes) => modes,
            Err(why) if why.contains("too slow") => {
                beyond_horizon += 1;
                continue;
            }
            Err(why) => panic!("seed {seed}: {why}"),
        };
        if let (Some(slow), Some(fast)) = (modes.first(), modes.last()) {
            widest_stiffness = widest_stiffness.max(slow.tau_seconds / fast.tau_seconds);
        }
        let slowest = modes.first().map_or(0.0, |m| m.tau_seconds);
        if slowest * 1000f64.ln() <= kinequil::DEFAULT_MAX_TIME {
            assert!(
                result.solution.equilibrium_at.is_some(),
                "seed {seed}: equilibrium not detected (τ slowest {slowest:e} s, stopped at {:e} s)",
                result.solution.trajectory.end_time()
            );
            assert!(
                !result.disagrees,
                "seed {seed}: routes differ by {:?}",
                result.disagreement
            );
            detected += 1;
        } else {
            beyond_horizon += 1;
        }
    }
    // The generator must exercise what the property is about: most networks settle within the
    // horizon, and stiffness ratios reach far beyond what a 1/t screen could follow.
    assert!(
        detected >= 120,
        "only {detected} networks settle within the horizon"
    );
    assert!(
        widest_stiffness > 1e15,
        "widest stiffness ratio only {widest_stiffness:e}"
    );
    eprintln!(
        "{detected} detected, {beyond_horizon} beyond the horizon, widest stiffness {widest_stiffness:e}"
    );
}

#[test]
fn trace_species_tied_by_a_zero_total_law_stay_equal() {
    // A <=> X + Y with a tiny K keeps X and Y at about 1e-8 mol/L under gross fluxes near
    // 1e3 mol/(L s); X + Y <=> B drains them slowly. X − Y = 0 is conserved: the two must stay
    // equal to rounding relative to their own size (1e-12 allows a few thousand roundings).
    let t = r#"
[species]
A = 1.0
X = 0.0
Y = 0.0
B = 0.0

[[reaction]]
scheme = "A <=> X + Y"
kf = 1e3
K = 1e-16

[[reaction]]
scheme = "X + Y <=> B"
kf = 1e5
K = 1e10
"#;
    let settings = RunSettings {
        rtol: 1e-10,
        atol: 1e-20,
        ..RunSettings::default()
    };
    let result = run(network(t), &settings).expect("run succeeds");
    assert!(result.solution.equilibrium_at.is_some());
    for state in &result.solution.trajectory.states[1..] {
        let (x, y) = (state[1], state[2]);
        assert!(
            (x - y).abs() <= 1e-12 * x.abs().max(y.abs()),
            "X = {x:e}, Y = {y:e}"
        );
    }
}

#[test]
fn two_solids_that_cannot_coexist_leave_the_less_soluble_one() {
    // S1 <=> A (K1 = 0.1) and S2 <=> A (K2 = 0.01): by the phase rule only the less soluble S2
    // can remain; all of S1 dissolves and re-precipitates as S2 ([A] = K2 = 0.01). Totals:
    // S1 + S2 + A = 1.5, so S2 = 1.49 and S1 = 0.
    let t = r#"
[species]
S1 = { initial = 1.0, phase = "solid" }
S2 = { initial = 0.5, phase = "solid" }
A = 0.0

[[reaction]]
scheme = "S1 <=> A"
kf = 1.0
K = 0.1

[[reaction]]
scheme = "S2 <=> A"
kf = 1.0
K = 0.01
"#;
    let net = network(t);
    let solved = solve_equilibrium(&net, &Stoichiometry::new(&net)).unwrap_or_else(|e| panic!("{e}"));
    let c = &solved.concentrations;
    assert_eq!(c[0], 0.0);
    assert!(rel(c[1], 1.49) < 1e-12 && rel(c[2], 0.01) < 1e-12, "{c:?}");
    assert_eq!(solved.used_up, vec!["S1".to_string()]);
    // The integration settles in the same place (1e-5: the run stops within ten integration
    // tolerances of the solved state, 1e-7 mol/L at [A] = 0.01; the presence switch leaves
    // about 1e-13 mol/L of the used-up solid).
    let result = run(net, &RunSettings::default()).expect("run succeeds");
    let end = result.solution.trajectory.last_state();
    assert!(
        end[0] < 1e-9 && rel(end[1], 1.49) < 1e-5 && rel(end[2], 0.01) < 1e-5,
        "{end:?}"
    );
    assert!(result.solution.equilibrium_at.is_some() && !result.disagrees);
}

#[test]
fn a_used_up_solid_that_would_reform_is_not_accepted() {
    // S <=> A + B with K = 0.04 from S = 0.1, A = 0.5, B = 0: the quick path keeps S present
    // ([A][B] = K, A − B = 0.5 → B = (−0.5 + √(0.25 + 0.16))/2 = 0.0701562...), S = 0.1 − B
    // stays positive; with little S (0.01) it is used up instead, and then [A][B] = 0.51·0.01
    // must stay below K (undersaturated: S does not form again).
    let t = |s0: f64| {
        format!(
            "[species]\nS = {{ initial = {s0}, phase = \"solid\" }}\nA = 0.5\nB = 0.0\n\n[[reaction]]\nscheme = \"S <=> A + B\"\nkf = 1.0\nK = 0.04\n"
        )
    };
    let net = network(&t(0.1));
    let solved = solve_equilibrium(&net, &Stoichiometry::new(&net)).unwrap();
    let b = (-0.5 + (0.25f64 + 0.16).sqrt()) / 2.0;
    assert!(rel(solved.concentrations[2], b) < 1e-12 && rel(solved.concentrations[0], 0.1 - b) < 1e-12);
    let net = network(&t(0.01));
    let solved = solve_equilibrium(&net, &Stoichiometry::new(&net)).unwrap();
    assert_eq!(solved.used_up, vec!["S".to_string()]);
    assert!(rel(solved.concentrations[1], 0.51) < 1e-12 && rel(solved.concentrations[2], 0.01) < 1e-12);
    assert!(solved.concentrations[1] * solved.concentrations[2] < 0.04);
}

#[test]
fn every_bundled_case_with_an_equilibrium_reaches_it_and_the_routes_agree() {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("cases");
    let mut checked = 0;
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        let net = kinequil::Network::from_file(&path).unwrap();
        let result = run(net, &RunSettings::default()).expect("bundled case runs");
        let name = path.display();
        if result.network.reactions.iter().all(|r| r.reversible) {
            let solved = result.solved.as_ref().unwrap_or_else(|e| panic!("{name}: {e}"));
            assert!(solved.max_total_residual < 1e-12, "{name}");
            assert!(
                result.solution.equilibrium_at.is_some(),
                "{name}: equilibrium not detected"
            );
            assert!(
                !result.disagrees,
                "{name}: routes differ by {:?}",
                result.disagreement
            );
            assert!(result.relaxation.is_ok(), "{name}");
            checked += 1;
        }
    }
    assert!(checked >= 4, "only {checked} bundled cases have an equilibrium");
}

#[test]
fn a_horizon_too_short_is_said_with_figures_not_blamed_on_one_way_steps() {
    // A <=> B with kf = kr = 1e-17 /s: τ = 1/(kf + kr) = 5e16 s (textbook first-order
    // relaxation), beyond the longest automatic horizon of 1e16 s.
    let t = "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 1e-17\nkr = 1e-17\n";
    let result = run(network(t), &RunSettings::default()).expect("run succeeds");
    assert!(result.solution.equilibrium_at.is_none());
    let said = kinequil::Summary::from_result(&result).stop_reason;
    assert!(
        said.contains("use --until") && said.contains("relaxation time"),
        "{said}"
    );
    assert!(!said.contains("one-way"), "{said}");
    let tau = result.relaxation.as_ref().unwrap()[0].tau_seconds;
    assert!(rel(tau, 5e16) < 1e-9, "{tau}");
}

#[test]
fn an_approach_far_from_the_linear_regime_is_flagged() {
    // 2 A <=> B with kf = 1e6 L/(mol s), kr = 1e-8 /s from A = 1: the start is second order and
    // fast, the equilibrium relaxation (1/τ = 4 kf [A]eq + kr) slow, so τ·ln(1/tol) overstates
    // the integrated time by orders of magnitude and the run must say so.
    let t = "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"2 A <=> B\"\nkf = 1e6\nkr = 1e-8\n";
    let result = run(network(t), &RunSettings::default()).expect("run succeeds");
    assert!(result.solution.equilibrium_at.is_some() && !result.disagrees);
    let note = kinequil::Summary::from_result(&result)
        .relaxation_estimate_note
        .expect("a note");
    assert!(note.contains("not in the linear regime"), "{note}");
    // The demo batch is close to linear: no note there.
    let demo = kinequil::Network::from_file(
        &std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("cases/demo.toml"),
    )
    .unwrap();
    let result = run(demo, &RunSettings::default()).expect("run succeeds");
    assert!(kinequil::Summary::from_result(&result)
        .relaxation_estimate_note
        .is_none());
}
