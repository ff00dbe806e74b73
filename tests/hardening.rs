//! Hostile input and interrupted runs: every out-of-range value is refused with file, line and
//! field and exit code 2; output folders always hold exactly one whole run; summary rows line
//! up; the wall-clock budget ends a run cleanly. The ranges are the common-practice bounds of
//! `network::limits`.

use std::path::Path;
use std::process::{Command, Stdio};
use std::time::Duration;

use kinequil::Network;

use crate::util::{kinequil, write_case, ISOMERISATION};

fn one_step(species: &str, step: &str) -> String {
    format!("[species]\n{species}\n\n[[reaction]]\n{step}\n")
}

#[test]
fn out_of_range_values_are_refused_with_line_and_field() {
    let dir = tempfile::tempdir().unwrap();
    let ab = "A = 1.0\nB = 0.0";
    let cases = [
        // (file text, expected line, expected field, words of the message)
        (
            one_step(
                ab,
                "scheme = \"1000000000000000000000000000000A <=> B\"\nkf = 1\nkr = 1",
            ),
            6,
            "reaction[1].scheme",
            "coefficient",
        ),
        (
            one_step("A = 1e308\nB = 0.0", "scheme = \"A <=> B\"\nkf = 1\nkr = 1"),
            2,
            "species.A",
            "denser",
        ),
        (
            one_step("A = 4.9e-324\nB = 0.0", "scheme = \"A <=> B\"\nkf = 1\nkr = 1"),
            2,
            "species.A",
            "write 0",
        ),
        (
            one_step(ab, "scheme = \"A <=> B\"\nkf = { A = 1e300, Ea = 10 }\nkr = 1"),
            7,
            "reaction[1].kf",
            "outside",
        ),
        (
            one_step(ab, "scheme = \"A <=> B\"\nkf = 1\nK = { dH = -5000, dS = 0 }"),
            8,
            "reaction[1].K",
            "overflow",
        ),
        (
            one_step(ab, "scheme = \"A <=> B\"\nkf = 1\nK = { dH = 5000, dS = 0 }"),
            8,
            "reaction[1].K",
            "underflow",
        ),
        (
            one_step(ab, "scheme = \"A <=> B\"\nkf = 1\nkr = 1\norder_in = { A = 20 }"),
            9,
            "reaction[1].order_in.A",
            "order",
        ),
        (
            format!(
                "temperature = 60\n{}",
                one_step(ab, "scheme = \"A <=> B\"\nkf = 1\nkr = 1")
            ),
            1,
            "temperature",
            "write the unit",
        ),
        (
            format!(
                "temperature = \"60 K\"\n{}",
                one_step(ab, "scheme = \"A <=> B\"\nkf = 1\nkr = 1")
            ),
            1,
            "temperature",
            "outside",
        ),
    ];
    for (k, (text, line, field, words)) in cases.iter().enumerate() {
        let case = write_case(dir.path(), &format!("c{k}.toml"), text);
        for command in ["run", "equilibrium", "check"] {
            let out_dir = dir.path().join(format!("o{k}"));
            let out = kinequil(&[command, &case, "--out", out_dir.to_str().unwrap()]);
            let out = if command == "run" {
                out
            } else {
                kinequil(&[command, &case])
            };
            let stderr = String::from_utf8_lossy(&out.stderr);
            assert_eq!(out.status.code(), Some(2), "{command} {text}\n{stderr}");
            let expected = format!("c{k}.toml, line {line}, field `{field}`:");
            assert!(stderr.contains(&expected), "{expected}\n{stderr}");
            assert!(stderr.contains(words), "{words}\n{stderr}");
            let lower = stderr.to_lowercase();
            assert!(
                !lower.contains("nan") && !lower.contains(" inf") && !lower.contains("panicked"),
                "{stderr}"
            );
        }
    }
}

