//! Side-by-side figures for the peer benchmark networks in `../shared/bench/nets/` (the neutral
//! JSON format described in `../shared/bench/networks.py`): kinequil's integration time and work
//! counts on each network, and its accuracy against the cached reference state. The peers'
//! figures (general-purpose stiff solvers, same networks, same 2-core machine) are in
//! `../shared/bench/RESULTS.md`; compare counts, and times as ratios within one machine.
//!
//! Run: `cargo bench --bench peer` (optionally `-- NAME` to pick networks). Same tolerances as the
//! peers' main pass: rtol 1e-6, atol 1e-10. Then the whole job on each network as a user runs it
//! (`kinequil run`, default tolerances, every report), with its time and peak memory.

use std::path::{Path, PathBuf};
use std::time::Instant;

use kinequil::RateModel;
use kinequil::Stoichiometry;
use kinequil::{integrate, IntegrationOptions as Options};
use kinequil::{Network, NetworkBuilder};

fn nets_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../shared/bench/nets")
}

/// The JSON network, built through the library's builder (no text format in between).
fn build(net: &serde_json::Value, name: &str) -> Network {
    let mut builder = NetworkBuilder::new(name);
    for s in net["species"].as_array().unwrap() {
        let species = s.as_str().unwrap();
        let c0 = net["initial"]
            .get(species)
            .and_then(|v| v.as_f64())
            .unwrap_or(0.0);
        builder = builder.species(species, c0);
    }
    let side = |m: &serde_json::Value| {
        let terms: Vec<String> = m
            .as_object()
            .unwrap()
            .iter()
            .map(|(s, c)| format!("{} {s}", c.as_f64().unwrap()))
            .collect();
        if terms.is_empty() {
            "0".to_string()
        } else {
            terms.join(" + ")
        }
    };
    for r in net["reactions"].as_array().unwrap() {
        let kr = r["kr"].as_f64().unwrap();
        let arrow = if kr > 0.0 { "<=>" } else { "=>" };
        let equation = format!("{} {arrow} {}", side(&r["reactants"]), side(&r["products"]));
        builder = builder.reaction(&equation, r["kf"].as_f64().unwrap());
        if kr > 0.0 {
            builder = builder.kr(kr);
        }
    }
    builder.build().unwrap_or_else(|e| panic!("{e}"))
}

