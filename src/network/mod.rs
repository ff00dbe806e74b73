//! The network description: a TOML file read into a validated [`Network`].
//!
//! Everything downstream takes a `Network` and never re-checks it: species names are unique,
//! every equation refers to known species, constants are finite and non-negative, and every
//! reversible step has a reverse constant.

mod equation;
mod formula;

use std::borrow::Cow;
use std::ops::Range;
use std::path::{Path, PathBuf};

use toml::de::{DeTable, DeValue};
use toml::Spanned;

use crate::error::{Error, InputError};
pub use equation::{parse_equation, ParsedEquation};
pub use formula::{parse_formula, Formula};

/// Run temperature when the file gives none (IUPAC standard ambient temperature).
pub const DEFAULT_TEMPERATURE_K: f64 = 298.15;

/// How a species enters rate laws and equilibrium expressions.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Phase {
    /// A solute (or ideal mixture component): its concentration enters the rate laws.
    Dissolved,
    /// A pure solid or liquid: activity 1, so it is left out of rate laws and K.
    Pure,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Species {
    pub name: String,
    /// Initial concentration, mol/L.
    pub initial: f64,
    pub phase: Phase,
    /// Absolute integration tolerance for this species, mol/L, when the file sets one.
    pub atol: Option<f64>,
    /// Chemical formula, for the element-balance audit.
    pub formula: Option<Formula>,
    /// Charge number (0 unless given).
    pub charge: f64,
    /// Standard Gibbs energy of formation, kJ/mol, for the audit.
    pub gibbs_formation: Option<f64>,
}

/// One step of the network with its resolved mass-action (or user-ordered) rate law.
#[derive(Debug, Clone, PartialEq)]
pub struct Reaction {
    /// The equation as written in the file.
    pub equation: String,
    /// Line of the `equation` field, for messages.
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
    /// Standard Gibbs energy of reaction as given in the file, kJ/mol.
    pub gibbs: Option<f64>,
    /// (species index, order) of each factor of the forward rate; pure phases left out.
    pub forward_orders: Vec<(usize, f64)>,
    /// (species index, order) of each factor of the reverse rate; empty for a one-way step.
    pub reverse_orders: Vec<(usize, f64)>,
}

/// A validated reaction network.
#[derive(Debug, Clone, PartialEq)]
pub struct Network {
    pub source: PathBuf,
    pub title: String,
    /// Temperature, K. The model is isothermal.
    pub temperature: f64,
    pub species: Vec<Species>,
    pub reactions: Vec<Reaction>,
}

impl Network {
    /// Reads and validates a network file.
    pub fn from_file(path: &Path) -> Result<Network, Error> {
        let text = std::fs::read_to_string(path).map_err(|source| Error::Read {
            path: path.to_path_buf(),
            source,
        })?;
        Ok(Network::from_text(&text, path)?)
    }

    /// Parses and validates network text; `source` names the file in messages.
    pub fn from_text(text: &str, source: &Path) -> Result<Network, InputError> {
        Reader { file: source, text }.read()
    }

