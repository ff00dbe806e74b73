//! Reports: the JSON summary, CSV tables, charts and the terminal summary, and the one place
//! that writes files. Outputs are staged in a temporary folder and moved into place only when
//! every file has been written, so a run leaves all of its files or none; earlier results are
//! never replaced without `--force`.

pub mod audit_table;
pub mod chart;
pub mod equilibrium_table;
pub mod figure;
pub mod html;
mod raster;
pub mod sensitivity;
pub mod study;
pub mod summary;
pub mod table;
pub mod terminal;

use rayon::prelude::*;
use std::fs;
use std::path::{Path, PathBuf};

use crate::error::Error;
use crate::run::RunResult;

pub use crate::CAUTIONS;

/// Names of every file a run may write (the approach and Q/K charts and the table at the
/// user's times are written only when they apply).
pub const RUN_FILES: [&str; 16] = [
    "summary.json",
    "trajectory.csv",
    "rates.csv",
    "summary_row.csv",
    "table_at_times.csv",
    "concentrations.svg",
    "concentrations.png",
    "approach.svg",
    "approach.png",
    "rates.svg",
    "rates.png",
    "quotients.svg",
    "quotients.png",
    "pressures.svg",
    "pressures.png",
    "report.html",
];

impl RunResult {
    /// A time for people: in the chosen time unit, or in seconds with a friendlier unit beside
    /// when the unit is the default.
    pub fn time_text(&self, seconds: f64) -> String {
        let unit = self.settings.units.time;
        if unit == crate::units::TimeUnit::S {
            crate::format::format_duration(seconds)
        } else {
            terminal_time(seconds, unit)
        }
    }
}

/// SHA-256 of the input text, as lowercase hex.
pub fn sha256_hex(text: &str) -> String {
    use sha2::Digest;
    sha2::Sha256::digest(text.as_bytes())
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// The current UTC date and time, `YYYY-MM-DD HH:MM UTC`.
pub fn utc_now() -> String {
    let seconds = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_secs()) as i64;
    let (days, rest) = (seconds.div_euclid(86_400), seconds.rem_euclid(86_400));
    // Civil date from days since 1970-01-01 (H. Hinnant's days_from_civil, inverted).
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    let year = yoe + era * 400 + i64::from(month <= 2);
    format!(
        "{year:04}-{month:02}-{day:02} {:02}:{:02} UTC",
        rest / 3600,
        (rest % 3600) / 60
    )
}

/// The contents of an output file: bytes, or a table written row by row straight into the new
/// folder (the trajectory of thousands of species runs to hundreds of MB).
pub enum Content<'a> {
    Bytes(Vec<u8>),
    Stream(Box<Writer<'a>>),
}

/// Writes a file's contents into an open file.
pub type Writer<'a> = dyn Fn(&mut dyn std::io::Write) -> std::io::Result<()> + 'a;

impl From<Vec<u8>> for Content<'_> {
    fn from(bytes: Vec<u8>) -> Self {
        Content::Bytes(bytes)
    }
}

/// Files as bytes, as [`write_all`] takes them.
pub fn as_contents(files: Vec<(String, Vec<u8>)>) -> Vec<(String, Content<'static>)> {
    files
        .into_iter()
        .map(|(name, bytes)| (name, Content::Bytes(bytes)))
        .collect()
}

