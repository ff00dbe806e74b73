//! `sensitivity.json`, its bar chart and its terminal text.

use std::fmt::Write;

use serde::Serialize;

use crate::error::Error;
use crate::format::trim_percent;
use crate::network::Network;
use crate::sensitivity::{EquilibriumRoute, Sensitivity};

use super::figure::{Block, Figure, Series};
use super::CAUTIONS;

/// Every file a sensitivity folder may hold.
pub const SENSITIVITY_FILES: [&str; 3] = ["sensitivity.json", "sensitivity.svg", "sensitivity.png"];

#[derive(Debug, Serialize)]
struct Report<'a> {
    title: &'a str,
    case: String,
    temperature_k: f64,
    tolerances: &'a [f64],
    method: Method,
    /// Ranked: the constant that moves the hold time most comes first.
    constants: Vec<Entry>,
    cautions: &'a [&'a str],
}

#[derive(Debug, Serialize)]
struct Method {
    time: &'static str,
    equilibrium: &'static str,
}

#[derive(Debug, Serialize)]
struct Entry {
    constant: String,
    step: usize,
    equation: String,
    /// d ln t / d ln k at each tolerance.
    time_to_equilibrium: Vec<TimeEntry>,
    /// d ln c_eq / d ln k per species (null: the step's K follows from others by a cycle, or
    /// the step is one-way).
    equilibrium: Option<serde_json::Map<String, serde_json::Value>>,
}

#[derive(Debug, Serialize)]
struct TimeEntry {
    tolerance: f64,
    d_ln_t_d_ln_k: Option<f64>,
}

/// The files of a sensitivity study as (name, bytes).
pub fn render_sensitivity(
    network: &Network,
    tolerances: &[f64],
    found: &[Sensitivity],
    route: EquilibriumRoute,
) -> Result<Vec<(String, Vec<u8>)>, Error> {
    let names: Vec<String> = network.species.iter().map(|s| s.name.clone()).collect();
    let report = Report {
        title: &network.title,
        case: network.source.display().to_string(),
        temperature_k: network.temperature,
        tolerances,
        method: Method {
            time: "central differences in ln k (h = 0.01), each probe integrated to equilibrium at rtol 1e-9",
            equilibrium: match route {
                EquilibriumRoute::Analytic => "analytic: implicit differentiation of the equilibrium conditions at the solved state",
                EquilibriumRoute::DifferencesOfTheSolve => "central differences of the equilibrium solve in ln K (h = 1e-3); the network has pure phases, species at zero or one-way steps",
            },
        },
        constants: found
            .iter()
            .map(|s| Entry {
                constant: s.constant.name.clone(),
                step: s.constant.step + 1,
                equation: network.reactions[s.constant.step].equation.clone(),
                time_to_equilibrium: tolerances
                    .iter()
                    .zip(&s.time)
                    .map(|(&tolerance, &d)| TimeEntry {
                        tolerance,
                        d_ln_t_d_ln_k: d,
                    })
                    .collect(),
                equilibrium: s
                    .equilibrium
                    .as_ref()
                    .map(|v| names.iter().cloned().zip(v.iter().map(|&x| serde_json::json!(x))).collect()),
            })
            .collect(),
        cautions: &CAUTIONS,
    };
    let compose = |what: &str, message: String| Error::Compose {
        what: what.into(),
        message,
    };
    let json =
        serde_json::to_string_pretty(&report).map_err(|e| compose("sensitivity.json", e.to_string()))?;
    let (svg, png) = bars(tolerances, found)
        .render()
        .map_err(|m| compose("sensitivity", m))?;
    Ok(vec![
        ("sensitivity.json".into(), (json + "\n").into_bytes()),
        ("sensitivity.svg".into(), svg.into_bytes()),
        ("sensitivity.png".into(), png),
    ])
}

/// Horizontal bars of d ln t / d ln k, one group per constant (the highest ranked at the top),
/// one bar per tolerance.
fn bars(tolerances: &[f64], found: &[Sensitivity]) -> Figure {
    let shown = &found[..found.len().min(20)];
    let n = shown.len();
    let width = 0.8 / tolerances.len().max(1) as f64;
    let mut blocks = Vec::new();
    let mut low: f64 = 0.0;
    let mut high: f64 = 0.0;
    for (rank, s) in shown.iter().enumerate() {
        let centre = (n - 1 - rank) as f64;
        for (k, d) in s.time.iter().enumerate() {
            let Some(d) = *d else { continue };
            let y0 = centre - 0.4 + k as f64 * width;
            blocks.push(Block {
                x: (0.0_f64.min(d), 0.0_f64.max(d)),
                y: (y0, y0 + width * 0.9),
                style: k,
            });
            low = low.min(d);
            high = high.max(d);
        }
    }
    let pad = 0.08 * (high - low).max(0.1);
    Figure {
        title: "What moves the hold time".into(),
        x_label: "d ln t / d ln k  (1: t doubles when k doubles; −1: t halves)".into(),
        y_label: "constant".into(),
        x_range: (low - pad, high + pad),
        y_range: (-0.6, n as f64 - 0.4),
        series: tolerances
            .iter()
            .enumerate()
            .map(|(k, t)| Series {
                name: format!("within {} %", trim_percent(*t)),
                points: Vec::new(),
                style: k,
                pattern: None,
            })
            .collect(),
        blocks,
        y_categories: shown.iter().rev().map(|s| s.constant.name.clone()).collect(),
        notes: vec!["Steps as numbered in the file.".into()],
        ..Figure::default()
    }
}

/// What the terminal shows: the ranking, with the figures of the tightest tolerance.
pub fn terminal_text(
    network: &Network,
    tolerances: &[f64],
    found: &[Sensitivity],
    written: &[std::path::PathBuf],
) -> String {
    let mut t = String::new();
    let _ = writeln!(
        t,
        "sensitivity of {}: d ln t / d ln k (time to equilibrium within each tolerance), ranked",
        network.title
    );
    let header: Vec<String> = tolerances
        .iter()
        .map(|x| format!("{:>9}", format!("{} %", trim_percent(*x))))
        .collect();
    let _ = writeln!(t, "  {:<10} {}   step", "constant", header.join(" "));
    for s in found {
        let values: Vec<String> = s
            .time
            .iter()
            .map(|d| {
                format!(
                    "{:>9}",
                    d.map(|d| format!("{d:+.3}")).unwrap_or_else(|| "–".into())
                )
            })
            .collect();
        let equation = &network.reactions[s.constant.step].equation;
        let _ = writeln!(t, "  {:<10} {}   {equation}", s.constant.name, values.join(" "));
    }
    if let Some(first) = found.first().filter(|s| s.weight() > 0.0) {
        let _ = writeln!(
            t,
            "the hold time depends most on {}: 10 % error in it moves the hold time by about {:.0} %",
            first.constant.name,
            first.weight() * 10.0
        );
    }
    t + &super::files_and_cautions(written)
}
