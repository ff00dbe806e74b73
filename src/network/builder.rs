//! Networks built in code, for sweeps, ensembles, benchmarks and tests: the same checks and the
//! same evaluation as a network file, without writing text.

use std::collections::HashMap;
use std::path::PathBuf;

use crate::error::InputError;

use super::rules::{check_directions, check_name, check_spread, resolve_side};
use super::{
    parse_equation, AmountGiven, KForm, KGiven, Network, Origin, Phase, RateGiven, Reaction, Species, Spread,
    UncertainValue, DEFAULT_TEMPERATURE_K,
};

/// Builds a [`Network`] step by step; constants are in mol/L and s, the temperature in K.
///
/// ```
/// use kinequil::{NetworkBuilder, Stoichiometry};
///
/// let network = NetworkBuilder::new("isomerisation")
///     .species("A", 1.0)
///     .species("B", 0.0)
///     .reaction("A <=> B", 2.0)
///     .kr(1.0)
///     .build()?;
/// // K = kf/kr = 2, so two thirds end up as B.
/// let solved = kinequil::solve_equilibrium(&network, &Stoichiometry::new(&network))?;
/// assert!((solved.concentrations[1] - 2.0 / 3.0).abs() < 1e-12);
/// let result = kinequil::run(network, &kinequil::RunSettings::default())?;
/// assert!(result.solution.equilibrium_at.is_some() && !result.disagrees);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
#[derive(Debug, Clone)]
pub struct NetworkBuilder {
    title: String,
    temperature: f64,
    species: Vec<(String, f64, Phase)>,
    reactions: Vec<Pending>,
}

#[derive(Debug, Clone)]
struct Pending {
    equation: String,
    kf: f64,
    kr: Option<f64>,
    k: Option<f64>,
    spread: Spread,
}

impl NetworkBuilder {
    pub fn new(title: &str) -> NetworkBuilder {
        NetworkBuilder {
            title: title.to_string(),
            temperature: DEFAULT_TEMPERATURE_K,
            species: Vec::new(),
            reactions: Vec::new(),
        }
    }

    /// The (isothermal) temperature, K.
    pub fn temperature(mut self, kelvin: f64) -> NetworkBuilder {
        self.temperature = kelvin;
        self
    }

    /// A dissolved species with its initial concentration, mol/L.
    pub fn species(mut self, name: &str, initial: f64) -> NetworkBuilder {
        self.species.push((name.to_string(), initial, Phase::Dissolved));
        self
    }

    /// A pure solid or liquid (activity 1) with its initial amount, mol/L of batch.
    pub fn pure_phase(mut self, name: &str, initial: f64) -> NetworkBuilder {
        self.species.push((name.to_string(), initial, Phase::Pure));
        self
    }

    /// A step with its forward rate constant; a reversible step (`<=>`) then needs
    /// [`kr`](Self::kr) or [`equilibrium_constant`](Self::equilibrium_constant).
    pub fn reaction(mut self, equation: &str, kf: f64) -> NetworkBuilder {
        self.reactions.push(Pending {
            equation: equation.to_string(),
            kf,
            kr: None,
            k: None,
            spread: Spread::default(),
        });
        self
    }

    /// The reverse rate constant of the last step.
    pub fn kr(mut self, kr: f64) -> NetworkBuilder {
        if let Some(last) = self.reactions.last_mut() {
            last.kr = Some(kr);
        }
        self
    }

    /// The equilibrium constant Kc (mol/L based) of the last step.
    pub fn equilibrium_constant(mut self, k: f64) -> NetworkBuilder {
        if let Some(last) = self.reactions.last_mut() {
            last.k = Some(k);
        }
        self
    }

    /// The last step's kf is known within a factor (95 % of values between kf/f and kf·f), for
    /// uncertainty studies.
    pub fn kf_uncertainty(mut self, factor: f64) -> NetworkBuilder {
        if let Some(last) = self.reactions.last_mut() {
            last.spread.kf = Some(UncertainValue::Factor(factor));
        }
        self
    }

    /// The last step's K is uncertain by a standard deviation of its ΔG°, kJ/mol.
    pub fn k_uncertainty_kj(mut self, sd_kj: f64) -> NetworkBuilder {
        if let Some(last) = self.reactions.last_mut() {
            last.spread.k = Some(UncertainValue::GibbsSd(sd_kj * 1000.0));
        }
        self
    }

