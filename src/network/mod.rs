//! The network description: a TOML file read into a validated [`Network`].
//!
//! Everything downstream takes a `Network` and never re-checks it: species names are unique,
//! every equation refers to known species, constants are finite and non-negative, and every
//! reversible step has a reverse constant.

mod builder;
mod equation;
mod formula;
mod given;
mod rules;

pub use builder::NetworkBuilder;

pub use given::{AmountGiven, Constant, KForm, KGiven, Origin, RateGiven};

use std::borrow::Cow;
use std::ops::Range;
use std::path::{Path, PathBuf};

use toml::de::{DeTable, DeValue};
use toml::Spanned;

use crate::constants::GAS_CONSTANT;
use crate::error::{Error, InputError};
use crate::units::{parse_quantity, Dimension};
pub use equation::{parse_equation, ParsedEquation};
pub use formula::{parse_formula, Formula};
use rules::{check_directions, check_name, check_uncertainty, mass_action_orders, resolve_side};

/// Run temperature when the file gives none (IUPAC standard ambient temperature).
pub const DEFAULT_TEMPERATURE_K: f64 = 298.15;

/// A temperature written as a bare number is read in K only from this value up: below it the
/// number is more likely meant in degC (a bare 60 would run at 60 K), so a unit is required.
const BARE_KELVIN_FROM: f64 = 200.0;

/// Ranges outside which a value is not physical for this model, so it is refused with a message
/// rather than left to overflow or stall the solvers (common practice; the bounds are generous).
pub mod limits {
    /// Stoichiometric coefficients: written equations use small numbers.
    pub const MAX_COEFFICIENT: f64 = 100.0;
    /// Rate-law orders.
    pub const MAX_ORDER: f64 = 10.0;
    /// Initial amounts, mol/L: nothing is denser than about 100 mol/L (water is 55).
    pub const MAX_AMOUNT: f64 = 1e4;
    /// Non-zero initial amounts below this (far less than one molecule per cubic metre) are
    /// rounding, not chemistry: write 0.
    pub const MIN_AMOUNT: f64 = 1e-30;
    /// Rate constants in mol/L and s: far beyond diffusion control (1e10 L/(mol s)) and kT/h
    /// (6e12 1/s at 300 K).
    pub const MAX_RATE_CONSTANT: f64 = 1e25;
    /// Non-zero rate and equilibrium constants below this underflow in products of rates.
    pub const MIN_CONSTANT: f64 = 1e-250;
    /// Equilibrium constants above this overflow in products of concentrations.
    pub const MAX_EQUILIBRIUM_CONSTANT: f64 = 1e250;
    /// Temperatures, K: the isothermal ideal model has no meaning outside this range.
    pub const TEMPERATURE: (f64, f64) = (100.0, 5000.0);
    /// A van 't Hoff extrapolation further than this from its reference temperature (K) is
    /// flagged: a constant dH rarely holds over more (common practice).
    pub const EXTRAPOLATION_K: f64 = 50.0;
}

/// How a species enters rate laws and equilibrium expressions.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Phase {
    /// A solute (or ideal mixture component): its concentration enters the rate laws.
    Dissolved,
    /// A pure solid or liquid: activity 1, so it is left out of rate laws and K.
    Pure,
    /// An ideal gas in the closed rigid vessel: its concentration (mol/L) is p/(RT).
    Gas,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Species {
    pub name: String,
    /// Initial concentration, mol/L, at the network's temperature.
    pub initial: f64,
    /// The initial amount as given (a partial pressure depends on the temperature).
    pub initial_spec: AmountGiven,
    pub initial_origin: Origin,
    pub phase: Phase,
    /// Absolute integration tolerance for this species, mol/L, when the file sets one.
    pub atol: Option<f64>,
    /// Chemical formula, for the element-balance audit.
    pub formula: Option<Formula>,
    /// Charge number (0 unless given).
    pub charge: f64,
    /// Standard Gibbs energy of formation, kJ/mol, for the audit.
    pub gibbs_formation: Option<f64>,
    /// Standard enthalpy of formation, kJ/mol, for the audit.
    pub enthalpy_formation: Option<f64>,
    /// Relative standard deviation of the initial amount, for uncertainty studies.
    pub initial_uncertainty: Option<f64>,
}

impl Species {
    /// A dissolved-by-default species as given, before evaluation; the optional properties
    /// (formula, charge, tolerances, formation energies) start empty.
    fn as_given(name: String, initial_spec: AmountGiven, initial_origin: Origin, phase: Phase) -> Species {
        Species {
            name,
            initial: 0.0,
            initial_spec,
            initial_origin,
            phase,
            atol: None,
            formula: None,
            charge: 0.0,
            gibbs_formation: None,
            enthalpy_formation: None,
            initial_uncertainty: None,
        }
    }

    /// True for species whose concentration enters rate laws and K (solutes and gases).
    pub fn in_rate_laws(&self) -> bool {
        self.phase != Phase::Pure
    }
}

/// Modified Arrhenius parameters: k(T) = A · T^n · exp(−Ea / (R T)), T in K.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Arrhenius {
    /// Pre-exponential factor in the rate constant's units (per K^n).
    pub a: f64,
    /// Activation energy, J/mol.
    pub ea: f64,
    pub n: f64,
}

impl Arrhenius {
    pub fn at(&self, t: f64) -> f64 {
        self.a * t.powf(self.n) * (-self.ea / (GAS_CONSTANT * t)).exp()
    }
}

/// The standard pressure for gas-phase standard equilibrium constants, Pa (1 bar, IUPAC).
pub const STANDARD_PRESSURE: f64 = 1e5;

/// Kc (mol/L based) from a standard equilibrium constant K° (1 mol/L for solutes, 1 bar for
/// gases): Kc = K° (p°/(RT))^Δn_gas with concentrations in mol/L (a factor 1000 L/m³).
pub fn kc_from_standard(k0: f64, delta_n_gas: f64, t: f64) -> f64 {
    k0 * (STANDARD_PRESSURE / (1000.0 * GAS_CONSTANT * t)).powf(delta_n_gas)
}