fn main() {
    let filter: Vec<String> = std::env::args().skip(1).filter(|a| !a.starts_with('-')).collect();
    let dir = nets_dir();
    let Ok(entries) = std::fs::read_dir(&dir) else {
        println!(
            "no peer networks at {} (the shared bench folder is not beside the project)",
            dir.display()
        );
        return;
    };
    let mut nets: Vec<PathBuf> = entries
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|e| e == "json") && !p.to_string_lossy().contains(".ref"))
        .collect();
    nets.sort_by_key(|p| std::fs::metadata(p).map(|m| m.len()).unwrap_or(0));
    let peers = peer_results();
    match &peers {
        Some((file, _)) => println!("peer figures from {file} (fastest peer: its median time)"),
        None => println!(
            "peer figures not at hand: run ../shared/bench (results/*.jsonl) in this session to print ratios"
        ),
    }
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    println!(
        "{:<10} {:>5} {:>9} {:>7} {:>7} {:>6} {:>6} {:>10} {:>10} {:>10} {:>8} {:>8} {:>16}",
        "net",
        "N",
        "t_end",
        "steps",
        "rhs",
        "jac",
        "LU",
        "seconds",
        format!("{cores} cores s"),
        "err_rel",
        "peak MB",
        "read s",
        "fastest peer"
    );
    let mut whole = Vec::new();
    for path in nets {
        let name = path.file_stem().unwrap().to_string_lossy().into_owned();
        if !filter.is_empty() && !filter.contains(&name) {
            continue;
        }
        let json: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
        reset_peak_memory();
        let network = build(&json, &name);
        let read_seconds = read_time(&network);
        let t_end = json["t_end"].as_f64().unwrap();
        let stoich = Stoichiometry::new(&network);
        let model = RateModel::new(&network);
        let options = Options {
            rtol: 1e-6,
            atol: vec![1e-10; network.n_species()],
            until: Some(t_end),
            to_equilibrium: false,
            ..Options::new(network.n_species())
        };
        let initial = network.initial_state();
        let conservation = &stoich.local_conservation;
        let (seconds, solution) =
            median_time(|| integrate(&model, conservation, &initial, &options).unwrap());
        let peak_mb = peak_memory_mb();
        // The same on every core (the shared factorisation of large networks): wall-clock time,
        // beside the one-thread time that compares with the peers' one-thread solvers.
        let shared_seconds = (cores > 1).then(|| {
            let options = Options {
                threads: cores,
                ..options.clone()
            };
            median_time(|| integrate(&model, conservation, &initial, &options).unwrap()).0
        });
        let reference = dir.join(format!("{name}.ref.json"));
        let err = std::fs::read_to_string(&reference)
            .ok()
            .and_then(|t| serde_json::from_str::<serde_json::Value>(&t).ok())
            .map(|r| {
                let y: Vec<f64> = r["y"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|v| v.as_f64().unwrap())
                    .collect();
                let largest = y.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
                let end = solution.trajectory.last_state();
                // The peers' measure: largest relative error over species above 1e-8 of the largest.
                y.iter()
                    .zip(end)
                    .filter(|(r, _)| r.abs() >= 1e-8 * largest)
                    .map(|(r, v)| (v - r).abs() / r.abs())
                    .fold(0.0, f64::max)
            });
        let s = &solution.stats;
        println!(
            "{:<10} {:>5} {:>9.1e} {:>7} {:>7} {:>6} {:>6} {:>10.4} {:>10} {:>10} {:>8} {:>8.3} {:>16}",
            name,
            network.n_species(),
            t_end,
            format!("{}+{}", s.steps, s.rejected_steps),
            s.rhs_evals,
            s.jacobian_evals,
            s.lu_factorizations,
            seconds,
            shared_seconds.map_or("-".into(), |t| format!("{t:.4}")),
            err.map_or("-".into(), |e| format!("{e:.2e}")),
            peak_mb.map_or("-".into(), |m| format!("{m:.0}")),
            read_seconds,
            peers
                .as_ref()
                .and_then(|(_, fastest)| fastest.get(&name))
                .map_or("-".into(), |(method, t)| format!("{method} {:.1}x", t / seconds))
        );
        whole.push((name, network));
    }
    println!(
        "\nwhole job, `kinequil run` in a process of its own (read the file, solve, integrate to\n\
         detected equilibrium at the default tolerances, analyse, write every report), median of {WHOLE_RUNS}:"
    );
    println!("{:<10} {:>5} {:>10} {:>8}", "net", "N", "seconds", "peak MB");
    for (name, network) in whole {
        match whole_run(&network, &name) {
            Some((seconds, peak)) => println!(
                "{:<10} {:>5} {:>10.3} {:>8}",
                name,
                network.n_species(),
                seconds,
                peak.map_or("-".into(), |m| format!("{m:.0}"))
            ),
            None => println!("{name:<10} the run failed or could not be started"),
        }
    }
}

/// The peers' timing rule: at least 5 solves, more (up to 50) until they add up to 2 s (or past
/// 30 s), and the median; returns it with the last solve's result.
fn median_time<T>(solve: impl Fn() -> T) -> (f64, T) {
    let mut times = Vec::new();
    let result = loop {
        let started = Instant::now();
        let result = solve();
        times.push(started.elapsed().as_secs_f64());
        let total: f64 = times.iter().sum();
        if times.len() >= 50 || (times.len() >= 5 && total >= 2.0) || (total > 30.0) {
            break result;
        }
    };
    times.sort_by(f64::total_cmp);
    (times[times.len() / 2], result)
}

/// Resets the process's peak resident memory (Linux: `5` to /proc/self/clear_refs), so each
/// network's peak is its own.
fn reset_peak_memory() {
    let _ = std::fs::write("/proc/self/clear_refs", "5");
}

/// Peak resident memory since the last reset, MB (Linux: VmHWM in /proc/self/status).
fn peak_memory_mb() -> Option<f64> {
    high_water_mb(&std::fs::read_to_string("/proc/self/status").ok()?)
}

