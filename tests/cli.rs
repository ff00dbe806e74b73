//! The binary as a user meets it: exit codes, messages and the files a run writes.

use crate::util::{kinequil, write_case, ISOMERISATION};

const GOOD: &str = ISOMERISATION;

#[test]
fn bad_input_exits_2_naming_file_line_and_field() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(
        dir.path(),
        "bad.toml",
        "[species]\nA = 1.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 1\nkr = 1\n",
    );
    let out = kinequil(&["run", &case, "--out", dir.path().join("o").to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr.contains("bad.toml, line 5, field `reaction[1].scheme`: unknown species `B`"),
        "{stderr}"
    );
    assert!(!stderr.contains("panicked"));
    assert!(!dir.path().join("o").exists(), "nothing is written for bad input");
}

#[test]
fn missing_file_and_bad_options_exit_2() {
    let out = kinequil(&["run", "/no/such/case.toml"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("/no/such/case.toml"));
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "ok.toml", GOOD);
    for bad in [
        ["--tol", "1.5"],
        ["--rtol", "0"],
        ["--until", "-3"],
        ["--atol", "nan"],
        ["--threads", "0"],
    ] {
        let out = kinequil(&[
            "run",
            &case,
            "--out",
            dir.path().join("o").to_str().unwrap(),
            bad[0],
            bad[1],
        ]);
        assert_eq!(
            out.status.code(),
            Some(2),
            "{bad:?}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
}

#[test]
fn a_run_writes_all_outputs_and_never_overwrites_silently() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "ab.toml", GOOD);
    let out_dir = dir.path().join("results");
    let out_str = out_dir.to_str().unwrap();
    let out = kinequil(&["run", &case, "--out", out_str, "--tol", "0.05"]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let stdout = String::from_utf8_lossy(&out.stdout);
    for phrase in [
        "time to equilibrium",
        "within      5%",
        "A + B",
        "RODAS4",
        "Cautions",
        "process-safety review",
    ] {
        assert!(
            stdout.contains(phrase),
            "terminal summary lacks `{phrase}`:\n{stdout}"
        );
    }

    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out_dir.join("summary.json")).unwrap()).unwrap();
    for key in [
        "final_time",
        "final",
        "time_to_equilibrium",
        "conservation",
        "solver",
        "cautions",
    ] {
        assert!(summary.get(key).is_some(), "summary.json lacks {key}");
    }
    for key in ["method", "steps", "rhs_evals", "jacobian_evals", "seconds"] {
        assert!(summary["solver"].get(key).is_some(), "solver lacks {key}");
    }
    let ttes = summary["time_to_equilibrium"].as_array().unwrap();
    assert_eq!(ttes.len(), 4);
    // 1 % of the total change for A <=> B with kf + kr = 3 /s: ln(100)/3 s (textbook closed form).
    let one_percent = ttes.iter().find(|t| t["tolerance"] == 0.01).unwrap()["seconds"]
        .as_f64()
        .unwrap();
    assert!((one_percent - 100f64.ln() / 3.0).abs() < 2e-3 * one_percent);
    assert!((summary["final"]["A"].as_f64().unwrap() - 1.0 / 3.0).abs() < 1e-5);
    // Solved directly: A = 1/3 exactly (K = 2); the one relaxation time is 1/(kf + kr) = 1/3 s.
    assert!((summary["equilibrium"]["A"].as_f64().unwrap() - 1.0 / 3.0).abs() < 1e-12);
    assert_eq!(summary["routes_agree"], serde_json::Value::Bool(true));
    let tau = summary["relaxation"][0]["tau_seconds"].as_f64().unwrap();
    assert!((tau - 1.0 / 3.0).abs() < 1e-12);

    let csv = std::fs::read_to_string(out_dir.join("trajectory.csv")).unwrap();
    let mut lines = csv.lines();
    assert_eq!(lines.next(), Some("time [s],A [mol/L],B [mol/L]"));
    assert!(lines.count() > 200, "too few rows to draw smooth curves");

    let svg = std::fs::read_to_string(out_dir.join("concentrations.svg")).unwrap();
    assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"));
    assert!(svg.contains("concentration [mol/L]"));
    let png = std::fs::File::open(out_dir.join("concentrations.png")).unwrap();
    let mut reader = png::Decoder::new(std::io::BufReader::new(png))
        .read_info()
        .unwrap();
    let mut pixels = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut pixels).unwrap();
    assert_eq!((info.width, info.height), (1000, 620));
    let distinct: std::collections::HashSet<&[u8]> = pixels.chunks(3).collect();
    assert!(distinct.len() > 20, "the PNG looks blank");

    // A second run into the same folder is refused and leaves the files as they were.
    let before = std::fs::read(out_dir.join("summary.json")).unwrap();
    let again = kinequil(&["run", &case, "--out", out_str, "--until", "1.0"]);
    assert_eq!(again.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&again.stderr).contains("--force"));
    assert_eq!(std::fs::read(out_dir.join("summary.json")).unwrap(), before);

    // With --force the results are replaced, whole.
    let forced = kinequil(&["run", &case, "--out", out_str, "--until", "1.0", "--force"]);
    assert_eq!(forced.status.code(), Some(0));
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out_dir.join("summary.json")).unwrap()).unwrap();
    assert_eq!(summary["final_time"].as_f64(), Some(1.0));
    // A at t = 1 s: 1/3 + 2/3 e^-3 (closed form); 1e-6 covers rtol 1e-6.
    let a1 = 1.0 / 3.0 + 2.0 / 3.0 * (-3.0f64).exp();
    assert!((summary["final"]["A"].as_f64().unwrap() - a1).abs() < 1e-6);
    let leftovers: Vec<_> = std::fs::read_dir(&out_dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|name| name.starts_with('.') && name != kinequil::RUN_MARKER)
        .collect();
    assert!(leftovers.is_empty(), "staging folder left behind: {leftovers:?}");
}

