//! The documentation's examples stay true: the README's network file and every bundled case
//! parse and run.

use std::path::Path;

use kinequil::Network;
use kinequil::{run, RunSettings};

#[test]
fn readme_network_example_parses_and_runs_clean() {
    let readme = std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("README.md")).unwrap();
    let start = readme.find("```toml\n").expect("README has a TOML example") + "```toml\n".len();
    let end = start + readme[start..].find("```").unwrap();
    let network = Network::from_text(&readme[start..end], Path::new("README.md"))
        .unwrap_or_else(|e| panic!("README example does not parse: {e}"));
    assert_eq!(network.reactions.len(), 2);
    assert!(
        (network.reactions[0].kr - 2.4e-4 / 4.2).abs() < 1e-18,
        "kr = kf / K"
    );
    // A reader copies this example first: it must reach a solved equilibrium that the
    // integration agrees with, and its constants must pass the audit.
    let result = kinequil::run(network, &kinequil::RunSettings::default()).unwrap();
    assert!(result.solved.is_ok(), "{:?}", result.solved);
    assert!(result.disagreement.is_some() && !result.disagrees, "routes agree");
    assert!(result.audit.brief().is_empty(), "{:?}", result.audit.brief());
}

#[test]
fn every_bundled_case_runs_to_a_result() {
    let cases = Path::new(env!("CARGO_MANIFEST_DIR")).join("cases");
    let mut count = 0;
    for entry in std::fs::read_dir(cases).unwrap() {
        let path = entry.unwrap().path();
        if path.extension().is_some_and(|e| e == "toml") {
            let network = Network::from_file(&path).unwrap_or_else(|e| panic!("{e}"));
            let settings = RunSettings {
                until: if network.case_name() == "robertson" {
                    Some(1e11)
                } else {
                    None
                },
                ..RunSettings::default()
            };
            let result = run(network, &settings).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
            assert!(
                result.drift.iter().all(|d| *d < 1e-10),
                "{}: drift {:?}",
                path.display(),
                result.drift
            );
            count += 1;
        }
    }
    assert!(count >= 4, "expected the demo and the example cases");
}

#[test]
fn readme_library_example_is_the_tested_one() {
    // The README's Rust example is run as a doc test in src/lib.rs; this keeps the two the same.
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let readme = std::fs::read_to_string(root.join("README.md")).unwrap();
    let start = readme.find("```rust\n").expect("README has a Rust example") + "```rust\n".len();
    let end = start + readme[start..].find("```").unwrap();
    let lib = std::fs::read_to_string(root.join("src/lib.rs")).unwrap();
    let documented: String = lib
        .lines()
        .filter_map(|l| l.strip_prefix("//!"))
        .map(|l| l.strip_prefix(' ').unwrap_or(l))
        .filter(|l| !l.starts_with('#'))
        .collect::<Vec<_>>()
        .join("\n");
    for line in readme[start..end].lines().filter(|l| !l.trim().is_empty()) {
        assert!(
            documented.contains(line),
            "README line not in the tested example: {line}"
        );
    }
}
