//! The circuit rig's foundation: the user's netlist run through ngspice (the system's `ngspice`
//! binary, in batch mode, as a child process) and its binary raw output read back ([`raw`]).
//!
//! ngspice's exit code is not its verdict (it exits 1 from batch mode whenever a deck has no
//! `.print` line, and 0 after a run that gave up half way): the run is judged by its output text
//! (error lines) and by its raw file (present, whole, finite). A run that outlasts its time limit
//! is killed and said so. Warnings (a singular matrix it worked round, gmin stepping) come back
//! beside the plots, for the result's warnings.

pub mod raw;
pub mod rig;

use crate::error::{Error, Result};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// The environment variable that names the ngspice binary when it is not `ngspice` on the PATH.
pub const BINARY_VAR: &str = "AMPNOTE_NGSPICE";

/// What one ngspice run gave.
#[derive(Debug, Clone)]
pub struct Outcome {
    pub plots: Vec<raw::Plot>,
    /// ngspice's own warnings, one line each, repeats removed.
    pub warnings: Vec<String>,
    /// Wall-clock time of the run.
    pub seconds: f64,
}

impl Outcome {
    /// The first plot whose name starts with `name` (`AC`, `Transient`), or an error naming the
    /// plots there are.
    pub fn plot(&self, name: &str) -> Result<&raw::Plot> {
        self.plots
            .iter()
            .find(|p| p.name.starts_with(name))
            .ok_or_else(|| Error::Spice {
                detail: format!(
                    "ngspice gave no {name} analysis (it gave: {})",
                    self.plots
                        .iter()
                        .map(|p| p.name.as_str())
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            })
    }
}

/// The ngspice binary to run.
pub fn binary() -> PathBuf {
    std::env::var_os(BINARY_VAR)
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from("ngspice"))
}

/// Run `deck` (a whole ngspice input: title line, circuit, analyses, `.end`) in `dir` (the deck,
/// its raw output and its log are written there, and kept for a look when something fails),
/// killing it after `limit`.
pub fn run(deck: &str, dir: &Path, limit: Duration) -> Result<Outcome> {
    run_with(&binary(), deck, dir, limit)
}

/// Whether the ngspice binary ([`binary`]) runs here.
pub fn available() -> bool {
    Command::new(binary())
        .arg("-v")
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|s| s.success())
}

/// The settings ngspice reads before the deck (see [`run_with`]).
const SPICEINIT: &str = "* written by ampnote's circuit rig\nset xtrtol=7\n";

/// [`run`] with a named ngspice binary.
pub fn run_with(bin: &Path, deck: &str, dir: &Path, limit: Duration) -> Result<Outcome> {
    std::fs::create_dir_all(dir).map_err(|source| Error::Write {
        path: dir.to_path_buf(),
        source,
    })?;
    // Absolute: ngspice runs in `dir`, and the deck may name files beside it.
    let dir = &std::fs::canonicalize(dir).map_err(|source| Error::Write {
        path: dir.to_path_buf(),
        source,
    })?;
    let deck_path = dir.join("deck.cir");
    let raw_path = dir.join("out.raw");
    let log_path = dir.join("ngspice.log");
    let write = |p: &Path, text: &[u8]| {
        std::fs::write(p, text).map_err(|source| Error::Write {
            path: p.to_path_buf(),
            source,
        })
    };
    write(&deck_path, deck.as_bytes())?;
    // ngspice reads `.spiceinit` from the folder it runs in. Once an XSPICE device is in the
    // deck (the rig's file source is one) ngspice tightens the truncation-error tolerance trtol
    // to 1; `xtrtol` sets it back to its usual 7 (measured: a tube circuit ran about 3 times
    // faster, with the response unchanged against ngspice's own .ac within 0.003 dB).
    write(&dir.join(".spiceinit"), SPICEINIT.as_bytes())?;
    let _ = std::fs::remove_file(&raw_path);
    let log = std::fs::File::create(&log_path).map_err(|source| Error::Write {
        path: log_path.clone(),
        source,
    })?;
    let log_err = log.try_clone().map_err(|source| Error::Write {
        path: log_path.clone(),
        source,
    })?;
    let started = Instant::now();
    let mut child = Command::new(bin)
        .arg("-b")
        .arg("-r")
        .arg(&raw_path)
        .arg(&deck_path)
        .current_dir(dir)
        .stdin(Stdio::null())
        .stdout(log)
        .stderr(log_err)
        .spawn()
        .map_err(|e| match e.kind() {
            std::io::ErrorKind::NotFound => Error::SpiceMissing {
                binary: bin.display().to_string(),
            },
            _ => Error::Spice {
                detail: format!("ngspice ({}) could not be started: {e}", bin.display()),
            },
        })?;
    loop {
        match child.try_wait() {
            Ok(Some(_)) => break,
            Ok(None) if started.elapsed() >= limit => {
                let _ = child.kill();
                let _ = child.wait();
                return Err(Error::SpiceTimedOut {
                    seconds: limit.as_secs_f64(),
                    deck: deck_path,
                });
            }
            Ok(None) => std::thread::sleep(Duration::from_millis(10)),
            Err(e) => {
                return Err(Error::Spice {
                    detail: format!("waiting for ngspice failed: {e}"),
                })
            }
        }
    }
    let seconds = started.elapsed().as_secs_f64();
    let text = std::fs::read_to_string(&log_path).unwrap_or_default();
    let (errors, warnings) = judge(&text);
    if !errors.is_empty() {
        return Err(Error::Spice {
            detail: format!(
                "ngspice said: {} (the deck and its log are in {})",
                errors.join("; "),
                dir.display()
            ),
        });
    }
    let bytes = std::fs::read(&raw_path).map_err(|_| Error::Spice {
        detail: format!(
            "ngspice wrote no results (its log is {})",
            log_path.display()
        ),
    })?;
    Ok(Outcome {
        plots: raw::parse(&bytes)?,
        warnings,
        seconds,
    })
}

