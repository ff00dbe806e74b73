//! CSV tables.

use rayon::prelude::*;

use crate::kinetics::RateModel;
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

/// `trajectory.csv`: the state at every accepted step and on linear and log time grids, written
/// row by row (for thousands of species it runs to hundreds of MB, never held in memory).
pub fn write_trajectory_csv(result: &RunResult, out: &mut dyn std::io::Write) -> std::io::Result<()> {
    write_state_table(result, &output_times(result), out)
}

/// `table_at_times.csv`: the state at the user's output times.
pub fn times_csv(result: &RunResult) -> String {
    let mut bytes = Vec::new();
    // Writing to memory cannot fail.
    let _ = write_state_table(result, &result.settings.output_times, &mut bytes);
    String::from_utf8(bytes).unwrap_or_default()
}

/// Time, then one column per species, in the chosen output units; for networks with gases,
/// their partial pressures and the total pressure in bar. Times after the end of the integration
/// give the end state (the run only ends early at equilibrium).
fn write_state_table(result: &RunResult, times: &[f64], out: &mut dyn std::io::Write) -> std::io::Result<()> {
    let units = result.settings.units;
    let (t_scale, c_scale) = (units.time.seconds(), units.concentration.mol_per_l());
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
    write_header(&header, out)?;
    let line = |row: &mut Row, &t: &f64| {
        let state = result.solution.trajectory.state_at(t);
        row.number(t / t_scale);
        for c in &state {
            row.number(c / c_scale);
        }
        if let Some((partial, total)) = result.pressures_bar(&state) {
            for (_, p) in &partial {
                row.number(*p);
            }
            row.number(total);
        }
        row.finish()
    };
    // Lines are built side by side (formatting millions of numbers is most of a large table's
    // time), a block at a time so that only one block is ever held in memory.
    for block in times.chunks(BLOCK_ROWS) {
        let lines: Vec<Vec<u8>> = block
            .par_iter()
            .with_min_len(BLOCK_ROWS / 8)
            .map_init(Row::default, line)
            .collect();
        for text in &lines {
            out.write_all(text)?;
        }
    }
    out.flush()
}

/// Rows of a state table formatted at once (5000 species: about 1.3 MB).
const BLOCK_ROWS: usize = 16;

/// Most steps in `rates.csv`: beyond this, the busiest steps (largest peak forward rate) are
/// kept so that tables of large networks stay a manageable size.
pub const MAX_RATE_STEPS: usize = 100;

/// The largest forward rate of every step over `times`, in one pass (nothing per time is kept,
/// so a network of thousands of steps needs no rate matrix to pick its busiest steps).
pub fn peak_forward_rates(result: &RunResult, times: &[f64]) -> Vec<f64> {
    let model = RateModel::new(&result.network);
    let m = model.n_steps();
    // (peak so far, the rates at the time in hand) per thread.
    let (peak, _) = result.solution.trajectory.fold_states(
        times,
        || (vec![0.0_f64; m], vec![0.0; m]),
        |(peak, f), _, state| {
            model.forward_rates(state, f);
            peak.iter_mut().zip(f.iter()).for_each(|(p, v)| *p = p.max(*v));
        },
        |(mut peak, f), (other, _)| {
            peak.iter_mut().zip(&other).for_each(|(p, v)| *p = p.max(*v));
            (peak, f)
        },
    );
    peak
}

/// Forward and reverse rates of the listed steps at `times`: row j holds step j's rates (rows
/// of steps not listed stay empty).
pub fn step_rates(result: &RunResult, times: &[f64], steps: &[usize]) -> (Vec<Vec<f64>>, Vec<Vec<f64>>) {
    let model = RateModel::new(&result.network);
    let m = model.n_steps();
    result.solution.trajectory.fold_states(
        times,
        || (vec![Vec::new(); m], vec![Vec::new(); m]),
        |(forward, reverse), _, state| {
            for &j in steps {
                let (f, r) = model.step_rate(j, state);
                forward[j].push(f);
                reverse[j].push(r);
            }
        },
        // Runs of times are joined in order: the later run's rates go after the earlier's.
        |(mut forward, mut reverse), (later_forward, later_reverse)| {
            for &j in steps {
                forward[j].extend(&later_forward[j]);
                reverse[j].extend(&later_reverse[j]);
            }
            (forward, reverse)
        },
    )
}

/// The steps with the largest peak forward rate among those `only` accepts, at most `limit`, in
/// step order.
pub fn busiest_steps(peaks: &[f64], limit: usize, only: impl Fn(usize) -> bool) -> Vec<usize> {
    let mut order: Vec<usize> = (0..peaks.len()).filter(|&j| only(j)).collect();
    order.sort_by(|&a, &b| peaks[b].total_cmp(&peaks[a]));
    order.truncate(limit);
    order.sort_unstable();
    order
}

