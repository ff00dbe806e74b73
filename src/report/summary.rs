//! The JSON summary (`summary.json`): stable keys that scripts can rely on.

use crate::format::percent_one_decimal;
use crate::verdict::{Conversion, HoldVerdict, NetFlux, Peak};
use serde::Serialize;
use serde_json::Map;

use crate::analysis::Settling;
use crate::equilibrium::{Equilibrium, NoEquilibrium};
use crate::integrate::{Stats, StopReason};
use crate::relaxation::Mode;
use crate::run::RunResult;

use super::{trim_percent, CAUTIONS};

#[derive(Debug, Serialize)]
pub struct Summary {
    pub tool: String,
    pub version: String,
    pub title: String,
    pub input_file: String,
    pub temperature_k: f64,
    pub units: Units,
    pub model: String,
    pub cautions: Vec<String>,
    /// Cautions about the run temperature (van 't Hoff far from its reference, a title naming
    /// another temperature).
    pub temperature_cautions: Vec<String>,
    /// Time of the reported state, s.
    pub final_time: f64,
    pub initial: Map<String, serde_json::Value>,
    /// Composition at `final_time`, mol/L.
    #[serde(rename = "final")]
    pub final_state: Map<String, serde_json::Value>,
    /// Why the integration ended, for people.
    pub stop_reason: String,
    /// The same as a stable tag for scripts (see `stop_tag`).
    pub stop_tag: &'static str,
    pub equilibrium_detected_at: Option<f64>,
    pub time_to_equilibrium: Vec<Settling>,
    /// The equilibrium solved directly (species → mol/L), null where none exists.
    pub equilibrium: Option<Map<String, serde_json::Value>>,
    /// "solved", or why no equilibrium exists.
    pub equilibrium_status: String,
    /// The same as a stable tag for scripts: `solved` or the reason (`NoEquilibrium::tag`).
    pub equilibrium_tag: &'static str,
    pub equilibrium_solver: Option<EquilibriumSolver>,
    /// Largest relative difference between the integrated end state and the solved equilibrium.
    pub integrated_vs_solved_max_relative_difference: Option<f64>,
    /// Whether the two routes agree within the tolerances in force (null when not compared).
    pub routes_agree: Option<bool>,
    /// Relaxation modes at equilibrium, slowest first.
    pub relaxation: Vec<Mode>,
    /// Why there are no relaxation modes, when there are none.
    pub relaxation_note: Option<String>,
    /// τ_slowest · ln(1/tol): the linearised estimate of time to equilibrium at each tolerance.
    pub relaxation_estimates: Vec<Estimate>,
    /// Set when an estimate differs from the integrated time by more than a factor 3.
    pub relaxation_estimate_note: Option<String>,
    /// Per species, the fraction of its total change completed at `final_time`.
    pub progress_at_final_time: Map<String, serde_json::Value>,
    /// At the hold time (`--until`): the largest share of its change any judged species still
    /// has to make, and which.
    pub hold_time_verdict: Option<HoldVerdict>,
    /// Species judging time to equilibrium (`--settle-on`); every species when absent.
    pub judged_species: Option<Vec<String>>,
    /// Conversion of the first reaction's limiting reagent and that reaction's yields, at
    /// `final_time` and at equilibrium (fractions).
    pub conversion: Option<Conversion>,
    /// Species passing through a maximum above both their start and their end (mol/L, s).
    pub maxima: Vec<Peak>,
    /// Net step rates at a steady state that is not an equilibrium (a cycle flux), mol/(L s).
    pub net_fluxes: Vec<NetFlux>,
    /// Partial pressures of the gases at `final_time`, bar (closed rigid vessel), when there are gases.
    pub final_partial_pressures_bar: Option<Map<String, serde_json::Value>>,
    pub final_total_pressure_bar: Option<f64>,
    pub initial_total_pressure_bar: Option<f64>,
    /// The rate-constant audit in brief (`kinequil check` gives the full report).
    pub audit: AuditBrief,
    pub conservation: Conservation,
    pub solver: Solver,
    /// Most negative concentration met, as a multiple of its tolerance (0 when none).
    pub worst_negative_over_tolerance: f64,
}