#[test]
fn the_library_checks_a_temperature_override() {
    let text = one_step("A = 1.0\nB = 0.0", "scheme = \"A <=> B\"\nkf = 1\nkr = 1");
    let err = Network::from_text_at(&text, Path::new("t.toml"), Some(60.0)).unwrap_err();
    assert!(err.to_string().contains("60 K is outside"), "{err}");
    assert!(Network::from_text_at(&text, Path::new("t.toml"), Some(333.15)).is_ok());
}

#[test]
fn twenty_thousand_spectators_answer_at_once() {
    // One step among 20 000 species: the species in no step keep their amounts, so the solve
    // and the run do not grow with them (this used to build a dense 20 000² system).
    let mut text = String::from("[species]\n");
    for i in 0..20_000 {
        text += &format!("X{i} = 1.0\n");
    }
    text += "\n[[reaction]]\nscheme = \"X0 <=> X1\"\nkf = 1.0\nkr = 2.0\n";
    let net = Network::from_text(&text, Path::new("many.toml")).unwrap();
    let solved = kinequil::solve_equilibrium(&net, &kinequil::Stoichiometry::new(&net)).unwrap();
    // X0 + X1 = 2 with X1/X0 = 1/2 (K = kf/kr): X0 = 4/3 (by hand), to rounding.
    assert!((solved.concentrations[0] - 4.0 / 3.0).abs() < 1e-12);
    assert_eq!(solved.concentrations[19_999], 1.0);
}

#[test]
fn force_replaces_the_whole_folder_and_foreign_folders_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "ok.toml", ISOMERISATION);
    let out = dir.path().join("run");
    let out_s = out.to_str().unwrap();
    assert!(kinequil(&["run", &case, "--out", out_s, "--times", "0,1"])
        .status
        .success());
    assert!(out.join("table_at_times.csv").exists());
    // Without --force the earlier run is kept; with it, nothing of the earlier run remains.
    assert_eq!(kinequil(&["run", &case, "--out", out_s]).status.code(), Some(2));
    assert!(kinequil(&["run", &case, "--out", out_s, "--force"])
        .status
        .success());
    assert!(
        !out.join("table_at_times.csv").exists(),
        "a stale file of the earlier run remains"
    );
    assert!(out.join("summary.json").exists());
    // No staging or set-aside folders are left beside it.
    let leftovers: Vec<String> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.contains("kinequil-"))
        .collect();
    assert!(leftovers.is_empty(), "{leftovers:?}");
    // A folder with someone else's files is never replaced, even with --force.
    let mine = dir.path().join("mine");
    std::fs::create_dir(&mine).unwrap();
    std::fs::write(mine.join("notes.txt"), "keep").unwrap();
    let refused = kinequil(&["run", &case, "--out", mine.to_str().unwrap(), "--force"]);
    assert_eq!(refused.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&refused.stderr).contains("notes.txt"));
    assert_eq!(std::fs::read_to_string(mine.join("notes.txt")).unwrap(), "keep");
}

/// A network large enough that a run takes a noticeable time (seeded chain of 400 species).
fn slow_case() -> String {
    let n = 400;
    let mut text = String::from("[species]\n");
    for i in 0..n {
        text += &format!("S{i} = {}\n", if i == 0 { 1.0 } else { 0.0 });
    }
    for i in 0..n - 1 {
        text += &format!(
            "\n[[reaction]]\nscheme = \"S{i} <=> S{}\"\nkf = {:e}\nkr = {:e}\n",
            i + 1,
            1.0 + (i % 7) as f64,
            0.5 + (i % 5) as f64
        );
    }
    text
}

