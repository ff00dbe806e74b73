//! The rules every network obeys however it was written, file or builder: each rule is one
//! function that returns the message, and the caller adds the line and field it knows.

use std::collections::HashMap;

use super::{limits, Species, Spread, UncertainValue};

/// "unknown species" with the nearest declared name, when one is close enough to be a slip.
pub(crate) fn unknown_species<'a>(name: &str, known: impl Iterator<Item = &'a str>) -> String {
    match nearest_name(name, known) {
        Some(near) => format!("unknown species `{name}`; did you mean `{near}`?"),
        None => format!("unknown species `{name}`: declare it among the species"),
    }
}

/// The known name closest to `name` by edit distance (Levenshtein, case differences counting
/// half), if within a third of its length (at most 3; names under three characters only by
/// case): beyond that a guess would mislead more than help (common practice in command-line
/// suggestions).
pub(crate) fn nearest_name<'a>(name: &str, known: impl Iterator<Item = &'a str>) -> Option<&'a str> {
    let length = name.chars().count();
    let limit = if length < 3 {
        0.5
    } else {
        (length / 3).min(3) as f64
    };
    known
        .map(|k| (edit_distance(name, k), k))
        .filter(|&(d, _)| d <= limit)
        .min_by(|a, b| a.0.total_cmp(&b.0).then_with(|| a.1.cmp(b.1)))
        .map(|(_, k)| k)
}

fn edit_distance(a: &str, b: &str) -> f64 {
    let (a, b): (Vec<char>, Vec<char>) = (a.chars().collect(), b.chars().collect());
    let mut previous: Vec<f64> = (0..=b.len()).map(|j| j as f64).collect();
    for (i, ca) in a.iter().enumerate() {
        let mut current = vec![i as f64 + 1.0; b.len() + 1];
        for (j, cb) in b.iter().enumerate() {
            let substitution = if ca == cb {
                0.0
            } else if ca.to_lowercase().eq(cb.to_lowercase()) {
                0.5
            } else {
                1.0
            };
            current[j + 1] = (previous[j] + substitution)
                .min(previous[j + 1] + 1.0)
                .min(current[j] + 1.0);
        }
        previous = current;
    }
    previous[b.len()]
}

/// A species name: starts with a letter (or a bracket, for `[Cu(NH3)4]2+`-style names) and
/// holds nothing the equation syntax uses.
pub(super) fn check_name(name: &str) -> Result<(), String> {
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

/// One side of a parsed equation as (species index, coefficient), every name known and every
/// coefficient within the limit.
pub(super) fn resolve_side(
    side: &[(String, f64)],
    index: &HashMap<String, usize>,
) -> Result<Vec<(usize, f64)>, String> {
    side.iter()
        .map(|(name, coefficient)| {
            if *coefficient > limits::MAX_COEFFICIENT {
                return Err(format!(
                    "the coefficient {coefficient:e} of `{name}` is above {} (common practice: chemical equations use small coefficients)",
                    limits::MAX_COEFFICIENT
                ));
            }
            index
                .get(name)
                .map(|&i| (i, *coefficient))
                .ok_or_else(|| unknown_species(name, index.keys().map(String::as_str)))
        })
        .collect()
}

/// A reversible step needs kr or K; a one-way step takes neither.
pub(super) fn check_directions(reversible: bool, reverse_given: bool) -> Result<(), &'static str> {
    match (reversible, reverse_given) {
        (true, false) => {
            Err("a reversible step (`<=>`) needs either kr or the equilibrium constant K (or Kp)")
        }
        (false, true) => Err("a one-way step (`=>`) takes only kf; write `<=>` for a reversible step"),
        _ => Ok(()),
    }
}

/// The mass-action orders of one side: its coefficients, pure phases (activity 1) left out.
pub(super) fn mass_action_orders(side: &[(usize, f64)], species: &[Species]) -> Vec<(usize, f64)> {
    side.iter()
        .copied()
        .filter(|&(i, order)| species[i].in_rate_laws() && order > 0.0)
        .collect()
}

/// Uncertainties within reason: factors from 1 to 1000, ΔG° deviations up to 100 kJ/mol, and a
/// K spread only on a step that gives K.
pub(super) fn check_spread(spread: &Spread, gives_k: bool) -> Result<Spread, String> {
    if spread.k.is_some() && !gives_k {
        return Err("the step does not give K, so K has no uncertainty".into());
    }
    let fine = |u: &Option<UncertainValue>| u.as_ref().is_none_or(|u| check_uncertainty(u).is_ok());
    match fine(&spread.kf) && fine(&spread.kr) && fine(&spread.k) {
        true => Ok(spread.clone()),
        false => Err(SPREAD_RANGE.into()),
    }
}

const SPREAD_RANGE: &str =
    "a factor from 1 to 1000 (2 for \"within a factor of 2\"), or for K an energy up to 100 kJ/mol";

/// One constant's uncertainty within reason.
pub(super) fn check_uncertainty(u: &UncertainValue) -> Result<(), &'static str> {
    let fine = match u {
        UncertainValue::Factor(f) => (1.0..=1000.0).contains(f),
        UncertainValue::GibbsSd(sd) => (0.0..=100e3).contains(sd),
    };
    fine.then_some(()).ok_or(SPREAD_RANGE)
}
