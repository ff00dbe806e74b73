//! The consistency audit against hand calculations, the Wegscheider condition and a published
//! thermochemical table.

use kinequil::GAS_CONSTANT;
use kinequil::{audit, corrected_network_text, Adjust};

use crate::util::{network, rel};

/// A <=> B <=> C <=> A with Π kf/kr = 2/kr3 around the cycle, and a side
/// step A <=> D that belongs to no cycle.
fn triangle(kr3: f64) -> String {
    format!(
        r#"
[species]
A = 1.0
B = 0.0
C = 0.0
D = 0.0

[[reaction]]
scheme = "A <=> B"
kf = 1.0
kr = 0.5

[[reaction]]
scheme = "B <=> C"
kf = 2.0
kr = 0.8

[[reaction]]
scheme = "C <=> A"
kf = 0.4
kr = {kr3}

[[reaction]]
scheme = "A <=> D"
kf = 0.3
kr = 0.1
"#
    )
}

const RT_298: f64 = GAS_CONSTANT * 298.15 / 1000.0;

#[test]
fn wegscheider_condition_on_a_three_step_cycle() {
    // Wegscheider (1901): around a cycle of reversible steps, Π kf/kr = 1. Here
    // (1/0.5)(2/0.8)(0.4/kr3) = 2/kr3, so kr3 = 2 is consistent and kr3 = 1 is off by 2.
    let consistent = audit(&network(&triangle(2.0)), 0.1, Adjust::Kr);
    assert_eq!(consistent.cycles.len(), 1, "one independent cycle");
    assert!(consistent.cycles[0].deviation_kj_per_mol.abs() < 1e-12);
    assert!(consistent.consistent);
    assert!(consistent.correction.is_none());

    let broken = audit(&network(&triangle(1.0)), 0.1, Adjust::Kr);
    let cycle = &broken.cycles[0];
    let steps: Vec<usize> = cycle.steps.iter().map(|s| s.step).collect();
    assert_eq!(steps, vec![1, 2, 3], "the cycle names its steps");
    // Deviation RT ln 2 at 298.15 K with CODATA R: pure arithmetic, 1e-12 relative.
    assert!(rel(cycle.deviation_kj_per_mol.abs(), RT_298 * 2f64.ln()) < 1e-12);
    assert!(!broken.consistent);
}

#[test]
fn correction_worked_by_hand() {
    // Adjusting kr with equal weights: minimise Σ d² subject to d1 + d2 + d3 = −ln 2 (the cycle),
    // so each d = −ln(2)/3: every kr of the cycle grows by 2^(1/3); kf and the side step stay.
    let text = triangle(1.0);
    let net = network(&text);
    let found = audit(&net, 0.1, Adjust::Kr);
    let correction = found.correction.as_ref().expect("a correction");
    assert_eq!(correction.steps.len(), 3, "the side step is not touched");
    for step in &correction.steps {
        assert_eq!(step.kf_corrected, step.kf, "kf is kept exactly");
        assert!(
            rel(step.kr_corrected / step.kr, 2f64.powf(1.0 / 3.0)) < 1e-12,
            "step {}",
            step.step
        );
    }
    let fixed_text = corrected_network_text(&text, correction).unwrap();
    let fixed = network(&fixed_text);
    let again = audit(&fixed, 0.1, Adjust::Kr);
    assert!(
        again.cycles[0].deviation_kj_per_mol.abs() < 1e-9,
        "the cycle condition holds after correction"
    );
    assert!(again.consistent);
    // The side step A <=> D keeps its constants exactly.
    assert_eq!((fixed.reactions[3].kf, fixed.reactions[3].kr), (0.3, 0.1));

    // Sharing the change: kf shrinks and kr grows by 2^(1/6) each.
    let shared = audit(&net, 0.1, Adjust::Both).correction.unwrap();
    for step in &shared.steps {
        assert!(rel(step.kf / step.kf_corrected, 2f64.powf(1.0 / 6.0)) < 1e-12);
        assert!(rel(step.kr_corrected / step.kr, 2f64.powf(1.0 / 6.0)) < 1e-12);
    }
}

