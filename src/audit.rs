//! The consistency audit of a network's rate constants.
//!
//! - Each reversible step: kf/kr against every independent equilibrium constant known for it (K
//!   written beside kr, a standard Gibbs energy of reaction `dG`, or the species' standard Gibbs
//!   energies of formation `dGf`), as a ratio and as an energy RT ln(ratio) in kJ/mol.
//! - Every independent cycle of reversible steps (a basis of the null space of N over them):
//!   Π (kf/kr)^x must be 1 (the Wegscheider condition).
//! - Element and charge balance of each step whose species carry formulas.
//! - The units each rate constant has by its order, and values beyond physical limits.
//! - A minimal correction: the smallest weighted change in ln k that makes every cycle and every
//!   known K hold.
//!
//! Equilibrium constants are concentration-based with a 1 mol/L standard state, so K from a Gibbs
//! energy equals Kc numerically (gas-phase standard states come with the gas-phase work).

use serde::Serialize;

use crate::constants::{rt_kj, BOLTZMANN, PLANCK};
use crate::network::{kc_from_standard, Network, Phase};
use crate::stoich::{net_change, Echelon, Insert};
pub use crate::units::rate_constant_units;

/// Default tolerance on deviations, kJ/mol (about 4 % in K at 298 K).
pub const DEFAULT_TOL_KJ: f64 = 0.1;
/// Diffusion limit for bimolecular steps in solution, L/(mol s) (common practice).
const DIFFUSION_LIMIT: f64 = 1e10;
/// Above this many reversible steps, cycles are reported by their closing step (a full cycle
/// basis fills in and costs O(n³)), and no correction is proposed.
const CYCLE_BASIS_LIMIT: usize = 400;
/// Steps whose kf/kr spans more decades than this are flagged as extremely stiff.
const STIFF_DECADES: f64 = 12.0;

/// Which constants the correction may change.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Adjust {
    /// Keep kf, change kr.
    Kr,
    /// Keep kr, change kf.
    Kf,
    /// Share the change equally (in ln k) between kf and kr.
    Both,
}

impl Adjust {
    pub fn name(self) -> &'static str {
        match self {
            Adjust::Kr => "kr",
            Adjust::Kf => "kf",
            Adjust::Both => "both",
        }
    }
}

#[derive(Debug, Clone, Serialize)]
pub struct Audit {
    pub model: &'static str,
    pub cautions: Vec<String>,
    pub temperature_k: f64,
    pub tolerance_kj_per_mol: f64,
    pub consistent: bool,
    pub steps: Vec<StepFinding>,
    pub cycles: Vec<CycleFinding>,
    pub balance: Vec<BalanceFinding>,
    pub warnings: Vec<Warning>,
    pub correction: Option<Correction>,
}

#[derive(Debug, Clone, Serialize)]
pub struct StepFinding {
    pub step: usize,
    pub equation: String,
    pub reversible: bool,
    pub kf: f64,
    pub kr: f64,
    pub kf_over_kr: Option<f64>,
    /// Units of kf and kr implied by their orders (mol/L and s).
    pub kf_units: String,
    pub kr_units: Option<String>,
    /// Units of Kc implied by the stoichiometry.
    pub k_units: Option<String>,
    pub references: Vec<Reference>,
    /// The first independent reference's K and deviation, for scripts that want one number.
    #[serde(rename = "K")]
    pub k: Option<f64>,
    pub deviation_kj_per_mol: Option<f64>,
    /// Ea,f − Ea,r against the enthalpy of reaction, when both are known.
    pub activation: Option<ActivationCheck>,
}

/// Arrhenius parameters against thermochemistry: d ln(kf/kr)/dT must equal d ln Kc/dT, i.e.
/// Ea,f − Ea,r + (n_f − n_r) R T = ΔH − Δn_gas R T (van 't Hoff; ideal gases).
#[derive(Debug, Clone, Serialize)]
pub struct ActivationCheck {
    /// Ea,f − Ea,r + (n_f − n_r) R T, kJ/mol.
    pub from_arrhenius_kj_per_mol: f64,
    /// ΔH − Δn_gas R T, kJ/mol.
    pub from_enthalpy_kj_per_mol: f64,
    pub enthalpy_source: String,
    pub deviation_kj_per_mol: f64,
    pub consistent: bool,
}

