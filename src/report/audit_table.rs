//! The terminal report of `kinequil check`.

use std::fmt::Write;

use crate::audit::Audit;
use crate::network::Network;

use super::with_digits;

pub fn render(network: &Network, audit: &Audit) -> String {
    let mut out = String::new();
    write_steps(&mut out, network, audit);
    write_references(&mut out, audit);
    write_activation(&mut out, audit);
    write_cycles(&mut out, audit);
    write_balance(&mut out, network, audit);
    write_warnings(&mut out, audit);
    write_correction(&mut out, audit);
    write_model(&mut out, audit);
    out
}

/// The header and the table of steps with their constants and implied units.
fn write_steps(out: &mut String, network: &Network, audit: &Audit) {
    let _ = writeln!(
        out,
        "kinequil {}: consistency audit of {} at {:.2} K (tolerance {} kJ/mol)",
        env!("CARGO_PKG_VERSION"),
        network.title,
        audit.temperature_k,
        audit.tolerance_kj_per_mol
    );
    let _ = writeln!(out, "  {}\n", network.source.display());
    let width = audit
        .steps
        .iter()
        .map(|s| s.equation.len())
        .max()
        .unwrap_or(8)
        .max(8);
    let _ = writeln!(
        out,
        "  {:>4}  {:<width$}  {:>12}  {:>12}  {:>12}  units (kf; kr; Kc)",
        "step", "scheme", "kf", "kr", "kf/kr"
    );
    for s in &audit.steps {
        let kr = if s.reversible {
            with_digits(s.kr, 5)
        } else {
            "-".into()
        };
        let ratio = s.kf_over_kr.map_or("-".into(), |r| with_digits(r, 5));
        let units = match (&s.kr_units, &s.k_units) {
            (Some(kr), Some(k)) => format!("{}; {kr}; {k}", s.kf_units),
            _ => s.kf_units.clone(),
        };
        let _ = writeln!(
            out,
            "  {:>4}  {:<width$}  {:>12}  {:>12}  {:>12}  {units}",
            s.step,
            s.equation,
            with_digits(s.kf, 5),
            kr,
            ratio
        );
    }
}

/// kf/kr against every known equilibrium constant.
fn write_references(out: &mut String, audit: &Audit) {
    let references: Vec<_> = audit
        .steps
        .iter()
        .flat_map(|s| s.references.iter().map(move |r| (s, r)))
        .collect();
    let _ = writeln!(out, "\n  kf/kr against known equilibrium constants:");
    if references.is_empty() {
        let _ = writeln!(
            out,
            "    none known (give K beside kr, dG for a step, or dGf for its species)"
        );
    }
    for (s, r) in references {
        let verdict = verdict(r.independent, r.deviation_kj_per_mol, audit.tolerance_kj_per_mol);
        let _ = writeln!(
            out,
            "    step {:>3}: K = {} ({}); (kf/kr)/K = {}; {:+.3} kJ/mol  {verdict}",
            s.step,
            with_digits(r.k, 6),
            r.source,
            with_digits(r.ratio, 6),
            r.deviation_kj_per_mol
        );
    }
}

/// Arrhenius parameters against the enthalpy of reaction.
fn write_activation(out: &mut String, audit: &Audit) {
    let activation: Vec<_> = audit
        .steps
        .iter()
        .filter_map(|s| s.activation.as_ref().map(|a| (s, a)))
        .collect();
    if !activation.is_empty() {
        let _ = writeln!(out, "\n  Arrhenius parameters against the enthalpy of reaction (Ea,f − Ea,r + Δn_Arrhenius RT vs ΔH − Δn_gas RT):");
        for (s, a) in activation {
            let _ = writeln!(
                out,
                "    step {:>3}: {:.3} vs {:.3} kJ/mol ({}); {:+.3} kJ/mol  {}",
                s.step,
                a.from_arrhenius_kj_per_mol,
                a.from_enthalpy_kj_per_mol,
                a.enthalpy_source,
                a.deviation_kj_per_mol,
                if a.consistent { "ok" } else { "INCONSISTENT" }
            );
        }
    }
}