/// One step of the network with its resolved mass-action (or user-ordered) rate law.
#[derive(Debug, Clone, PartialEq)]
pub struct Reaction {
    /// The equation as written in the file.
    pub equation: String,
    /// Line of the `scheme` field, for messages.
    pub line: usize,
    /// (species index, coefficient) on each side.
    pub reactants: Vec<(usize, f64)>,
    pub products: Vec<(usize, f64)>,
    pub reversible: bool,
    /// Forward rate constant, units implied by the forward orders (mol/L and s).
    pub kf: f64,
    /// Reverse rate constant; 0 for a one-way step.
    pub kr: f64,
    /// Equilibrium constant as given in the file (Kc, mol/L based), if any.
    pub k_given: Option<f64>,
    /// True when kr was written in the file (not derived from K).
    pub kr_given: bool,
    /// How the equilibrium constant was given (for reports), when it was.
    pub k_source: Option<String>,
    /// Standard enthalpy of reaction from the K or Kp data, kJ/mol, when given.
    pub enthalpy: Option<f64>,
    /// Arrhenius parameters behind kf and kr, when given that way.
    pub kf_arrhenius: Option<Arrhenius>,
    pub kr_arrhenius: Option<Arrhenius>,
    /// The constants as given, from which kf, kr and K are evaluated at any temperature.
    pub kf_spec: RateGiven,
    pub kf_origin: Origin,
    pub kr_spec: Option<RateGiven>,
    pub kr_origin: Origin,
    pub k_spec: Option<KGiven>,
    /// Standard Gibbs energy of reaction as given in the file, kJ/mol.
    pub gibbs: Option<f64>,
    /// (species index, order) of each factor of the forward rate; pure phases left out.
    pub forward_orders: Vec<(usize, f64)>,
    /// (species index, order) of each factor of the reverse rate; empty for a one-way step.
    pub reverse_orders: Vec<(usize, f64)>,
    /// How uncertain the constants are, for uncertainty studies (none by default).
    pub uncertainty: Spread,
}

/// The uncertainty of a step's constants as given.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Spread {
    pub kf: Option<UncertainValue>,
    pub kr: Option<UncertainValue>,
    pub k: Option<UncertainValue>,
}

/// One constant's uncertainty.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum UncertainValue {
    /// Log-normal: 95 % of values between value/f and value·f.
    Factor(f64),
    /// The standard deviation of the step's standard Gibbs energy, J/mol (K log-normal).
    GibbsSd(f64),
}

/// A validated reaction network.
#[derive(Debug, Clone, PartialEq)]
pub struct Network {
    pub source: PathBuf,
    /// The file's text as read, for reports that echo their input.
    pub source_text: String,
    pub title: String,
    /// Temperature, K. The model is isothermal.
    pub temperature: f64,
    pub species: Vec<Species>,
    pub reactions: Vec<Reaction>,
}

/// The rate law of a step, in one place: rate = kf·Π c^a (forward orders) − kr·Π c^b (reverse
/// orders), pure phases at activity 1. Everything that needs to know how fast a step runs, in
/// which directions, or whether kf/kr is an equilibrium constant asks here; `kinetics` holds
/// the same law in the form the integrator differentiates (checked against `rates` in
/// tests/model.rs).
impl Reaction {
    /// A step as given, before [`Network::evaluate`] fills in kf, kr and K at a temperature:
    /// mass-action orders, and no reverse constant, K or ΔG until the caller adds them.
    fn as_given(
        equation: String,
        line: usize,
        sides: Sides,
        reversible: bool,
        species: &[Species],
        kf: (RateGiven, Origin),
    ) -> Reaction {
        let (reactants, products) = sides;
        Reaction {
            equation,
            line,
            forward_orders: mass_action_orders(&reactants, species),
            reverse_orders: if reversible {
                mass_action_orders(&products, species)
            } else {
                Vec::new()
            },
            reactants,
            products,
            reversible,
            kf: 0.0,
            kr: 0.0,
            k_given: None,
            kr_given: false,
            k_source: None,
            enthalpy: None,
            kf_arrhenius: None,
            kr_arrhenius: None,
            kf_spec: kf.0,
            kf_origin: kf.1,
            kr_spec: None,
            kr_origin: Origin::default(),
            k_spec: None,
            gibbs: None,
            uncertainty: Spread::default(),
        }
    }

    /// Both directions run (a reversible step with kf > 0 and kr > 0).
    pub fn runs_both_ways(&self) -> bool {
        self.reversible && self.kf > 0.0 && self.kr > 0.0
    }

    /// Only one direction runs: the step drives the network to exhaustion, not equilibrium.
    pub fn runs_one_way(&self) -> bool {
        (self.kf > 0.0) != (self.reversible && self.kr > 0.0)
    }

    /// Total forward and reverse order: they fix the units of kf and kr.
    pub fn orders(&self) -> (f64, f64) {
        let sum = |o: &[(usize, f64)]| o.iter().map(|e| e.1).sum();
        (sum(&self.forward_orders), sum(&self.reverse_orders))
    }

    /// Mass action: forward minus reverse orders equal the net stoichiometry of the species in
    /// rate laws, so that kf/kr is an equilibrium constant.
    pub fn follows_stoichiometry(&self, species: &[Species]) -> bool {
        let mut change: Vec<(usize, f64)> = net_change(&self.reactants, &self.products)
            .into_iter()
            .filter(|e| species[e.0].in_rate_laws())
            .collect();
        let mut add = |i: usize, v: f64| match change.iter_mut().find(|e| e.0 == i) {
            Some(e) => e.1 += v,
            None => change.push((i, v)),
        };
        for &(i, a) in &self.forward_orders {
            add(i, a);
        }
        for &(i, b) in &self.reverse_orders {
            add(i, -b);
        }
        change.iter().all(|e| e.1.abs() <= 1e-12)
    }

    /// Forward and reverse rate at concentrations c, mol/(L s), with every pure phase present.
    pub fn rates(&self, c: &[f64]) -> (f64, f64) {
        let product = |o: &[(usize, f64)]| o.iter().map(|&(i, a)| c[i].max(0.0).powf(a)).product::<f64>();
        let reverse = if self.reversible && self.kr > 0.0 {
            self.kr * product(&self.reverse_orders)
        } else {
            0.0
        };
        (self.kf * product(&self.forward_orders), reverse)
    }
}