#[derive(Debug, Serialize)]
pub struct EquilibriumSolver {
    pub method: &'static str,
    pub iterations: usize,
    pub max_ln_k_residual: f64,
    pub max_total_relative_residual: f64,
    /// Pure phases used up at equilibrium (held at zero).
    pub used_up: Vec<String>,
}

#[derive(Debug, Serialize)]
pub struct AuditBrief {
    pub consistent: bool,
    pub tolerance_kj_per_mol: f64,
    pub findings: Vec<String>,
}

#[derive(Debug, Serialize)]
pub struct Estimate {
    pub tolerance: f64,
    pub seconds: f64,
}

#[derive(Debug, Serialize)]
pub struct Units {
    pub time: &'static str,
    pub concentration: &'static str,
}

#[derive(Debug, Serialize)]
pub struct Conservation {
    pub laws: Vec<Law>,
    pub max_relative_drift: f64,
}

#[derive(Debug, Serialize)]
pub struct Law {
    pub expression: String,
    pub coefficients: Map<String, serde_json::Value>,
    pub total: f64,
    pub max_relative_drift: f64,
}

#[derive(Debug, Serialize)]
pub struct Solver {
    #[serde(flatten)]
    pub stats: Stats,
    pub rtol: f64,
    pub atol: Map<String, serde_json::Value>,
}

fn by_species(names: &[String], values: &[f64]) -> Map<String, serde_json::Value> {
    names
        .iter()
        .zip(values)
        .map(|(n, v)| (n.clone(), serde_json::json!(v)))
        .collect()
}

/// A stable snake_case tag for why the integration ended: `equilibrium_detected`,
/// `steady_state_not_equilibrium`, `reached_requested_time`, `horizon_reached`, `step_budget` or
/// `time_budget`.
pub fn stop_tag(result: &RunResult) -> &'static str {
    match (
        result.solution.stop,
        result.solution.equilibrium_at,
        &result.solved,
    ) {
        (_, Some(_), Err(_)) => "steady_state_not_equilibrium",
        (StopReason::Equilibrium, _, _) => "equilibrium_detected",
        (StopReason::ReachedTime, _, _) => "reached_requested_time",
        (StopReason::MaxTime, _, _) => "horizon_reached",
        (StopReason::MaxSteps, _, _) => "step_budget",
        (StopReason::TimeBudget, _, _) => "time_budget",
    }
}

/// The conservation laws with their totals and how far the integration drifted from them.
fn conservation(result: &RunResult, names: &[String]) -> Conservation {
    let start = &result.solution.trajectory.states[0];
    let laws = result
        .stoichiometry
        .conservation
        .iter()
        .zip(&result.drift)
        .map(|(law, &drift)| Law {
            expression: law.describe(names),
            coefficients: law
                .coefficients
                .iter()
                .map(|&(i, c)| (names[i].clone(), serde_json::json!(c)))
                .collect(),
            total: law.total(start),
            max_relative_drift: drift,
        })
        .collect();
    Conservation {
        laws,
        max_relative_drift: result.drift.iter().fold(0.0, |m: f64, &d| m.max(d)),
    }
}

impl EquilibriumSolver {
    fn of(e: &Equilibrium) -> EquilibriumSolver {
        EquilibriumSolver {
            method: "Newton on the dual of the free-energy minimisation (log-concentrations)",
            iterations: e.iterations,
            max_ln_k_residual: e.max_k_residual,
            max_total_relative_residual: e.max_total_residual,
            used_up: e.used_up.clone(),
        }
    }
}

