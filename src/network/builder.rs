//! Networks built in code, for sweeps, ensembles, benchmarks and tests: the same checks and the
//! same evaluation as a network file, without writing text.

use std::path::PathBuf;

use crate::error::InputError;

use super::{
    check_name, limits, parse_equation, AmountGiven, KForm, KGiven, Network, Origin, Phase, RateGiven,
    Reaction, Species, DEFAULT_TEMPERATURE_K,
};

/// Builds a [`Network`] step by step; constants are in mol/L and s, the temperature in K.
///
/// ```
/// use kinequil::network::NetworkBuilder;
/// use kinequil::stoich::Stoichiometry;
///
/// let network = NetworkBuilder::new("isomerisation")
///     .species("A", 1.0)
///     .species("B", 0.0)
///     .reaction("A <=> B", 2.0)
///     .kr(1.0)
///     .build()?;
/// // K = kf/kr = 2, so two thirds end up as B.
/// let solved = kinequil::equilibrium::solve(&network, &Stoichiometry::new(&network))?;
/// assert!((solved.concentrations[1] - 2.0 / 3.0).abs() < 1e-12);
/// let result = kinequil::run::run(&network, &kinequil::run::RunSettings::default())?;
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
        for (name, initial, phase) in &self.species {
            let field = format!("species.{name}");
            check_name(name).map_err(|m| fail(field.clone(), m))?;
            if species.iter().any(|s| &s.name == name) {
                return Err(fail(field, format!("`{name}` is listed twice")));
            }
            if !(initial.is_finite() && *initial >= 0.0) {
                return Err(fail(field, "a concentration must be a finite number ≥ 0".into()));
            }
            species.push(Species {
                name: name.clone(),
                initial: 0.0,
                initial_spec: AmountGiven::Concentration(initial.abs()),
                initial_origin: Origin { line: None, field },
                phase: *phase,
                atol: None,
                formula: None,
                charge: 0.0,
                gibbs_formation: None,
                enthalpy_formation: None,
            });
        }
        if self.reactions.is_empty() {
            return Err(fail("reaction".into(), "the network has no reaction".into()));
        }
        let reactions = self
            .reactions
            .iter()
            .enumerate()
            .map(|(j, pending)| built_reaction(pending, j, &species, &file))
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

/// One pending step checked and resolved against the species.
fn built_reaction(
    pending: &Pending,
    j: usize,
    species: &[Species],
    file: &std::path::Path,
) -> Result<Reaction, InputError> {
    let fail = |field: String, message: String| InputError {
        file: file.to_path_buf(),
        line: None,
        field,
        message,
    };
    let field = format!("reaction[{}]", j + 1);
    let eq_field = format!("{field}.equation");
    let parsed = parse_equation(&pending.equation).map_err(|m| fail(eq_field.clone(), m))?;
    let resolve = |side: &[(String, f64)]| -> Result<Vec<(usize, f64)>, InputError> {
        side.iter()
            .map(|(name, c)| {
                if *c > limits::MAX_COEFFICIENT {
                    return Err(fail(
                        eq_field.clone(),
                        format!(
                            "the coefficient {c:e} of `{name}` is above {}",
                            limits::MAX_COEFFICIENT
                        ),
                    ));
                }
                species
                    .iter()
                    .position(|s| &s.name == name)
                    .map(|i| (i, *c))
                    .ok_or_else(|| fail(eq_field.clone(), format!("unknown species `{name}`")))
            })
            .collect()
    };
    let reactants = resolve(&parsed.reactants)?;
    let products = resolve(&parsed.products)?;
    let mass_action = |side: &[(usize, f64)]| -> Vec<(usize, f64)> {
        side.iter()
            .copied()
            .filter(|e| species[e.0].in_rate_laws())
            .collect()
    };
    let constant = |k: f64, key: &str| -> Result<RateGiven, InputError> {
        if !(k.is_finite() && k >= 0.0) {
            return Err(fail(
                format!("{field}.{key}"),
                "must be a finite number ≥ 0".into(),
            ));
        }
        Ok(RateGiven::Value(k.abs()))
    };
    match (parsed.reversible, pending.kr.is_some() || pending.k.is_some()) {
        (true, false) => {
            return Err(fail(
                field.clone(),
                "a reversible step (`<=>`) needs either kr or the equilibrium constant".into(),
            ))
        }
        (false, true) => {
            return Err(fail(field.clone(), "a one-way step (`=>`) takes only kf".into()));
        }
        _ => {}
    }
    let k_spec = match pending.k {
        Some(k) if !(k.is_finite() && k > 0.0) => {
            return Err(fail(format!("{field}.K"), "must be positive".into()))
        }
        Some(k) => Some(KGiven {
            form: KForm::Value(k),
            is_kp: false,
            delta_n_gas: 0.0,
            origin: Origin {
                line: None,
                field: format!("{field}.K"),
            },
        }),
        None => None,
    };
    Ok(Reaction {
        equation: pending.equation.clone(),
        line: 0,
        forward_orders: mass_action(&reactants),
        reverse_orders: if parsed.reversible {
            mass_action(&products)
        } else {
            Vec::new()
        },
        reactants,
        products,
        reversible: parsed.reversible,
        kf: 0.0,
        kr: 0.0,
        k_given: None,
        kr_given: pending.kr.is_some(),
        k_source: None,
        enthalpy: None,
        kf_arrhenius: None,
        kr_arrhenius: None,
        kf_spec: constant(pending.kf, "kf")?,
        kf_origin: Origin {
            line: None,
            field: format!("{field}.kf"),
        },
        kr_spec: pending.kr.map(|kr| constant(kr, "kr")).transpose()?,
        kr_origin: Origin {
            line: None,
            field: format!("{field}.kr"),
        },
        k_spec,
        gibbs: None,
    })
}
