//! Real conditions: Kp and Kc, temperature dependence against the JANAF tables, Arrhenius
//! constants, units in files, gases and pure phases that are used up.

use std::path::Path;

use kinequil::Network;
use kinequil::GAS_CONSTANT;
use kinequil::{audit, Adjust};

use crate::util::{network, rel, run_with};

fn at(text: &str, t: f64) -> Network {
    Network::from_text_at(text, Path::new("inline.toml"), Some(t)).unwrap_or_else(|e| panic!("{e}"))
}

/// A gas-phase step with the given equation and Kp field; species all gases.
fn gas_step(species: &[&str], equation: &str, kp: &str) -> String {
    let mut text = String::from("[species]\n");
    for s in species {
        text += &format!("{s} = {{ initial = 0.01, phase = \"gas\" }}\n");
    }
    text + &format!("\n[[reaction]]\nscheme = \"{equation}\"\nkf = 1.0\nKp = {kp}\n")
}

#[test]
fn kp_to_kc_by_hand_with_codata_r() {
    // Kc = Kp (p°/(RT))^Δn with concentrations in mol/L (hand calculation; R from CODATA 2018,
    // p° = 1 bar). In atm: Kp [atm^Δn] · (101 325 Pa/atm)^Δn / (1000 R T)^Δn. Same formula,
    // computed independently here: 1e-12 relative.
    let t = 350.0;
    let rt = 1000.0 * GAS_CONSTANT * t; // Pa per (mol/L)
    let cases: [(&[&str], &str, f64); 3] = [
        (&["N2", "H2", "NH3"], "N2 + 3 H2 <=> 2 NH3", -2.0),
        (&["A", "B", "C"], "A + B <=> C", -1.0),
        (&["N2O4", "NO2"], "N2O4 <=> 2 NO2", 1.0),
    ];
    for (species, equation, dn) in cases {
        let kp = 0.37;
        let net = at(&gas_step(species, equation, &kp.to_string()), t);
        let kc = net.reactions[0].k_given.unwrap();
        assert!(
            rel(kc, kp * (1e5 / rt).powf(dn)) < 1e-12,
            "{equation} in bar: {kc}"
        );
        let kr = net.reactions[0].kr;
        assert!(rel(1.0 / kr, kc) < 1e-12, "kr = kf / Kc");

        let with_units = format!("\"{kp} atm^{dn}\"");
        let net = at(&gas_step(species, equation, &with_units), t);
        let kc = net.reactions[0].k_given.unwrap();
        assert!(
            rel(kc, kp * (101_325.0 / rt).powf(dn)) < 1e-12,
            "{equation} in atm: {kc}"
        );
    }
}