/// ngspice's log sorted: lines that mean the run failed, and warnings (each once).
fn judge(log: &str) -> (Vec<String>, Vec<String>) {
    let mut errors: Vec<String> = Vec::new();
    let mut warnings: Vec<String> = Vec::new();
    for line in log.lines().map(str::trim) {
        let lower = line.to_ascii_lowercase();
        let failed = lower.starts_with("error")
            || lower.contains("timestep too small")
            || lower.contains("simulation interrupted")
            || lower.contains("aborted")
            || lower.contains("no such vector");
        // Harmless in batch mode: the run went on.
        let noise = lower.contains("there aren't any circuits loaded");
        // `.options interp` (a user's netlist may set it): ngspice 39 then writes each kept
        // point several times over and rewrites the header with a shorter count (seen in its
        // batch output), so the values read back would be wrong, not short.
        if lower.contains("interpolated raw file data") {
            let said = "the deck sets `.options interp`, whose results ngspice 39 writes wrongly (points repeated, the header rewritten): take the option out (ampnote chooses the time steps itself)";
            if !errors.iter().any(|e| e == said) {
                errors.push(said.to_string());
            }
            continue;
        }
        // An XSPICE part that could not read its file (the rig's drive, or a file source in
        // the user's netlist) says so on a `Message:` line and then gives zeros: a silent
        // output, not an error, unless it is caught here.
        if lower.contains("cannot open file") {
            let said = format!("{line} (ngspice lowercases file names given to a model, so a path with capitals in it names a file that is not there: give such files lowercase paths, or paths relative to the netlist's folder)");
            if !errors.contains(&said) {
                errors.push(said);
            }
            continue;
        }
        if failed && !noise {
            if !errors.iter().any(|e| e == line) {
                errors.push(line.to_string());
            }
        } else if lower.starts_with("warning") && !warnings.iter().any(|w| w == line) {
            warnings.push(line.to_string());
        }
    }
    (errors, warnings)
}

#[cfg(test)]
mod tests {
    use super::judge;

    #[test]
    fn an_interpolated_run_is_refused() {
        // ngspice 39's own words for a deck with `.options interp`.
        let (errors, _) =
            judge("Doing analysis at TEMP = 27.000000\nWarning: Interpolated raw file data!\n");
        assert_eq!(errors.len(), 1, "{errors:?}");
        assert!(errors[0].contains("take the option out"), "{errors:?}");
    }

    #[test]
    fn a_file_ngspice_could_not_open_is_an_error() {
        // ngspice 39's own words when a file source names a path it lowercased.
        let (errors, _) = judge(
            "Doing analysis at TEMP = 27.000000 and TNOM = 27.000000\nInstance: a1   Message: cannot open file /tmp/tmp.abcd/drive.txt\nInitial Transient Solution\n",
        );
        assert_eq!(errors.len(), 1, "{errors:?}");
        assert!(errors[0].contains("/tmp/tmp.abcd/drive.txt"), "{errors:?}");
        assert!(errors[0].contains("lowercases"), "{errors:?}");
    }

    #[test]
    fn the_log_is_read_for_errors_not_the_exit_code() {
        let log = "Error: unknown subckt: x1 in out nosuch\n    Simulation interrupted due to error!\nError: there aren't any circuits loaded.\n";
        let (e, w) = judge(log);
        assert_eq!(e.len(), 2, "{e:?}");
        assert!(e[0].contains("unknown subckt"));
        assert!(w.is_empty());
        let log = "Warning: singular matrix:  check node x\nWarning: singular matrix:  check node x\nNote: No compatibility mode selected!\n";
        let (e, w) = judge(log);
        assert!(e.is_empty());
        assert_eq!(
            w,
            vec!["Warning: singular matrix:  check node x".to_string()]
        );
    }
}
