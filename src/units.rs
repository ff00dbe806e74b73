//! Quantities with units, as written in network files: `"60 degC"`, `"2.5 h"`, `"25 mmol/L"`,
//! `"1.2 bar"`, `"45 kJ/mol"`, `"3.1e-4 L/(mol*s)"`, `"0.9 1/h"`.
//!
//! A unit expression is a product of units with integer or decimal powers, `*`, a space or `·`
//! to multiply, `/` to divide (binding to the next factor or bracket), `^` or trailing digits for
//! powers (`m3`, `s^-1`). Every quantity is converted to kinequil's internal units: mol/L, s, K,
//! Pa and J, which is what plain numbers have always meant (energies in the file default to
//! kJ/mol).

use std::fmt;

/// Exponents of the base dimensions: amount, length, time, energy, pressure, temperature.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Dimension(pub [f64; 6]);

const NAMES: [&str; 6] = ["mol", "dm", "s", "J", "Pa", "K"];

impl Dimension {
    pub const NONE: Dimension = Dimension([0.0; 6]);
    pub const AMOUNT: Dimension = Dimension([1.0, 0.0, 0.0, 0.0, 0.0, 0.0]);
    pub const LENGTH: Dimension = Dimension([0.0, 1.0, 0.0, 0.0, 0.0, 0.0]);
    pub const TIME: Dimension = Dimension([0.0, 0.0, 1.0, 0.0, 0.0, 0.0]);
    pub const ENERGY: Dimension = Dimension([0.0, 0.0, 0.0, 1.0, 0.0, 0.0]);
    pub const PRESSURE: Dimension = Dimension([0.0, 0.0, 0.0, 0.0, 1.0, 0.0]);
    pub const TEMPERATURE: Dimension = Dimension([0.0, 0.0, 0.0, 0.0, 0.0, 1.0]);

    pub fn times(self, other: Dimension) -> Dimension {
        let mut d = self.0;
        for (a, b) in d.iter_mut().zip(other.0) {
            *a += b;
        }
        Dimension(d)
    }

    pub fn power(self, p: f64) -> Dimension {
        Dimension(self.0.map(|a| a * p))
    }

    /// Concentration, mol/L = mol dm⁻³.
    pub fn concentration() -> Dimension {
        Dimension::AMOUNT.times(Dimension::LENGTH.power(-3.0))
    }

    /// Energy per amount, J/mol.
    pub fn molar_energy() -> Dimension {
        Dimension::ENERGY.times(Dimension::AMOUNT.power(-1.0))
    }

    /// A rate constant of total order n: (mol/L)^(1−n) / s.
    pub fn rate_constant(order: f64) -> Dimension {
        Dimension::concentration()
            .power(1.0 - order)
            .times(Dimension::TIME.power(-1.0))
    }

    pub fn same(self, other: Dimension) -> bool {
        self.0.iter().zip(other.0).all(|(a, b)| (a - b).abs() < 1e-9)
    }
}

impl fmt::Display for Dimension {
    /// Writes the dimension in the internal units, e.g. `L/(mol s)` style as `mol^-1 dm^3 s^-1`,
    /// with volumes shown as L where the length power is a multiple of 3.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let mut parts = Vec::new();
        for (k, &p) in self.0.iter().enumerate() {
            if p.abs() < 1e-12 {
                continue;
            }
            let (name, p) = if k == 1 && (p / 3.0 - (p / 3.0).round()).abs() < 1e-9 {
                ("L", p / 3.0)
            } else {
                (NAMES[k], p)
            };
            parts.push(if (p - 1.0).abs() < 1e-12 {
                name.to_string()
            } else {
                format!("{name}^{}", crate::format::whole_or_exact(p))
            });
        }
        if parts.is_empty() {
            write!(f, "1 (dimensionless)")
        } else {
            write!(f, "{}", parts.join(" "))
        }
    }
}

/// A parsed quantity in internal units.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Quantity {
    pub value: f64,
    pub dimension: Dimension,
}

/// The units [`unit`] knows, grouped by kind, for messages.
pub const KNOWN_UNITS: &str =
    "time s, min, h, d; amount mol, mmol, umol, kmol; volume L, mL, m^3, dm^3, cm^3; \
concentration M, mM, uM; temperature K, degC; pressure Pa, kPa, MPa, bar, mbar, atm; energy J, kJ, cal, kcal";