#[test]
fn k_from_the_crc_table_for_the_water_gas_shift() {
    // CO + H2O <=> CO2 + H2 (gas, 298.15 K) from the standard Gibbs energies of formation of the
    // CRC Handbook of Chemistry and Physics, 95th edition (2014), as committed in
    // tests/reference/crc_thermo.json by tests/reference/crc_thermo.py. Δn = 0, so the
    // concentration-based K equals the standard K.
    let table: serde_json::Value = serde_json::from_str(include_str!("reference/crc_thermo.json")).unwrap();
    let gf = |s: &str| table["substances"][s]["dGf"].as_f64().unwrap();
    let dg = gf("CO2") + gf("H2") - gf("CO") - gf("H2O");
    let k_hand = (-dg * 1000.0 / (GAS_CONSTANT * 298.15)).exp();
    // The textbook magnitude of this K at 25 °C is about 1e5 (common practice).
    assert!(k_hand > 5e4 && k_hand < 2e5, "K = {k_hand}");
    let text = format!(
        r#"
[species]
CO = {{ initial = 1.0, dGf = {}, formula = "CO" }}
H2O = {{ initial = 1.0, dGf = {}, formula = "H2O" }}
CO2 = {{ initial = 0.0, dGf = {}, formula = "CO2" }}
H2 = {{ initial = 0.0, dGf = {}, formula = "H2" }}

[[reaction]]
scheme = "CO + H2O <=> CO2 + H2"
kf = 2.0
kr = {}
"#,
        gf("CO"),
        gf("H2O"),
        gf("CO2"),
        gf("H2"),
        2.0 / k_hand * 2.0
    );
    let found = audit(&network(&text), 0.1, Adjust::Kr);
    let reference = &found.steps[0].references[0];
    // Same formula, same constants: agreement to rounding (1e-12 relative).
    assert!(
        rel(reference.k, k_hand) < 1e-12,
        "audit K {} vs {k_hand}",
        reference.k
    );
    // kf/kr was set to half of K: the deviation is RT ln(1/2).
    assert!(rel(reference.deviation_kj_per_mol, -RT_298 * 2f64.ln()) < 1e-9);
    assert!(!found.consistent);
    assert!(found.balance.is_empty(), "the water-gas shift balances");
}

#[test]
fn unbalanced_atoms_and_charge_are_named() {
    let text = r#"
[species]
CH4 = { initial = 1.0, formula = "CH4" }
O2 = { initial = 2.0, formula = "O2" }
CO2 = { initial = 0.0, formula = "CO2" }
H2O = { initial = 0.0, formula = "H2O" }
Fe3 = { initial = 1.0, formula = "Fe", charge = 3 }
Fe2 = { initial = 0.0, formula = "Fe", charge = 2 }

[[reaction]]
scheme = "CH4 + O2 => CO2 + H2O"
kf = 1.0

[[reaction]]
scheme = "Fe3 <=> Fe2"
kf = 1.0
kr = 1.0
"#;
    let found = audit(&network(text), 0.1, Adjust::Kr);
    assert_eq!(found.balance.len(), 2);
    let combustion = &found.balance[0];
    // Products minus reactants: H 2 − 4 = −2, O (2 + 1) − 2 = +1; C balances.
    assert_eq!(
        combustion.unbalanced,
        vec![("H".to_string(), -2.0), ("O".to_string(), 1.0)]
    );
    assert_eq!(found.balance[1].charge, Some(-1.0));
    assert!(!found.consistent);
    assert!(found
        .brief()
        .iter()
        .any(|line| line.contains("H, O do not balance")));
}

#[test]
fn implied_units_and_physical_limits() {
    let text = r#"
[species]
A = 1.0
B = 1.0
C = 0.0

[[reaction]]
scheme = "A + B <=> C"
kf = 5.0e10
kr = 1.0e-12
"#;
    let found = audit(&network(text), 0.1, Adjust::Kr);
    let step = &found.steps[0];
    assert_eq!(step.kf_units, "L/(mol s)");
    assert_eq!(step.kr_units.as_deref(), Some("1/s"));
    assert_eq!(step.k_units.as_deref(), Some("L/mol"));
    let messages: Vec<&str> = found.warnings.iter().map(|w| w.message.as_str()).collect();
    assert!(
        messages.iter().any(|m| m.contains("diffusion limit")),
        "{messages:?}"
    );
    assert!(
        messages.iter().any(|m| m.contains("extremely stiff")),
        "{messages:?}"
    );
}

#[test]
fn large_networks_report_cycles_by_their_closing_step() {
    // A ring of 420 isomers X0 <=> X1 <=> ... <=> X419 <=> X0 with kf/kr = 1 on every step except
    // the closing one, where it is 3: Π(kf/kr) around the ring is 3 (Wegscheider 1901), so the
    // ring is off by RT ln 3. Above 400 reversible steps the audit names the closing step.
    let n = 420;
    let mut text = String::from("[species]\nX0 = 1.0\n");
    for i in 1..n {
        text += &format!("X{i} = 0.0\n");
    }
    for i in 0..n {
        let kr = if i == n - 1 { 1.0 / 3.0 } else { 1.0 };
        text += &format!(
            "\n[[reaction]]\nscheme = \"X{i} <=> X{}\"\nkf = 1.0\nkr = {kr}\n",
            (i + 1) % n
        );
    }
    let found = audit(&network(&text), 0.1, Adjust::Kr);
    assert_eq!(found.cycles.len(), 1);
    assert_eq!(found.cycles[0].steps[0].step, n);
    // Arithmetic on ln 3 through one elimination pass: 1e-9 relative.
    assert!(rel(found.cycles[0].deviation_kj_per_mol.abs(), RT_298 * 3f64.ln()) < 1e-9);
    assert!(!found.consistent && found.correction.is_none());
}