/// Detailed balance around cycles.
fn write_cycles(out: &mut String, audit: &Audit) {
    let _ = writeln!(out, "\n  detailed balance around cycles (Wegscheider condition):");
    if audit.cycles.is_empty() {
        let _ = writeln!(out, "    no cycles among the reversible steps");
    }
    for c in &audit.cycles {
        let members: Vec<String> = c
            .steps
            .iter()
            .map(|s| {
                if s.coefficient == 1.0 {
                    format!("{}", s.step)
                } else {
                    format!("{}×{}", s.coefficient, s.step)
                }
            })
            .collect();
        let _ = writeln!(
            out,
            "    steps {}: Π(kf/kr)^x = {}; {:+.3} kJ/mol  {}",
            members.join(" + "),
            with_digits(c.product, 6),
            c.deviation_kj_per_mol,
            verdict(true, c.deviation_kj_per_mol, audit.tolerance_kj_per_mol)
        );
    }
}

/// Element and charge balance.
fn write_balance(out: &mut String, network: &Network, audit: &Audit) {
    let _ = writeln!(out, "\n  element and charge balance:");
    let with_formulas = network.species.iter().filter(|s| s.formula.is_some()).count();
    if audit.balance.is_empty() {
        let what = if with_formulas == 0 {
            "no formulas given (add `formula` to species)"
        } else {
            "every step with formulas balances"
        };
        let _ = writeln!(out, "    {what}");
    }
    for b in &audit.balance {
        let mut parts: Vec<String> = b.unbalanced.iter().map(|(e, d)| format!("{e} {d:+}")).collect();
        if let Some(z) = b.charge {
            parts.push(format!("charge {z:+}"));
        }
        let _ = writeln!(
            out,
            "    step {} ({}): products minus reactants: {}  UNBALANCED",
            b.step,
            b.equation,
            parts.join(", ")
        );
    }
}

/// Suspicious values.
fn write_warnings(out: &mut String, audit: &Audit) {
    if !audit.warnings.is_empty() {
        let _ = writeln!(out, "\n  warnings:");
        for w in &audit.warnings {
            let _ = writeln!(out, "    step {} ({}): {}", w.step, w.equation, w.message);
        }
    }
}

/// The minimal correction, when one is proposed.
fn write_correction(out: &mut String, audit: &Audit) {
    if let Some(correction) = &audit.correction {
        let _ = writeln!(
            out,
            "\n  minimal correction (least change in ln k; adjusting {}):",
            correction.adjust.name()
        );
        for c in &correction.steps {
            let _ = writeln!(
                out,
                "    step {:>3} {}: kf {} -> {}, kr {} -> {}",
                c.step,
                c.equation,
                with_digits(c.kf, 6),
                with_digits(c.kf_corrected, 6),
                with_digits(c.kr, 6),
                with_digits(c.kr_corrected, 6)
            );
        }
        if let Some(conflict) = &correction.conflict {
            let _ = writeln!(out, "    note: {conflict}");
        }
    }
}

/// The model statement and cautions.
fn write_model(out: &mut String, audit: &Audit) {
    let _ = writeln!(out, "\n  Model: {}. Cautions:", audit.model);
    for c in &audit.cautions {
        let _ = writeln!(out, "    - {c}");
    }
    let _ = writeln!(
        out,
        "\n  verdict: {}",
        if audit.consistent {
            "CONSISTENT"
        } else {
            "INCONSISTENT"
        }
    );
}

fn verdict(independent: bool, deviation: f64, tol: f64) -> &'static str {
    if !independent {
        "(defines kr)"
    } else if deviation.abs() <= tol {
        "ok"
    } else {
        "INCONSISTENT"
    }
}