/// The network as a network file (what a user would have written).
fn network_text(network: &Network) -> String {
    let mut text = String::from("[species]\n");
    for s in &network.species {
        text += &format!("{} = {}\n", s.name, s.initial);
    }
    for r in &network.reactions {
        text += &format!("\n[[reaction]]\nscheme = \"{}\"\nkf = {}\n", r.equation, r.kf);
        if r.reversible {
            text += &format!("kr = {}\n", r.kr);
        }
    }
    text
}

/// Seconds to read the network as a network file: the reader's cost, which must grow linearly
/// with the size of the network.
fn read_time(network: &Network) -> f64 {
    let text = network_text(network);
    let started = Instant::now();
    Network::from_text(&text, Path::new("peer.toml")).expect("the written network reads back");
    started.elapsed().as_secs_f64()
}

/// Runs of the whole job per network (the median is taken).
const WHOLE_RUNS: usize = 3;

/// The whole job as a user runs it: `kinequil run` on the network written as a file, in a
/// process of its own (default tolerances, to detected equilibrium, every report written into
/// a fresh folder, removed after). Returns the median wall-clock seconds and the largest peak
/// resident memory, MB, polled from /proc every 2 ms while the process runs (a peak within its
/// last 2 ms would be missed; the largest files are written well before the end).
fn whole_run(network: &Network, name: &str) -> Option<(f64, Option<f64>)> {
    let dir = std::env::temp_dir().join(format!("kinequil-bench-{}-{name}", std::process::id()));
    std::fs::create_dir_all(&dir).ok()?;
    let file = dir.join(format!("{name}.toml"));
    std::fs::write(&file, network_text(network)).ok()?;
    let (mut times, mut peak) = (Vec::new(), None::<f64>);
    for k in 0..WHOLE_RUNS {
        let out = dir.join(format!("run{k}"));
        let started = Instant::now();
        let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_kinequil"))
            .arg("run")
            .arg(&file)
            .arg("--out")
            .arg(&out)
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .spawn()
            .ok()?;
        let status = format!("/proc/{}/status", child.id());
        let exit = loop {
            if let Some(mb) = std::fs::read_to_string(&status)
                .ok()
                .and_then(|s| high_water_mb(&s))
            {
                peak = Some(peak.map_or(mb, |p| p.max(mb)));
            }
            match child.try_wait() {
                Ok(Some(exit)) => break exit,
                Ok(None) => std::thread::sleep(std::time::Duration::from_millis(2)),
                Err(_) => return None,
            }
        };
        times.push(started.elapsed().as_secs_f64());
        if !exit.success() {
            return None;
        }
    }
    let _ = std::fs::remove_dir_all(&dir);
    times.sort_by(f64::total_cmp);
    Some((times[times.len() / 2], peak))
}

/// VmHWM of a /proc status text, MB.
fn high_water_mb(status: &str) -> Option<f64> {
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kb: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb / 1024.0)
}

/// Per network, the fastest peer: (method, median seconds).
type Fastest = std::collections::HashMap<String, (String, f64)>;

/// The newest peer results file (`../shared/bench/results/*.jsonl`, or `KINEQUIL_PEER_RESULTS`)
/// and, per network, the fastest peer that finished.
fn peer_results() -> Option<(String, Fastest)> {
    let file = match std::env::var("KINEQUIL_PEER_RESULTS") {
        Ok(path) => PathBuf::from(path),
        Err(_) => {
            let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("../shared/bench/results");
            let mut files: Vec<PathBuf> = std::fs::read_dir(dir)
                .ok()?
                .filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|p| p.extension().is_some_and(|e| e == "jsonl"))
                .collect();
            files.sort();
            files.pop()?
        }
    };
    let mut fastest = Fastest::new();
    for line in std::fs::read_to_string(&file).ok()?.lines() {
        let Ok(record) = serde_json::from_str::<serde_json::Value>(line) else {
            continue;
        };
        let (Some(net), Some(method), Some(time)) = (
            record["net"].as_str(),
            record["method"].as_str(),
            record["time_s"].as_f64(),
        ) else {
            continue;
        };
        if record["status"].as_str().is_some_and(|s| s != "ok") {
            continue;
        }
        let entry = fastest
            .entry(net.to_string())
            .or_insert((method.to_string(), time));
        if time < entry.1 {
            *entry = (method.to_string(), time);
        }
    }
    Some((file.display().to_string(), fastest))
}