/// `rates.csv`: forward, reverse and net rate and Q/K of every step (or of the
/// [`MAX_RATE_STEPS`] busiest) at the output times.
pub fn write_rates_csv(result: &RunResult, out: &mut dyn std::io::Write) -> std::io::Result<()> {
    let times = output_times(result);
    let steps = busiest_steps(&peak_forward_rates(result, &times), MAX_RATE_STEPS, |_| true);
    let (forward, reverse) = step_rates(result, &times, &steps);
    let t_unit = result.settings.units.time;
    let mut header = vec![format!("time [{}]", t_unit.symbol())];
    for j in steps.iter().map(|j| j + 1) {
        header.push(format!("step {j} forward [mol/(L s)]"));
        header.push(format!("step {j} reverse [mol/(L s)]"));
        header.push(format!("step {j} net [mol/(L s)]"));
        header.push(format!("step {j} Q/K"));
    }
    write_header(&header, out)?;
    let mut row = Row::default();
    for (k, t) in times.iter().enumerate() {
        row.number(t / t_unit.seconds());
        for &j in &steps {
            let (f, r) = (forward[j][k], reverse[j][k]);
            row.number(f);
            row.number(r);
            row.number(f - r);
            if result.network.reactions[j].reversible && f > 0.0 {
                row.number(r / f);
            } else {
                row.empty();
            }
        }
        row.write(out)?;
    }
    out.flush()
}

/// The header line, quoted where a name needs it.
fn write_header(header: &[String], out: &mut dyn std::io::Write) -> std::io::Result<()> {
    let mut writer = csv::Writer::from_writer(out);
    writer.write_record(header).map_err(std::io::Error::other)?;
    writer.flush()
}

/// One CSV line of numbers with ten significant digits, built in a reused buffer and written
/// whole: numbers never need quoting, so the line skips the CSV writer's per-byte checks (a large
/// network's tables have millions of fields).
#[derive(Default)]
struct Row {
    line: Vec<u8>,
    fields: usize,
}

impl Row {
    fn number(&mut self, value: f64) {
        self.separate();
        crate::format::push_scientific(&mut self.line, value);
    }

    fn empty(&mut self) {
        self.separate();
    }

    fn separate(&mut self) {
        if self.fields > 0 {
            self.line.push(b',');
        }
        self.fields += 1;
    }

    fn write(&mut self, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        self.line.push(b'\n');
        out.write_all(&self.line)?;
        self.line.clear();
        self.fields = 0;
        Ok(())
    }

    /// The line, ended, handed over (the row starts afresh).
    fn finish(&mut self) -> Vec<u8> {
        self.line.push(b'\n');
        self.fields = 0;
        let capacity = self.line.len();
        std::mem::replace(&mut self.line, Vec::with_capacity(capacity))
    }
}

/// `summary_row.csv`: one header and one row, with columns in a fixed order, so rows of many
/// runs of the same network can be appended into one table.
pub fn summary_row_csv(result: &RunResult, input_sha256: &str) -> String {
    let mut header: Vec<String> = [
        "case",
        "title",
        "input_sha256",
        "temperature [K]",
        "final_time [s]",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    let mut row = vec![
        result.network.case_name(),
        result.network.title.clone(),
        input_sha256.to_string(),
        format!("{}", result.network.temperature),
        format!("{:.9e}", result.final_time),
    ];
    // Always the default tolerances, whatever --tol adds (those are in summary.json), so rows
    // of different runs line up.
    for tolerance in crate::analysis::DEFAULT_TOLERANCES {
        header.push(format!("time to equilibrium {} % [s]", tolerance * 100.0));
        let seconds = result
            .settling
            .iter()
            .find(|s| s.tolerance == tolerance)
            .and_then(|s| s.seconds);
        row.push(seconds.map_or(String::new(), |t| format!("{t:.9e}")));
    }
    header.push("slowest relaxation time [s]".into());
    row.push(
        result
            .relaxation
            .as_ref()
            .ok()
            .and_then(|m| m.first())
            .map_or(String::new(), |m| format!("{:.9e}", m.tau_seconds)),
    );
    header.push("routes agree".into());
    row.push(
        result
            .disagreement
            .map_or(String::new(), |_| (!result.disagrees).to_string()),
    );
    header.push("audit consistent".into());
    row.push(result.audit.consistent.to_string());
    for (i, s) in result.network.species.iter().enumerate() {
        header.push(format!("{} final [mol/L]", s.name));
        row.push(format!("{:.9e}", result.final_state[i]));
    }
    // Equilibrium columns are there even when none exists (then empty).
    for (i, s) in result.network.species.iter().enumerate() {
        header.push(format!("{} equilibrium [mol/L]", s.name));
        row.push(result.solved.as_ref().map_or(String::new(), |solved| {
            format!("{:.9e}", solved.concentrations[i])
        }));
    }
    let mut writer = csv::Writer::from_writer(Vec::new());
    let _ = writer.write_record(&header);
    let _ = writer.write_record(&row);
    String::from_utf8(writer.into_inner().unwrap_or_default()).unwrap_or_default()
}
