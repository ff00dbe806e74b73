//! Reports: the JSON summary, CSV tables, charts and the terminal summary, and the one place
//! that writes files. Outputs are staged in a temporary folder and moved into place only when
//! every file has been written, so a run leaves all of its files or none; earlier results are
//! never replaced without `--force`.

pub mod audit_table;
pub mod chart;
pub mod equilibrium_table;
pub mod summary;
pub mod table;
pub mod terminal;

use std::fs;
use std::path::{Path, PathBuf};

use crate::error::Error;
use crate::run::RunResult;

pub use crate::CAUTIONS;

/// Names of the files a run writes.
pub const RUN_FILES: [&str; 4] = [
    "summary.json",
    "trajectory.csv",
    "concentrations.svg",
    "concentrations.png",
];

/// Renders every output of a run in memory: (file name, contents).
pub fn render_run(result: &RunResult) -> Result<Vec<(String, Vec<u8>)>, Error> {
    let summary = summary::Summary::from_result(result);
    let json = serde_json::to_string_pretty(&summary).map_err(|e| Error::Write {
        path: "summary.json".into(),
        message: e.to_string(),
    })?;
    let (svg, png) = chart::concentrations(result).map_err(|message| Error::Write {
        path: "concentrations".into(),
        message,
    })?;
    Ok(vec![
        ("summary.json".into(), (json + "\n").into_bytes()),
        (
            "trajectory.csv".into(),
            table::trajectory_csv(result).into_bytes(),
        ),
        ("concentrations.svg".into(), svg.into_bytes()),
        ("concentrations.png".into(), png),
    ])
}

/// Writes one new file whole (temporary file, then rename); refuses to replace an existing file
/// unless `force`.
pub fn write_new_file(path: &Path, bytes: &[u8], force: bool) -> Result<(), Error> {
    if path.exists() && !force {
        return Err(Error::OutputExists {
            path: path.to_path_buf(),
            existing: "the file exists".into(),
        });
    }
    let write_error = |e: std::io::Error| Error::Write {
        path: path.to_path_buf(),
        message: e.to_string(),
    };
    let dir = path
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let temporary = dir.join(format!(".{name}.kinequil-{}", std::process::id()));
    fs::write(&temporary, bytes).map_err(write_error)?;
    fs::rename(&temporary, path).map_err(|e| {
        let _ = fs::remove_file(&temporary);
        write_error(e)
    })
}

/// Writes the files into `dir` all together: staged in a hidden folder inside `dir`, then
/// renamed into place. Refuses when any of them exists already unless `force`.
pub fn write_all(dir: &Path, files: &[(String, Vec<u8>)], force: bool) -> Result<Vec<PathBuf>, Error> {
    let write_error = |path: &Path, e: std::io::Error| Error::Write {
        path: path.to_path_buf(),
        message: e.to_string(),
    };
    let existing: Vec<&str> = files
        .iter()
        .filter(|(name, _)| dir.join(name).exists())
        .map(|(name, _)| name.as_str())
        .collect();
    if !existing.is_empty() && !force {
        return Err(Error::OutputExists {
            path: dir.to_path_buf(),
            existing: existing.join(", "),
        });
    }
    fs::create_dir_all(dir).map_err(|e| write_error(dir, e))?;
    let staging = dir.join(format!(".kinequil-staging-{}", std::process::id()));
    let staged = (|| -> Result<(), Error> {
        fs::create_dir_all(&staging).map_err(|e| write_error(&staging, e))?;
        for (name, bytes) in files {
            let path = staging.join(name);
            fs::write(&path, bytes).map_err(|e| write_error(&path, e))?;
        }
        Ok(())
    })();
    if let Err(e) = staged {
        let _ = fs::remove_dir_all(&staging);
        return Err(e);
    }
    let mut written = Vec::new();
    for (name, _) in files {
        let target = dir.join(name);
        if let Err(e) = fs::rename(staging.join(name), &target) {
            let _ = fs::remove_dir_all(&staging);
            return Err(write_error(&target, e));
        }
        written.push(target);
    }
    let _ = fs::remove_dir_all(&staging);
    Ok(written)
}

/// Seconds with a friendlier unit beside them when the number is large.
pub fn format_duration(seconds: f64) -> String {
    let friendly = if seconds >= 86_400.0 * 2.0 {
        format!(" ({:.2} d)", seconds / 86_400.0)
    } else if seconds >= 3600.0 {
        format!(" ({:.2} h)", seconds / 3600.0)
    } else if seconds >= 120.0 {
        format!(" ({:.1} min)", seconds / 60.0)
    } else {
        String::new()
    };
    format!("{} s{friendly}", significant(seconds))
}

/// Four significant figures, fixed or scientific as fits.
pub fn significant(x: f64) -> String {
    with_digits(x, 4)
}

/// `digits` significant figures: fixed notation between 1e-3 and 1e6, otherwise scientific with
/// a signed two-digit exponent (2.083340e-08), which lines up in columns.
pub fn with_digits(x: f64, digits: usize) -> String {
    if x == 0.0 {
        return "0".into();
    }
    if x.abs() >= 1e6 || x.abs() < 1e-3 {
        let text = format!("{x:.prec$e}", prec = digits - 1);
        let (mantissa, exponent) = text.split_once('e').unwrap_or((&text, "0"));
        let exponent: i32 = exponent.parse().unwrap_or(0);
        let sign = if exponent < 0 { '-' } else { '+' };
        format!("{mantissa}e{sign}{:02}", exponent.abs())
    } else {
        let decimals = (digits as i32 - 1 - x.abs().log10().floor() as i32).max(0) as usize;
        format!("{x:.decimals$}")
    }
}