    /// Checks everything a network file is checked for and evaluates the constants.
    pub fn build(self) -> Result<Network, InputError> {
        let file = PathBuf::from("(built in code)");
        let fail = |field: String, message: String| InputError {
            file: file.clone(),
            line: None,
            field,
            message,
        };
        if self.species.is_empty() {
            return Err(fail("species".into(), "the network has no species".into()));
        }
        let mut species: Vec<Species> = Vec::new();
        let mut seen = std::collections::HashSet::new();
        for (name, initial, phase) in &self.species {
            let field = format!("species.{name}");
            check_name(name).map_err(|m| fail(field.clone(), m))?;
            if !seen.insert(name.as_str()) {
                return Err(fail(field, format!("`{name}` is listed twice")));
            }
            if !(initial.is_finite() && *initial >= 0.0) {
                return Err(fail(field, "a concentration must be a finite number ≥ 0".into()));
            }
            let origin = Origin { line: None, field };
            species.push(Species::as_given(
                name.clone(),
                AmountGiven::Concentration(initial.abs()),
                origin,
                *phase,
            ));
        }
        if self.reactions.is_empty() {
            return Err(fail("reaction".into(), "the network has no reaction".into()));
        }
        let index: HashMap<String, usize> = species
            .iter()
            .enumerate()
            .map(|(i, s)| (s.name.clone(), i))
            .collect();
        let reactions = self
            .reactions
            .iter()
            .enumerate()
            .map(|(j, pending)| built_reaction(pending, j, (&species, &index), &file))
            .collect::<Result<Vec<Reaction>, InputError>>()?;
        let network = Network {
            source: file.clone(),
            source_text: String::new(),
            title: self.title,
            temperature: DEFAULT_TEMPERATURE_K,
            species,
            reactions,
        };
        network.at_temperature(self.temperature)
    }
}

/// One pending step checked and resolved against the species, by the reader's rules.
fn built_reaction(
    pending: &Pending,
    j: usize,
    (species, index): (&[Species], &HashMap<String, usize>),
    file: &std::path::Path,
) -> Result<Reaction, InputError> {
    let field = format!("reaction[{}]", j + 1);
    let fail = |sub: &str, message: String| InputError {
        file: file.to_path_buf(),
        line: None,
        field: format!("{field}{sub}"),
        message,
    };
    let parsed = parse_equation(&pending.equation).map_err(|m| fail(".equation", m))?;
    let resolve = |side: &[(String, f64)]| resolve_side(side, index).map_err(|m| fail(".equation", m));
    let sides = (resolve(&parsed.reactants)?, resolve(&parsed.products)?);
    let reverse_given = pending.kr.is_some() || pending.k.is_some();
    check_directions(parsed.reversible, reverse_given).map_err(|m| fail("", m.into()))?;
    let origin = |key: &str| Origin {
        line: None,
        field: format!("{field}.{key}"),
    };
    let constant = |k: f64, key: &str| -> Result<RateGiven, InputError> {
        match k.is_finite() && k >= 0.0 {
            true => Ok(RateGiven::Value(k.abs())),
            false => Err(fail(&format!(".{key}"), "must be a finite number ≥ 0".into())),
        }
    };
    let kf = (constant(pending.kf, "kf")?, origin("kf"));
    let mut step = Reaction::as_given(pending.equation.clone(), 0, sides, parsed.reversible, species, kf);
    if let Some(kr) = pending.kr {
        step.kr_spec = Some(constant(kr, "kr")?);
        step.kr_origin = origin("kr");
        step.kr_given = true;
    }
    if let Some(k) = pending.k {
        if !(k.is_finite() && k > 0.0) {
            return Err(fail(".K", "must be positive".into()));
        }
        step.k_spec = Some(KGiven {
            form: KForm::Value(k),
            is_kp: false,
            delta_n_gas: 0.0,
            origin: origin("K"),
        });
    }
    step.uncertainty =
        check_spread(&pending.spread, step.k_spec.is_some()).map_err(|m| fail(".uncertainty", m))?;
    Ok(step)
}
