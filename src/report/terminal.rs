//! The short, readable summary printed after a run.

use std::fmt::Write;
use std::path::PathBuf;

use crate::format::count;
use crate::run::RunResult;

use super::summary::{
    end_word, judged_on, nonlinear_approach_note, relaxation_estimates, stop_description, verdict_lines,
};
use super::{trim_percent, with_digits, CAUTIONS};

/// Relaxation modes listed on the terminal (all of them are in summary.json).
const MODES_SHOWN: usize = 5;

/// Conservation laws listed, and species written out in each (the rest are in summary.json).
const LAWS_SHOWN: usize = 10;
const TERMS_SHOWN: usize = 8;

pub fn render(result: &RunResult, files: &[PathBuf]) -> String {
    let mut out = String::new();
    write_header(&mut out, result);
    let _ = writeln!(out);
    write_verdict(&mut out, result);
    write_agreement(&mut out, result);
    let _ = writeln!(out);
    write_settling(&mut out, result);
    write_relaxation(&mut out, result);
    write_hold_time(&mut out, result);
    let _ = writeln!(out);
    write_conservation(&mut out, result);
    write_audit_brief(&mut out, result);
    write_solver(&mut out, result, files);
    let _ = writeln!(out);
    let _ = writeln!(out, "  Cautions:");
    for c in CAUTIONS {
        let _ = writeln!(out, "    - {c}");
    }
    out
}

/// The title line, the stop line and the composition table.
fn write_header(out: &mut String, result: &RunResult) {
    let names = result.species_names();
    let net = &result.network;
    let _ = writeln!(out, "kinequil {}: {}", env!("CARGO_PKG_VERSION"), net.title);
    let _ = writeln!(
        out,
        "  {} species, {} reaction{}, {:.2} K, from {}",
        net.n_species(),
        net.reactions.len(),
        if net.reactions.len() == 1 { "" } else { "s" },
        net.temperature,
        net.source.display()
    );
    for caution in net.temperature_cautions() {
        let _ = writeln!(out, "  CAUTION: {caution}");
    }
    let _ = writeln!(out, "  run: {}", stop_description(result));
    let _ = writeln!(out);
    let c_unit = result.settings.units.concentration;
    let scale = c_unit.mol_per_l();
    let width = names.iter().map(|n| n.len()).max().unwrap_or(7).max(7);
    let _ = writeln!(
        out,
        "  {:<width$}  {:>14}  {:>14}  {:>14}",
        "species",
        format!("initial {}", c_unit.symbol()),
        format!("at {}", result.time_text(result.final_time)),
        end_word(result)
    );
    for (i, name) in names.iter().enumerate() {
        let eq = match (&result.solved, &result.equilibrium) {
            (Ok(solved), _) => with_digits(solved.concentrations[i] / scale, 7),
            (Err(_), Some(integrated)) => with_digits(integrated[i] / scale, 7),
            (Err(_), None) => "-".to_string(),
        };
        let _ = writeln!(
            out,
            "  {:<width$}  {:>14}  {:>14}  {:>14}",
            name,
            with_digits(result.solution.trajectory.states[0][i] / scale, 7),
            with_digits(result.final_state[i] / scale, 7),
            eq
        );
    }
}

/// The practitioner's reading: the hold-time verdict, conversion and yields, and maxima.
fn write_verdict(out: &mut String, result: &RunResult) {
    for line in verdict_lines(result) {
        let _ = writeln!(out, "  {line}");
    }
}

/// The state at the requested time, when `until` was given.
fn write_hold_time(out: &mut String, result: &RunResult) {
    let names = result.species_names();
    if let Some(until) = result.settings.until {
        let _ = writeln!(
            out,
            "  at the hold time {}, share of each species' total change completed:",
            result.time_text(until)
        );
        let parts: Vec<String> = names
            .iter()
            .zip(&result.progress)
            .map(|(n, p)| match p {
                Some(p) => format!("{n} {:.1}%", 100.0 * p),
                None => format!("{n} -"),
            })
            .collect();
        let _ = writeln!(out, "    {}", parts.join(", "));
    }
}

/// Conservation laws with their drift, and gas pressures.
fn write_conservation(out: &mut String, result: &RunResult) {
    let names = result.species_names();
    let laws = &result.stoichiometry.conservation;
    if laws.is_empty() {
        let _ = writeln!(
            out,
            "  conservation: no conserved totals (the network has feeds or sinks)"
        );
    } else {
        let _ = writeln!(
            out,
            "  conservation ({} law{}), largest relative drift:",
            laws.len(),
            if laws.len() == 1 { "" } else { "s" }
        );
        for (law, drift) in laws.iter().zip(&result.drift).take(LAWS_SHOWN) {
            let _ = writeln!(
                out,
                "    {} = {} mol/L   drift {:.1e}",
                law.describe_within(&names, TERMS_SHOWN),
                with_digits(law.total(&result.solution.trajectory.states[0]), 7),
                drift
            );
        }
        if laws.len() > LAWS_SHOWN {
            let rest = &result.drift[LAWS_SHOWN..];
            let _ = writeln!(
                out,
                "    and {} more (each in summary.json), drift at most {:.1e}",
                laws.len() - LAWS_SHOWN,
                rest.iter().fold(0.0_f64, |m, d| m.max(*d))
            );
        }
    }
    if let (Some((_, p0)), Some((partial, p1))) = (
        result.pressures_bar(&result.solution.trajectory.states[0]),
        result.pressures_bar(&result.final_state),
    ) {
        let parts: Vec<String> = partial
            .iter()
            .map(|(n, p)| format!("{n} {}", with_digits(*p, 5)))
            .collect();
        let _ = writeln!(
            out,
            "  gas (closed rigid vessel): total pressure {} -> {} bar; partial pressures at the end: {} bar",
            with_digits(p0, 5),
            with_digits(p1, 5),
            parts.join(", ")
        );
    }
}