#[test]
fn gas_phase_k_at_two_temperatures_matches_the_janaf_tables() {
    // K°(T) of three gas-phase reactions from the NIST-JANAF Thermochemical Tables, 4th ed.
    // (Chase 1998), with the heat-capacity integrals done by tests/reference/janaf_gas.py. Here K
    // is rebuilt from dH and dS at 298.15 K (and, equivalently, by van 't Hoff from K(298.15)),
    // which neglects the heat-capacity change ΔCp. At 298.15 K the two agree to rounding (1e-9);
    // at T the neglected term is about (ΔCp/R)((T − T0)/T − ln(T/T0)) in ln K, and ΔCp itself
    // drifts with T, so the tolerance on ln K is three times that estimate (common practice).
    let table: serde_json::Value = serde_json::from_str(include_str!("reference/janaf_gas.json")).unwrap();
    let species_of = |equation: &str| -> Vec<String> {
        equation
            .split(['+', '<', '=', '>'])
            .map(|t| {
                t.trim()
                    .trim_start_matches(|c: char| c.is_ascii_digit() || c == ' ')
                    .to_string()
            })
            .filter(|t| !t.is_empty())
            .collect()
    };
    let mut checked = 0;
    for (equation, entry) in table["reactions"].as_object().unwrap() {
        let dh = entry["dH_kJ_per_mol"].as_f64().unwrap();
        let ds = entry["dS_J_per_mol_K"].as_f64().unwrap();
        let dcp = entry["dCp_298_J_per_mol_K"].as_f64().unwrap();
        let names = species_of(equation);
        let refs: Vec<&str> = names.iter().map(|s| s.as_str()).collect();
        let k298 = entry["K"]["298.15"].as_f64().unwrap();
        let from_gibbs = gas_step(&refs, equation, &format!("{{ dH = {dh}, dS = {ds} }}"));
        let from_vant_hoff = gas_step(
            &refs,
            equation,
            &format!("{{ value = {k298:e}, at = 298.15, dH = {dh} }}"),
        );
        for (t_key, k_ref) in entry["K"].as_object().unwrap() {
            let t: f64 = t_key.parse().unwrap();
            let k_ref = k_ref.as_f64().unwrap();
            let dn: f64 = {
                let net = at(&from_gibbs, t);
                let r = &net.reactions[0];
                r.products.iter().map(|e| e.1).sum::<f64>() - r.reactants.iter().map(|e| e.1).sum::<f64>()
            };
            let back_to_kp = |net: &Network| {
                net.reactions[0].k_given.unwrap() * (1000.0 * GAS_CONSTANT * t / 1e5).powf(dn)
            };
            let k_gibbs = back_to_kp(&at(&from_gibbs, t));
            let k_vant_hoff = back_to_kp(&at(&from_vant_hoff, t));
            assert!(
                rel(k_vant_hoff, k_gibbs) < 1e-9,
                "{equation} at {t} K: the two routes differ"
            );
            let t0: f64 = 298.15;
            let estimate = (dcp / GAS_CONSTANT * ((t - t0) / t - (t / t0).ln())).abs();
            let tolerance = 3.0 * estimate + 1e-9;
            let error = (k_gibbs / k_ref).ln().abs();
            assert!(
                error <= tolerance,
                "{equation} at {t} K: ln K off by {error}, allowed {tolerance}"
            );
            checked += 1;
        }
    }
    assert!(checked >= 6, "at least two reactions at two temperatures");
}

#[test]
fn arrhenius_constants_at_two_temperatures_and_the_enthalpy_audit() {
    // k = A exp(−Ea/(R T)) by hand at 300 K and 350 K (CODATA R): 1e-12 relative.
    // Reverse Ea = Ea,f − ΔH: with ΔH = −20 kJ/mol in the K data the audit finds no deviation;
    // with Ea,r 5 kJ/mol higher it finds −5 kJ/mol (the same numbers).
    let text = |ea_r: f64| {
        format!(
            r#"
[species]
A = 1.0
B = 1.0
C = 0.0

[[reaction]]
scheme = "A + B <=> C"
kf = {{ A = "1.0e10 L/(mol*s)", Ea = "60 kJ/mol" }}
kr = {{ A = "2.0e12 1/s", Ea = "{ea_r} kJ/mol" }}
K = {{ value = 5.0, at = "25 degC", dH = "-20 kJ/mol" }}
"#
        )
    };
    for t in [300.0, 350.0] {
        let net = at(&text(80.0), t);
        let hand = 1.0e10 * (-60_000.0 / (GAS_CONSTANT * t)).exp();
        assert!(rel(net.reactions[0].kf, hand) < 1e-12, "kf at {t} K");
        let hand_r = 2.0e12 * (-80_000.0 / (GAS_CONSTANT * t)).exp();
        assert!(rel(net.reactions[0].kr, hand_r) < 1e-12, "kr at {t} K");
        let check = audit(&net, 0.1, Adjust::Kr).steps[0]
            .activation
            .clone()
            .expect("activation check");
        assert!(check.deviation_kj_per_mol.abs() < 1e-9 && check.consistent);
        let off = audit(&at(&text(85.0), t), 0.1, Adjust::Kr).steps[0]
            .activation
            .clone()
            .unwrap();
        assert!(
            (off.deviation_kj_per_mol + 5.0).abs() < 1e-9,
            "{}",
            off.deviation_kj_per_mol
        );
        assert!(!off.consistent);
    }
}

