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
pub mod watch;
pub mod zout;

use ampnote::capture::Capture;
use ampnote::error::Error;
use ampnote::signal::stimulus::Description;
use std::io::Write;
use std::path::Path;
use std::process::ExitCode;

/// `ampnote devices`: the audio hosts and interfaces the live rig can use.
pub fn devices() -> Result<ExitCode, String> {
    #[cfg(feature = "live")]
    {
        print_stdout(&ampnote::rig::card::list_devices());
        Ok(ExitCode::SUCCESS)
    }
    #[cfg(not(feature = "live"))]
    Err("this build has no live audio: install with `cargo install --path . --features live` (needs ALSA and JACK headers, see README, Live rig)".into())
}

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

/// What a rig run plays: the signal, its rate, and its description (none for silence).
pub struct Played {
    pub signal: Vec<f64>,
    pub rate: u32,
    pub description: Option<Description>,
}

impl From<ampnote::signal::stimulus::Stimulus> for Played {
    fn from(s: ampnote::signal::stimulus::Stimulus) -> Played {
        Played {
            rate: s.description.sample_rate_hz,
            signal: s.signal,
            description: Some(s.description),
        }
    }
}

/// A rig run's stimulus settings: one channel at `level_dbfs` RMS, 50 ms of lead silence and
/// `fade_s` raised-cosine ramps.
pub fn rig_common(rate_hz: u32, level_dbfs: f64, fade_s: f64) -> ampnote::signal::stimulus::Common {
    ampnote::signal::stimulus::Common {
        lead_s: 0.05,
        fade_s,
        ..ampnote::signal::stimulus::Common::mono(rate_hz, level_dbfs)
    }
}

/// A generated stimulus, ready for [`capture_or_record`].
pub fn to_played(
    s: ampnote::error::Result<ampnote::signal::stimulus::Stimulus>,
) -> Result<Played, String> {
    s.map(Into::into).map_err(|e| e.to_string())
}

/// A command's capture: the file, the stimulus file a rig run wrote (if any), and what the rig
/// noticed per channel (for the results' warnings).
pub type Recorded = (
    std::path::PathBuf,
    Option<std::path::PathBuf>,
    Vec<(usize, String)>,
);

/// The capture a command analyses: the file the user gave, or a fresh one recorded on the rig the
/// user named (`make_stimulus` gives what to play at the rig's turn). With a rig, the stimulus and
/// the capture are written to the captures folder first, so the run is analysed (and kept) like
/// any recording; a run that fails half way keeps the channels it finished, as partial.
pub fn capture_or_record(
    capture: &Option<std::path::PathBuf>,
    rig_args: &crate::cli::RigArgs,
    calibration: ampnote::calibration::Calibration,
    procedure: &str,
    channel: Option<usize>,
    make_stimulus: impl FnOnce() -> Result<Played, String>,
) -> Result<Recorded, String> {
    let rig = rig_args.open(calibration)?;
    let mut rig = match (capture, rig) {
        (Some(_), Some(_)) => return Err("give a capture file or --rig, not both".into()),
        (Some(path), None) => return Ok((path.clone(), None, Vec::new())),
        (None, None) => {
            return Err(format!(
                "give a capture file to analyse, or --rig sim (the simulated bench) or --rig card (the audio interface) to measure one ({procedure})"
            ))
        }
        (None, Some(rig)) => rig,
    };
    let stim = make_stimulus()?;
    let rate = stim.rate;
    let chosen =
        ampnote::capture::select_channels(rig.channels(), channel).map_err(|e| e.to_string())?;
    let dir = &rig_args.captures_dir;
    std::fs::create_dir_all(dir)
        .map_err(|e| format!("cannot create the captures folder {}: {e}", dir.display()))?;
    let stamp = ampnote::notebook::timestamp_for_file();
    let stim_path = dir.join(format!("{procedure}-{stamp}-stimulus.wav"));
    let cap_path = dir.join(format!("{procedure}-{stamp}-capture.wav"));
    let description = stim.description.as_ref().map(|d| d.to_json());
    ampnote::signal::wav::write_wav_described(
        &stim_path,
        rate,
        std::slice::from_ref(&stim.signal),
        ampnote::signal::wav::WavFormat::Float32,
        1,
        description.as_deref(),
    )
    .map_err(|e| e.to_string())?;
    eprintln!("{}", rig.describe());
    let n = *chosen.iter().max().expect("at least one channel");
    let mut chans = vec![vec![0.0; stim.signal.len()]; n];
    let write = |path: &std::path::Path, chans: &[Vec<f64>]| {
        ampnote::signal::wav::write_wav(
            path,
            rate,
            chans,
            ampnote::signal::wav::WavFormat::Float32,
            1,
        )
        .map_err(|e| e.to_string())
    };
    let mut notes = Vec::new();
    for (done, &ch) in chosen.iter().enumerate() {
        match rig.play_and_record(ch, &stim.signal, rate) {
            Ok(y) => {
                chans[ch - 1] = y;
                notes.extend(rig.take_notes(ch).into_iter().map(|n| (ch, n)));
            }
            Err(err) => {
                let mut msg = err.to_string();
                if done > 0 {
                    let partial = dir.join(format!("{procedure}-{stamp}-capture.partial.wav"));
                    write(&partial, &chans)?;
                    msg.push_str(&format!(
                        "; the channel(s) measured before it are kept in {} (partial)",
                        partial.display()
                    ));
                }
                return Err(msg);
            }
        }
    }
    write(&cap_path, &chans)?;
    eprintln!(
        "recorded {} (stimulus {})",
        cap_path.display(),
        stim_path.display()
    );
    Ok((cap_path, Some(stim_path), notes))
}