    pub fn n_species(&self) -> usize {
        self.species.len()
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
struct Reader<'a> {
    file: &'a Path,
    text: &'a str,
}

type Value<'i> = Spanned<DeValue<'i>>;

impl<'a> Reader<'a> {
    fn line_of(&self, offset: usize) -> usize {
        let end = offset.min(self.text.len());
        self.text.as_bytes()[..end]
            .iter()
            .filter(|&&b| b == b'\n')
            .count()
            + 1
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
        let temperature = match root.get("temperature") {
            Some(v) => {
                let t = self.number(v, "temperature")?;
                if t <= 0.0 {
                    return Err(self.error(Some(v.span()), "temperature", "must be above 0 K"));
                }
                t
            }
            None => DEFAULT_TEMPERATURE_K,
        };
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
        Ok(Network {
            source: self.file.to_path_buf(),
            title,
            temperature,
            species,
            reactions,
        })
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
            let mut item = Species {
                name,
                initial: 0.0,
                phase: Phase::Dissolved,
                atol: None,
                formula: None,
                charge: 0.0,
                gibbs_formation: None,
            };
            match entry.get_ref() {
                DeValue::Table(props) => {
                    for (prop, v) in props.iter() {
                        let sub = format!("{field}.{}", prop.get_ref());
                        match prop.get_ref().as_ref() {
                            "initial" => item.initial = self.concentration(v, &sub)?,
                            "atol" => {
                                let atol = self.number(v, &sub)?;
                                if atol <= 0.0 {
                                    return Err(self.error(Some(v.span()), &sub, "must be positive"));
                                }
                                item.atol = Some(atol);
                            }
                            "formula" => {
                                let text = self.string(v, &sub)?;
                                item.formula =
                                    Some(parse_formula(text).map_err(|m| self.error(Some(v.span()), &sub, m))?);
                            }
                            "charge" => item.charge = self.number(v, &sub)?,
                            "dGf" => item.gibbs_formation = Some(self.number(v, &sub)?),
                            "phase" => {
                                item.phase = match self.string(v, &sub)? {
                                    "solution" | "dissolved" => Phase::Dissolved,
                                    "solid" | "liquid" => Phase::Pure,
                                    other => {
                                        return Err(self.error(
                                            Some(v.span()),
                                            &sub,
                                            format!(
                                        "unknown phase `{other}`; use \"solution\", \"solid\" or \"liquid\""
                                    ),
                                        ))
                                    }
                                }
                            }
                            other => {
                                return Err(self.error(
                                    Some(prop.span()),
                                    &sub,
                                    format!(
                                        "unknown property `{other}`; expected initial, phase, atol, formula, charge or dGf"
                                    ),
                                ))
                            }
                        }
                    }
                }
                _ => item.initial = self.concentration(entry, &field)?,
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
        items
            .iter()
            .enumerate()
            .map(|(i, item)| self.reaction(item, &format!("reaction[{}]", i + 1), species))
            .collect()
    }

    fn reaction(&self, item: &Value<'_>, field: &str, species: &[Species]) -> Result<Reaction, InputError> {
        let DeValue::Table(table) = item.get_ref() else {
            return Err(self.error(Some(item.span()), field, "must be a table with equation and kf"));
        };
        let known = ["equation", "kf", "kr", "K", "dG", "orders", "reverse_orders"];
        for (key, _) in table.iter() {
            if !known.contains(&key.get_ref().as_ref()) {
                return Err(self.error(
                    Some(key.span()),
                    &format!("{field}.{}", key.get_ref()),
                    format!("unknown key; expected one of: {}", known.join(", ")),
                ));
            }
        }
        let eq_field = format!("{field}.equation");
        let Some(eq_value) = table.get("equation") else {
            return Err(self.error(
                Some(item.span()),
                &eq_field,
                "missing: every reaction needs an equation such as \"A + B <=> C\"",
            ));
        };
        let equation = self.string(eq_value, &eq_field)?;
        let line = self.line_of(eq_value.span().start);
        let parsed = parse_equation(equation).map_err(|m| self.error(Some(eq_value.span()), &eq_field, m))?;
        let resolve = |side: &[(String, f64)]| -> Result<Vec<(usize, f64)>, InputError> {
            side.iter()
                .map(|(name, coefficient)| {
                    species
                        .iter()
                        .position(|s| &s.name == name)
                        .map(|i| (i, *coefficient))
                        .ok_or_else(|| {
                            self.error(
                                Some(eq_value.span()),
                                &eq_field,
                                format!("unknown species `{name}`: list it under [species]"),
                            )
                        })
                })
                .collect()
        };
        let reactants = resolve(&parsed.reactants)?;
        let products = resolve(&parsed.products)?;

        let constant = |key: &str| -> Result<Option<f64>, InputError> {
            table
                .get(key)
                .map(|v| {
                    let sub = format!("{field}.{key}");
                    let x = self.number(v, &sub)?;
                    if x < 0.0 {
                        return Err(self.error(Some(v.span()), &sub, "must not be negative"));
                    }
                    Ok(x)
                })
                .transpose()
        };
        let kf = constant("kf")?.ok_or_else(|| {
            self.error(
                Some(item.span()),
                &format!("{field}.kf"),
                "missing: every reaction needs a forward rate constant kf",
            )
        })?;
        let kr_given = constant("kr")?;
        let k_given = constant("K")?;
        let kr = if parsed.reversible {
            match (kr_given, k_given) {
                (Some(kr), _) => kr,
                (None, Some(k)) => {
                    if k <= 0.0 {
                        return Err(self.error(
                            table.get("K").map(|v| v.span()),
                            &format!("{field}.K"),
                            "must be positive",
                        ));
                    }
                    kf / k
                }
                (None, None) => {
                    return Err(self.error(
                        Some(eq_value.span()),
                        field,
                        "a reversible step (`<=>`) needs either kr or the equilibrium constant K",
                    ))
                }
            }
        } else {
            if let Some(key) = ["kr", "K"].into_iter().find(|k| table.get(*k).is_some()) {
                let sub = format!("{field}.{key}");
                return Err(self.error(
                    table.get(key).map(|v| v.span()),
                    &sub,
                    "a one-way step (`=>`) takes only kf; write `<=>` for a reversible step",
                ));
            }
            0.0
        };
        let forward_orders = self.orders(
            table.get("orders"),
            &format!("{field}.orders"),
            &reactants,
            species,
        )?;
        let reverse_orders = if parsed.reversible {
            self.orders(
                table.get("reverse_orders"),
                &format!("{field}.reverse_orders"),
                &products,
                species,
            )?
        } else {
            if let Some(v) = table.get("reverse_orders") {
                return Err(self.error(
                    Some(v.span()),
                    &format!("{field}.reverse_orders"),
                    "a one-way step has no reverse rate",
                ));
            }
            Vec::new()
        };
        Ok(Reaction {
            equation: equation.to_string(),
            line,
            reactants,
            products,
            reversible: parsed.reversible,
            kf,
            kr,
            k_given,
            kr_given: kr_given.is_some(),
            gibbs: match table.get("dG") {
                Some(v) => Some(self.number(v, &format!("{field}.dG"))?),
                None => None,
            },
            forward_orders,
            reverse_orders,
        })
    }

    /// Rate-law orders: the side's coefficients (mass action), overridden per species by the
    /// `orders` table; pure phases are left out (activity 1).
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
                let Some(i) = species.iter().position(|s| s.name == key.get_ref().as_ref()) else {
                    return Err(self.error(
                        Some(key.span()),
                        &sub,
                        format!("unknown species `{}`", key.get_ref()),
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
                match orders.iter_mut().find(|(s, _)| *s == i) {
                    Some(entry) => entry.1 = order,
                    None => orders.push((i, order)),
                }
            }
        }
        orders.retain(|&(i, order)| species[i].phase == Phase::Dissolved && order > 0.0);
        Ok(orders)
    }

    fn concentration(&self, value: &Value<'_>, field: &str) -> Result<f64, InputError> {
        let x = self.number(value, field)?;
        if x < 0.0 {
            return Err(self.error(Some(value.span()), field, "a concentration must not be negative"));
        }
        Ok(x)
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

fn check_name(name: &str) -> Result<(), String> {
    let first = name.chars().next().unwrap_or(' ');
    if !(first.is_alphabetic() || first == '(' || first == '[') {
        return Err(format!(
            "`{name}` is not a species name: names start with a letter"
        ));
    }
    if name.chars().any(|c| c.is_whitespace() || c == '=' || c == '<') {
        return Err(format!("`{name}` may not contain spaces, `=` or `<`"));
    }
    Ok(())
}
