//! Helpers shared by the integration tests.

use std::path::Path;
use std::process::{Command, Output};

use kinequil::Network;
use kinequil::{run, RunResult, RunSettings};

/// A <=> B with kf = 2 and kr = 1 from A = 1: the smallest complete network, for tests of the
/// command line and the output folders (closed form: A = 1/3 + 2/3 e^(−3t)).
pub const ISOMERISATION: &str =
    "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 2.0\nkr = 1.0\n";

/// Parses network text as if it came from `inline.toml`.
pub fn network(text: &str) -> Network {
    Network::from_text(text, Path::new("inline.toml")).unwrap_or_else(|e| panic!("test network invalid: {e}"))
}

/// Runs a network with the given tolerances.
pub fn run_with(text: &str, rtol: f64, atol: f64, until: Option<f64>) -> RunResult {
    let settings = RunSettings {
        rtol,
        atol,
        until,
        ..RunSettings::default()
    };
    run(network(text), &settings).expect("run succeeds")
}

/// |a - b| / |b|.
pub fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

/// A small seeded generator (SplitMix64) so random tests are reproducible without a crate.
pub struct SplitMix(pub u64);

impl SplitMix {
    pub fn next_f64(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        (z >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// Runs the binary with these arguments.
pub fn kinequil(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_kinequil"))
        .args(args)
        .output()
        .expect("binary runs")
}

/// Runs the binary, asserts that it succeeded (showing its error output if not) and returns
/// what it printed.
pub fn kinequil_ok(args: &[&str]) -> String {
    let out = kinequil(args);
    assert!(
        out.status.success(),
        "{args:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

/// Writes a network file into `dir` and returns its path as a string.
pub fn write_case(dir: &Path, name: &str, text: &str) -> String {
    let path = dir.join(name);
    std::fs::write(&path, text).unwrap();
    path.to_string_lossy().into_owned()
}
