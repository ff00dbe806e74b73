//! CSV tables.

use crate::run::RunResult;

/// Points added between accepted steps so curves look smooth on linear and log axes.
const GRID_POINTS: usize = 200;

/// Output times: every accepted step up to the final time, plus evenly spaced points on a
/// linear and on a logarithmic time axis.
pub fn output_times(result: &RunResult) -> Vec<f64> {
    let end = result.final_time;
    let steps = &result.solution.trajectory.times;
    let mut times: Vec<f64> = steps.iter().copied().filter(|&t| t <= end).collect();
    times.extend((1..=GRID_POINTS).map(|k| end * k as f64 / GRID_POINTS as f64));
    if let Some(&first) = steps.iter().find(|&&t| t > 0.0) {
        if first < end {
            let (a, b) = (first.ln(), end.ln());
            times.extend((0..=GRID_POINTS).map(|k| (a + (b - a) * k as f64 / GRID_POINTS as f64).exp()));
        }
    }
    times.retain(|&t| t <= end);
    times.sort_by(f64::total_cmp);
    times.dedup_by(|a, b| (*a - *b).abs() <= 1e-12 * b.abs().max(1e-300));
    times
}

/// `trajectory.csv`: time, then one column per species, in the chosen output units; for
/// networks with gases, their partial pressures and the total pressure in bar.
pub fn trajectory_csv(result: &RunResult) -> String {
    let units = result.settings.units;
    let (t_scale, c_scale) = (units.time.seconds(), units.concentration.mol_per_l());
    let mut writer = csv::Writer::from_writer(Vec::new());
    let mut header = vec![format!("time [{}]", units.time.symbol())];
    header.extend(
        result
            .network
            .species
            .iter()
            .map(|s| format!("{} [{}]", s.name, units.concentration.symbol())),
    );
    if let Some((partial, _)) = result.pressures_bar(&result.final_state) {
        header.extend(partial.iter().map(|(name, _)| format!("p({name}) [bar]")));
        header.push("p_total [bar]".into());
    }
    // Writing to memory cannot fail.
    let _ = writer.write_record(&header);
    for t in output_times(result) {
        let state = result.solution.trajectory.state_at(t);
        let mut row = vec![format!("{:.9e}", t / t_scale)];
        row.extend(state.iter().map(|c| format!("{:.9e}", c / c_scale)));
        if let Some((partial, total)) = result.pressures_bar(&state) {
            row.extend(partial.iter().map(|(_, p)| format!("{p:.9e}")));
            row.push(format!("{total:.9e}"));
        }
        let _ = writer.write_record(&row);
    }
    String::from_utf8(writer.into_inner().unwrap_or_default()).unwrap_or_default()
}