/// Audits `text` (at `temperature` if given), writes the correction, and audits the written file
/// again at the same temperature: it must be consistent, and say what it changed in place.
fn round_trip(text: &str, adjust: Adjust, temperature: Option<f64>) -> String {
    let read = |t: &str| {
        kinequil::Network::from_text_at(t, std::path::Path::new("inline.toml"), temperature)
            .unwrap_or_else(|e| panic!("{e}\n{t}"))
    };
    let found = audit(&read(text), 0.1, adjust);
    assert!(!found.consistent, "the test network must start inconsistent");
    let correction = found.correction.as_ref().expect("a correction");
    let fixed = corrected_network_text(text, correction).unwrap();
    let again = audit(&read(&fixed), 0.1, adjust);
    assert!(
        again.consistent,
        "{adjust:?}: still inconsistent after correction:\n{fixed}"
    );
    fixed
}

#[test]
fn corrections_keep_every_constant_in_its_form_and_check_clean() {
    // A three-step cycle off by a factor 2 around it, each step written differently: plain kf
    // and kr; Arrhenius kf and kr; kf with units and kr defined by K from dH and dS. The
    // corrected file must check consistent for every --adjust, keep Arrhenius as Arrhenius (A
    // scaled, Ea kept), keep units, and correct a K-defined kr through K without adding kr.
    let cycle = r#"temperature = 310
[species]
A = 1.0
B = 0.0
C = 0.0

[[reaction]]
scheme = "A <=> B"
kf = 2.0
kr = 1.0   # measured

[[reaction]]
scheme = "B <=> C"
kf = { A = 1.0e6, Ea = "30 kJ/mol" }
kr = { A = 1.0e6, Ea = "30 kJ/mol" }

[[reaction]]
scheme = "C <=> A"
kf = "3.6 1/h"
K = { dH = "0 kJ/mol", dS = 0.0 }
"#;
    for adjust in [Adjust::Kr, Adjust::Kf, Adjust::Both] {
        let fixed = round_trip(cycle, adjust, None);
        assert!(fixed.contains("Ea = \"30 kJ/mol\""), "{fixed}");
        assert!(fixed.contains("1/h\""), "units kept:\n{fixed}");
        assert!(
            !fixed.contains("\nkr = ") || fixed.matches("\nkr = ").count() == 2,
            "no kr added:\n{fixed}"
        );
        assert!(fixed.contains("dH = \"0 kJ/mol\""), "{fixed}");
        assert!(
            fixed.contains("# measured") || adjust == Adjust::Kf,
            "comments kept:\n{fixed}"
        );
    }
    // Under a temperature override the correction is made, and holds, at that temperature; the
    // file keeps its own temperature line.
    let fixed = round_trip(cycle, Adjust::Kr, Some(350.0));
    assert!(fixed.contains("temperature = 310"));
}

#[test]
fn an_independent_k_is_a_reference_and_stays() {
    // kr given explicitly beside K: K is an independent reference that kf/kr misses by a factor
    // 2; the correction moves kf or kr, never K.
    let text =
        "[species]\nD = 1.0\nE = 0.0\n\n[[reaction]]\nscheme = \"D <=> E\"\nkf = 1.0\nkr = 1.0\nK = 2.0\n";
    for adjust in [Adjust::Kr, Adjust::Kf, Adjust::Both] {
        let fixed = round_trip(text, adjust, None);
        assert!(fixed.contains("K = 2.0"), "{fixed}");
    }
}

#[test]
fn a_kp_defined_step_is_corrected_through_kp() {
    // Gas cycle X <=> Y <=> Z <=> X with the last step's kr defined by the standard Kp (Δn = 0,
    // so Kc = Kp): after a kr correction the file holds Kp and no kr for that step.
    let text = r#"[species]
X = { initial = "1 bar", phase = "gas" }
Y = { initial = 0.0, phase = "gas" }
Z = { initial = 0.0, phase = "gas" }

[[reaction]]
scheme = "X <=> Y"
kf = 1.0
kr = 1.0

[[reaction]]
scheme = "Y <=> Z"
kf = 1.0
kr = 1.0

[[reaction]]
scheme = "Z <=> X"
kf = 1.0
Kp = 2.0
"#;
    for adjust in [Adjust::Kr, Adjust::Kf, Adjust::Both] {
        let fixed = round_trip(text, adjust, None);
        let last = &fixed[fixed.rfind("[[reaction]]").unwrap()..];
        assert!(last.contains("Kp = ") && !last.contains("kr"), "{last}");
    }
}
