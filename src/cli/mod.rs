//! The command line: parse arguments, run, report. The only module that sees every layer.

use std::path::PathBuf;

use clap::{Parser, Subcommand};

mod studies;

use crate::audit::{self, Adjust};
use crate::equilibrium;
use crate::error::Error;
use crate::network::Network;
use crate::report;
use crate::report::chart::{ChartOptions, TimeAxis};
use crate::run::{self, OutputUnits, RunSettings};
use crate::stoich::Stoichiometry;
use crate::units::{parse_quantity, ConcentrationUnit, Dimension, TimeUnit};

#[derive(Debug, Parser)]
#[command(
    name = "kinequil",
    version,
    about = "Reversible reaction networks in closed batches: time to equilibrium, composition, tables and charts"
)]
struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Integrate a network to equilibrium (or to --until) and write summary, table and chart.
    Run(RunArgs),
    /// Solve the equilibrium composition directly, without integrating: composition, extent of
    /// each reaction and conversion of each starting species.
    Equilibrium(EquilibriumArgs),
    /// Audit the rate constants: kf/kr against K, detailed balance around cycles, element and
    /// charge balance, units and limits; propose a minimal correction. Exit 0 when consistent,
    /// 1 when not, 2 for bad input.
    Check(CheckArgs),
    /// Run the network over a grid of conditions (temperature, initial amounts, multipliers on
    /// constants): time to equilibrium and conversion at every point, with charts.
    Sweep(studies::SweepArgs),
    /// Draw an ensemble from the uncertainties the file gives and report the spread of the time
    /// to equilibrium and of the equilibrium composition.
    Uncertainty(studies::UncertaintyArgs),
    /// Rank the constants by how much they move the hold time (d ln t / d ln k) and the
    /// equilibrium composition (d ln c_eq / d ln k): which constant to measure better.
    Sensitivity(studies::SensitivityArgs),
    /// Join the shard folders of one sweep or ensemble into the result of one whole run.
    Merge(studies::MergeArgs),
}

#[derive(Debug, clap::Args)]
struct CheckArgs {
    /// The network file (TOML).
    pub case: PathBuf,
    /// Print a JSON report instead of the table.
    #[arg(long)]
    pub json: bool,
    /// Largest deviation accepted as consistent, kJ/mol.
    #[arg(long, value_name = "KJ_PER_MOL", default_value_t = crate::audit::DEFAULT_TOL_KJ)]
    pub tol_kj: f64,
    /// Which constants the proposed correction may change.
    #[arg(long, value_enum, default_value_t = AdjustArg::Kr)]
    pub adjust: AdjustArg,
    /// Write the corrected network to this new file (the original is left untouched).
    #[arg(long, value_name = "FILE")]
    pub write_corrected: Option<PathBuf>,
    /// Replace FILE if it exists.
    #[arg(long)]
    pub force: bool,
    /// Temperature, overriding the file's (K, or with units such as "60 degC").
    #[arg(long, value_name = "T")]
    pub temperature: Option<String>,
}

#[derive(Debug, clap::Args)]
struct EquilibriumArgs {
    /// The network file (TOML).
    pub case: PathBuf,
    /// Print a JSON object instead of the table.
    #[arg(long)]
    pub json: bool,
    /// Temperature, overriding the file's (K, or with units such as "60 degC").
    #[arg(long, value_name = "T")]
    pub temperature: Option<String>,
}