/// Renders every output of a run: (file name, contents); the trajectory table is streamed when
/// written.
pub fn render_run<'a>(
    result: &'a RunResult,
    chart_options: &chart::ChartOptions,
) -> Result<Vec<(String, Content<'a>)>, Error> {
    let render_error = |name: &str, message: String| Error::Compose {
        what: name.into(),
        message,
    };
    let summary = summary::Summary::from_result(result);
    let json =
        serde_json::to_string_pretty(&summary).map_err(|e| render_error("summary.json", e.to_string()))?;
    let sha = sha256_hex(&result.network.source_text);
    let mut files: Vec<(String, Content<'a>)> = vec![
        ("summary.json".into(), (json + "\n").into_bytes().into()),
        (
            "trajectory.csv".into(),
            Content::Stream(Box::new(move |out| table::write_trajectory_csv(result, out))),
        ),
        (
            "rates.csv".into(),
            Content::Stream(Box::new(move |out| table::write_rates_csv(result, out))),
        ),
        (
            "summary_row.csv".into(),
            table::summary_row_csv(result, &sha).into_bytes().into(),
        ),
    ];
    if !result.settings.output_times.is_empty() {
        files.push((
            "table_at_times.csv".into(),
            table::times_csv(result).into_bytes().into(),
        ));
    }
    let mut charts = Vec::new();
    let figs = chart::figures(result, chart_options);
    // Each figure is drawn twice (SVG and PNG), independently of the others: side by side.
    let rendered: Vec<_> = figs
        .par_iter()
        .map(|(stem, figure)| figure.render().map_err(|m| render_error(stem, m)))
        .collect::<Result<_, _>>()?;
    for ((stem, figure), (svg, png)) in figs.into_iter().zip(rendered) {
        charts.push((figure.title.clone(), svg.clone()));
        files.push((format!("{stem}.svg"), svg.into_bytes().into()));
        files.push((format!("{stem}.png"), png.into()));
    }
    let mut names: Vec<String> = files.iter().map(|(n, _)| n.clone()).collect();
    names.push("report.html".into());
    let inputs = html::ReportInputs {
        input_sha256: &sha,
        date: &utc_now(),
        charts: &charts,
        files: &names,
    };
    files.push((
        "report.html".into(),
        html::render(result, &inputs).into_bytes().into(),
    ));
    Ok(files)
}

/// Fails with [`Error::OutputExists`] when any of `names` is already in `dir`.
pub fn refuse_existing<'a>(dir: &Path, names: impl IntoIterator<Item = &'a str>) -> Result<(), Error> {
    let existing: Vec<&str> = names.into_iter().filter(|name| dir.join(name).exists()).collect();
    if existing.is_empty() {
        Ok(())
    } else {
        Err(Error::OutputExists {
            path: dir.to_path_buf(),
            existing: existing.join(", "),
        })
    }
}