impl Network {
    /// Reads and validates a network file.
    pub fn from_file(path: &Path) -> Result<Network, Error> {
        Network::from_file_at(path, None)
    }

    /// Reads a network file, at `temperature` (K) instead of the file's when given: every
    /// temperature-dependent constant and partial pressure is evaluated there.
    pub fn from_file_at(path: &Path, temperature: Option<f64>) -> Result<Network, Error> {
        let text = std::fs::read_to_string(path).map_err(|source| Error::Read {
            path: path.to_path_buf(),
            source,
        })?;
        Ok(Network::from_text_at(&text, path, temperature)?)
    }

    /// Parses and validates network text; `source` names the file in messages.
    pub fn from_text(text: &str, source: &Path) -> Result<Network, InputError> {
        Network::from_text_at(text, source, None)
    }

    pub fn from_text_at(text: &str, source: &Path, temperature: Option<f64>) -> Result<Network, InputError> {
        Reader {
            file: source,
            text,
            temperature_override: temperature,
            index: std::cell::OnceCell::new(),
            newlines: std::cell::OnceCell::new(),
        }
        .read()
    }

    pub fn has_gas(&self) -> bool {
        self.species.iter().any(|s| s.phase == Phase::Gas)
    }

    pub fn n_species(&self) -> usize {
        self.species.len()
    }

    /// Cautions about the run temperature: equilibrium constants carried by van 't Hoff more
    /// than [`limits::EXTRAPOLATION_K`] from where they were given, and a title that names a
    /// temperature other than the run's (a title kept from another case misleads the report).
    pub fn temperature_cautions(&self) -> Vec<String> {
        let t = self.temperature;
        let mut cautions: Vec<String> = self
            .reactions
            .iter()
            .enumerate()
            .filter_map(|(j, r)| match r.k_spec.as_ref().map(|k| k.form) {
                Some(given::KForm::VantHoff { at, .. }) if (t - at).abs() > limits::EXTRAPOLATION_K => {
                    Some(format!(
                        "K of step {} ({}) is carried by van 't Hoff from {:.2} K to {:.2} K, {:.0} K away, \
                     with dH held constant: check it against data at the run temperature",
                        j + 1,
                        r.equation,
                        at,
                        t,
                        (t - at).abs()
                    ))
                }
                _ => None,
            })
            .collect();
        if let Some(named) = temperature_in_text(&self.title) {
            if (named - t).abs() > 0.5 {
                cautions.push(format!(
                    "the title names {:.2} K but the run is at {:.2} K",
                    named, t
                ));
            }
        }
        cautions
    }

    /// "unknown species" for `name`, with the nearest declared name when one is close.
    pub fn unknown_species(&self, name: &str) -> String {
        rules::unknown_species(name, self.species.iter().map(|s| s.name.as_str()))
    }

    pub fn species_index(&self, name: &str) -> Option<usize> {
        self.species.iter().position(|s| s.name == name)
    }

    /// Initial concentrations in species order, mol/L.
    pub fn initial_state(&self) -> Vec<f64> {
        self.species.iter().map(|s| s.initial).collect()
    }

    /// A short name for output folders: the file stem.
    pub fn case_name(&self) -> String {
        self.source
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "case".into())
    }
}

/// Walks the spanned TOML tree so that every message can name a line.
/// Rate-law orders of one direction: (species index, order).
type Orders = Vec<(usize, f64)>;

/// The reactants and products of a step as (species index, coefficient).
type Sides = (Vec<(usize, f64)>, Vec<(usize, f64)>);

/// A step's rate constants as given, with where they were written.
struct RateSpecs {
    kf_spec: RateGiven,
    kf_origin: Origin,
    kr_spec: Option<RateGiven>,
    kr_origin: Origin,
}

/// A step's equation, parsed and resolved against the species.
struct ResolvedEquation {
    text: String,
    line: usize,
    span: Range<usize>,
    reversible: bool,
    reactants: Vec<(usize, f64)>,
    products: Vec<(usize, f64)>,
}

struct Reader<'a> {
    file: &'a Path,
    text: &'a str,
    temperature_override: Option<f64>,
    /// Species name → index, filled once the species are read, so that reading the reactions
    /// takes time linear in the size of the network.
    index: std::cell::OnceCell<std::collections::HashMap<String, usize>>,
    /// Byte offsets of the newlines, for line numbers in messages.
    newlines: std::cell::OnceCell<Vec<usize>>,
}

type Value<'i> = Spanned<DeValue<'i>>;

impl<'a> Reader<'a> {
    /// The index of a species by name (once the species are read).
    fn index_of(&self, name: &str) -> Option<usize> {
        self.index.get().and_then(|index| index.get(name).copied())
    }

    /// The 1-based line of a byte offset, by binary search in the line starts (computed once).
    fn line_of(&self, offset: usize) -> usize {
        let newlines = self.newlines.get_or_init(|| {
            self.text
                .bytes()
                .enumerate()
                .filter(|&(_, b)| b == b'\n')
                .map(|(k, _)| k)
                .collect()
        });
        newlines.partition_point(|&k| k < offset.min(self.text.len())) + 1
    }

    fn error(&self, span: Option<Range<usize>>, field: &str, message: impl Into<String>) -> InputError {
        InputError {
            file: self.file.to_path_buf(),
            line: span.map(|s| self.line_of(s.start)),
            field: field.to_string(),
            message: message.into(),
        }
    }

