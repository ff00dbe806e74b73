//! Constants as the file gives them, and their evaluation at a temperature.
//!
//! The reader keeps every temperature-dependent quantity in the form it was written (a fixed
//! rate constant or Arrhenius parameters; K or Kp as a value, from van 't Hoff or from dH and dS;
//! an initial amount or a partial pressure), so one network can be evaluated at any temperature
//! and with any constant scaled, in-process, without reading text again. `Network::evaluate` is
//! the one place where the numbers the engine uses are computed and range-checked.

use crate::constants::GAS_CONSTANT;
use crate::error::InputError;

use super::{kc_from_standard, limits, Arrhenius, Network};

/// Where a value was written: for messages raised when it is evaluated.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Origin {
    pub line: Option<usize>,
    pub field: String,
}

/// A rate constant as given, in mol/L and s (units already converted).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RateGiven {
    Value(f64),
    Arrhenius(Arrhenius),
}

impl RateGiven {
    pub fn at(&self, t: f64) -> f64 {
        match self {
            RateGiven::Value(k) => *k,
            RateGiven::Arrhenius(a) => a.at(t),
        }
    }

    pub fn arrhenius(&self) -> Option<Arrhenius> {
        match self {
            RateGiven::Arrhenius(a) => Some(*a),
            RateGiven::Value(_) => None,
        }
    }

    /// The same constant times `factor` at every temperature (Arrhenius: A scaled).
    pub fn times(&self, factor: f64) -> RateGiven {
        match self {
            RateGiven::Value(k) => RateGiven::Value(k * factor),
            RateGiven::Arrhenius(a) => RateGiven::Arrhenius(Arrhenius {
                a: a.a * factor,
                ..*a
            }),
        }
    }
}

/// How an equilibrium constant was written. "Native" values are Kc (mol/L based) for `K` and
/// the standard Kp° (1 bar) for `Kp`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum KForm {
    /// A value that holds at any temperature the model is run at.
    Value(f64),
    /// The same, with the enthalpy of reaction (kJ/mol) given beside it for the audit.
    ValueWithEnthalpy { value: f64, dh: f64 },
    /// A value at one temperature only (no dH to carry it over).
    ValueAt { value: f64, at: f64 },
    /// van 't Hoff from a reference temperature: ln K(T) = ln K(at) − dH/R (1/T − 1/at); dH in kJ/mol.
    VantHoff { value: f64, at: f64, dh: f64 },
    /// Standard K° = exp(−(dH − T dS)/RT); dH in kJ/mol, dS in J/(mol K).
    FromEnthalpyEntropy { dh: f64, ds: f64 },
}

/// An equilibrium constant as given, with what it takes to turn it into Kc at any temperature.
#[derive(Debug, Clone, PartialEq)]
pub struct KGiven {
    pub form: KForm,
    /// Written as `Kp` (gas phase, standard 1 bar) rather than `K`.
    pub is_kp: bool,
    /// Gas moles of products minus reactants, for Kp° → Kc.
    pub delta_n_gas: f64,
    pub origin: Origin,
}

impl KGiven {
    fn name(&self) -> &'static str {
        if self.is_kp {
            "Kp"
        } else {
            "K"
        }
    }

    /// Kc (mol/L based) at temperature t, or why it cannot be had there.
    pub fn kc_at(&self, t: f64) -> Result<f64, String> {
        let to_kc = |native: f64| {
            if self.is_kp {
                kc_from_standard(native, self.delta_n_gas, t)
            } else {
                native
            }
        };
        match self.form {
            KForm::Value(x) | KForm::ValueWithEnthalpy { value: x, .. } => Ok(to_kc(x)),
            KForm::ValueAt { value, at } if (at - t).abs() <= 1e-9 => Ok(to_kc(value)),
            KForm::ValueAt { at, .. } => Err(format!(
                "{} is given at {at} K but the run is at {t} K: add dH to carry it over",
                self.name()
            )),
            KForm::VantHoff { value, at, dh } => Ok(to_kc(
                value * (-dh * 1000.0 / GAS_CONSTANT * (1.0 / t - 1.0 / at)).exp(),
            )),
            KForm::FromEnthalpyEntropy { dh, ds } => {
                let k0 = (-(dh * 1000.0 - t * ds) / (GAS_CONSTANT * t)).exp();
                Ok(kc_from_standard(k0, self.delta_n_gas, t))
            }
        }
    }

    /// How the constant was given, for reports.
    pub fn source(&self) -> String {
        let name = self.name();
        match self.form {
            KForm::Value(x) | KForm::ValueAt { value: x, .. } | KForm::ValueWithEnthalpy { value: x, .. }
                if self.is_kp =>
            {
                format!("Kp = {x} (standard, 1 bar)")
            }
            KForm::Value(x) | KForm::ValueAt { value: x, .. } | KForm::ValueWithEnthalpy { value: x, .. } => {
                format!("K = {x}")
            }
            KForm::VantHoff { value, at, dh } => {
                format!("{name} = {value} at {at} K, van 't Hoff with dH = {dh} kJ/mol")
            }
            KForm::FromEnthalpyEntropy { dh, ds } => {
                format!("{name} from dH = {dh} kJ/mol, dS = {ds} J/(mol K)")
            }
        }
    }

    /// The standard enthalpy of reaction, kJ/mol, when the data give it.
    pub fn enthalpy(&self) -> Option<f64> {
        match self.form {
            KForm::VantHoff { dh, .. }
            | KForm::FromEnthalpyEntropy { dh, .. }
            | KForm::ValueWithEnthalpy { dh, .. } => Some(dh),
            _ => None,
        }
    }

    /// The same constant times `factor` at every temperature (dH/dS: dS + R ln factor).
    pub fn times(&self, factor: f64) -> KGiven {
        let form = match self.form {
            KForm::Value(x) => KForm::Value(x * factor),
            KForm::ValueWithEnthalpy { value, dh } => KForm::ValueWithEnthalpy {
                value: value * factor,
                dh,
            },
            KForm::ValueAt { value, at } => KForm::ValueAt {
                value: value * factor,
                at,
            },
            KForm::VantHoff { value, at, dh } => KForm::VantHoff {
                value: value * factor,
                at,
                dh,
            },
            KForm::FromEnthalpyEntropy { dh, ds } => KForm::FromEnthalpyEntropy {
                dh,
                ds: ds + GAS_CONSTANT * factor.ln(),
            },
        };
        KGiven { form, ..self.clone() }
    }
}

