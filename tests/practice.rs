//! The practitioner's questions answered as asked: units on every option, verdicts at the hold
//! time, messages that point at the fix.

use crate::util::{kinequil, write_case, ISOMERISATION};

fn stderr_of(args: &[&str]) -> (Option<i32>, String) {
    let out = kinequil(args);
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn a_bare_temperature_is_refused_on_the_command_line_and_below_200_in_a_file() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "c.toml", ISOMERISATION);
    let (code, stderr) = stderr_of(&["equilibrium", &case, "--temperature", "60"]);
    assert_eq!(code, Some(2), "{stderr}");
    assert!(stderr.contains("\"60 degC\" or \"60 K\""), "{stderr}");
    let (code, _) = stderr_of(&["equilibrium", &case, "--temperature", "60 degC"]);
    assert_eq!(code, Some(0));
    let cold = write_case(
        dir.path(),
        "cold.toml",
        &format!("temperature = 25\n{ISOMERISATION}"),
    );
    let (code, stderr) = stderr_of(&["equilibrium", &cold]);
    assert_eq!(code, Some(2));
    assert!(
        stderr.contains("line 1, field `temperature`") && stderr.contains("write the unit"),
        "{stderr}"
    );
    let warm = write_case(
        dir.path(),
        "warm.toml",
        &format!("temperature = 298.15\n{ISOMERISATION}"),
    );
    assert_eq!(
        stderr_of(&["equilibrium", &warm]).0,
        Some(0),
        "a bare 298.15 is plainly kelvin"
    );
}

#[test]
fn until_takes_units_like_the_other_time_options() {
    // A <=> B, kf 2, kr 1 from A = 1: A(t) = 1/3 + 2/3 e^(−3t) (closed form), so the state at
    // 0.01 min = 0.6 s must be the same whichever way the hold time is written.
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "c.toml", ISOMERISATION);
    let mut tables: Vec<f64> = Vec::new();
    for (k, until) in ["0.6", "0.6 s", "0.01 min"].iter().enumerate() {
        let out_dir = dir.path().join(format!("o{k}"));
        let out = kinequil(&["run", &case, "--until", until, "--out", out_dir.to_str().unwrap()]);
        assert_eq!(
            out.status.code(),
            Some(0),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let summary: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(out_dir.join("summary.json")).unwrap()).unwrap();
        assert_eq!(summary["final_time"].as_f64(), Some(0.6));
        let a = summary["final"]["A"].as_f64().expect("A at the hold time");
        // RODAS4 at rtol 1e-6: the closed form within 1e-6 relative.
        let exact = 1.0 / 3.0 + 2.0 / 3.0 * (-3.0_f64 * 0.6).exp();
        assert!((a - exact).abs() < 1e-6 * exact, "{a} vs {exact}");
        tables.push(a);
    }
    assert!(tables.windows(2).all(|w| w[0] == w[1]), "{tables:?}");
    let (code, stderr) = stderr_of(&["run", &case, "--until", "4 kg"]);
    assert_eq!(code, Some(2));
    assert!(stderr.contains("--until"), "{stderr}");
}

#[test]
fn an_unknown_species_or_unit_names_the_nearest_name_and_the_units_known() {
    let dir = tempfile::tempdir().unwrap();
    let text =
        "[species]\nacid = 1.0\nester = 0.0\n\n[[reaction]]\nscheme = \"Acid <=> ester\"\nkf = 1\nkr = 1\n";
    let case = write_case(dir.path(), "typo.toml", text);
    let (code, stderr) = stderr_of(&["check", &case]);
    assert_eq!(code, Some(2));
    assert!(
        stderr.contains("unknown species `Acid`; did you mean `acid`?"),
        "{stderr}"
    );
    let good = write_case(dir.path(), "good.toml", &text.replace("Acid", "acid"));
    let (code, stderr) = stderr_of(&[
        "run",
        &good,
        "--species",
        "estr",
        "--out",
        dir.path().join("o").to_str().unwrap(),
    ]);
    assert_eq!(code, Some(2));
    assert!(stderr.contains("did you mean `ester`?"), "{stderr}");
    // A one-letter slip is not guessed at: any one-letter name is one edit away.
    let (_, stderr) = stderr_of(&[
        "run",
        &good,
        "--species",
        "Q",
        "--out",
        dir.path().join("o").to_str().unwrap(),
    ]);
    assert!(!stderr.contains("did you mean"), "{stderr}");
    let units = write_case(
        dir.path(),
        "units.toml",
        &text.replace("Acid", "acid").replace("kf = 1", "kf = \"1 per/s\""),
    );
    let (code, stderr) = stderr_of(&["check", &units]);
    assert_eq!(code, Some(2));
    assert!(stderr.contains("known units: time s, min, h, d"), "{stderr}");
}

#[test]
fn old_key_names_point_to_the_new_ones() {
    let dir = tempfile::tempdir().unwrap();
    let text = "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nequation = \"A <=> B\"\nkf = 1\nkr = 1\n";
    let case = write_case(dir.path(), "old.toml", text);
    let (code, stderr) = stderr_of(&["check", &case]);
    assert_eq!(code, Some(2));
    assert!(
        stderr.contains("line 6, field `reaction[1].equation`") && stderr.contains("goes under `scheme`"),
        "{stderr}"
    );
}