    fn read(&self) -> Result<Network, InputError> {
        let root = DeTable::parse(self.text).map_err(|e| {
            let message = e.message().trim().to_string();
            self.error(e.span(), "", format!("not a valid TOML file: {message}"))
        })?;
        let root = root.get_ref();
        let known = ["title", "temperature", "species", "reaction"];
        for (key, _) in root.iter() {
            if !known.contains(&key.get_ref().as_ref()) {
                return Err(self.error(
                    Some(key.span()),
                    key.get_ref(),
                    format!("unknown key; expected one of: {}", known.join(", ")),
                ));
            }
        }
        let title = match root.get("title") {
            Some(v) => self.string(v, "title")?.to_string(),
            None => String::new(),
        };
        let (low, high) = limits::TEMPERATURE;
        let out_of_range = |t: f64| !(low..=high).contains(&t);
        let temperature = match root.get("temperature") {
            Some(v) => {
                let t = self.quantity(v, "temperature", Dimension::TEMPERATURE, 1.0)?;
                if t < BARE_KELVIN_FROM && matches!(v.get_ref(), DeValue::Integer(_) | DeValue::Float(_)) {
                    return Err(self.error(
                        Some(v.span()),
                        "temperature",
                        format!(
                            "a bare {t} would be read as {t} K; write the unit, e.g. \"{t} degC\" or \"{t} K\""
                        ),
                    ));
                }
                if out_of_range(t) {
                    return Err(self.error(
                        Some(v.span()),
                        "temperature",
                        format!("{t} K is outside {low} K to {high} K (common practice for this model)"),
                    ));
                }
                t
            }
            None => DEFAULT_TEMPERATURE_K,
        };
        if let Some(t) = self.temperature_override.filter(|&t| out_of_range(t)) {
            return Err(self.error(
                None,
                "temperature",
                format!("the run temperature {t} K is outside {low} K to {high} K (common practice for this model)"),
            ));
        }
        let temperature = self.temperature_override.unwrap_or(temperature);
        let species = self.species(root.get("species"))?;
        let reactions = self.reactions(root.get("reaction"), &species)?;
        let title = if title.is_empty() {
            self.file
                .file_stem()
                .map(|s| s.to_string_lossy().into_owned())
                .unwrap_or_default()
        } else {
            title
        };
        let mut network = Network {
            source: self.file.to_path_buf(),
            source_text: self.text.to_string(),
            title,
            temperature,
            species,
            reactions,
        };
        network.evaluate()?;
        Ok(network)
    }

    fn species(&self, value: Option<&Value<'_>>) -> Result<Vec<Species>, InputError> {
        let Some(value) = value else {
            return Err(self.error(
                None,
                "species",
                "missing: list each species with its initial concentration under [species]",
            ));
        };
        let DeValue::Table(table) = value.get_ref() else {
            return Err(self.error(
                Some(value.span()),
                "species",
                "must be a table: [species] then `A = 1.0` lines",
            ));
        };
        if table.is_empty() {
            return Err(self.error(Some(value.span()), "species", "the network has no species"));
        }
        let mut species = Vec::new();
        for (key, entry) in table.iter() {
            let name = key.get_ref().to_string();
            let field = format!("species.{name}");
            check_name(&name).map_err(|m| self.error(Some(key.span()), &field, m))?;
            let origin = Origin {
                line: Some(self.line_of(key.span().start)),
                field: field.clone(),
            };
            let mut item = Species::as_given(name, AmountGiven::Concentration(0.0), origin, Phase::Dissolved);
            let mut initial: Option<&Value<'_>> = None;
            match entry.get_ref() {
                DeValue::Table(props) => {
                    for (prop, v) in props.iter() {
                        let sub = format!("{field}.{}", prop.get_ref());
                        if self.species_property(&mut item, prop.get_ref().as_ref(), prop.span(), v, &sub)? {
                            initial = Some(v);
                        }
                    }
                }
                _ => initial = Some(entry),
            }
            if let Some(v) = initial {
                let sub = if matches!(entry.get_ref(), DeValue::Table(_)) {
                    format!("{field}.initial")
                } else {
                    field.clone()
                };
                item.initial_spec = self.initial_amount(v, &sub, item.phase)?;
                item.initial_origin = Origin {
                    line: Some(self.line_of(v.span().start)),
                    field: sub.clone(),
                };
            }
            species.push(item);
        }
        Ok(species)
    }

    fn reactions(&self, value: Option<&Value<'_>>, species: &[Species]) -> Result<Vec<Reaction>, InputError> {
        let Some(value) = value else {
            return Err(self.error(
                None,
                "reaction",
                "missing: add at least one [[reaction]] with an equation and kf",
            ));
        };
        let DeValue::Array(items) = value.get_ref() else {
            return Err(self.error(
                Some(value.span()),
                "reaction",
                "must be written as [[reaction]] entries",
            ));
        };
        if items.is_empty() {
            return Err(self.error(Some(value.span()), "reaction", "the network has no reactions"));
        }
        self.index.get_or_init(|| {
            species
                .iter()
                .enumerate()
                .map(|(i, s)| (s.name.clone(), i))
                .collect()
        });
        // Sized up front: collecting a Result grows by doubling, up to 60 % more than needed
        // for a network of thousands of steps.
        let mut reactions = Vec::with_capacity(items.len());
        for (i, item) in items.iter().enumerate() {
            reactions.push(self.reaction(item, &format!("reaction[{}]", i + 1), species)?);
        }
        Ok(reactions)
    }