/// An initial amount as given.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum AmountGiven {
    /// mol/L.
    Concentration(f64),
    /// A gas's partial pressure, Pa: c = p/(RT) depends on the temperature.
    PartialPressure(f64),
}

impl AmountGiven {
    pub fn at(&self, t: f64) -> f64 {
        match self {
            AmountGiven::Concentration(c) => *c,
            AmountGiven::PartialPressure(p) => p / (1000.0 * GAS_CONSTANT * t),
        }
    }
}

/// Which constant of a step a factor applies to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Constant {
    Kf,
    Kr,
    K,
}

impl Network {
    /// The same network evaluated at another temperature (K): Arrhenius constants, K(T), Kp → Kc
    /// and partial pressures are evaluated there, with the same checks as when the file is read.
    pub fn at_temperature(&self, t: f64) -> Result<Network, InputError> {
        let (low, high) = limits::TEMPERATURE;
        if !(low..=high).contains(&t) {
            return Err(InputError {
                file: self.source.clone(),
                line: None,
                field: "temperature".into(),
                message: format!("the run temperature {t} K is outside {low} K to {high} K (common practice for this model)"),
            });
        }
        let mut network = self.clone();
        network.temperature = t;
        network.evaluate()?;
        Ok(network)
    }

    /// The same network with one constant of step `step` (0-based) multiplied by `factor` at
    /// every temperature. A kr defined by K is scaled through K (K / factor), so the step stays
    /// what the file says it is; scaling K of a step with an explicit kr changes only the
    /// reference K.
    pub fn with_factor(&self, step: usize, constant: Constant, factor: f64) -> Result<Network, InputError> {
        self.with_factors(&[(step, constant, factor)])
    }

    /// [`with_factor`](Self::with_factor) for several constants at once, evaluated once.
    pub fn with_factors(&self, factors: &[(usize, Constant, f64)]) -> Result<Network, InputError> {
        let mut network = self.clone();
        for &(step, constant, factor) in factors {
            let r = network.reactions.get_mut(step).ok_or_else(|| InputError {
                file: self.source.clone(),
                line: None,
                field: format!("reaction[{}]", step + 1),
                message: "no such step".into(),
            })?;
            match (constant, &r.kr_spec, &r.k_spec) {
                (Constant::Kf, _, _) => r.kf_spec = r.kf_spec.times(factor),
                (Constant::Kr, Some(kr), _) => r.kr_spec = Some(kr.times(factor)),
                (Constant::Kr, None, Some(k)) => r.k_spec = Some(k.times(1.0 / factor)),
                (Constant::K, _, Some(k)) => r.k_spec = Some(k.times(factor)),
                _ => {
                    return Err(InputError {
                        file: self.source.clone(),
                        line: Some(r.line),
                        field: format!("reaction[{}]", step + 1),
                        message: "the step has no such constant to scale".into(),
                    })
                }
            }
        }
        network.evaluate()?;
        Ok(network)
    }

    /// The same network with species `species` (0-based) starting at `concentration` mol/L.
    pub fn with_initial(&self, species: usize, concentration: f64) -> Result<Network, InputError> {
        self.with_initials(&[(species, concentration)])
    }

