//! The study commands: `sweep`, `uncertainty` and `merge`. Members run in-process on every
//! core; a shard writes its rows, and `merge` turns the shards into the unsharded result.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::time::Instant;

use crate::ensemble::{self, Outcome};
use crate::error::Error;
use crate::network::Network;
use crate::report::{self, study as study_files};
use crate::run::RunSettings;
use crate::study::{self, Study, Table};
use crate::sweep::{self, Axis};
use crate::uncertainty::Sampler;
use crate::units::TimeUnit;

use super::{duration, settle_on, temperature, tolerance_list};

/// What every study command shares.
#[derive(Debug, clap::Args)]
pub(super) struct Shared {
    /// The network file (TOML).
    pub case: PathBuf,
    /// Output folder [default: output/<case name>_<command>/].
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Threads to run members on [default: every core].
    #[arg(long, value_name = "N")]
    pub threads: Option<usize>,
    /// Run only share I of N of the members (1-based), for job arrays; `merge` joins them.
    #[arg(long, value_name = "I/N")]
    pub shard: Option<String>,
    /// Add a tolerance for time to equilibrium, as a fraction of the total change.
    #[arg(long, value_name = "FRACTION")]
    pub tol: Vec<f64>,
    /// Temperature, overriding the file's ("60 degC" or "333.15 K").
    #[arg(long, value_name = "T")]
    pub temperature: Option<String>,
    /// Judge time to equilibrium on these species only (comma-separated), or on `conversion`
    /// (the limiting reagent of the first reaction).
    #[arg(long, value_name = "A,B|conversion")]
    pub settle_on: Option<String>,
    /// Replace results of an earlier study in the output folder.
    #[arg(long)]
    pub force: bool,
}

#[derive(Debug, clap::Args)]
pub(super) struct SweepArgs {
    #[command(flatten)]
    pub shared: Shared,
    /// What to vary: temperature=40degC..80degC:9, c0[A]=0.5..2:4, kf[2]=x0.5..x2:5 (also kr,
    /// K). Several make a grid.
    #[arg(long, value_name = "WHAT=FROM..TO:N", required = true)]
    pub vary: Vec<String>,
}

#[derive(Debug, clap::Args)]
pub(super) struct UncertaintyArgs {
    #[command(flatten)]
    pub shared: Shared,
    /// Members of the ensemble.
    #[arg(long, default_value_t = 1000)]
    pub samples: usize,
    /// Seed of the random draws: the same seed gives the same ensemble on any machine.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// A planned hold time (seconds, or with units such as "6 h"): the probability of being
    /// within each tolerance by then.
    #[arg(long, value_name = "TIME")]
    pub until: Option<String>,
}

#[derive(Debug, clap::Args)]
pub(super) struct SensitivityArgs {
    #[command(flatten)]
    pub shared: Shared,
}

#[derive(Debug, clap::Args)]
pub(super) struct MergeArgs {
    /// The shard folders of one study.
    #[arg(required = true)]
    pub shards: Vec<PathBuf>,
    /// The merged study's folder.
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
    /// Replace results of an earlier study in the output folder.
    #[arg(long)]
    pub force: bool,
}

/// The network, member settings, study skeleton and member indices of a study command.
struct Prepared {
    network: Network,
    settings: RunSettings,
    study: Study,
    indices: Vec<usize>,
    threads: usize,
    out: PathBuf,
}