#[test]
fn units_in_files_and_their_errors() {
    let text = r#"
temperature = "60 degC"

[species]
A = "25 mmol/L"
B = { initial = "0.5 mol/m3" }
C = 0.0

[[reaction]]
scheme = "A + B <=> C"
kf = "3.6 L/(mol*h)"
kr = "0.06 1/min"
"#;
    let net = network(text);
    assert!((net.temperature - 333.15).abs() < 1e-12);
    assert!(rel(net.species[0].initial, 0.025) < 1e-15 && rel(net.species[1].initial, 5e-4) < 1e-15);
    assert!(rel(net.reactions[0].kf, 1e-3) < 1e-15 && rel(net.reactions[0].kr, 1e-3) < 1e-15);

    // A first-order constant on a second-order step names the step, the units given and expected.
    let wrong = text.replace("\"3.6 L/(mol*h)\"", "\"0.5 1/s\"");
    let err = Network::from_text(&wrong, Path::new("units.toml")).unwrap_err();
    assert_eq!((err.line, err.field.as_str()), (Some(11), "reaction[1].kf"));
    assert!(
        err.message.contains("`0.5 1/s` has units of s^-1") && err.message.contains("L/(mol s)"),
        "{err}"
    );

    let malformed = text.replace("\"0.06 1/min\"", "\"0.06 1/fortnight\"");
    let err = Network::from_text(&malformed, Path::new("units.toml")).unwrap_err();
    assert_eq!((err.line, err.field.as_str()), (Some(12), "reaction[1].kr"));
    assert!(err.message.contains("unknown unit `fortnight`"), "{err}");
}

#[test]
fn a_used_up_solid_stops_its_steps_without_going_negative() {
    // S(s) <=> A + B with K = 0.04 but only 0.1 mol/L of solid and B0 = 0.05: the solid dissolves
    // completely (Q = 0.1 · 0.15 = 0.015 < K), so by hand A = 0.1, B = 0.15, S = 0.
    let text = r#"
[species]
S = { initial = 0.1, phase = "solid" }
A = 0.0
B = 0.05

[[reaction]]
scheme = "S <=> A + B"
kf = 0.02
K = 0.04
"#;
    let result = run_with(text, 1e-8, 1e-14, None);
    let solved = result.solved.as_ref().expect("solved with the solid used up");
    assert_eq!(solved.concentrations[0], 0.0);
    // The solver meets each total to 1e-12 of its size; 1e-10 leaves margin for the sum of terms.
    assert!(rel(solved.concentrations[1], 0.1) < 1e-10 && rel(solved.concentrations[2], 0.15) < 1e-10);
    // Along the trajectory the solid never goes below its tolerance (1e-14), and the run ends
    // with it used up (below 1e-11: the presence switch keeps a trace of order 1e-12).
    let min_s = result
        .solution
        .trajectory
        .states
        .iter()
        .map(|c| c[0])
        .fold(f64::INFINITY, f64::min);
    assert!(min_s > -1e-14, "solid went to {min_s}");
    let end = result.equilibrium.as_ref().unwrap();
    assert!(end[0] < 1e-11 && rel(end[1], 0.1) < 1e-6, "{end:?}");
    assert!(!result.disagrees);
}

#[test]
fn gas_pressures_follow_the_ideal_gas_law_in_a_rigid_vessel() {
    // N2O4 <=> 2 NO2 from 1 bar of N2O4 at 298.15 K: c = p/(RT); each N2O4 that dissociates adds
    // one mole of gas, so p_total = p0 + p(NO2)/2 (hand calculation for a closed rigid vessel).
    let text = r#"
temperature = 298.15

[species]
N2O4 = { initial = "1 bar", phase = "gas" }
NO2 = { initial = 0.0, phase = "gas" }

[[reaction]]
scheme = "N2O4 <=> 2 NO2"
kf = 5.0
Kp = 0.1485
"#;
    let result = run_with(text, 1e-9, 1e-15, None);
    let c0 = 1e5 / (1000.0 * GAS_CONSTANT * 298.15);
    assert!(rel(result.network.species[0].initial, c0) < 1e-12);
    let (partial, total) = result.pressures_bar(&result.final_state).unwrap();
    assert!(rel(total, 1.0 + partial[1].1 / 2.0) < 1e-9, "total {total}");
    // At equilibrium p(NO2)²/p(N2O4) = Kp (bar, standard 1 bar): 1e-6 for the run's tolerance.
    assert!(rel(partial[1].1.powi(2) / partial[0].1, 0.1485) < 1e-6);
}