/// The practitioner's reading of a run as sentences: the verdict at the hold time with when
/// each tolerance is reached, the conversion of the limiting reagent with the yields, and the
/// maxima above where a species ends. Shared by the terminal and the HTML report.
pub fn verdict_lines(result: &RunResult) -> Vec<String> {
    let mut lines = Vec::new();
    let settled = end_word(result);
    if let Some(v) = &result.verdict {
        lines.push(format!(
            "verdict at the hold time {}: every species{} within {} of its total change (furthest: {})",
            result.time_text(v.time),
            judged_on(result),
            percent_one_decimal(v.remaining.max(0.0)),
            v.furthest
        ));
        let reached: Vec<String> = result
            .settling
            .iter()
            .map(|s| match s.seconds {
                Some(t) if t <= v.time => format!(
                    "{}% reached at {} (before the hold time)",
                    trim_percent(s.tolerance),
                    result.time_text(t)
                ),
                Some(t) => format!(
                    "{}% is reached at {}",
                    trim_percent(s.tolerance),
                    result.time_text(t)
                ),
                None => format!("{}% not reached", trim_percent(s.tolerance)),
            })
            .collect();
        if !reached.is_empty() {
            lines.push(format!("  {}", reached.join("; ")));
        }
    }
    if let Some(c) = &result.conversion {
        let at_eq = c.at_equilibrium.map_or(String::new(), |x| {
            format!(", {} at {settled}", percent_one_decimal(x))
        });
        lines.push(format!(
            "conversion of {} (limiting reagent of the first reaction): {} at {}{at_eq}",
            c.reagent,
            percent_one_decimal(c.at_final),
            result.time_text(result.final_time)
        ));
        let yields: Vec<String> = c
            .yields
            .iter()
            .map(|y| {
                let eq = y.at_equilibrium.map_or(String::new(), |x| {
                    format!(" ({} at {settled})", percent_one_decimal(x))
                });
                format!("{} {}{eq}", y.product, percent_one_decimal(y.at_final))
            })
            .collect();
        if !yields.is_empty() {
            lines.push(format!("  yield on {}: {}", c.reagent, yields.join(", ")));
        }
    }
    let unit = result.settings.units.concentration;
    let (scale, symbol) = (unit.mol_per_l(), unit.symbol());
    for p in &result.peaks {
        let after = if p.end_value > 0.01 * p.value {
            format!(
                "{} above where it ends, {} {symbol}",
                percent_one_decimal(p.value / p.end_value - 1.0),
                crate::format::with_digits(p.end_value / scale, 5)
            )
        } else {
            format!(
                "then falls to {} {symbol}",
                crate::format::with_digits(p.end_value / scale, 3)
            )
        };
        lines.push(format!(
            "maximum: {} reaches {} {symbol} at {}, {after}",
            p.species,
            crate::format::with_digits(p.value / scale, 5),
            result.time_text(p.time)
        ));
    }
    if !result.net_fluxes.is_empty() {
        let parts: Vec<String> = result
            .net_fluxes
            .iter()
            .take(5)
            .map(|f| format!("step {} ({}) {:+.3e}", f.step, f.scheme, f.net_rate))
            .collect();
        lines.push(format!(
            "steady state, not an equilibrium: net rates still running, mol/(L s): {}",
            parts.join(", ")
        ));
    }
    lines
}

/// " judged" with the species list when time to equilibrium is judged on chosen species.
pub fn judged_on(result: &RunResult) -> String {
    match &result.settings.settle_on {
        Some(list) => {
            let names: Vec<&str> = list
                .iter()
                .map(|&i| result.network.species[i].name.as_str())
                .collect();
            format!(" judged ({})", names.join(", "))
        }
        None => String::new(),
    }
}

/// "equilibrium", or "steady state" for a network whose end is not an equilibrium (one-way
/// steps, feeds, constants that break detailed balance).
pub fn end_word(result: &RunResult) -> &'static str {
    if result.solved.is_ok() {
        "equilibrium"
    } else {
        "steady state"
    }
}