fn prepare(
    shared: &Shared,
    kind: &str,
    total: impl FnOnce(&Network) -> Result<usize, Error>,
) -> Result<Prepared, Error> {
    let network = Network::from_file_at(&shared.case, temperature(&shared.temperature)?)?;
    let tolerances = tolerance_list(&shared.tol)?;
    let judged = settle_on(&network, shared.settle_on.as_deref())?;
    let total = total(&network)?;
    let shard = shared.shard.as_deref().map(parse_shard).transpose()?;
    let indices = match shard {
        Some([i, n]) => ensemble::shard(total, i, n),
        None => (0..total).collect(),
    };
    let threads = match shared.threads {
        Some(0) => return Err(option("--threads", "at least one thread")),
        Some(n) => n,
        None => ensemble::default_threads(),
    };
    let out = shared.out.clone().unwrap_or_else(|| {
        let mut name = format!("{}_{kind}", network.case_name());
        if let Some([i, n]) = shard {
            name += &format!("_shard{i}of{n}");
        }
        PathBuf::from("output").join(name)
    });
    report::recover_interrupted(&out);
    if !shared.force {
        report::refuse_existing(&out, study_files::STUDY_FILES)?;
    }
    report::refuse_foreign(&out)?;
    let study = Study {
        kind: kind.into(),
        title: network.title.clone(),
        case: shared.case.display().to_string(),
        case_sha256: report::sha256_hex(&network.source_text),
        temperature_k: network.temperature,
        tolerances: tolerances.clone(),
        axes: Vec::new(),
        axis_headers: Vec::new(),
        seed: None,
        until: None,
        total,
        species: network.species.iter().map(|s| s.name.clone()).collect(),
        notes: judged
            .iter()
            .map(|list| {
                let names: Vec<&str> = list.iter().map(|&i| network.species[i].name.as_str()).collect();
                format!(
                    "time to equilibrium judged on {} only (--settle-on)",
                    names.join(", ")
                )
            })
            .collect(),
        shard,
    };
    Ok(Prepared {
        settings: RunSettings {
            tolerances,
            settle_on: judged,
            ..RunSettings::default()
        },
        network,
        study,
        indices,
        threads,
        out,
    })
}

fn option(name: &str, message: &str) -> Error {
    Error::Option {
        option: name.into(),
        message: message.into(),
    }
}

fn parse_shard(text: &str) -> Result<[usize; 2], Error> {
    let parsed = text
        .split_once('/')
        .and_then(|(i, n)| Some([i.trim().parse().ok()?, n.trim().parse().ok()?]))
        .filter(|&[i, n]: &[usize; 2]| i >= 1 && i <= n);
    parsed.ok_or_else(|| option("--shard", "write I/N with 1 ≤ I ≤ N, e.g. 2/8"))
}

/// A progress bar on stderr, drawn only on a terminal and only after the first second.
fn progress_bar(total: usize) -> impl Fn(usize) + Sync {
    let started = Instant::now();
    let terminal = std::io::stderr().is_terminal();
    move |done: usize| {
        if !terminal || started.elapsed().as_secs_f64() < 1.0 {
            return;
        }
        let width = 40;
        let filled = (done * width) / total.max(1);
        eprint!(
            "\r[{}{}] {done}/{total} members",
            "#".repeat(filled),
            " ".repeat(width - filled)
        );
        if done == total {
            eprintln!();
        }
    }
}

/// Runs the members (with a progress bar) and writes the study's folder.
fn run_members<F>(prepared: &Prepared, member: F, force: bool) -> Result<String, Error>
where
    F: Fn(usize) -> (Vec<f64>, Result<Outcome, String>) + Sync,
{
    let progress = progress_bar(prepared.indices.len());
    let study = &prepared.study;
    let table = study::tabulate(study, &prepared.indices, prepared.threads, member, &progress);
    let files = study_files::render_study(study, &table)?;
    let written = report::write_all(&prepared.out, &report::as_contents(files), force)?;
    Ok(study_files::terminal_text(study, &table, &written))
}