#[test]
fn equilibrium_command_reports_composition_extents_and_conversion() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "ab.toml", GOOD);
    let out = kinequil(&["equilibrium", &case]);
    assert_eq!(out.status.code(), Some(0));
    let text = String::from_utf8_lossy(&out.stdout);
    // A <=> B with K = 2 from A = 1: A = 1/3, extent 2/3, conversion of A 66.67 %.
    for phrase in [
        "0.3333333",
        "0.6666667",
        "66.67%",
        "extent of reaction",
        "Cautions",
    ] {
        assert!(text.contains(phrase), "`{phrase}` missing:\n{text}");
    }
    let json = kinequil(&["equilibrium", &case, "--json"]);
    let value: serde_json::Value = serde_json::from_slice(&json.stdout).unwrap();
    assert!((value["reactions"][0]["extent"].as_f64().unwrap() - 2.0 / 3.0).abs() < 1e-12);

    let one_way = write_case(
        dir.path(),
        "oneway.toml",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A => B\"\nkf = 1.0\n",
    );
    let out = kinequil(&["equilibrium", &one_way]);
    assert_eq!(out.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no equilibrium exists"));
}

#[test]
fn check_exits_0_1_2_and_writes_corrections_to_a_new_file() {
    let dir = tempfile::tempdir().unwrap();
    let consistent = write_case(dir.path(), "ok.toml", GOOD);
    let out = kinequil(&["check", &consistent]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stdout)
    );
    assert!(String::from_utf8_lossy(&out.stdout).contains("CONSISTENT"));

    let cycle = "[species]\nA = 1.0\nB = 0.0\nC = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 1.0\nkr = 0.5\n\n\
                 [[reaction]]\nscheme = \"B <=> C\"\nkf = 1.0\nK = 1.0\n\n[[reaction]]\nscheme = \"C <=> A\"\nkf = 1.0\nkr = 1.0\n";
    let broken = write_case(dir.path(), "cycle.toml", cycle);
    let out = kinequil(&["check", &broken, "--json"]);
    assert_eq!(out.status.code(), Some(1));
    let report: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    // Per step: kf/kr, the first independent K and its deviation (null here: step 2's K only
    // defines kr), every reference, and the implied units.
    for key in [
        "kf_over_kr",
        "K",
        "deviation_kj_per_mol",
        "references",
        "kf_units",
    ] {
        assert!(report["steps"][0].get(key).is_some(), "step lacks {key}");
    }
    assert!(report["steps"][1]["references"][0]
        .get("deviation_kj_per_mol")
        .is_some());
    assert!(report["steps"][1]["references"][0].get("K").is_some());
    assert_eq!(report["cycles"][0]["steps"].as_array().unwrap().len(), 3);
    assert!(report["correction"]["steps"].as_array().is_some());

    let fixed = dir.path().join("fixed.toml");
    let fixed_str = fixed.to_str().unwrap();
    let before = std::fs::read_to_string(&broken).unwrap();
    let out = kinequil(&["check", &broken, "--write-corrected", fixed_str]);
    assert_eq!(out.status.code(), Some(1), "the original is still inconsistent");
    assert_eq!(
        std::fs::read_to_string(&broken).unwrap(),
        before,
        "the original is untouched"
    );
    let out = kinequil(&["check", fixed_str]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stdout)
    );
    // Writing again is refused without --force.
    let out = kinequil(&["check", &broken, "--write-corrected", fixed_str]);
    assert_eq!(out.status.code(), Some(2));

    let bad = write_case(dir.path(), "bad.toml", "[species]\nA = 1.0\n");
    assert_eq!(kinequil(&["check", &bad]).status.code(), Some(2));
}