/// Where the integration ended and why, worded so that the solver's stopping point is not
/// mistaken for a hold time.
pub fn stop_description(result: &RunResult) -> String {
    if let (Err(_), Some(t)) = (&result.solved, result.solution.equilibrium_at) {
        return format!(
            "the solver reached a steady state at {} (not an equilibrium: see below)",
            result.time_text(t)
        );
    }
    let hold = result.time_text(result.final_time);
    match (result.solution.stop, result.solution.equilibrium_at) {
        (StopReason::Equilibrium, Some(t)) => format!(
            "the solver ran to {}, where the state had settled to equilibrium within its tolerances \
             (the solver's stopping point, not a hold time: see time to equilibrium)",
            result.time_text(t)
        ),
        (StopReason::ReachedTime, Some(t)) => format!(
            "state reported at the hold time {hold}; the solver went on to settle the equilibrium at {}",
            result.time_text(t)
        ),
        (StopReason::ReachedTime, None) => {
            format!("state reported at the hold time {hold}; the equilibrium was not settled")
        }
        (StopReason::MaxTime, _) => horizon_description(result),
        (StopReason::TimeBudget, _) => format!(
            "stopped by the --max-seconds budget at {} before equilibrium was detected",
            result.time_text(result.solution.trajectory.end_time())
        ),
        (StopReason::MaxSteps, _) => format!(
            "step budget used up at {}",
            result.time_text(result.solution.trajectory.end_time())
        ),
        (StopReason::Equilibrium, None) => "equilibrium detected".into(),
    }
}

/// Why the integration ended without equilibrium, with the figures that say what would reach it.
fn horizon_description(result: &RunResult) -> String {
    let end = result.time_text(result.solution.trajectory.end_time());
    let slowest = result.relaxation.as_ref().ok().and_then(|m| m.first());
    let tightest = result
        .settings
        .tolerances
        .iter()
        .copied()
        .fold(f64::INFINITY, f64::min);
    match (&result.solved, slowest) {
        (Ok(_), Some(mode)) if tightest.is_finite() => format!(
            "equilibrium not reached by {end}: slowest relaxation time {}, so {}% needs about {}; use --until",
            result.time_text(mode.tau_seconds),
            trim_percent(tightest),
            result.time_text(mode.tau_seconds * (1.0 / tightest).ln())
        ),
        (Ok(_), _) => format!("equilibrium not reached by {end}; use --until to integrate longer"),
        (Err(NoEquilibrium::OneWaySteps(_)), _) => format!(
            "no equilibrium by {end}: the network has one-way steps, so it runs on until a reactant is used up"
        ),
        (Err(why), _) => format!("no steady state detected by {end} ({why})"),
    }
}

/// Estimates from the slowest relaxation time beyond this factor of the integrated time mean
/// the approach is not governed by the linearised equations.
const LINEAR_REGIME_FACTOR: f64 = 3.0;

/// A warning when τ_slowest·ln(1/tol) and the integrated time to equilibrium differ by more than
/// a factor 3 at some tolerance: the approach is then not in the linear regime and the estimate
/// must not be used as a hold time.
pub fn nonlinear_approach_note(result: &RunResult) -> Option<String> {
    let estimates = relaxation_estimates(result);
    result.settling.iter().find_map(|s| {
        let t = s.seconds.filter(|t| *t > 0.0)?;
        let e = estimates.iter().find(|e| e.tolerance == s.tolerance)?.seconds;
        let ratio = e / t;
        (!(1.0 / LINEAR_REGIME_FACTOR..=LINEAR_REGIME_FACTOR).contains(&ratio)).then(|| {
            format!(
                "the approach is not in the linear regime: at {}% the estimate τ·ln(1/tol) = {} is {} the integrated {}; use the integrated times",
                trim_percent(s.tolerance),
                result.time_text(e),
                if ratio > 1.0 { format!("{ratio:.1} times") } else { format!("1/{:.1} of", 1.0 / ratio) },
                result.time_text(t)
            )
        })
    })
}