const SWEEPABLE: &str = r#"temperature = "50 degC"
[species]
A = 1.0
B = 0.0
G = { initial = "1 bar", phase = "gas" }
H = { initial = 0.0, phase = "gas" }

[[reaction]]
scheme = "A <=> B"
kf = { A = 1.0e8, Ea = "60 kJ/mol" }
K = { value = 4.0, at = "25 degC", dH = "-20 kJ/mol" }

[[reaction]]
scheme = "G <=> H"
kf = 1.0
kr = 2.0
"#;

#[test]
fn one_network_evaluates_at_any_temperature_without_rereading() {
    // The network read once and evaluated at 70 degC equals the file read at 70 degC (one code
    // path, bit for bit), and its constants follow the closed forms: Arrhenius
    // k = A exp(−Ea/RT), van 't Hoff ln K(T) = ln K(T0) − dH/R (1/T − 1/T0), and a partial
    // pressure c = p/(RT) (textbook relations; R from CODATA 2018).
    let t = 343.15;
    let read_once = network(SWEEPABLE);
    let evaluated = read_once.at_temperature(t).unwrap();
    let reread = Network::from_text_at(SWEEPABLE, Path::new("inline.toml"), Some(t)).unwrap();
    assert_eq!(evaluated.reactions, reread.reactions);
    assert_eq!(evaluated.species, reread.species);
    let r = &evaluated.reactions[0];
    let kf = 1.0e8 * (-60_000.0 / (GAS_CONSTANT * t)).exp();
    let k = 4.0 * (20_000.0 / GAS_CONSTANT * (1.0 / t - 1.0 / 298.15)).exp();
    // 1e-14 relative: the same arithmetic in another order.
    assert!(rel(r.kf, kf) < 1e-14 && rel(r.k_given.unwrap(), k) < 1e-14);
    assert!(rel(r.kr, kf / k) < 1e-14);
    assert!(rel(evaluated.species[2].initial, 1e5 / (1000.0 * GAS_CONSTANT * t)) < 1e-14);
    // Out of the model's range, the evaluation says so as the reader would.
    let err = read_once.at_temperature(60.0).unwrap_err();
    assert!(err.to_string().contains("outside"), "{err}");
}

#[test]
fn constants_scale_by_factors_in_their_own_form() {
    use kinequil::Constant;
    let base = network(SWEEPABLE);
    let (kf, kr, k) = (
        base.reactions[0].kf,
        base.reactions[0].kr,
        base.reactions[0].k_given.unwrap(),
    );
    // kf × 2 with kr defined by K: K stays, so kr doubles with kf (by definition kr = kf/K).
    let n = base.with_factor(0, Constant::Kf, 2.0).unwrap();
    assert!(rel(n.reactions[0].kf, 2.0 * kf) < 1e-15 && rel(n.reactions[0].kr, 2.0 * kr) < 1e-15);
    assert!(n.reactions[0].kf_arrhenius.is_some(), "Arrhenius stays Arrhenius");
    // kr × 2 on a K-defined kr goes through K (halved); kf stays.
    let n = base.with_factor(0, Constant::Kr, 2.0).unwrap();
    assert!(rel(n.reactions[0].kr, 2.0 * kr) < 1e-14 && n.reactions[0].kf == kf);
    assert!(rel(n.reactions[0].k_given.unwrap(), k / 2.0) < 1e-14);
    // K × 3 holds at every temperature (the van 't Hoff value is scaled).
    let n = base
        .with_factor(0, Constant::K, 3.0)
        .unwrap()
        .at_temperature(360.0)
        .unwrap();
    let m = base.at_temperature(360.0).unwrap();
    assert!(
        rel(
            n.reactions[0].k_given.unwrap(),
            3.0 * m.reactions[0].k_given.unwrap()
        ) < 1e-14
    );
    // An explicit kr scales itself.
    let n = base.with_factor(1, Constant::Kr, 0.5).unwrap();
    assert_eq!(n.reactions[1].kr, 1.0);
    assert!(base.with_factor(1, Constant::K, 2.0).is_err(), "step 2 has no K");
}