/// Writes one new file whole (temporary file, then rename); refuses to replace an existing file
/// unless `force`.
pub fn write_new_file(path: &Path, bytes: &[u8], force: bool) -> Result<(), Error> {
    if path.exists() && !force {
        return Err(Error::FileExists {
            path: path.to_path_buf(),
        });
    }
    let write_error = |e: std::io::Error| Error::Write {
        path: path.to_path_buf(),
        source: e,
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

/// Marks a folder as a kinequil run folder, so `--force` may replace it whole.
pub const RUN_MARKER: &str = ".kinequil-run";

/// Writes a run's files as one folder `dir`, whole or not at all: the complete new folder is
/// built beside `dir` (hidden), then renamed into place; an earlier run in `dir` is renamed aside
/// first and removed after, so `dir` always holds exactly one run and `--force` leaves no file
/// of the earlier one. Refuses when `dir` holds results unless `force`, and always refuses to
/// replace a folder holding files kinequil did not write.
pub fn write_all(dir: &Path, files: &[(String, Content<'_>)], force: bool) -> Result<Vec<PathBuf>, Error> {
    let write_error = |path: &Path, e: std::io::Error| Error::Write {
        path: path.to_path_buf(),
        source: e,
    };
    recover_interrupted(dir);
    let exists = dir.exists();
    if exists {
        if !force {
            refuse_existing(dir, files.iter().map(|(name, _)| name.as_str()))?;
        }
        refuse_foreign(dir)?;
    }
    let name = dir
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .ok_or_else(|| Error::Option {
            option: "--out".into(),
            message: format!("{} is not a folder of its own (not `.` or `/`)", dir.display()),
        })?;
    let parent = dir
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    fs::create_dir_all(parent).map_err(|e| write_error(parent, e))?;
    let staging = parent.join(format!(".{name}.kinequil-new-{}", std::process::id()));
    let staged = (|| -> Result<(), Error> {
        fs::create_dir_all(&staging).map_err(|e| write_error(&staging, e))?;
        // One file at a time: the large tables are formatted side by side within themselves,
        // and writing files side by side as well would add their buffers to the run's peak.
        for (file, content) in files {
            let path = staging.join(file);
            match content {
                Content::Bytes(bytes) => fs::write(&path, bytes),
                Content::Stream(write) => fs::File::create(&path).and_then(|file| {
                    let mut out = std::io::BufWriter::new(file);
                    write(&mut out)?;
                    std::io::Write::flush(&mut out)
                }),
            }
            .map_err(|e| write_error(&path, e))?;
        }
        let marker = staging.join(RUN_MARKER);
        fs::write(
            &marker,
            b"written by kinequil; --force may replace this folder whole\n",
        )
        .map_err(|e| write_error(&marker, e))
    })();
    if let Err(e) = staged {
        let _ = fs::remove_dir_all(&staging);
        return Err(e);
    }
    let aside = parent.join(format!(".{name}.kinequil-old-{}", std::process::id()));
    if exists {
        if let Err(e) = fs::rename(dir, &aside) {
            let _ = fs::remove_dir_all(&staging);
            return Err(write_error(dir, e));
        }
    }
    if let Err(e) = fs::rename(&staging, dir) {
        if exists {
            let _ = fs::rename(&aside, dir);
        }
        let _ = fs::remove_dir_all(&staging);
        return Err(write_error(dir, e));
    }
    if exists {
        let _ = fs::remove_dir_all(&aside);
    }
    Ok(files.iter().map(|(file, _)| dir.join(file)).collect())
}

/// Undoes what a run killed while swapping its folder in left beside `dir`: an earlier run set
/// aside is put back when `dir` is missing (else removed), and half-built folders are removed.
/// Only leftovers of processes that are gone are touched (where /proc tells; elsewhere none).
pub fn recover_interrupted(dir: &Path) {
    let Some(name) = dir.file_name().map(|n| n.to_string_lossy().into_owned()) else {
        return;
    };
    let parent = dir
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let Ok(entries) = fs::read_dir(parent) else {
        return;
    };
    let gone = |pid: u32| {
        let proc_fs = Path::new("/proc/self").exists();
        proc_fs && pid != std::process::id() && !Path::new(&format!("/proc/{pid}")).exists()
    };
    for entry in entries.filter_map(|e| e.ok()) {
        let file = entry.file_name().to_string_lossy().into_owned();
        for (kind, restore) in [("old", true), ("new", false)] {
            let prefix = format!(".{name}.kinequil-{kind}-");
            let Some(pid) = file.strip_prefix(&prefix).and_then(|p| p.parse::<u32>().ok()) else {
                continue;
            };
            if !gone(pid) {
                continue;
            }
            let path = entry.path();
            if restore && !dir.exists() {
                let _ = fs::rename(&path, dir);
            } else {
                let _ = fs::remove_dir_all(&path);
            }
        }
    }
}

/// Refuses to replace a folder that holds anything but kinequil's own run files.
pub fn refuse_foreign(dir: &Path) -> Result<(), Error> {
    if !dir.exists() {
        return Ok(());
    }
    let entries = fs::read_dir(dir).map_err(|source| Error::Write {
        path: dir.to_path_buf(),
        source,
    })?;
    let foreign: Vec<String> = entries
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| {
            n != RUN_MARKER
                && !RUN_FILES.contains(&n.as_str())
                && !study::STUDY_FILES.contains(&n.as_str())
                && !sensitivity::SENSITIVITY_FILES.contains(&n.as_str())
        })
        .collect();
    if foreign.is_empty() {
        Ok(())
    } else {
        Err(Error::Option {
            option: "--out".into(),
            message: format!(
                "{} holds files kinequil did not write ({}); a run is written as a folder of its own: choose a new one",
                dir.display(),
                foreign.join(", ")
            ),
        })
    }
}

/// The closing lines of a command's terminal text: the files written and the cautions.
pub fn files_and_cautions(written: &[PathBuf]) -> String {
    let mut t = String::from("files:\n");
    for path in written {
        t += &format!("  {}\n", path.display());
    }
    t += "cautions:\n";
    for c in CAUTIONS {
        t += &format!("  - {c}\n");
    }
    t
}

/// Seconds with a friendlier unit beside them when the number is large.
pub use crate::format::{format_duration, significant, trim_percent, with_digits};

/// A time in the chosen output unit, four significant figures.
pub fn terminal_time(seconds: f64, unit: crate::units::TimeUnit) -> String {
    format!(
        "{} {}",
        trimmed(significant(seconds / unit.seconds())),
        unit.symbol()
    )
}

/// A fixed-notation number without trailing zeros ("4.000" reads "4", "2.50" reads "2.5").
fn trimmed(text: String) -> String {
    if text.contains('.') && !text.contains('e') {
        text.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        text
    }
}