#[derive(Debug, clap::Args)]
struct RunArgs {
    /// The network file (TOML).
    pub case: PathBuf,
    /// Output folder [default: output/<case name>/].
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Hold time: report the state and a verdict at this time (plain numbers are in the
    /// --time-unit, or give units such as "4 h"); the run still finds time to equilibrium.
    #[arg(long, value_name = "TIME")]
    pub until: Option<String>,
    /// Wall-clock budget for the integration in seconds: the run ends cleanly with what it
    /// reached and says so.
    #[arg(long, value_name = "SECONDS")]
    pub max_seconds: Option<f64>,
    /// Threads for the linear algebra of large networks (a thousand species and more)
    /// [default: every core].
    #[arg(long, value_name = "N")]
    pub threads: Option<usize>,
    /// Add a tolerance for time to equilibrium, as a fraction of the total change (e.g. 0.05).
    #[arg(long, value_name = "FRACTION")]
    pub tol: Vec<f64>,
    /// Relative integration tolerance.
    #[arg(long, default_value_t = crate::integrate::DEFAULT_RTOL)]
    pub rtol: f64,
    /// Absolute integration tolerance in mol/L (species may set their own `atol` in the file).
    #[arg(long, default_value_t = crate::integrate::DEFAULT_ATOL)]
    pub atol: f64,
    /// Run temperature, overriding the file's (K, or with units such as "60 degC").
    #[arg(long, value_name = "T")]
    pub temperature: Option<String>,
    /// Integration method: auto (NDF from 10 species, RODAS4 below), or either one, to cross-check.
    #[arg(long, value_enum, default_value_t = IntegratorArg::Auto)]
    pub integrator: IntegratorArg,
    /// Time unit of tables and charts.
    #[arg(long, value_enum, default_value_t = TimeUnitArg::S)]
    pub time_unit: TimeUnitArg,
    /// Concentration unit of tables and charts.
    #[arg(long, value_enum, default_value_t = ConcentrationUnitArg::MolPerL)]
    pub conc_unit: ConcentrationUnitArg,
    /// Also tabulate the state at these times (comma-separated; plain numbers are in the
    /// --time-unit, or give units such as "1.5 h") in table_at_times.csv.
    #[arg(long, value_name = "LIST")]
    pub times: Option<String>,
    /// Also tabulate the state every this long (e.g. "30 min") in table_at_times.csv.
    #[arg(long, value_name = "INTERVAL")]
    pub every: Option<String>,
    /// Judge time to equilibrium and the hold-time verdict on these species only
    /// (comma-separated), or on `conversion` (the limiting reagent of the first reaction),
    /// instead of on every species: a trace side product need not set the hold time.
    #[arg(long, value_name = "A,B|conversion")]
    pub settle_on: Option<String>,
    /// Species to plot (comma-separated) instead of those that change most.
    #[arg(long, value_name = "A,B,C")]
    pub species: Option<String>,
    /// Time axis of the charts.
    #[arg(long, value_enum, default_value_t = TimeAxisArg::Auto)]
    pub time_axis: TimeAxisArg,
    /// Replace results of an earlier run in the output folder.
    #[arg(long)]
    pub force: bool,
}

/// What a successful command prints and the exit code it ends with (`check` ends with 1 when
/// the network is inconsistent).
struct Outcome {
    pub text: String,
    pub exit_code: u8,
    /// A diagnosis for stderr (for example why no equilibrium exists), printed after `text`.
    pub diagnosis: Option<String>,
}

impl From<String> for Outcome {
    fn from(text: String) -> Outcome {
        Outcome {
            text,
            exit_code: 0,
            diagnosis: None,
        }
    }
}

/// The binary's whole life: parse the arguments, run the command, map the outcome to an exit code.
pub fn main() -> std::process::ExitCode {
    use std::io::Write;
    match execute(Cli::parse()) {
        Ok(outcome) => {
            // A closed pipe (e.g. `| head`) is not an error.
            let _ = std::io::stdout().write_all(outcome.text.as_bytes());
            if let Some(diagnosis) = outcome.diagnosis {
                eprintln!("error: {diagnosis}");
            }
            std::process::ExitCode::from(outcome.exit_code)
        }
        Err(e) => {
            eprintln!("error: {e}");
            std::process::ExitCode::from(e.exit_code())
        }
    }
}

/// Runs the parsed command.
fn execute(cli: Cli) -> Result<Outcome, Error> {
    match cli.command {
        Command::Run(args) => run_command(args).map(Outcome::from),
        Command::Equilibrium(args) => equilibrium_command(args),
        Command::Check(args) => check_command(args),
        Command::Sweep(args) => studies::sweep_command(args).map(Outcome::from),
        Command::Uncertainty(args) => studies::uncertainty_command(args).map(Outcome::from),
        Command::Sensitivity(args) => studies::sensitivity_command(args).map(Outcome::from),
        Command::Merge(args) => studies::merge_command(args).map(Outcome::from),
    }
}

/// A `--temperature` value: a quantity with temperature units. A bare number is refused: on a
/// command line "60" is as likely meant in degC as in K, and 60 K would run silently.
fn temperature(text: &Option<String>) -> Result<Option<f64>, Error> {
    let Some(text) = text else { return Ok(None) };
    let bad = |message: String| Error::Option {
        option: "--temperature".into(),
        message,
    };
    let q = parse_quantity(text).map_err(bad)?;
    let t = if q.dimension.same(Dimension::TEMPERATURE) {
        q.value
    } else if q.dimension.same(Dimension::NONE) {
        return Err(bad(format!(
            "`{text}` has no unit; write it as \"{text} degC\" or \"{text} K\""
        )));
    } else {
        return Err(bad(format!("`{text}` is not a temperature")));
    };
    if t > 0.0 {
        Ok(Some(t))
    } else {
        Err(bad(format!("`{text}` is not above 0 K")))
    }
}

/// A time: a plain number in `unit`, or a quantity with time units; never negative.
fn duration(option: &str, text: &str, unit: TimeUnit) -> Result<f64, Error> {
    let bad = |message: String| Error::Option {
        option: option.into(),
        message,
    };
    let q = parse_quantity(text.trim()).map_err(bad)?;
    let seconds = if q.dimension.same(Dimension::NONE) {
        q.value * unit.seconds()
    } else if q.dimension.same(Dimension::TIME) {
        q.value
    } else {
        return Err(bad(format!("`{text}` is not a time")));
    };
    if seconds < 0.0 {
        return Err(bad(format!("`{text}` is negative")));
    }
    Ok(seconds)
}

/// Species indices from a comma-separated list of names given to `option`.
fn species_list(network: &Network, list: &str, option: &str) -> Result<Vec<usize>, Error> {
    let mut chosen = Vec::new();
    for name in list.split(',').map(str::trim).filter(|n| !n.is_empty()) {
        let Some(i) = network.species_index(name) else {
            return Err(Error::Option {
                option: option.into(),
                message: network.unknown_species(name),
            });
        };
        if !chosen.contains(&i) {
            chosen.push(i);
        }
    }
    if chosen.is_empty() {
        return Err(Error::Option {
            option: option.into(),
            message: "name at least one species".into(),
        });
    }
    Ok(chosen)
}

/// The default tolerances and those `--tol` adds, loosest first, each once.
fn tolerance_list(extra: &[f64]) -> Result<Vec<f64>, Error> {
    let mut tolerances = crate::analysis::DEFAULT_TOLERANCES.to_vec();
    for &t in extra {
        tolerances.push(positive_fraction("--tol", t)?);
    }
    tolerances.sort_by(|a, b| b.total_cmp(a));
    tolerances.dedup();
    Ok(tolerances)
}

fn positive_fraction(option: &str, x: f64) -> Result<f64, Error> {
    if x > 0.0 && x < 1.0 {
        Ok(x)
    } else {
        Err(Error::Option {
            option: option.into(),
            message: format!("{x} is not a fraction between 0 and 1"),
        })
    }
}

fn run_command(args: RunArgs) -> Result<String, Error> {
    let mut settings = run_settings(&args)?;
    let network = Network::from_file_at(&args.case, temperature(&args.temperature)?)?;
    settings.settle_on = settle_on(&network, args.settle_on.as_deref())?;
    let out = args
        .out
        .unwrap_or_else(|| PathBuf::from("output").join(network.case_name()));
    // Refuse before the work, not after it, when earlier results are in the way (after putting
    // back a run that an interrupted one had set aside).
    report::recover_interrupted(&out);
    if !args.force {
        report::refuse_existing(&out, report::RUN_FILES)?;
    }
    report::refuse_foreign(&out)?;
    let chart = ChartOptions {
        time_axis: args.time_axis.into(),
        species: match &args.species {
            Some(list) => Some(species_list(&network, list, "--species")?),
            None => None,
        },
    };
    let result = run::run(network, &settings)?;
    let files = report::render_run(&result, &chart)?;
    let written = report::write_all(&out, &files, args.force)?;
    Ok(report::terminal::render(&result, &written))
}

/// The run's settings from its options, each checked with the option named.
fn run_settings(args: &RunArgs) -> Result<RunSettings, Error> {
    let positive_seconds = |option: &str, value: Option<f64>| match value {
        Some(s) if !(s > 0.0 && s.is_finite()) => Err(Error::Option {
            option: option.into(),
            message: "must be a positive number of seconds".into(),
        }),
        _ => Ok(value),
    };
    let rtol = positive_fraction("--rtol", args.rtol)?;
    if !(args.atol > 0.0 && args.atol.is_finite()) {
        return Err(Error::Option {
            option: "--atol".into(),
            message: "must be a positive concentration in mol/L".into(),
        });
    }
    let tolerances = tolerance_list(&args.tol)?;
    let time_unit = args.time_unit.into();
    let output_every = match &args.every {
        Some(text) => match duration("--every", text, time_unit)? {
            every if every > 0.0 => Some(every),
            _ => {
                return Err(Error::Option {
                    option: "--every".into(),
                    message: "must be a positive interval".into(),
                })
            }
        },
        None => None,
    };
    Ok(RunSettings {
        max_seconds: positive_seconds("--max-seconds", args.max_seconds)?,
        until: match &args.until {
            Some(text) => positive_seconds("--until", Some(duration("--until", text, time_unit)?))?,
            None => None,
        },
        tolerances,
        rtol,
        atol: args.atol,
        force_dense: None,
        method: args.integrator.into(),
        units: OutputUnits {
            time: time_unit,
            concentration: args.conc_unit.into(),
        },
        output_times: match &args.times {
            Some(list) => list
                .split(',')
                .map(|t| duration("--times", t, time_unit))
                .collect::<Result<Vec<f64>, Error>>()?,
            None => Vec::new(),
        },
        output_every,
        settle_on: None,
        threads: match args.threads {
            Some(0) => {
                return Err(Error::Option {
                    option: "--threads".into(),
                    message: "must be at least one thread".into(),
                })
            }
            Some(n) => n,
            None => crate::ensemble::default_threads(),
        },
    })
}

/// The species a `--settle-on` value names: a list, or `conversion` for the first reaction's
/// limiting reagent; None (every species) without the option.
fn settle_on(network: &Network, text: Option<&str>) -> Result<Option<Vec<usize>>, Error> {
    match text {
        None => Ok(None),
        Some("conversion") => match crate::verdict::limiting_reagent(network) {
            Some((i, _)) => Ok(Some(vec![i])),
            None => Err(Error::Option {
                option: "--settle-on".into(),
                message: "the first reaction has no reactant present at the start, so no limiting reagent"
                    .into(),
            }),
        },
        Some(list) => species_list(network, list, "--settle-on").map(Some),
    }
}

fn equilibrium_command(args: EquilibriumArgs) -> Result<Outcome, Error> {
    let network = Network::from_file_at(&args.case, temperature(&args.temperature)?)?;
    let stoich = Stoichiometry::new(&network);
    let solved = match equilibrium::solve(&network, &stoich) {
        Ok(solved) => solved,
        // Not a failure of the program: the answer is that there is none, and why.
        Err(why) => {
            let json =
                serde_json::json!({ "equilibrium_tag": why.tag(), "equilibrium_status": why.to_string() });
            return Ok(Outcome {
                text: if args.json {
                    json.to_string() + "\n"
                } else {
                    String::new()
                },
                exit_code: 1,
                diagnosis: Some(why.to_string()),
            });
        }
    };
    let c0 = network.initial_state();
    let extents = equilibrium::extents(&stoich, &c0, &solved.concentrations);
    let table = report::equilibrium_table::EquilibriumTable::new(&network, &c0, &solved, extents.as_deref());
    Ok((if args.json { table.json() } else { table.text() }).into())
}

fn check_command(args: CheckArgs) -> Result<Outcome, Error> {
    if !(args.tol_kj > 0.0 && args.tol_kj.is_finite()) {
        return Err(Error::Option {
            option: "--tol-kj".into(),
            message: "must be a positive energy in kJ/mol".into(),
        });
    }
    let network = Network::from_file_at(&args.case, temperature(&args.temperature)?)?;
    let found = audit::audit(&network, args.tol_kj, args.adjust.into());
    let mut text = if args.json {
        serde_json::to_string_pretty(&found).unwrap_or_default() + "\n"
    } else {
        report::audit_table::render(&network, &found)
    };
    if let Some(path) = &args.write_corrected {
        let Some(correction) = &found.correction else {
            return Err(Error::Option {
                option: "--write-corrected".into(),
                message: "nothing to correct: the constants already meet every condition".into(),
            });
        };
        let original = std::fs::read_to_string(&args.case).map_err(|source| Error::Read {
            path: args.case.clone(),
            source,
        })?;
        let corrected =
            audit::corrected_network_text(&original, correction).map_err(|message| Error::Compose {
                what: path.display().to_string(),
                message,
            })?;
        report::write_new_file(path, corrected.as_bytes(), args.force)?;
        if !args.json {
            text += &format!("  corrected network written to {}\n", path.display());
        }
    }
    Ok(Outcome {
        text,
        exit_code: if found.consistent { 0 } else { 1 },
        diagnosis: None,
    })
}

/// Command-line spellings of the library's choices: the parser's traits stay here, so the
/// library does not depend on the command line.
macro_rules! choice {
    ($(#[$doc:meta])* $arg:ident => $target:ty { $($(#[$attr:meta])* $variant:ident => $to:expr),+ $(,)? }) => {
        $(#[$doc])*
        #[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
        pub enum $arg {
            $($(#[$attr])* $variant),+
        }

        impl From<$arg> for $target {
            fn from(choice: $arg) -> $target {
                match choice {
                    $($arg::$variant => $to),+
                }
            }
        }
    };
}

choice!(
    /// `--adjust`
    AdjustArg => Adjust { Kr => Adjust::Kr, Kf => Adjust::Kf, Both => Adjust::Both }
);
choice!(
    /// `--time-unit`
    TimeUnitArg => TimeUnit { S => TimeUnit::S, Min => TimeUnit::Min, H => TimeUnit::H, D => TimeUnit::D }
);
choice!(
    /// `--conc-unit`
    ConcentrationUnitArg => ConcentrationUnit {
        #[value(name = "mol/L")]
        MolPerL => ConcentrationUnit::MolPerL,
        #[value(name = "mmol/L")]
        MmolPerL => ConcentrationUnit::MmolPerL,
        #[value(name = "mol/m3")]
        MolPerM3 => ConcentrationUnit::MolPerM3,
    }
);
choice!(
    /// `--integrator`
    IntegratorArg => crate::integrate::Method {
        Auto => crate::integrate::Method::Auto,
        Rodas4 => crate::integrate::Method::Rodas4,
        Ndf => crate::integrate::Method::Ndf,
    }
);
choice!(
    /// `--time-axis`
    TimeAxisArg => TimeAxis { Auto => TimeAxis::Auto, Linear => TimeAxis::Linear, Log => TimeAxis::Log }
);