/// τ_slowest · ln(1/tol) for each tolerance (empty without relaxation modes).
pub fn relaxation_estimates(result: &RunResult) -> Vec<Estimate> {
    let Some(slowest) = result.relaxation.as_ref().ok().and_then(|m| m.first()) else {
        return Vec::new();
    };
    result
        .settings
        .tolerances
        .iter()
        .map(|&tolerance| Estimate {
            tolerance,
            seconds: slowest.tau_seconds * (1.0 / tolerance).ln(),
        })
        .collect()
}

impl Summary {
    pub fn from_result(result: &RunResult) -> Summary {
        let names = result.species_names();
        let trajectory = &result.solution.trajectory;
        Summary {
            tool: "kinequil".into(),
            version: env!("CARGO_PKG_VERSION").into(),
            title: result.network.title.clone(),
            input_file: result.network.source.display().to_string(),
            temperature_k: result.network.temperature,
            units: Units {
                time: "s",
                concentration: "mol/L",
            },
            model: "isothermal, constant-volume batch; ideal mass-action kinetics".into(),
            cautions: CAUTIONS.iter().map(|c| c.to_string()).collect(),
            temperature_cautions: result.network.temperature_cautions(),
            final_time: result.final_time,
            initial: by_species(&names, &trajectory.states[0]),
            final_state: by_species(&names, &result.final_state),
            stop_reason: stop_description(result),
            stop_tag: stop_tag(result),
            equilibrium_detected_at: result.solution.equilibrium_at,
            time_to_equilibrium: result.settling.clone(),
            equilibrium: result
                .solved
                .as_ref()
                .ok()
                .map(|e| by_species(&names, &e.concentrations)),
            equilibrium_status: match &result.solved {
                Ok(_) => "solved".into(),
                Err(why) => why.to_string(),
            },
            equilibrium_tag: match &result.solved {
                Ok(_) => "solved",
                Err(why) => why.tag(),
            },
            equilibrium_solver: result.solved.as_ref().ok().map(EquilibriumSolver::of),
            integrated_vs_solved_max_relative_difference: result.disagreement,
            routes_agree: result.disagreement.map(|_| !result.disagrees),
            relaxation: result.relaxation.clone().unwrap_or_default(),
            relaxation_note: result.relaxation.as_ref().err().cloned(),
            relaxation_estimates: relaxation_estimates(result),
            relaxation_estimate_note: nonlinear_approach_note(result),
            progress_at_final_time: names
                .iter()
                .zip(&result.progress)
                .map(|(n, p)| (n.clone(), serde_json::json!(p)))
                .collect(),
            hold_time_verdict: result.verdict.clone(),
            judged_species: result
                .settings
                .settle_on
                .as_ref()
                .map(|list| list.iter().map(|&i| names[i].clone()).collect()),
            conversion: result.conversion.clone(),
            maxima: result.peaks.clone(),
            net_fluxes: result.net_fluxes.clone(),
            final_partial_pressures_bar: result.pressures_bar(&result.final_state).map(|(partial, _)| {
                partial
                    .into_iter()
                    .map(|(n, p)| (n, serde_json::json!(p)))
                    .collect()
            }),
            final_total_pressure_bar: result.pressures_bar(&result.final_state).map(|(_, total)| total),
            initial_total_pressure_bar: result
                .pressures_bar(&trajectory.states[0])
                .map(|(_, total)| total),
            audit: AuditBrief {
                consistent: result.audit.consistent,
                tolerance_kj_per_mol: result.audit.tolerance_kj_per_mol,
                findings: result.audit.brief(),
            },
            conservation: conservation(result, &names),
            solver: Solver {
                stats: result.solution.stats.clone(),
                rtol: result.settings.rtol,
                atol: by_species(&names, &result.atol),
            },
            worst_negative_over_tolerance: -result.solution.worst_negative,
        }
    }
}