    fn reaction(&self, item: &Value<'_>, field: &str, species: &[Species]) -> Result<Reaction, InputError> {
        let DeValue::Table(table) = item.get_ref() else {
            return Err(self.error(Some(item.span()), field, "must be a table with scheme and kf"));
        };
        let known = [
            "scheme",
            "kf",
            "kr",
            "K",
            "Kp",
            "dG",
            "order_in",
            "reverse_order_in",
            "uncertainty",
        ];
        for (key, _) in table.iter() {
            let name: &str = key.get_ref().as_ref();
            if !known.contains(&name) {
                let hint = match name {
                    "equation" => "; the chemical equation goes under `scheme`".to_string(),
                    "orders" => "; rate-law orders go under `order_in`".to_string(),
                    "reverse_orders" => "; reverse orders go under `reverse_order_in`".to_string(),
                    _ => String::new(),
                };
                return Err(self.error(
                    Some(key.span()),
                    &format!("{field}.{name}"),
                    format!("unknown key{hint}; expected one of: {}", known.join(", ")),
                ));
            }
        }
        let ResolvedEquation {
            text: equation,
            line,
            span: eq_span,
            reversible,
            reactants,
            products,
        } = self.resolved_equation(table, item, field)?;

        let (forward_orders, reverse_orders) =
            self.rate_orders(table, field, reversible, &reactants, &products, species)?;
        let RateSpecs {
            kf_spec,
            kf_origin,
            kr_spec,
            kr_origin,
        } = self.rate_specs(table, item, field, &forward_orders, &reverse_orders)?;
        let k_spec = self.equilibrium_spec(table, field, species, &reactants, &products)?;
        let reverse_keys = ["kr", "K", "Kp"];
        let reverse_key = reverse_keys.into_iter().find(|k| table.get(*k).is_some());
        if let Err(message) = check_directions(reversible, reverse_key.is_some()) {
            let (span, sub) = match reverse_key {
                Some(key) => (table.get(key).map(|v| v.span()), format!("{field}.{key}")),
                None => (Some(eq_span), field.to_string()),
            };
            return Err(self.error(span, &sub, message));
        }
        let gibbs = match table.get("dG") {
            Some(v) => Some(self.energy_kj(v, &format!("{field}.dG"))?),
            None => None,
        };
        let sides = (reactants, products);
        let mut step = Reaction::as_given(equation, line, sides, reversible, species, (kf_spec, kf_origin));
        step.forward_orders = forward_orders;
        step.reverse_orders = reverse_orders;
        step.kr_given = kr_spec.is_some();
        step.kr_spec = kr_spec;
        step.kr_origin = kr_origin;
        step.k_spec = k_spec;
        step.gibbs = gibbs;
        if let Some(v) = table.get("uncertainty") {
            step.uncertainty = self.uncertainty(v, &format!("{field}.uncertainty"), &step)?;
        }
        Ok(step)
    }

    /// The forward and reverse rate-law orders of a step (the coefficients unless `order_in` or
    /// `reverse_order_in` say otherwise).
    fn rate_orders(
        &self,
        table: &DeTable<'_>,
        field: &str,
        reversible: bool,
        reactants: &[(usize, f64)],
        products: &[(usize, f64)],
        species: &[Species],
    ) -> Result<(Orders, Orders), InputError> {
        let forward_orders = self.orders(
            table.get("order_in"),
            &format!("{field}.order_in"),
            reactants,
            species,
        )?;
        let reverse_orders = if reversible {
            self.orders(
                table.get("reverse_order_in"),
                &format!("{field}.reverse_order_in"),
                products,
                species,
            )?
        } else {
            if let Some(v) = table.get("reverse_order_in") {
                return Err(self.error(
                    Some(v.span()),
                    &format!("{field}.reverse_order_in"),
                    "a one-way step has no reverse rate",
                ));
            }
            Vec::new()
        };
        Ok((forward_orders, reverse_orders))
    }