/// The audit findings in brief.
fn write_audit_brief(out: &mut String, result: &RunResult) {
    let findings = result.audit.brief();
    if findings.is_empty() {
        let _ = writeln!(out, "  audit of the rate constants: no findings");
    } else {
        let _ = writeln!(
            out,
            "  audit of the rate constants ({}; `kinequil check` for details):",
            count(findings.len(), "finding")
        );
        for f in findings.iter().take(5) {
            let _ = writeln!(out, "    - {f}");
        }
    }
}

/// Solver statistics, tolerances and the files written.
fn write_solver(out: &mut String, result: &RunResult, files: &[PathBuf]) {
    let st = &result.solution.stats;
    let _ = writeln!(
        out,
        "  solver: {}, {}; {} ({} rejected), {}, {}, {} LU; {:.3} s",
        st.method,
        st.linear_solver,
        count(st.steps, "step"),
        st.rejected_steps,
        count(st.rhs_evals, "rate evaluation"),
        count(st.jacobian_evals, "Jacobian"),
        st.lu_factorizations,
        st.seconds
    );
    let _ = writeln!(
        out,
        "  tolerances: rtol {:.0e}, atol {:.0e} mol/L (unless set per species)",
        result.settings.rtol, result.settings.atol
    );
    if !files.is_empty() {
        let _ = writeln!(out, "  files:");
        for f in files {
            let _ = writeln!(out, "    {}", f.display());
        }
    }
}

/// Whether the integrated end state and the directly solved equilibrium agree.
fn write_agreement(out: &mut String, result: &RunResult) {
    let _ = match (&result.solved, result.disagreement) {
        (Ok(_), Some(diff)) if result.disagrees => writeln!(
            out,
            "  WARNING: the integrated end state and the directly solved equilibrium differ by up to \
             {diff:.2e} (relative), more than the tolerances allow; tighten --rtol/--atol or check the constants"
        ),
        (Ok(solved), Some(diff)) => writeln!(
            out,
            "  equilibrium solved directly ({} Newton iterations); the integration agrees to {diff:.1e} (relative)",
            solved.iterations
        ),
        (Ok(solved), None) => writeln!(
            out,
            "  equilibrium solved directly ({} Newton iterations)",
            solved.iterations
        ),
        (Err(why), _) => writeln!(out, "  equilibrium: {why}"),
    };
    if let Ok(solved) = &result.solved {
        if !solved.used_up.is_empty() {
            let _ = writeln!(out, "  used up at equilibrium: {}", solved.used_up.join(", "));
        }
    }
}

fn write_settling(out: &mut String, result: &RunResult) {
    let _ = writeln!(
        out,
        "  time to {} (every species{} within the fraction of its total change):",
        end_word(result),
        judged_on(result)
    );
    let estimates = relaxation_estimates(result);
    for s in &result.settling {
        let when = match (s.seconds, &s.limiting_species) {
            (Some(t), Some(sp)) => format!("{}, last to settle: {sp}", result.time_text(t)),
            (Some(t), None) => result.time_text(t),
            (None, _) => "not reached".into(),
        };
        let estimate = estimates
            .iter()
            .find(|e| e.tolerance == s.tolerance)
            .map_or(String::new(), |e| {
                format!("   [τ·ln(1/tol) = {}]", result.time_text(e.seconds))
            });
        let percent = format!("{}%", trim_percent(s.tolerance));
        let _ = writeln!(out, "    within {percent:>7}: {when}{estimate}");
    }
    if let Some(note) = nonlinear_approach_note(result) {
        let _ = writeln!(out, "    note: {note}");
    }
}

fn write_relaxation(out: &mut String, result: &RunResult) {
    match &result.relaxation {
        Ok(modes) if !modes.is_empty() => {
            let _ = writeln!(
                out,
                "  relaxation times at equilibrium (slowest first; the steps that set each, with their share):"
            );
            for mode in modes.iter().take(MODES_SHOWN) {
                let species: Vec<&str> = mode.species.iter().map(|s| s.name.as_str()).collect();
                let steps: Vec<String> = mode
                    .steps
                    .iter()
                    .map(|s| format!("{} ({:.0}%)", s.name, 100.0 * s.share))
                    .collect();
                let _ = writeln!(
                    out,
                    "    τ = {:<20} moves {}; set by {}",
                    result.time_text(mode.tau_seconds),
                    species.join(", "),
                    steps.join(", ")
                );
            }
            if modes.len() > MODES_SHOWN {
                let _ = writeln!(
                    out,
                    "    ... and {} faster modes (all in summary.json)",
                    modes.len() - MODES_SHOWN
                );
            }
        }
        Ok(_) => {}
        Err(why) => {
            let _ = writeln!(out, "  relaxation analysis: {why}");
        }
    }
}
