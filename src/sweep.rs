//! Sweeps: the same network at a grid of conditions. An axis varies the temperature, a species'
//! initial amount, or a multiplier on one step's kf, kr or K; several axes make a grid.
//!
//! Axis grammar (our own): `WHAT=FROM..TO:N` with WHAT one of `temperature`, `c0[SPECIES]`,
//! `kf[STEP]`, `kr[STEP]`, `K[STEP]` (steps numbered from 1 as in the file). Temperatures and
//! amounts may carry units (`40degC`, `250 mmol/L`) and are spaced evenly; multipliers are
//! written `x0.5..x2` and spaced evenly in their logarithm.

use crate::network::{Constant, Network};
use crate::units::{parse_quantity, Dimension};

/// What one axis varies.
#[derive(Debug, Clone, PartialEq)]
pub enum Varied {
    /// The run temperature, K.
    Temperature,
    /// The initial concentration of a species (index), mol/L.
    Initial(usize),
    /// A multiplier on a step's (0-based) constant.
    Factor(usize, Constant),
}

/// One axis of a sweep: what it varies and its values in internal units (K, mol/L, factor).
#[derive(Debug, Clone, PartialEq)]
pub struct Axis {
    /// The axis as the user wrote its name (`temperature`, `kf[2]`), for headers and charts.
    pub name: String,
    pub varied: Varied,
    pub values: Vec<f64>,
}

impl Axis {
    /// Reads `WHAT=FROM..TO:N` against the network's species and steps.
    pub fn parse(text: &str, network: &Network) -> Result<Axis, String> {
        let (what, range) = text
            .split_once('=')
            .ok_or_else(|| format!("`{text}`: write WHAT=FROM..TO:N, e.g. temperature=40degC..80degC:9"))?;
        let what = what.trim();
        let (span, count) = range
            .rsplit_once(':')
            .ok_or_else(|| format!("`{text}`: the number of points is missing (…:N)"))?;
        let count: usize = count
            .trim()
            .parse()
            .ok()
            .filter(|&n| (1..=10_000).contains(&n))
            .ok_or_else(|| {
                format!("`{text}`: the number of points must be a whole number from 1 to 10000")
            })?;
        let (from, to) = span
            .split_once("..")
            .ok_or_else(|| format!("`{text}`: write the range as FROM..TO"))?;
        let varied = varied(what, network)?;
        let (from, to) = match &varied {
            Varied::Temperature => (kelvin(from)?, kelvin(to)?),
            Varied::Initial(_) => (amount(from)?, amount(to)?),
            Varied::Factor(..) => (factor(from)?, factor(to)?),
        };
        let values = (0..count)
            .map(|i| {
                let w = if count == 1 {
                    0.0
                } else {
                    i as f64 / (count - 1) as f64
                };
                match varied {
                    Varied::Factor(..) => (from.ln() * (1.0 - w) + to.ln() * w).exp(),
                    _ => from * (1.0 - w) + to * w,
                }
            })
            .collect();
        Ok(Axis {
            name: what.to_string(),
            varied,
            values,
        })
    }

    /// The column header for this axis's values, with their unit.
    pub fn header(&self) -> String {
        match self.varied {
            Varied::Temperature => "temperature_K".into(),
            Varied::Initial(_) => format!("{}_mol_per_L", self.name),
            Varied::Factor(..) => format!("{}_factor", self.name),
        }
    }
}

fn varied(what: &str, network: &Network) -> Result<Varied, String> {
    if what == "temperature" {
        return Ok(Varied::Temperature);
    }
    let (kind, inside) = what
        .strip_suffix(']')
        .and_then(|w| w.split_once('['))
        .ok_or_else(|| format!("`{what}`: vary temperature, c0[SPECIES], kf[STEP], kr[STEP] or K[STEP]"))?;
    let step = || -> Result<usize, String> {
        inside
            .trim()
            .parse::<usize>()
            .ok()
            .filter(|&s| (1..=network.reactions.len()).contains(&s))
            .map(|s| s - 1)
            .ok_or_else(|| format!("`{what}`: steps are numbered 1 to {}", network.reactions.len()))
    };
    match kind {
        "c0" => network
            .species_index(inside.trim())
            .map(Varied::Initial)
            .ok_or_else(|| format!("`{what}`: no species `{}` in the network", inside.trim())),
        "kf" => Ok(Varied::Factor(step()?, Constant::Kf)),
        "kr" => Ok(Varied::Factor(step()?, Constant::Kr)),
        "K" => Ok(Varied::Factor(step()?, Constant::K)),
        _ => Err(format!(
            "`{what}`: vary temperature, c0[SPECIES], kf[STEP], kr[STEP] or K[STEP]"
        )),
    }
}

fn kelvin(text: &str) -> Result<f64, String> {
    let q = parse_quantity(text)?;
    if q.dimension.same(Dimension::TEMPERATURE) || q.dimension.same(Dimension::NONE) {
        Ok(q.value)
    } else {
        Err(format!("`{}` is not a temperature (K or degC)", text.trim()))
    }
}