/// Units known by name: (symbol, dimension, factor to internal units, offset for temperatures).
fn unit(symbol: &str) -> Option<(Dimension, f64)> {
    use Dimension as D;
    let volume = D::LENGTH.power(3.0);
    Some(match symbol {
        "s" | "sec" => (D::TIME, 1.0),
        "min" => (D::TIME, 60.0),
        "h" | "hr" => (D::TIME, 3600.0),
        "d" | "day" => (D::TIME, 86_400.0),
        "mol" => (D::AMOUNT, 1.0),
        "mmol" => (D::AMOUNT, 1e-3),
        "umol" | "µmol" => (D::AMOUNT, 1e-6),
        "kmol" => (D::AMOUNT, 1e3),
        "m" => (D::LENGTH, 10.0),
        "dm" => (D::LENGTH, 1.0),
        "cm" => (D::LENGTH, 0.1),
        "L" | "l" => (volume, 1.0),
        "mL" | "ml" => (volume, 1e-3),
        "M" => (D::concentration(), 1.0),
        "mM" => (D::concentration(), 1e-3),
        "uM" | "µM" => (D::concentration(), 1e-6),
        "K" => (D::TEMPERATURE, 1.0),
        "Pa" => (D::PRESSURE, 1.0),
        "kPa" => (D::PRESSURE, 1e3),
        "MPa" => (D::PRESSURE, 1e6),
        "bar" => (D::PRESSURE, 1e5),
        "mbar" => (D::PRESSURE, 1e2),
        "atm" => (D::PRESSURE, 101_325.0),
        "J" => (D::ENERGY, 1.0),
        "kJ" => (D::ENERGY, 1e3),
        // Thermochemical calorie, 4.184 J exactly.
        "cal" => (D::ENERGY, 4.184),
        "kcal" => (D::ENERGY, 4184.0),
        _ => return None,
    })
}

/// Parses `"<number> <unit expression>"`. Temperatures in degC are converted to K here.
pub fn parse_quantity(text: &str) -> Result<Quantity, String> {
    let text = text.trim();
    let number_end = number_prefix_len(text);
    if number_end == 0 {
        return Err(format!(
            "`{text}` is not a number with units (such as \"2.5 h\" or \"25 mmol/L\")"
        ));
    }
    let value: f64 = text[..number_end]
        .parse()
        .map_err(|_| format!("`{}` is not a number", &text[..number_end]))?;
    if !value.is_finite() {
        return Err("must be a finite number".into());
    }
    let unit_text = text[number_end..].trim();
    if matches!(unit_text, "degC" | "°C" | "C") {
        return Ok(Quantity {
            value: value + 273.15,
            dimension: Dimension::TEMPERATURE,
        });
    }
    if unit_text.is_empty() {
        return Ok(Quantity {
            value,
            dimension: Dimension::NONE,
        });
    }
    let (dimension, factor) = parse_unit(unit_text)?;
    Ok(Quantity {
        value: value * factor,
        dimension,
    })
}

fn number_prefix_len(text: &str) -> usize {
    let bytes = text.as_bytes();
    let mut i = 0;
    let digits = |i: &mut usize| {
        let start = *i;
        while *i < bytes.len() && bytes[*i].is_ascii_digit() {
            *i += 1;
        }
        *i > start
    };
    if i < bytes.len() && (bytes[i] == b'+' || bytes[i] == b'-') {
        i += 1;
    }
    let mut any = digits(&mut i);
    if i < bytes.len() && bytes[i] == b'.' {
        i += 1;
        any |= digits(&mut i);
    }
    if !any {
        return 0;
    }
    if i < bytes.len() && (bytes[i] == b'e' || bytes[i] == b'E') {
        let mut j = i + 1;
        if j < bytes.len() && (bytes[j] == b'+' || bytes[j] == b'-') {
            j += 1;
        }
        if digits(&mut j) {
            i = j;
        }
    }
    // A number directly followed by a letter is a unit ("2.5h"), but "1/h" starts with the unit 1.
    i
}

/// Parses a unit expression into (dimension, factor to internal units).
pub fn parse_unit(text: &str) -> Result<(Dimension, f64), String> {
    let tokens = tokenize(text)?;
    let mut parser = Parser {
        tokens: &tokens,
        pos: 0,
        text,
    };
    let result = parser.product()?;
    if parser.pos != tokens.len() {
        return Err(format!("unexpected `{}` in unit `{text}`", tokens[parser.pos]));
    }
    Ok(result)
}

#[derive(Debug, Clone, PartialEq)]
enum Token {
    Name(String),
    Number(f64),
    Times,
    Divide,
    Open,
    Close,
    Caret,
}

impl fmt::Display for Token {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Token::Name(n) => write!(f, "{n}"),
            Token::Number(x) => write!(f, "{x}"),
            Token::Times => write!(f, "*"),
            Token::Divide => write!(f, "/"),
            Token::Open => write!(f, "("),
            Token::Close => write!(f, ")"),
            Token::Caret => write!(f, "^"),
        }
    }
}