pub(super) fn sweep_command(args: SweepArgs) -> Result<String, Error> {
    let mut axes: Vec<Axis> = Vec::new();
    let mut prepared = prepare(&args.shared, "sweep", |network| {
        for text in &args.vary {
            axes.push(Axis::parse(text, network).map_err(|m| option("--vary", &m))?);
        }
        Ok(axes.iter().map(|a| a.values.len()).product())
    })?;
    prepared.study.axes = args.vary.clone();
    prepared.study.axis_headers = axes.iter().map(Axis::header).collect();
    if let Some(note) = sweep::temperature_note(&prepared.network, &axes) {
        prepared.study.notes.push(note);
    }
    let points = sweep::grid(&axes);
    let (network, settings) = (&prepared.network, &prepared.settings);
    let member = |i: usize| {
        let outcome = sweep::at_point(network, &axes, &points[i]).and_then(|n| Outcome::of(&n, settings));
        (points[i].clone(), outcome)
    };
    run_members(&prepared, member, args.shared.force)
}

pub(super) fn uncertainty_command(args: UncertaintyArgs) -> Result<String, Error> {
    if args.samples == 0 || args.samples > 10_000_000 {
        return Err(option("--samples", "from 1 to 10000000 members"));
    }
    let mut prepared = prepare(&args.shared, "uncertainty", |_| Ok(args.samples))?;
    let sampler = Sampler::new(&prepared.network).map_err(|m| option("uncertainty", &m))?;
    prepared.study.seed = Some(args.seed);
    prepared.study.until = args
        .until
        .as_deref()
        .map(|t| duration("--until", t, TimeUnit::S))
        .transpose()?;
    let settings = &prepared.settings;
    let member = |i: usize| {
        let outcome = sampler
            .member(args.seed, i)
            .and_then(|n| Outcome::of(&n, settings));
        (Vec::new(), outcome)
    };
    run_members(&prepared, member, args.shared.force)
}

pub(super) fn merge_command(args: MergeArgs) -> Result<String, Error> {
    let read = |dir: &Path, name: &str| {
        std::fs::read_to_string(dir.join(name)).map_err(|source| Error::Read {
            path: dir.join(name),
            source,
        })
    };
    let mut parts = Vec::new();
    for dir in &args.shards {
        let text = read(dir, "study.json")?;
        let study: Study = serde_json::from_str(&text).map_err(|e| {
            option(
                "(shard folders)",
                &format!("{}: {e}", dir.join("study.json").display()),
            )
        })?;
        let table_text = read(dir, study_files::table_name(&study.kind))?;
        let table = Table::parse(&table_text)
            .map_err(|m| option("(shard folders)", &format!("{}: {m}", dir.display())))?;
        parts.push((study, table));
    }
    let (study, table) = study::merge(parts).map_err(|m| option("(shard folders)", &m))?;
    report::recover_interrupted(&args.out);
    let files = study_files::render_study(&study, &table)?;
    let written = report::write_all(&args.out, &report::as_contents(files), args.force)?;
    Ok(study_files::terminal_text(&study, &table, &written))
}

pub(super) fn sensitivity_command(args: SensitivityArgs) -> Result<String, Error> {
    if args.shared.shard.is_some() {
        return Err(option(
            "--shard",
            "a sensitivity study is small enough for one machine; run it whole",
        ));
    }
    let prepared = prepare(&args.shared, "sensitivity", |n| {
        Ok(2 * crate::sensitivity::constants(n).len())
    })?;
    let network = &prepared.network;
    let tolerances = &prepared.study.tolerances;
    let judged = prepared.settings.settle_on.clone();
    let (found, route) = crate::sensitivity::sensitivities(network, tolerances, judged, prepared.threads)
        .map_err(|m| option("(network)", &format!("no sensitivities: {m}")))?;
    let files = report::sensitivity::render_sensitivity(network, tolerances, &found, route)?;
    let written = report::write_all(&prepared.out, &report::as_contents(files), args.shared.force)?;
    let notes: String = prepared
        .study
        .notes
        .iter()
        .map(|n| format!("note: {n}\n"))
        .collect();
    Ok(notes + &report::sensitivity::terminal_text(network, tolerances, &found, &written))
}