#[derive(Debug, Clone, Serialize)]
pub struct Reference {
    /// Where the equilibrium constant comes from.
    pub source: String,
    #[serde(rename = "K")]
    pub k: f64,
    /// (kf/kr) / K.
    pub ratio: f64,
    pub deviation_kj_per_mol: f64,
    /// False when K only defines kr (kr = kf/K) and so cannot disagree with it.
    pub independent: bool,
}

#[derive(Debug, Clone, Serialize)]
pub struct CycleFinding {
    /// (step number, equation, coefficient) around the cycle.
    pub steps: Vec<CycleStep>,
    /// Π (kf/kr)^coefficient; 1 when detailed balance holds.
    pub product: f64,
    pub deviation_kj_per_mol: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct CycleStep {
    pub step: usize,
    pub equation: String,
    pub coefficient: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct BalanceFinding {
    pub step: usize,
    pub equation: String,
    /// Element → products minus reactants, for elements that do not balance.
    pub unbalanced: Vec<(String, f64)>,
    /// Charge of products minus reactants, when it is not zero.
    pub charge: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct Warning {
    pub step: usize,
    pub equation: String,
    pub message: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct Correction {
    pub adjust: Adjust,
    pub steps: Vec<CorrectedStep>,
    /// Set when the reference data contradict one another, so no correction meets all of them.
    pub conflict: Option<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct CorrectedStep {
    pub step: usize,
    pub equation: String,
    pub kf: f64,
    pub kr: f64,
    pub kf_corrected: f64,
    pub kr_corrected: f64,
}

impl Audit {
    /// One-line findings for run summaries.
    pub fn brief(&self) -> Vec<String> {
        let mut lines = Vec::new();
        for s in &self.steps {
            for r in s
                .references
                .iter()
                .filter(|r| r.independent && r.deviation_kj_per_mol.abs() > self.tolerance_kj_per_mol)
            {
                lines.push(format!(
                    "step {} ({}): kf/kr differs from K ({}) by {:+.2} kJ/mol",
                    s.step, s.equation, r.source, r.deviation_kj_per_mol
                ));
            }
        }
        for c in self
            .cycles
            .iter()
            .filter(|c| c.deviation_kj_per_mol.abs() > self.tolerance_kj_per_mol)
        {
            let names: Vec<String> = c.steps.iter().map(|s| s.step.to_string()).collect();
            lines.push(format!(
                "cycle through steps {}: detailed balance off by {:+.2} kJ/mol",
                names.join(", "),
                c.deviation_kj_per_mol
            ));
        }
        for b in &self.balance {
            let elements: Vec<&str> = b.unbalanced.iter().map(|e| e.0.as_str()).collect();
            let mut what = elements.join(", ");
            if b.charge.is_some() {
                what += if what.is_empty() { "charge" } else { " and charge" };
            }
            let verb = if b.unbalanced.len() + usize::from(b.charge.is_some()) == 1 {
                "does"
            } else {
                "do"
            };
            lines.push(format!(
                "step {} ({}): {what} {verb} not balance",
                b.step, b.equation
            ));
        }
        for s in &self.steps {
            if let Some(a) = s.activation.as_ref().filter(|a| !a.consistent) {
                lines.push(format!(
                    "step {} ({}): Ea,f − Ea,r does not match the enthalpy of reaction: off by {:+.2} kJ/mol",
                    s.step, s.equation, a.deviation_kj_per_mol
                ));
            }
        }
        lines.extend(
            self.warnings
                .iter()
                .map(|w| format!("step {} ({}): {}", w.step, w.equation, w.message)),
        );
        lines
    }
}

/// Audits a network at its temperature.
pub fn audit(network: &Network, tol_kj: f64, adjust: Adjust) -> Audit {
    let rt = rt_kj(network.temperature);
    let mut steps = Vec::new();
    let mut warnings = Vec::new();
    let mut balance = Vec::new();
    for (j, r) in network.reactions.iter().enumerate() {
        steps.push(step_finding(network, j + 1, r, rt, tol_kj));
        balance.extend(balance_finding(network, j + 1, r));
        warnings.extend(limit_warnings(network, j + 1, r));
    }
    let cycles = cycles(network, rt);
    let inconsistent_k = steps
        .iter()
        .flat_map(|s| &s.references)
        .any(|r| r.independent && r.deviation_kj_per_mol.abs() > tol_kj);
    let inconsistent_cycle = cycles.iter().any(|c| c.deviation_kj_per_mol.abs() > tol_kj);
    let inconsistent_activation = steps
        .iter()
        .filter_map(|s| s.activation.as_ref())
        .any(|a| !a.consistent);
    let consistent = !inconsistent_k && !inconsistent_cycle && !inconsistent_activation && balance.is_empty();
    let small = balanced_steps(network).len() <= CYCLE_BASIS_LIMIT;
    let correction =
        (small && (inconsistent_k || inconsistent_cycle)).then(|| correct(network, &steps, &cycles, adjust));
    Audit {
        model: "isothermal, ideal mass-action kinetics; equilibrium constants at the stated temperature",
        cautions: crate::CAUTIONS.iter().map(|c| c.to_string()).collect(),
        temperature_k: network.temperature,
        tolerance_kj_per_mol: tol_kj,
        consistent,
        steps,
        cycles,
        balance,
        warnings,
        correction,
    }
}

/// kf/kr of one step against every equilibrium constant known for it, with the implied units.
fn step_finding(
    network: &Network,
    number: usize,
    r: &crate::network::Reaction,
    rt: f64,
    tol_kj: f64,
) -> StepFinding {
    let dissolved = |i: usize| network.species[i].in_rate_laws();
    let net = net_change(&r.reactants, &r.products);
    let (forward_order, reverse_order) = r.orders();
    let delta_n: f64 = net.iter().filter(|e| dissolved(e.0)).map(|e| e.1).sum();
    let delta_n_gas: f64 = net
        .iter()
        .filter(|e| network.species[e.0].phase == Phase::Gas)
        .map(|e| e.1)
        .sum();
    // K from a Gibbs energy is standard (1 mol/L for solutes, 1 bar for gases): as Kc.
    let standard_to_kc = |k0: f64| kc_from_standard(k0, delta_n_gas, network.temperature);
    let mut references = Vec::new();
    let ratio = (r.reversible && r.kr > 0.0).then(|| r.kf / r.kr); // kf = 0 is reported, not skipped
    if let Some(ratio) = ratio {
        let mut push = |source: String, k: f64, independent: bool| {
            references.push(Reference {
                source,
                k,
                ratio: ratio / k,
                deviation_kj_per_mol: rt * (ratio / k).ln(),
                independent,
            })
        };
        if let Some(k) = r.k_given {
            let source = if r.kr_given {
                "K given"
            } else {
                "K given (defines kr)"
            };
            push(source.into(), k, r.kr_given);
        }
        if let Some(dg) = r.gibbs {
            push(
                format!("dG = {dg} kJ/mol"),
                standard_to_kc((-dg / rt).exp()),
                true,
            );
        }
        let formation: Option<f64> = net
            .iter()
            .map(|&(i, v)| network.species[i].gibbs_formation.map(|g| v * g))
            .sum();
        if let Some(dg) = formation {
            push(
                format!("dGf of species: dG = {dg:.4} kJ/mol"),
                standard_to_kc((-dg / rt).exp()),
                true,
            );
        }
    }
    let name = |order: f64| rate_constant_units(order);
    StepFinding {
        step: number,
        equation: r.equation.clone(),
        reversible: r.reversible,
        kf: r.kf,
        kr: r.kr,
        kf_over_kr: ratio,
        kf_units: name(forward_order),
        kr_units: r.reversible.then(|| name(reverse_order)),
        k_units: r.reversible.then(|| concentration_power(delta_n)),
        k: references.iter().find(|r| r.independent).map(|r| r.k),
        deviation_kj_per_mol: references
            .iter()
            .find(|r| r.independent)
            .map(|r| r.deviation_kj_per_mol),
        references,
        activation: activation_check(network, r, &net, delta_n_gas, tol_kj),
    }
}

/// Element and charge balance of one step, when every species of it has a formula.
fn balance_finding(network: &Network, number: usize, r: &crate::network::Reaction) -> Option<BalanceFinding> {
    let net = net_change(&r.reactants, &r.products);
    // Element and charge balance, when every species of the step has a formula.
    let formulas: Option<Vec<(&crate::network::Formula, f64, f64)>> = net
        .iter()
        .map(|&(i, v)| {
            network.species[i]
                .formula
                .as_ref()
                .map(|f| (f, v, network.species[i].charge))
        })
        .collect();
    if let Some(formulas) = formulas {
        let mut elements: Vec<String> = Vec::new();
        for (f, _, _) in &formulas {
            for (e, _) in &f.elements {
                if !elements.contains(e) {
                    elements.push(e.clone());
                }
            }
        }
        let unbalanced: Vec<(String, f64)> = elements
            .into_iter()
            .map(|e| {
                let sum: f64 = formulas.iter().map(|(f, v, _)| v * f.count(&e)).sum();
                (e, sum)
            })
            .filter(|(_, sum)| sum.abs() > 1e-9)
            .collect();
        let charge: f64 = formulas.iter().map(|(_, v, z)| v * z).sum();
        let charge = (charge.abs() > 1e-9).then_some(charge);
        if !unbalanced.is_empty() || charge.is_some() {
            return Some(BalanceFinding {
                step: number,
                equation: r.equation.clone(),
                unbalanced,
                charge,
            });
        }
    }
    None
}

/// Constants beyond physical limits, and steps all but one-way.
fn limit_warnings(network: &Network, number: usize, r: &crate::network::Reaction) -> Vec<Warning> {
    let mut warnings = Vec::new();
    let (forward_order, reverse_order) = r.orders();
    let ratio = (r.reversible && r.kr > 0.0).then(|| r.kf / r.kr);
    // Values beyond physical limits (common practice).
    let frequency_limit = BOLTZMANN * network.temperature / PLANCK;
    for (label, k, order) in [("kf", r.kf, forward_order), ("kr", r.kr, reverse_order)] {
        if label == "kr" && !r.reversible {
            continue;
        }
        if (order - 2.0).abs() < 1e-12 && k > DIFFUSION_LIMIT {
            warnings.push(Warning {
                step: number,
                equation: r.equation.clone(),
                message: format!(
                    "{label} = {k:.3e} L/(mol s) is above the diffusion limit of about 1e10 L/(mol s) in solution (common practice)"
                ),
            });
        }
        if (order - 1.0).abs() < 1e-12 && k > 10.0 * frequency_limit {
            warnings.push(Warning {
                step: number,
                equation: r.equation.clone(),
                message: format!(
                    "{label} = {k:.3e} 1/s is above ten times kT/h = {frequency_limit:.2e} 1/s, the fastest a unimolecular step can be (common practice)"
                ),
            });
        }
    }
    if let Some(ratio) = ratio.filter(|r| *r > 0.0 && r.is_finite()) {
        if ratio.log10().abs() > STIFF_DECADES {
            warnings.push(Warning {
                step: number,
                equation: r.equation.clone(),
                message: format!(
                    "kf/kr = {ratio:.3e} spans {:.0} decades: the step is all but one-way and makes the system extremely stiff; consider writing it with `=>`",
                    ratio.log10().abs()
                ),
            });
        }
    }
    warnings
}

/// The Arrhenius-versus-enthalpy check of one step, when kf and kr are both Arrhenius and the
/// enthalpy of reaction is known (from the K or Kp data, or from the species' dHf).
fn activation_check(
    network: &Network,
    r: &crate::network::Reaction,
    net: &[(usize, f64)],
    delta_n_gas: f64,
    tol_kj: f64,
) -> Option<ActivationCheck> {
    let (f, b) = (r.kf_arrhenius?, r.kr_arrhenius?);
    let formation: Option<f64> = net
        .iter()
        .map(|&(i, v)| network.species[i].enthalpy_formation.map(|h| v * h))
        .sum();
    let (dh, source) = match (r.enthalpy, formation) {
        (Some(dh), _) => (dh, "dH of the equilibrium-constant data".to_string()),
        (None, Some(dh)) => (dh, "dHf of species".to_string()),
        (None, None) => return None,
    };
    let rt = rt_kj(network.temperature);
    let from_arrhenius = (f.ea - b.ea) / 1000.0 + (f.n - b.n) * rt;
    let from_enthalpy = dh - delta_n_gas * rt;
    let deviation = from_arrhenius - from_enthalpy;
    Some(ActivationCheck {
        from_arrhenius_kj_per_mol: from_arrhenius,
        from_enthalpy_kj_per_mol: from_enthalpy,
        enthalpy_source: source,
        deviation_kj_per_mol: deviation,
        consistent: deviation.abs() <= tol_kj,
    })
}

/// Steps that take part in detailed balance: reversible with both constants positive.
fn balanced_steps(network: &Network) -> Vec<usize> {
    (0..network.reactions.len())
        .filter(|&j| {
            let r = &network.reactions[j];
            r.runs_both_ways()
        })
        .collect()
}

/// A basis of the cycles among the reversible steps: vectors x with N x = 0.
fn cycles(network: &Network, rt: f64) -> Vec<CycleFinding> {
    let steps = balanced_steps(network);
    if steps.len() > CYCLE_BASIS_LIMIT {
        return closing_steps(network, &steps, rt);
    }
    let mut rows: Vec<Vec<(usize, f64)>> = vec![Vec::new(); network.n_species()];
    for (k, &j) in steps.iter().enumerate() {
        let r = &network.reactions[j];
        for (i, v) in net_change(&r.reactants, &r.products) {
            rows[i].push((k, v));
        }
    }
    let mut echelon = Echelon::new(steps.len());
    for row in &rows {
        echelon.insert(row, 0.0);
    }
    echelon
        .null_space()
        .into_iter()
        .map(|x| {
            let x = whole_numbers(x);
            let ln_product: f64 = x
                .iter()
                .map(|&(k, c)| {
                    let r = &network.reactions[steps[k]];
                    c * (r.kf / r.kr).ln()
                })
                .sum();
            CycleFinding {
                steps: x
                    .iter()
                    .map(|&(k, c)| CycleStep {
                        step: steps[k] + 1,
                        equation: network.reactions[steps[k]].equation.clone(),
                        coefficient: c,
                    })
                    .collect(),
                product: ln_product.exp(),
                deviation_kj_per_mol: rt * ln_product,
            }
        })
        .collect()
}

/// For large networks: each step that closes a cycle with earlier steps, with the cycle's
/// mismatch. Found by eliminating the steps' stoichiometric rows with ln(kf/kr) as right-hand
/// side, which stays sparse where a full cycle basis fills in. The cycle is named by its closing
/// step only.
fn closing_steps(network: &Network, steps: &[usize], rt: f64) -> Vec<CycleFinding> {
    let mut echelon = Echelon::new(network.n_species());
    let mut found = Vec::new();
    for &j in steps {
        let r = &network.reactions[j];
        let ln_k = (r.kf / r.kr).ln();
        if let Insert::Dependent { residual } = echelon.insert(&net_change(&r.reactants, &r.products), ln_k) {
            found.push(CycleFinding {
                steps: vec![CycleStep {
                    step: j + 1,
                    equation: r.equation.clone(),
                    coefficient: 1.0,
                }],
                product: residual.exp(),
                deviation_kj_per_mol: rt * residual,
            });
        }
    }
    found
}

/// Scales a vector so its smallest entry is ±1 and snaps near-integers.
fn whole_numbers(mut x: Vec<(usize, f64)>) -> Vec<(usize, f64)> {
    let smallest = x.iter().fold(f64::INFINITY, |m, e| m.min(e.1.abs()));
    for e in x.iter_mut() {
        let v = e.1 / smallest;
        e.1 = if (v - v.round()).abs() < 1e-9 {
            v.round()
        } else {
            v
        };
    }
    x
}

/// The smallest weighted change in ln k that makes every cycle and every independent K hold.
///
/// Only d_j = Δln kf_j − Δln kr_j enters the conditions, and for a given d_j the cheapest split
/// costs d_j²·s_j⁻¹ with s_j the step's softness (1 when one constant moves, 2 when both share the
/// change). Minimising Σ d_j²/s_j subject to A d = b gives d = S Aᵀ (A S Aᵀ)⁺ b; steps in no
/// condition keep d_j = 0 exactly.
fn correct(network: &Network, steps: &[StepFinding], cycles: &[CycleFinding], adjust: Adjust) -> Correction {
    let balanced = balanced_steps(network);
    let index_of = |step: usize| balanced.iter().position(|&j| j + 1 == step);
    let mut rows: Vec<(Vec<(usize, f64)>, f64)> = Vec::new();
    for c in cycles {
        let row: Vec<(usize, f64)> = c
            .steps
            .iter()
            .filter_map(|s| index_of(s.step).map(|k| (k, s.coefficient)))
            .collect();
        rows.push((row, -c.product.ln()));
    }
    for s in steps {
        let Some(k) = index_of(s.step) else { continue };
        for r in s.references.iter().filter(|r| r.independent) {
            rows.push((vec![(k, 1.0)], -r.ratio.ln()));
        }
    }
    let n = balanced.len();
    let m = rows.len();
    let softness = if adjust == Adjust::Both { 2.0 } else { 1.0 };
    let mut a = nalgebra::DMatrix::<f64>::zeros(m, n);
    let mut b = nalgebra::DVector::<f64>::zeros(m);
    for (i, (row, rhs)) in rows.iter().enumerate() {
        for &(k, v) in row {
            a[(i, k)] += v;
        }
        b[i] = *rhs;
    }
    let ass = &a * a.transpose() * softness;
    let y = ass
        .clone()
        .pseudo_inverse(1e-12 * ass.norm().max(f64::MIN_POSITIVE))
        .map(|p| p * &b)
        .unwrap_or_else(|_| nalgebra::DVector::zeros(m));
    let d = a.transpose() * y * softness;
    let residual = (&a * &d - &b).amax();
    let conflict = (residual > 1e-9).then(|| {
        format!(
            "the reference data contradict one another (largest unmet condition {:.3} kJ/mol); the correction meets them in the least-squares sense",
            residual * rt_kj(network.temperature)
        )
    });
    let corrected = balanced
        .iter()
        .enumerate()
        .filter(|(k, _)| d[*k].abs() > 1e-15)
        .map(|(k, &j)| {
            let r = &network.reactions[j];
            let (df, dr) = match adjust {
                Adjust::Kr => (0.0, -d[k]),
                Adjust::Kf => (d[k], 0.0),
                Adjust::Both => (d[k] / 2.0, -d[k] / 2.0),
            };
            CorrectedStep {
                step: j + 1,
                equation: r.equation.clone(),
                kf: r.kf,
                kr: r.kr,
                kf_corrected: r.kf * df.exp(),
                kr_corrected: r.kr * dr.exp(),
            }
        })
        .collect();
    Correction {
        adjust,
        steps: corrected,
        conflict,
    }
}

/// (mol/L)^n, with the common special cases named.
fn concentration_power(n: f64) -> String {
    if n.abs() < 1e-12 {
        "dimensionless".into()
    } else if (n - 1.0).abs() < 1e-12 {
        "mol/L".into()
    } else if (n + 1.0).abs() < 1e-12 {
        "L/mol".into()
    } else {
        format!("(mol/L)^{n}")
    }
}

/// The network file's text with the corrected constants written in, each in the form it was
/// given (comments and layout kept). Only multiplicative factors are applied, so a correction
/// found at one temperature holds at every temperature the file can be evaluated at:
/// - kf (and an explicit kr) is scaled where it is written: a plain number, the number of a
///   string with units, or Arrhenius A (Ea and n unchanged);
/// - a kr defined by K or Kp is corrected through K (or Kp): K × (kf factor / kr factor), in
///   its own form (number, string with units, `value` of a van 't Hoff table, or dS of a dH/dS
///   table, shifted by R ln factor); no kr is added and no K is deleted;
/// - an independent K (beside an explicit kr) is a reference and is never touched.
pub fn corrected_network_text(original: &str, correction: &Correction) -> Result<String, String> {
    let mut doc: toml_edit::DocumentMut = original
        .parse()
        .map_err(|e| format!("cannot edit the file: {e}"))?;
    let reactions = doc
        .get_mut("reaction")
        .and_then(|r| r.as_array_of_tables_mut())
        .ok_or("the file has no [[reaction]] tables")?;
    for step in &correction.steps {
        let table = reactions
            .get_mut(step.step - 1)
            .ok_or("reaction numbering changed")?;
        let kf_factor = step.kf_corrected / step.kf;
        let kr_factor = step.kr_corrected / step.kr;
        let note = |what: &str, factor: f64| format!("  # kinequil check: {what} × {factor:.6}");
        if kf_factor != 1.0 {
            scale_constant(table, "kf", kf_factor, &note("kf", kf_factor))?;
        }
        if table.contains_key("kr") {
            if kr_factor != 1.0 {
                scale_constant(table, "kr", kr_factor, &note("kr", kr_factor))?;
            }
        } else {
            let key = if table.contains_key("K") { "K" } else { "Kp" };
            let factor = kf_factor / kr_factor;
            if factor != 1.0 {
                scale_constant(table, key, factor, &note(key, factor))?;
            }
        }
    }
    let header = format!(
        "# Rate constants corrected by `kinequil check` (adjusting {}) to satisfy detailed balance\n\
         # and the known equilibrium constants; the original file is unchanged.\n",
        correction.adjust.name()
    );
    Ok(header + &doc.to_string())
}

/// Multiplies the constant under `key` by `factor` in the form it is written in.
fn scale_constant(table: &mut toml_edit::Table, key: &str, factor: f64, note: &str) -> Result<(), String> {
    let value = table
        .get_mut(key)
        .and_then(|item| item.as_value_mut())
        .ok_or_else(|| format!("`{key}` is not a value the correction can edit"))?;
    let decor_prefix = value
        .decor()
        .prefix()
        .and_then(|p| p.as_str())
        .unwrap_or(" ")
        .to_string();
    // The user's own comment stays; the note follows it.
    let old_suffix = value
        .decor()
        .suffix()
        .and_then(|p| p.as_str())
        .unwrap_or("")
        .trim_end()
        .to_string();
    let suffix = if old_suffix.contains('#') {
        format!("{old_suffix};{}", note.trim_start().trim_start_matches('#'))
    } else {
        note.to_string()
    };
    match &mut *value {
        toml_edit::Value::InlineTable(parts) => {
            if parts.contains_key("A") {
                scale_number(parts, "A", factor)?;
            } else if parts.contains_key("value") {
                scale_number(parts, "value", factor)?;
            } else if parts.contains_key("dS") {
                // K = exp(−(dH − T dS)/RT): K × f is dS + R ln f at every T.
                let shift = crate::constants::GAS_CONSTANT * factor.ln();
                let ds = parts.get_mut("dS").ok_or("dS missing")?;
                let new = match &*ds {
                    toml_edit::Value::Float(f) => *f.value() + shift,
                    toml_edit::Value::Integer(i) => *i.value() as f64 + shift,
                    _ => return Err("dS given with units: correct it by hand".into()),
                };
                *ds = toml_edit::Value::from(new);
            } else {
                return Err(format!("`{key}` has no A, value or dS to correct"));
            }
        }
        other => *other = scaled(other, factor)?,
    }
    value.decor_mut().set_prefix(decor_prefix);
    value.decor_mut().set_suffix(suffix);
    Ok(())
}

fn scale_number(parts: &mut toml_edit::InlineTable, key: &str, factor: f64) -> Result<(), String> {
    let v = parts.get_mut(key).ok_or_else(|| format!("{key} missing"))?;
    let decor = v.decor().clone();
    *v = scaled(v, factor)?;
    *v.decor_mut() = decor;
    Ok(())
}

/// A number times `factor`, or a string "number units" with its number scaled.
fn scaled(value: &toml_edit::Value, factor: f64) -> Result<toml_edit::Value, String> {
    match value {
        toml_edit::Value::Float(f) => Ok(toml_edit::Value::from(*f.value() * factor)),
        toml_edit::Value::Integer(i) => Ok(toml_edit::Value::from(*i.value() as f64 * factor)),
        toml_edit::Value::String(text) => {
            let text = text.value().trim();
            let end = text.find(|c: char| c.is_whitespace()).unwrap_or(text.len());
            let (number, units) = text.split_at(end);
            let x: f64 = number
                .parse()
                .map_err(|_| format!("`{text}` does not start with a number"))?;
            Ok(toml_edit::Value::from(format!("{} {}", x * factor, units.trim())))
        }
        _ => Err("not a number or a string with units".into()),
    }
}