    /// [`with_initial`](Self::with_initial) for several species at once, evaluated once.
    pub fn with_initials(&self, amounts: &[(usize, f64)]) -> Result<Network, InputError> {
        let mut network = self.clone();
        for &(species, concentration) in amounts {
            let s = network.species.get_mut(species).ok_or_else(|| InputError {
                file: self.source.clone(),
                line: None,
                field: "species".into(),
                message: format!("no species number {}", species + 1),
            })?;
            if !(concentration.is_finite() && concentration >= 0.0) {
                return Err(InputError {
                    file: self.source.clone(),
                    line: s.initial_origin.line,
                    field: s.initial_origin.field.clone(),
                    message: format!("{concentration} is not a concentration ≥ 0"),
                });
            }
            s.initial_spec = AmountGiven::Concentration(concentration);
        }
        network.evaluate()?;
        Ok(network)
    }

    /// Computes every number the engine uses from the constants as given, at `self.temperature`,
    /// and checks them against `limits`.
    pub(super) fn evaluate(&mut self) -> Result<(), InputError> {
        let t = self.temperature;
        let file = self.source.clone();
        let fail = |origin: &Origin, message: String| InputError {
            file: file.clone(),
            line: origin.line,
            field: origin.field.clone(),
            message,
        };
        for s in &mut self.species {
            evaluate_amount(s, t, &fail)?;
        }
        for r in &mut self.reactions {
            evaluate_constants(r, t, &fail)?;
        }
        Ok(())
    }
}

/// A species' initial amount at temperature t, within the limits.
fn evaluate_amount(
    s: &mut super::Species,
    t: f64,
    fail: &impl Fn(&Origin, String) -> InputError,
) -> Result<(), InputError> {
    let c = s.initial_spec.at(t);
    if c > limits::MAX_AMOUNT {
        return Err(fail(
            &s.initial_origin,
            format!(
                "{c:e} mol/L is above {:e} mol/L, denser than any substance (common practice)",
                limits::MAX_AMOUNT
            ),
        ));
    }
    if c > 0.0 && c < limits::MIN_AMOUNT {
        return Err(fail(
            &s.initial_origin,
            format!(
                "{c:e} mol/L is below {:e} mol/L, less than one molecule in a cubic kilometre: write 0",
                limits::MIN_AMOUNT
            ),
        ));
    }
    s.initial = c;
    Ok(())
}

/// A step's kf, kr and K at temperature t, within the limits, and what reports say of them.
fn evaluate_constants(
    r: &mut super::Reaction,
    t: f64,
    fail: &impl Fn(&Origin, String) -> InputError,
) -> Result<(), InputError> {
    let rate = |spec: &RateGiven, origin: &Origin| -> Result<f64, InputError> {
        let k = spec.at(t);
        if !k.is_finite() || k > limits::MAX_RATE_CONSTANT || (k > 0.0 && k < limits::MIN_CONSTANT) {
            return Err(fail(
                origin,
                format!(
                    "evaluates to {} at {t} K, outside {:e} to {:e} (common practice; mol/L and s)",
                    crate::format::finite_or_word(k),
                    limits::MIN_CONSTANT,
                    limits::MAX_RATE_CONSTANT
                ),
            ));
        }
        Ok(k)
    };
    r.kf = rate(&r.kf_spec, &r.kf_origin)?;
    let kc = match &r.k_spec {
        Some(k) => {
            let kc = k.kc_at(t).map_err(|m| fail(&k.origin, m))?;
            if !(limits::MIN_CONSTANT..=limits::MAX_EQUILIBRIUM_CONSTANT).contains(&kc) {
                return Err(fail(
                    &k.origin,
                    format!(
                        "evaluates to Kc = {} at {t} K, outside {:e} to {:e}: the step is one-way in practice; write it with `=>`",
                        crate::format::finite_or_word(kc),
                        limits::MIN_CONSTANT,
                        limits::MAX_EQUILIBRIUM_CONSTANT
                    ),
                ));
            }
            Some(kc)
        }
        None => None,
    };
    r.kr = match (&r.kr_spec, kc, &r.k_spec) {
        (Some(spec), _, _) => rate(spec, &r.kr_origin)?,
        (None, Some(kc), Some(k)) if r.reversible => {
            let kr = r.kf / kc;
            if kr > limits::MAX_RATE_CONSTANT || (kr > 0.0 && kr < limits::MIN_CONSTANT) {
                return Err(fail(
                    &k.origin,
                    format!(
                        "makes kr = kf/K = {kr:e}, outside {:e} to {:e} (common practice)",
                        limits::MIN_CONSTANT,
                        limits::MAX_RATE_CONSTANT
                    ),
                ));
            }
            kr
        }
        _ => 0.0,
    };
    r.k_given = kc;
    r.k_source = r.k_spec.as_ref().map(KGiven::source);
    r.enthalpy = r.k_spec.as_ref().and_then(KGiven::enthalpy);
    r.kf_arrhenius = r.kf_spec.arrhenius();
    r.kr_arrhenius = r.kr_spec.as_ref().and_then(RateGiven::arrhenius);
    Ok(())
}
