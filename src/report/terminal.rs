//! The short, readable summary printed after a run.

use std::fmt::Write;
use std::path::PathBuf;

use crate::run::RunResult;

use super::summary::stop_description;
use super::{format_duration, significant, with_digits, CAUTIONS};

pub fn render(result: &RunResult, files: &[PathBuf]) -> String {
    let mut out = String::new();
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
    let _ = writeln!(out, "  stopped: {}", stop_description(result));
    let _ = writeln!(out);
    let width = names.iter().map(|n| n.len()).max().unwrap_or(7).max(7);
    let _ = writeln!(
        out,
        "  {:<width$}  {:>14}  {:>14}  {:>14}",
        "species",
        "initial mol/L",
        format!("at {} s", significant(result.final_time)),
        "equilibrium"
    );
    for (i, name) in names.iter().enumerate() {
        let eq = result
            .equilibrium
            .as_ref()
            .map_or("-".to_string(), |e| with_digits(e[i], 7));
        let _ = writeln!(
            out,
            "  {:<width$}  {:>14}  {:>14}  {:>14}",
            name,
            with_digits(result.solution.trajectory.states[0][i], 7),
            with_digits(result.final_state[i], 7),
            eq
        );
    }
    let _ = writeln!(out);
    let _ = writeln!(
        out,
        "  time to equilibrium (every species within the fraction of its total change):"
    );
    for s in &result.settling {
        let when = match (s.seconds, &s.limiting_species) {
            (Some(t), Some(sp)) => format!("{}, last to settle: {sp}", format_duration(t)),
            (Some(t), None) => format_duration(t),
            (None, _) => "not reached".into(),
        };
        let _ = writeln!(
            out,
            "    within {:>7}: {when}",
            format!("{}%", trim_percent(s.tolerance))
        );
    }
    if let Some(until) = result.settings.until {
        let _ = writeln!(
            out,
            "  state reported at the requested time {}",
            format_duration(until)
        );
    }
    let _ = writeln!(out);
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
        for (law, drift) in laws.iter().zip(&result.drift) {
            let _ = writeln!(
                out,
                "    {} = {} mol/L   drift {:.1e}",
                law.describe(&names),
                with_digits(law.total(&result.solution.trajectory.states[0]), 7),
                drift
            );
        }
    }
    let st = &result.solution.stats;
    let _ = writeln!(
        out,
        "  solver: {}, {}; {} steps ({} rejected), {} rate evaluations, {} Jacobians, {} LU; {:.3} s",
        st.method,
        st.linear_solver,
        st.steps,
        st.rejected_steps,
        st.rhs_evals,
        st.jacobian_evals,
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
    let _ = writeln!(out);
    let _ = writeln!(out, "  Cautions:");
    for c in CAUTIONS {
        let _ = writeln!(out, "    - {c}");
    }
    out
}

fn trim_percent(fraction: f64) -> String {
    let s = format!("{:.4}", fraction * 100.0);
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}