    /// kf and kr as given, checked against the units their orders imply.
    fn rate_specs(
        &self,
        table: &DeTable<'_>,
        item: &Value<'_>,
        field: &str,
        forward_orders: &[(usize, f64)],
        reverse_orders: &[(usize, f64)],
    ) -> Result<RateSpecs, InputError> {
        let sum = |o: &[(usize, f64)]| o.iter().map(|e| e.1).sum::<f64>();
        let (forward_order, reverse_order) = (sum(forward_orders), sum(reverse_orders));
        let kf_field = format!("{field}.kf");
        let Some(kf_value) = table.get("kf") else {
            return Err(self.error(
                Some(item.span()),
                &kf_field,
                "missing: every reaction needs a forward rate constant kf",
            ));
        };
        let origin = |v: &Value<'_>, field: String| Origin {
            line: Some(self.line_of(v.span().start)),
            field,
        };
        let kf_spec = self.rate_constant(kf_value, &kf_field, forward_order)?;
        let kf_origin = origin(kf_value, kf_field.clone());
        let (kr_spec, kr_origin) = match table.get("kr") {
            Some(v) => {
                let kr_field = format!("{field}.kr");
                (
                    Some(self.rate_constant(v, &kr_field, reverse_order)?),
                    origin(v, kr_field),
                )
            }
            None => (None, Origin::default()),
        };
        Ok(RateSpecs {
            kf_spec,
            kf_origin,
            kr_spec,
            kr_origin,
        })
    }

    /// The `scheme` field read, parsed and resolved against the species.
    fn resolved_equation(
        &self,
        table: &DeTable<'_>,
        item: &Value<'_>,
        field: &str,
    ) -> Result<ResolvedEquation, InputError> {
        let eq_field = format!("{field}.scheme");
        let Some(eq_value) = table.get("scheme") else {
            return Err(self.error(
                Some(item.span()),
                &eq_field,
                "missing: every reaction needs a scheme such as \"A + B <=> C\"",
            ));
        };
        let equation = self.string(eq_value, &eq_field)?;
        let line = self.line_of(eq_value.span().start);
        let parsed = parse_equation(equation).map_err(|m| self.error(Some(eq_value.span()), &eq_field, m))?;
        let resolve = |side: &[(String, f64)]| {
            resolve_side(
                side,
                self.index.get().unwrap_or(&std::collections::HashMap::new()),
            )
            .map_err(|m| self.error(Some(eq_value.span()), &eq_field, m))
        };
        let reactants = resolve(&parsed.reactants)?;
        let products = resolve(&parsed.products)?;
        Ok(ResolvedEquation {
            text: equation.to_string(),
            line,
            span: eq_value.span(),
            reversible: parsed.reversible,
            reactants,
            products,
        })
    }

    /// K or Kp, when the step gives one, in the form it was written.
    fn equilibrium_spec(
        &self,
        table: &DeTable<'_>,
        field: &str,
        species: &[Species],
        reactants: &[(usize, f64)],
        products: &[(usize, f64)],
    ) -> Result<Option<KGiven>, InputError> {
        // Δn over the species whose concentrations enter K, and over the gases alone.
        let net = net_change(reactants, products);
        let delta_n: f64 = net
            .iter()
            .filter(|e| species[e.0].in_rate_laws())
            .map(|e| e.1)
            .sum();
        let delta_n_gas: f64 = net
            .iter()
            .filter(|e| species[e.0].phase == Phase::Gas)
            .map(|e| e.1)
            .sum();
        let all_gas = net.iter().all(|e| species[e.0].phase != Phase::Dissolved);
        Ok(match (table.get("K"), table.get("Kp")) {
            (Some(_), Some(v)) => {
                return Err(self.error(
                    Some(v.span()),
                    &format!("{field}.Kp"),
                    "give either K or Kp, not both",
                ));
            }
            (Some(v), None) => {
                Some(self.equilibrium_constant(v, &format!("{field}.K"), false, delta_n, delta_n_gas)?)
            }
            (None, Some(v)) => {
                if !all_gas {
                    return Err(self.error(
                        Some(v.span()),
                        &format!("{field}.Kp"),
                        "Kp needs a gas-phase step (species with phase = \"gas\", or pure phases)",
                    ));
                }
                Some(self.equilibrium_constant(v, &format!("{field}.Kp"), true, delta_n, delta_n_gas)?)
            }
            (None, None) => None,
        })
    }

    /// Rate-law orders: the side's coefficients (mass action), overridden per species by the
    /// `order_in` table; pure phases are left out (activity 1).
    fn orders(
        &self,
        value: Option<&Value<'_>>,
        field: &str,
        side: &[(usize, f64)],
        species: &[Species],
    ) -> Result<Vec<(usize, f64)>, InputError> {
        let mut orders: Vec<(usize, f64)> = side.to_vec();
        if let Some(value) = value {
            let DeValue::Table(table) = value.get_ref() else {
                return Err(self.error(Some(value.span()), field, "must be a table such as { A = 0.5 }"));
            };
            for (key, v) in table.iter() {
                let sub = format!("{field}.{}", key.get_ref());
                let Some(i) = self.index_of(key.get_ref().as_ref()) else {
                    return Err(self.error(
                        Some(key.span()),
                        &sub,
                        rules::unknown_species(key.get_ref(), species.iter().map(|s| s.name.as_str())),
                    ));
                };
                if species[i].phase == Phase::Pure {
                    return Err(self.error(
                        Some(key.span()),
                        &sub,
                        "a pure solid or liquid has activity 1 and takes no order",
                    ));
                }
                let order = self.number(v, &sub)?;
                if order < 0.0 {
                    return Err(self.error(Some(v.span()), &sub, "negative orders are not supported"));
                }
                if order > limits::MAX_ORDER {
                    return Err(self.error(
                        Some(v.span()),
                        &sub,
                        format!(
                            "an order above {} is not a rate law (common practice)",
                            limits::MAX_ORDER
                        ),
                    ));
                }
                match orders.iter_mut().find(|(s, _)| *s == i) {
                    Some(entry) => entry.1 = order,
                    None => orders.push((i, order)),
                }
            }
        }
        Ok(mass_action_orders(&orders, species))
    }

    /// A quantity in internal units: a plain number times `plain_factor`, or a string with units
    /// of the expected dimension.
    fn quantity(
        &self,
        value: &Value<'_>,
        field: &str,
        expected: Dimension,
        plain_factor: f64,
    ) -> Result<f64, InputError> {
        match value.get_ref() {
            DeValue::String(text) => {
                let q = parse_quantity(text).map_err(|m| self.error(Some(value.span()), field, m))?;
                if !q.dimension.same(expected) {
                    return Err(self.error(
                        Some(value.span()),
                        field,
                        format!(
                            "`{text}` has units of {}, expected units of {expected}",
                            q.dimension
                        ),
                    ));
                }
                Ok(q.value)
            }
            _ => Ok(self.number(value, field)? * plain_factor),
        }
    }

    /// One property of a species table other than `initial` (which is returned as true, to be
    /// read once the phase is known).
    fn species_property(
        &self,
        item: &mut Species,
        prop: &str,
        prop_span: Range<usize>,
        v: &Value<'_>,
        sub: &str,
    ) -> Result<bool, InputError> {
        match prop {
            "initial" => return Ok(true),
            "atol" => {
                let atol = self.quantity(v, sub, Dimension::concentration(), 1.0)?;
                if atol <= 0.0 {
                    return Err(self.error(Some(v.span()), sub, "must be positive"));
                }
                item.atol = Some(atol);
            }
            "formula" => {
                let text = self.string(v, sub)?;
                item.formula = Some(parse_formula(text).map_err(|m| self.error(Some(v.span()), sub, m))?);
            }
            "charge" => item.charge = self.number(v, sub)?,
            "uncertainty" => {
                let relative = self.number(v, sub)?;
                if !(0.0..1.0).contains(&relative) {
                    return Err(self.error(
                        Some(v.span()),
                        sub,
                        "a relative standard deviation from 0 to below 1 (0.05 for 5 %)",
                    ));
                }
                item.initial_uncertainty = Some(relative);
            }
            "dGf" => item.gibbs_formation = Some(self.energy_kj(v, sub)?),
            "dHf" => item.enthalpy_formation = Some(self.energy_kj(v, sub)?),
            "phase" => {
                item.phase = match self.string(v, sub)? {
                    "solution" | "dissolved" => Phase::Dissolved,
                    "solid" | "liquid" => Phase::Pure,
                    "gas" => Phase::Gas,
                    other => {
                        return Err(self.error(
                            Some(v.span()),
                            sub,
                            format!(
                                "unknown phase `{other}`; use \"solution\", \"gas\", \"solid\" or \"liquid\""
                            ),
                        ))
                    }
                }
            }
            other => {
                return Err(self.error(
                    Some(prop_span.clone()),
                    sub,
                    format!(
                    "unknown property `{other}`; expected initial, phase, atol, formula, charge, dGf, dHf or uncertainty"
                ),
                ))
            }
        }
        Ok(false)
    }

    /// `uncertainty = { kf = 2.0, K = "1.5 kJ/mol" }`: factors (95 % of values within value/f
    /// and value·f), or for K also the standard deviation of the step's ΔG°.
    fn uncertainty(&self, value: &Value<'_>, field: &str, step: &Reaction) -> Result<Spread, InputError> {
        let DeValue::Table(parts) = value.get_ref() else {
            return Err(self.error(
                Some(value.span()),
                field,
                "must be a table such as { kf = 2.0, K = \"1.5 kJ/mol\" }",
            ));
        };
        let mut spread = Spread::default();
        for (key, v) in parts.iter() {
            let sub = format!("{field}.{}", key.get_ref());
            let has = match key.get_ref().as_ref() {
                "kf" => true,
                "kr" => step.kr_spec.is_some(),
                "K" => step.k_spec.is_some(),
                _ => {
                    return Err(self.error(
                        Some(key.span()),
                        &sub,
                        "unknown key; uncertainty takes kf, kr and K",
                    ));
                }
            };
            if !has {
                return Err(self.error(Some(key.span()), &sub, "the step does not give this constant"));
            }
            let is_energy = matches!(v.get_ref(), DeValue::String(_));
            let given = if key.get_ref().as_ref() == "K" && is_energy {
                UncertainValue::GibbsSd(self.quantity(v, &sub, Dimension::molar_energy(), 1000.0)?)
            } else {
                UncertainValue::Factor(self.number(v, &sub)?)
            };
            check_uncertainty(&given).map_err(|m| self.error(Some(v.span()), &sub, m))?;
            match key.get_ref().as_ref() {
                "kf" => spread.kf = Some(given),
                "kr" => spread.kr = Some(given),
                _ => spread.k = Some(given),
            }
        }
        Ok(spread)
    }

    /// An energy per mole in kJ/mol (plain numbers are kJ/mol).
    fn energy_kj(&self, value: &Value<'_>, field: &str) -> Result<f64, InputError> {
        Ok(self.quantity(value, field, Dimension::molar_energy(), 1000.0)? / 1000.0)
    }

    /// An initial amount as a concentration or, for a gas, a partial pressure (→ p/(RT)).
    fn initial_amount(
        &self,
        value: &Value<'_>,
        field: &str,
        phase: Phase,
    ) -> Result<AmountGiven, InputError> {
        let c = match value.get_ref() {
            DeValue::String(text) => {
                let q = parse_quantity(text).map_err(|m| self.error(Some(value.span()), field, m))?;
                if q.dimension.same(Dimension::concentration()) {
                    q.value
                } else if q.dimension.same(Dimension::PRESSURE) && phase == Phase::Gas {
                    if q.value < 0.0 {
                        return Err(self.error(Some(value.span()), field, "a pressure must not be negative"));
                    }
                    return Ok(AmountGiven::PartialPressure(q.value.abs()));
                } else {
                    let expected = if phase == Phase::Gas {
                        "a concentration or a partial pressure"
                    } else {
                        "a concentration"
                    };
                    return Err(self.error(
                        Some(value.span()),
                        field,
                        format!("`{text}` has units of {}, expected {expected}", q.dimension),
                    ));
                }
            }
            _ => self.number(value, field)?,
        };
        if c < 0.0 {
            return Err(self.error(Some(value.span()), field, "a concentration must not be negative"));
        }
        Ok(AmountGiven::Concentration(c.abs())) // -0.0 is zero
    }

    /// A rate constant of the given total order at temperature t: a number (internal units), a
    /// string with units, or Arrhenius parameters `{ A = ..., Ea = ..., n = ... }`.
    fn rate_constant(&self, value: &Value<'_>, field: &str, order: f64) -> Result<RateGiven, InputError> {
        let expected = Dimension::rate_constant(order);
        let units_error = |text: &str, given: Dimension| {
            self.error(
                Some(value.span()),
                field,
                format!(
                    "`{text}` has units of {given}, but a step of order {} needs {} (mol/L and s: {})",
                    crate::format::whole_or_exact(order),
                    expected,
                    crate::units::rate_constant_units(order)
                ),
            )
        };
        let (k, arrhenius) = match value.get_ref() {
            DeValue::String(text) => {
                let q = parse_quantity(text).map_err(|m| self.error(Some(value.span()), field, m))?;
                if !q.dimension.same(expected) {
                    return Err(units_error(text, q.dimension));
                }
                (q.value, None)
            }
            DeValue::Table(parts) => {
                for (key, _) in parts.iter() {
                    if !["A", "Ea", "n"].contains(&key.get_ref().as_ref()) {
                        return Err(self.error(
                            Some(key.span()),
                            &format!("{field}.{}", key.get_ref()),
                            "unknown key; Arrhenius parameters are A, Ea and n",
                        ));
                    }
                }
                let (Some(a), Some(ea)) = (parts.get("A"), parts.get("Ea")) else {
                    return Err(self.error(
                        Some(value.span()),
                        field,
                        "Arrhenius parameters need A and Ea (n is optional)",
                    ));
                };
                let a_field = format!("{field}.A");
                let a = match a.get_ref() {
                    DeValue::String(text) => {
                        let q = parse_quantity(text).map_err(|m| self.error(Some(a.span()), &a_field, m))?;
                        if !q.dimension.same(expected) {
                            return Err(units_error(text, q.dimension));
                        }
                        q.value
                    }
                    _ => self.number(a, &a_field)?,
                };
                let ea = self.quantity(ea, &format!("{field}.Ea"), Dimension::molar_energy(), 1000.0)?;
                let n = match parts.get("n") {
                    Some(v) => self.number(v, &format!("{field}.n"))?,
                    None => 0.0,
                };
                (a, Some(Arrhenius { a, ea, n }))
            }
            _ => (self.number(value, field)?, None),
        };
        if k < 0.0 {
            return Err(self.error(Some(value.span()), field, "must not be negative"));
        }
        let k = k.abs(); // -0.0 is zero
        Ok(match arrhenius {
            Some(arrhenius) => RateGiven::Arrhenius(Arrhenius { a: k, ..arrhenius }),
            None => RateGiven::Value(k),
        })
    }

    /// The "native" value of K or Kp: Kc for K, the standard (1 bar) Kp° for Kp; a string
    /// carries units that must fit the step (concentration^Δn, or pressure^Δn_gas).
    fn k_native(
        &self,
        v: &Value<'_>,
        sub: &str,
        is_kp: bool,
        delta_n: f64,
        delta_n_gas: f64,
    ) -> Result<f64, InputError> {
        let expected = if is_kp {
            Dimension::PRESSURE.power(delta_n_gas)
        } else {
            Dimension::concentration().power(delta_n)
        };
        let x = self.quantity(v, sub, expected, 1.0)?;
        // Kp with units is in Pa^Δn here; the standard Kp° is relative to 1 bar.
        let x = if is_kp && matches!(v.get_ref(), DeValue::String(_)) {
            x / STANDARD_PRESSURE.powf(delta_n_gas)
        } else {
            x
        };
        if x <= 0.0 {
            return Err(self.error(Some(v.span()), sub, "must be positive"));
        }
        Ok(x)
    }

    /// K (Kc, concentration-based) or Kp, in any of its forms, kept as given.
    fn equilibrium_constant(
        &self,
        value: &Value<'_>,
        field: &str,
        is_kp: bool,
        delta_n: f64,
        delta_n_gas: f64,
    ) -> Result<KGiven, InputError> {
        let given = |form: KForm| KGiven {
            form,
            is_kp,
            delta_n_gas,
            origin: Origin {
                line: Some(self.line_of(value.span().start)),
                field: field.to_string(),
            },
        };
        let name = if is_kp { "Kp" } else { "K" };
        let native = |v: &Value<'_>, sub: &str| self.k_native(v, sub, is_kp, delta_n, delta_n_gas);
        let DeValue::Table(parts) = value.get_ref() else {
            return Ok(given(KForm::Value(native(value, field)?)));
        };
        for (key, _) in parts.iter() {
            if !["value", "at", "dH", "dS"].contains(&key.get_ref().as_ref()) {
                return Err(self.error(
                    Some(key.span()),
                    &format!("{field}.{}", key.get_ref()),
                    format!("unknown key; {name} takes value (with at and dH) or dH and dS"),
                ));
            }
        }
        let energy = |key: &str| {
            parts
                .get(key)
                .map(|v| self.energy_kj(v, &format!("{field}.{key}")))
                .transpose()
        };
        let dh = energy("dH")?;
        let at = parts
            .get("at")
            .map(|v| self.quantity(v, &format!("{field}.at"), Dimension::TEMPERATURE, 1.0))
            .transpose()?;
        let ds = parts
            .get("dS")
            .map(|v| {
                self.quantity(
                    v,
                    &format!("{field}.dS"),
                    Dimension::molar_energy().times(Dimension::TEMPERATURE.power(-1.0)),
                    1.0,
                )
            })
            .transpose()?;
        match (parts.get("value"), dh, ds) {
            (Some(v), dh, None) => {
                let value = native(v, &format!("{field}.value"))?;
                Ok(given(match (at, dh) {
                    (Some(at), Some(dh)) => KForm::VantHoff { value, at, dh },
                    (Some(at), None) => KForm::ValueAt { value, at },
                    (None, Some(dh)) => KForm::ValueWithEnthalpy { value, dh },
                    (None, None) => KForm::Value(value),
                }))
            }
            (None, Some(dh), Some(ds)) => Ok(given(KForm::FromEnthalpyEntropy { dh, ds })),
            _ => Err(self.error(
                Some(value.span()),
                field,
                format!("{name} as a table takes value (optionally with at and dH), or dH and dS"),
            )),
        }
    }

    /// A finite number (TOML integer or float).
    fn number(&self, value: &Value<'_>, field: &str) -> Result<f64, InputError> {
        let parsed = match value.get_ref() {
            DeValue::Integer(i) => i64::from_str_radix(&i.as_str().replace('_', ""), i.radix())
                .ok()
                .map(|i| i as f64),
            DeValue::Float(f) => f.as_str().replace('_', "").parse::<f64>().ok(),
            other => {
                return Err(self.error(
                    Some(value.span()),
                    field,
                    format!(
                        "expected a number, found {} (values are in mol/L, s and K)",
                        other.type_str()
                    ),
                ))
            }
        };
        match parsed {
            Some(x) if x.is_finite() => Ok(x),
            _ => Err(self.error(Some(value.span()), field, "must be a finite number")),
        }
    }

    fn string<'v>(&self, value: &'v Value<'_>, field: &str) -> Result<&'v str, InputError> {
        match value.get_ref() {
            DeValue::String(s) => Ok(match s {
                Cow::Borrowed(b) => b,
                Cow::Owned(o) => o.as_str(),
            }),
            other => Err(self.error(
                Some(value.span()),
                field,
                format!("expected a string, found {}", other.type_str()),
            )),
        }
    }
}

