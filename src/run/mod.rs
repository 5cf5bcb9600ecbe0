//! One module per command: read inputs, call the library, render, choose the exit code.
//! Errors come back as the message to print (exit code 2).

pub mod analyze;
pub mod calibrate;
pub mod generate;
pub mod imd;
pub mod noise;
pub mod notebook;
pub mod power;
pub mod response;
pub mod zout;

use ampnote::capture::Capture;
use ampnote::error::Error;
use ampnote::signal::stimulus::Description;
use std::io::Write;
use std::path::Path;
use std::process::ExitCode;

/// Print to stdout; a closed pipe (`| head`) is not an error.
pub fn print_stdout(text: &str) {
    let mut out = std::io::stdout().lock();
    let _ = out.write_all(text.as_bytes()).and_then(|_| out.flush());
}

/// Channels that could not be analysed go to stderr always; warnings only with the
/// machine-readable formats (the table carries them itself).
pub fn report_to_stderr<'a>(
    machine_format: bool,
    warnings: impl Iterator<Item = (usize, &'a String)>,
    errors: impl Iterator<Item = &'a String>,
) {
    if machine_format {
        for (ch, w) in warnings {
            eprintln!("warning: channel {ch}: {w}");
        }
    }
    for e in errors {
        eprintln!("error: {e}");
    }
}

/// The end of every analysing command: diagnostics to stderr, the report (JSON or table) to
/// stdout, and exit code 2 when a channel could not be analysed.
pub fn finish<T: ampnote::report::ChannelResult>(
    json: bool,
    results: &[T],
    errors: &[ampnote::report::tone::ChannelError],
    render_json: impl FnOnce() -> String,
    render_table: impl FnOnce() -> String,
) -> ExitCode {
    report_to_stderr(
        json,
        results
            .iter()
            .flat_map(|r| r.warnings().iter().map(move |w| (r.channel(), w))),
        errors.iter().map(|e| &e.error),
    );
    print_stdout(&if json { render_json() } else { render_table() });
    if errors.is_empty() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(2)
    }
}

/// A stimulus file `ampnote generate` wrote: its samples and its description, which must be of
/// the `wanted` kind (`tone`, `steps`, `sweep`, `twotone`).
pub fn read_stimulus(path: &Path, wanted: &'static str) -> Result<(Capture, Description), String> {
    let cap = Capture::read_wav(path, false).map_err(|e| e.to_string())?;
    let desc = cap
        .description_json
        .as_deref()
        .and_then(Description::from_json)
        .filter(|d| d.kind.name() == wanted)
        .ok_or_else(|| {
            Error::NotAStimulus {
                path: path.to_path_buf(),
                wanted,
            }
            .to_string()
        })?;
    Ok((cap, desc))
}

/// Keep one channel's result in the notebook the user named (if any), with the files that made it.
pub fn keep(
    save: &crate::cli::SaveArgs,
    procedure: &str,
    channel: usize,
    calibration: ampnote::calibration::Calibration,
    files: Vec<(&str, &Path)>,
    result: &impl serde::Serialize,
) -> Result<(), String> {
    let (Some(dir), Some(label)) = (&save.notebook, &save.label) else {
        return Ok(());
    };
    let nb = ampnote::notebook::Notebook::open(dir).map_err(|e| e.to_string())?;
    let run = nb
        .save(ampnote::notebook::NewRun {
            label,
            channel,
            procedure,
            notes: &save.note,
            settings: save.settings_map()?,
            calibration,
            files,
            blobs: Vec::new(),
            result: serde_json::to_value(result).expect("results serialize"),
        })
        .map_err(|e| e.to_string())?;
    eprintln!("kept as {} in {}", run.meta.id, dir.display());
    Ok(())
}