fn tokenize(text: &str) -> Result<Vec<Token>, String> {
    let chars: Vec<char> = text.chars().collect();
    let mut tokens = Vec::new();
    let mut i = 0;
    while i < chars.len() {
        let c = chars[i];
        match c {
            ' ' | '*' | '·' | '.' => {
                // Runs of spaces are one multiplication, and none is needed next to / ( ) ^.
                if !matches!(
                    tokens.last(),
                    None | Some(Token::Times | Token::Divide | Token::Open | Token::Caret)
                ) {
                    tokens.push(Token::Times);
                }
                i += 1;
            }
            '/' => {
                if tokens.last() == Some(&Token::Times) {
                    tokens.pop();
                }
                tokens.push(Token::Divide);
                i += 1;
            }
            '(' => {
                tokens.push(Token::Open);
                i += 1;
            }
            ')' => {
                if tokens.last() == Some(&Token::Times) {
                    tokens.pop();
                }
                tokens.push(Token::Close);
                i += 1;
            }
            '^' => {
                if tokens.last() == Some(&Token::Times) {
                    tokens.pop();
                }
                tokens.push(Token::Caret);
                i += 1;
            }
            c if c.is_ascii_digit() || c == '-' || c == '+' => {
                let start = i;
                i += 1;
                while i < chars.len() && (chars[i].is_ascii_digit() || chars[i] == '.') {
                    i += 1;
                }
                let s: String = chars[start..i].iter().collect();
                let x: f64 = s
                    .parse()
                    .map_err(|_| format!("`{s}` is not a number in unit `{text}`"))?;
                // Digits right after a name are its power: m3, s2.
                if matches!(tokens.last(), Some(Token::Name(_))) {
                    tokens.push(Token::Caret);
                }
                tokens.push(Token::Number(x));
            }
            c if c.is_alphabetic() || c == 'µ' || c == '°' => {
                let start = i;
                while i < chars.len() && (chars[i].is_alphabetic() || chars[i] == 'µ' || chars[i] == '°') {
                    i += 1;
                }
                tokens.push(Token::Name(chars[start..i].iter().collect()));
            }
            other => return Err(format!("unexpected `{other}` in unit `{text}`")),
        }
    }
    if tokens.last() == Some(&Token::Times) {
        tokens.pop();
    }
    Ok(tokens)
}

struct Parser<'a> {
    tokens: &'a [Token],
    pos: usize,
    text: &'a str,
}

impl Parser<'_> {
    fn product(&mut self) -> Result<(Dimension, f64), String> {
        let (mut dimension, mut factor) = self.power()?;
        while let Some(token) = self.tokens.get(self.pos) {
            let divide = match token {
                Token::Times => false,
                Token::Divide => true,
                _ => break,
            };
            self.pos += 1;
            let (d, f) = self.power()?;
            if divide {
                dimension = dimension.times(d.power(-1.0));
                factor /= f;
            } else {
                dimension = dimension.times(d);
                factor *= f;
            }
        }
        Ok((dimension, factor))
    }

    fn power(&mut self) -> Result<(Dimension, f64), String> {
        let (dimension, factor) = self.atom()?;
        if self.tokens.get(self.pos) == Some(&Token::Caret) {
            self.pos += 1;
            let Some(Token::Number(p)) = self.tokens.get(self.pos) else {
                return Err(format!("`^` needs a number in unit `{}`", self.text));
            };
            let p = *p;
            self.pos += 1;
            return Ok((dimension.power(p), factor.powf(p)));
        }
        Ok((dimension, factor))
    }

    fn atom(&mut self) -> Result<(Dimension, f64), String> {
        match self.tokens.get(self.pos) {
            Some(Token::Open) => {
                self.pos += 1;
                let inner = self.product()?;
                if self.tokens.get(self.pos) != Some(&Token::Close) {
                    return Err(format!("unclosed `(` in unit `{}`", self.text));
                }
                self.pos += 1;
                Ok(inner)
            }
            Some(Token::Number(x)) if (*x - 1.0).abs() < 1e-12 => {
                self.pos += 1;
                Ok((Dimension::NONE, 1.0))
            }
            Some(Token::Name(name)) => {
                self.pos += 1;
                unit(name).ok_or_else(|| {
                    format!(
                        "unknown unit `{name}` in `{}`; known units: {KNOWN_UNITS} (combined with *, / and ^, as in \"L/(mol*s)\")",
                        self.text
                    )
                })
            }
            Some(other) => Err(format!("unexpected `{other}` in unit `{}`", self.text)),
            None => Err(format!("unit `{}` ends too early", self.text)),
        }
    }
}

/// Output time units.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub enum TimeUnit {
    S,
    Min,
    H,
    D,
}

impl TimeUnit {
    pub fn seconds(self) -> f64 {
        match self {
            TimeUnit::S => 1.0,
            TimeUnit::Min => 60.0,
            TimeUnit::H => 3600.0,
            TimeUnit::D => 86_400.0,
        }
    }