#[test]
fn a_run_killed_midway_leaves_one_whole_run() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "slow.toml", &slow_case());
    let out = dir.path().join("run");
    let out_s = out.to_str().unwrap().to_string();
    assert!(kinequil(&["run", &case, "--out", &out_s, "--times", "0,1"])
        .status
        .success());
    let first = std::fs::read_to_string(out.join("summary.json")).unwrap();
    let first_files = std::fs::read_dir(&out).unwrap().count();
    // Kill forced re-runs at increasing delays; after each, the folder holds either the earlier
    // run whole (same summary, same files) or a later run whole (no table_at_times.csv).
    for delay_ms in [5u64, 40, 120, 300, 700, 1500] {
        let mut child = Command::new(env!("CARGO_BIN_EXE_kinequil"))
            .args(["run", &case, "--out", &out_s, "--force"])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_millis(delay_ms));
        let _ = child.kill();
        let _ = child.wait();
        let summary = std::fs::read_to_string(out.join("summary.json")).expect("a summary is there");
        serde_json::from_str::<serde_json::Value>(&summary).expect("the summary is whole");
        let files = std::fs::read_dir(&out).unwrap().count();
        let old = summary == first && files == first_files;
        let new = !out.join("table_at_times.csv").exists() && files == first_files - 1;
        assert!(
            old || new,
            "after {delay_ms} ms: a folder mixing runs ({files} files)"
        );
    }
}

#[test]
fn summary_rows_keep_their_columns() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "ok.toml", ISOMERISATION);
    let header = |extra: &[&str], name: &str| {
        let out = dir.path().join(name);
        let mut args = vec!["run", &case, "--out", out.to_str().unwrap()];
        args.extend_from_slice(extra);
        assert!(kinequil(&args).status.success());
        let text = std::fs::read_to_string(out.join("summary_row.csv")).unwrap();
        text.lines().next().unwrap().to_string()
    };
    assert_eq!(header(&[], "a"), header(&["--tol", "0.05"], "b"));
    // A network with no equilibrium has the same columns as one with.
    let feed = write_case(
        dir.path(),
        "feed.toml",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A => B\"\nkf = 2.0\n",
    );
    let out = dir.path().join("c");
    assert!(kinequil(&["run", &feed, "--out", out.to_str().unwrap()])
        .status
        .success());
    let text = std::fs::read_to_string(out.join("summary_row.csv")).unwrap();
    let columns = |h: &str| h.split(',').count();
    assert_eq!(columns(text.lines().next().unwrap()), columns(&header(&[], "d")));
}

#[test]
fn the_time_budget_ends_a_run_cleanly() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "slow.toml", &slow_case());
    let out = dir.path().join("run");
    let run = kinequil(&[
        "run",
        &case,
        "--out",
        out.to_str().unwrap(),
        "--max-seconds",
        "0.001",
    ]);
    assert!(run.status.success(), "{}", String::from_utf8_lossy(&run.stderr));
    assert!(String::from_utf8_lossy(&run.stdout).contains("--max-seconds"));
    assert!(out.join("summary.json").exists());
}

#[test]
fn leftovers_of_a_killed_swap_are_put_right() {
    // A run killed between setting the earlier run aside and renaming the new one in leaves
    // `.run.kinequil-old-PID` and perhaps `.run.kinequil-new-PID` beside a missing `run`. The next
    // run puts the earlier results back (and so refuses without --force) and removes the
    // half-built folder. PID 4194303 stands for a process that is gone.
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "ok.toml", ISOMERISATION);
    let aside = dir.path().join(".run.kinequil-old-4194303");
    let half = dir.path().join(".run.kinequil-new-4194303");
    std::fs::create_dir(&aside).unwrap();
    std::fs::write(aside.join("summary.json"), "{\"earlier\": true}").unwrap();
    std::fs::create_dir(&half).unwrap();
    std::fs::write(half.join("summary.json"), "{\"half\"").unwrap();
    let out = dir.path().join("run");
    let refused = kinequil(&["run", &case, "--out", out.to_str().unwrap()]);
    assert_eq!(
        refused.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&refused.stderr)
    );
    assert_eq!(
        std::fs::read_to_string(out.join("summary.json")).unwrap(),
        "{\"earlier\": true}"
    );
    assert!(!aside.exists() && !half.exists());
}