fn amount(text: &str) -> Result<f64, String> {
    let q = parse_quantity(text)?;
    if !(q.dimension.same(Dimension::concentration()) || q.dimension.same(Dimension::NONE)) {
        return Err(format!("`{}` is not a concentration (mol/L)", text.trim()));
    }
    match q.value >= 0.0 {
        true => Ok(q.value),
        false => Err(format!("`{}`: an amount must not be negative", text.trim())),
    }
}

fn factor(text: &str) -> Result<f64, String> {
    let number = text
        .trim()
        .strip_prefix('x')
        .ok_or_else(|| format!("`{}`: write multipliers with an x, as in x0.5..x2", text.trim()))?;
    number
        .trim()
        .parse::<f64>()
        .ok()
        .filter(|f| f.is_finite() && *f > 0.0)
        .ok_or_else(|| format!("`{}`: a multiplier is a positive number", text.trim()))
}

/// Every point of the grid of `axes` (the last axis varies fastest), as one value per axis.
pub fn grid(axes: &[Axis]) -> Vec<Vec<f64>> {
    axes.iter().fold(vec![Vec::new()], |points, axis| {
        points
            .iter()
            .flat_map(|p| {
                axis.values.iter().map(move |&v| {
                    let mut q = p.clone();
                    q.push(v);
                    q
                })
            })
            .collect()
    })
}

/// The network at one point of the grid: temperature first, then amounts and multipliers.
pub fn at_point(network: &Network, axes: &[Axis], point: &[f64]) -> Result<Network, String> {
    let mut net = network.clone();
    for (axis, &value) in axes.iter().zip(point) {
        if axis.varied == Varied::Temperature {
            net = net.at_temperature(value).map_err(|e| e.to_string())?;
        }
    }
    for (axis, &value) in axes.iter().zip(point) {
        net = match axis.varied {
            Varied::Temperature => continue,
            Varied::Initial(i) => net.with_initial(i, value),
            Varied::Factor(step, constant) => net.with_factor(step, constant, value),
        }
        .map_err(|e| e.to_string())?;
    }
    Ok(net)
}

/// A warning when a temperature axis meets a network whose constants do not depend on
/// temperature (plain values, no Arrhenius, van 't Hoff, dH/dS or partial pressures).
pub fn temperature_note(network: &Network, axes: &[Axis]) -> Option<String> {
    if !axes.iter().any(|a| a.varied == Varied::Temperature) {
        return None;
    }
    let t = network.temperature;
    let (low, high) = (
        network.at_temperature(t).ok()?,
        network.at_temperature(t + 10.0).ok()?,
    );
    let same = low
        .reactions
        .iter()
        .zip(&high.reactions)
        .all(|(a, b)| a.kf == b.kf && a.kr == b.kr)
        && low.initial_state() == high.initial_state();
    same.then(|| {
        "no constant in this network depends on temperature (plain values: no Arrhenius, van 't Hoff or dH/dS), so the temperature axis changes nothing; give the temperature dependence in the file".to_string()
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::network::NetworkBuilder;

    fn two_steps() -> Network {
        NetworkBuilder::new("t")
            .species("A", 1.0)
            .species("B", 0.0)
            .species("C", 0.0)
            .reaction("A <=> B", 2.0)
            .kr(1.0)
            .reaction("B <=> C", 1.0)
            .equilibrium_constant(3.0)
            .build()
            .unwrap()
    }

    #[test]
    fn axes_read_units_and_space_multipliers_logarithmically() {
        let net = two_steps();
        let t = Axis::parse("temperature=40degC..80degC:5", &net).unwrap();
        assert_eq!(t.values.len(), 5);
        assert!((t.values[0] - 313.15).abs() < 1e-9 && (t.values[4] - 353.15).abs() < 1e-9);
        let k = Axis::parse("kf[2]=x0.5..x2:3", &net).unwrap();
        assert_eq!(k.varied, Varied::Factor(1, Constant::Kf));
        assert!(
            (k.values[1] - 1.0).abs() < 1e-12,
            "geometric middle of 0.5 and 2 is 1"
        );
        let c = Axis::parse("c0[A]=100 mmol/L..1:2", &net).unwrap();
        assert_eq!((c.varied.clone(), c.values[0]), (Varied::Initial(0), 0.1));
        for bad in [
            "kf[3]=x1..x2:2",
            "c0[Z]=0..1:2",
            "kf[1]=0.5..2:3",
            "temperature=40..80",
            "pH=1..2:2",
        ] {
            assert!(Axis::parse(bad, &net).is_err(), "{bad}");
        }
    }

    #[test]
    fn a_grid_holds_every_combination_last_axis_fastest() {
        let net = two_steps();
        let axes = [
            Axis::parse("kf[1]=x1..x2:2", &net).unwrap(),
            Axis::parse("c0[A]=1..3:3", &net).unwrap(),
        ];
        let points = grid(&axes);
        assert_eq!(points.len(), 6);
        assert_eq!(points[1], vec![1.0, 2.0]);
        let at = at_point(&net, &axes, &points[5]).unwrap();
        assert!((at.reactions[0].kf - 4.0).abs() < 1e-12 && at.species[0].initial == 3.0);
    }
}