/// products minus reactants, as sorted sparse entries with zeros dropped.
pub fn net_change(reactants: &[(usize, f64)], products: &[(usize, f64)]) -> Vec<(usize, f64)> {
    let mut net: Vec<(usize, f64)> = Vec::new();
    for (&(i, c), sign) in reactants
        .iter()
        .map(|e| (e, -1.0))
        .chain(products.iter().map(|e| (e, 1.0)))
    {
        match net.iter_mut().find(|(j, _)| *j == i) {
            Some(entry) => entry.1 += sign * c,
            None => net.push((i, sign * c)),
        }
    }
    net.retain(|&(_, c)| c != 0.0);
    net.sort_by_key(|&(i, _)| i);
    net
}

/// A temperature written in free text ("60 degC", "60 °C", "333 K"), in K: the first number
/// directly followed by a temperature unit.
fn temperature_in_text(text: &str) -> Option<f64> {
    let words: Vec<&str> = text.split_whitespace().collect();
    for (k, word) in words.iter().enumerate() {
        let word = word.trim_matches(|c: char| c == ',' || c == '(' || c == ')' || c == ';');
        let (number, unit) = match word.find(|c: char| !(c.is_ascii_digit() || c == '.' || c == '-')) {
            Some(0) => continue,
            Some(split) => (&word[..split], &word[split..]),
            None => (
                word,
                words
                    .get(k + 1)
                    .map_or("", |w| w.trim_matches(|c: char| c == ',' || c == ')' || c == ';')),
            ),
        };
        let Ok(value) = number.parse::<f64>() else {
            continue;
        };
        match unit {
            "degC" | "°C" | "C" => return Some(value + 273.15),
            "K" => return Some(value),
            _ => {}
        }
    }
    None
}