    pub fn symbol(self) -> &'static str {
        match self {
            TimeUnit::S => "s",
            TimeUnit::Min => "min",
            TimeUnit::H => "h",
            TimeUnit::D => "d",
        }
    }
}

/// Output concentration units.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub enum ConcentrationUnit {
    MolPerL,
    MmolPerL,
    MolPerM3,
}

impl ConcentrationUnit {
    /// Internal mol/L per one of this unit.
    pub fn mol_per_l(self) -> f64 {
        match self {
            ConcentrationUnit::MolPerL => 1.0,
            ConcentrationUnit::MmolPerL => 1e-3,
            ConcentrationUnit::MolPerM3 => 1e-3,
        }
    }

    pub fn symbol(self) -> &'static str {
        match self {
            ConcentrationUnit::MolPerL => "mol/L",
            ConcentrationUnit::MmolPerL => "mmol/L",
            ConcentrationUnit::MolPerM3 => "mol/m3",
        }
    }
}

/// Units of a rate constant of total order n with concentrations in mol/L and time in s.
pub fn rate_constant_units(order: f64) -> String {
    let power = 1.0 - order;
    if power.abs() < 1e-12 {
        "1/s".into()
    } else if (power - 1.0).abs() < 1e-12 {
        "mol/(L s)".into()
    } else if (power + 1.0).abs() < 1e-12 {
        "L/(mol s)".into()
    } else if power < 0.0 && (power - power.round()).abs() < 1e-12 {
        format!("L^{0}/(mol^{0} s)", -power.round() as i64)
    } else {
        format!("(mol/L)^{power}/s")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn q(text: &str) -> Quantity {
        parse_quantity(text).unwrap_or_else(|e| panic!("{text}: {e}"))
    }

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-12 * b.abs().max(1e-300)
    }

    #[test]
    fn every_unit_converts_to_internal_units() {
        // Conversion factors by definition (SI; thermochemical calorie 4.184 J; standard
        // atmosphere 101 325 Pa; 0 degC = 273.15 K).
        let cases: &[(&str, f64, Dimension)] = &[
            ("2.5 h", 9000.0, Dimension::TIME),
            ("3 min", 180.0, Dimension::TIME),
            ("2 d", 172_800.0, Dimension::TIME),
            ("7 s", 7.0, Dimension::TIME),
            ("25 mmol/L", 0.025, Dimension::concentration()),
            ("25 mol/m3", 0.025, Dimension::concentration()),
            ("0.5 mol/L", 0.5, Dimension::concentration()),
            ("60 degC", 333.15, Dimension::TEMPERATURE),
            ("300 K", 300.0, Dimension::TEMPERATURE),
            ("1.2 bar", 1.2e5, Dimension::PRESSURE),
            ("1 atm", 101_325.0, Dimension::PRESSURE),
            ("50 kPa", 5e4, Dimension::PRESSURE),
            ("10 Pa", 10.0, Dimension::PRESSURE),
            ("45 kJ/mol", 45_000.0, Dimension::molar_energy()),
            ("45 J/mol", 45.0, Dimension::molar_energy()),
            ("10 kcal/mol", 41_840.0, Dimension::molar_energy()),
            ("3.1e-4 L/(mol*s)", 3.1e-4, Dimension::rate_constant(2.0)),
            ("3.1e-4 L mol^-1 s^-1", 3.1e-4, Dimension::rate_constant(2.0)),
            ("0.9 1/h", 0.9 / 3600.0, Dimension::rate_constant(1.0)),
            ("0.9 h^-1", 0.9 / 3600.0, Dimension::rate_constant(1.0)),
            ("2 mol/(L*s)", 2.0, Dimension::rate_constant(0.0)),
            ("1.5 m3/(mol*s)", 1500.0, Dimension::rate_constant(2.0)),
            ("4 L2/(mol2*min)", 4.0 / 60.0, Dimension::rate_constant(3.0)),
            ("2 mM", 2e-3, Dimension::concentration()),
        ];
        for (text, value, dimension) in cases {
            let got = q(text);
            assert!(close(got.value, *value), "{text}: {} vs {value}", got.value);
            assert!(
                got.dimension.same(*dimension),
                "{text}: {} vs {}",
                got.dimension,
                dimension
            );
        }
    }

    #[test]
    fn malformed_units_are_errors() {
        for bad in [
            "3 furlongs",
            "kJ/mol",
            "2 L/(mol s",
            "1 mol^",
            "5 bar/",
            "1 L//mol",
            "x",
        ] {
            assert!(parse_quantity(bad).is_err(), "{bad} should be rejected");
        }
    }

    #[test]
    fn dimensions_display_in_chemists_terms() {
        assert_eq!(Dimension::rate_constant(2.0).to_string(), "mol^-1 L s^-1");
        assert_eq!(Dimension::rate_constant(1.0).to_string(), "s^-1");
    }
}
