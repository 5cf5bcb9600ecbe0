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
pub mod separation;
pub mod square;
pub mod trend;
pub mod watch;
pub mod zout;

use ampnote::capture::Capture;
use ampnote::error::Error;
use ampnote::signal::stimulus::Description;
use std::io::Write;
use std::path::Path;
use std::process::ExitCode;

/// `ampnote devices`: the audio hosts and interfaces the live rig can use.
pub fn devices(json: bool) -> Result<ExitCode, Failure> {
    #[cfg(feature = "live")]
    {
        let list = ampnote::rig::card::list_devices();
        print_stdout(&if json {
            serde_json::to_string_pretty(&list).expect("the list serializes") + "\n"
        } else {
            list.to_table()
        });
        Ok(ExitCode::SUCCESS)
    }
    #[cfg(not(feature = "live"))]
    let _ = json;
    #[cfg(not(feature = "live"))]
    Err("this build has no live audio: install with `cargo install --path . --features live` (needs ALSA and JACK headers, see README, Live rig)".into())
}

/// `ampnote man`: the manual page from the parser itself (clap_mangen), to stdout or, with
/// `out`, one page per command into that folder.
pub fn man(out: Option<&Path>) -> Result<ExitCode, Failure> {
    use clap::CommandFactory;
    let cmd = crate::cli::Cli::command();
    match out {
        None => {
            let mut buf = Vec::new();
            clap_mangen::Man::new(cmd)
                .render(&mut buf)
                .map_err(|e| format!("cannot render the manual: {e}"))?;
            print_stdout(&String::from_utf8_lossy(&buf));
        }
        Some(dir) => {
            std::fs::create_dir_all(dir)
                .map_err(|e| format!("cannot create {}: {e}", dir.display()))?;
            clap_mangen::generate_to(cmd, dir).map_err(|e| {
                format!("cannot write the manual pages into {}: {e}", dir.display())
            })?;
            eprintln!("manual pages written to {}", dir.display());
        }
    }
    Ok(ExitCode::SUCCESS)
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
    warnings: impl Iterator<Item = (usize, &'a ampnote::warning::Warning)>,
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

/// Why a command stopped: what to tell the user, and the exit code (2 usage or input, 3 the audio
/// interface or rig, 130 Ctrl-C; see [`ampnote::Error::exit_code`]).
#[derive(Debug)]
pub struct Failure {
    pub message: String,
    pub code: u8,
}

impl std::fmt::Display for Failure {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.message)
    }
}

impl From<ampnote::Error> for Failure {
    fn from(e: ampnote::Error) -> Failure {
        Failure {
            code: e.exit_code(),
            message: e.to_string(),
        }
    }
}

/// A message of the command's own: a usage or input problem.
impl From<String> for Failure {
    fn from(message: String) -> Failure {
        Failure { message, code: 2 }
    }
}

impl From<&str> for Failure {
    fn from(message: &str) -> Failure {
        message.to_string().into()
    }
}

/// Print the report (table, JSON or CSV, with the warnings on stderr), then keep the runs: the
/// figures come first, so a failed keep never hides what was measured.
pub fn print_then_keep<P: ampnote::report::Printed>(
    format: Format,
    report: &P,
    keeper: Keeper,
) -> Result<ExitCode, Failure> {
    let code = finish(
        format,
        report.results(),
        report.errors(),
        || report.json(),
        || report.csv(),
        || report.table(),
    );
    keeper.commit()?;
    code
}

/// The channels of a file run sorted into results and errors: each result takes the reading's
/// warnings (a truncated file, an open length) and what the rig noticed on its channel.
pub fn sort_channels<R: ampnote::report::ChannelResult>(
    outcomes: Vec<(usize, ampnote::Result<R>)>,
    reading: &[ampnote::warning::Warning],
    notes: &[(usize, ampnote::warning::Warning)],
) -> (Vec<R>, Vec<ampnote::report::tone::ChannelError>) {
    let mut results = Vec::new();
    let mut errors = Vec::new();
    for (channel, outcome) in outcomes {
        match outcome {
            Ok(mut r) => {
                r.warnings_mut().extend(reading.iter().cloned());
                results.push(r)
            }
            Err(e) => errors.push(ampnote::report::tone::ChannelError {
                channel,
                error: e.to_string(),
            }),
        }
    }
    ampnote::report::add_rig_notes(&mut results, notes);
    (results, errors)
}

/// How a command prints its figures: a table, JSON, or CSV (to stdout with `-`, or a file).
pub struct Format<'a> {
    pub json: bool,
    pub csv: Option<&'a Path>,
}

impl<'a> Format<'a> {
    /// From a command's `--json` and `--csv [FILE]`.
    pub fn of(json: bool, csv: &'a Option<std::path::PathBuf>) -> Format<'a> {
        Format {
            json,
            csv: csv.as_deref(),
        }
    }
}

/// Print the report in the chosen format: JSON or the table to stdout, CSV to stdout (`-`) or
/// written whole to its file.
pub fn emit(
    format: &Format,
    render_json: impl FnOnce() -> String,
    render_csv: impl FnOnce() -> String,
    render_table: impl FnOnce() -> String,
) -> Result<(), Failure> {
    match (format.json, format.csv) {
        (true, _) => print_stdout(&render_json()),
        (false, Some(path)) if path.as_os_str() != "-" => {
            ampnote::files::write_whole(path, render_csv().as_bytes())?
        }
        (false, Some(_)) => print_stdout(&render_csv()),
        (false, None) => print_stdout(&render_table()),
    }
    Ok(())
}

/// The end of every analysing command: diagnostics to stderr, the report (table, JSON or CSV) to
/// stdout or the CSV file, and exit code 2 when a channel could not be analysed.
pub fn finish<T: ampnote::report::ChannelResult>(
    format: Format,
    results: &[T],
    errors: &[ampnote::report::tone::ChannelError],
    render_json: impl FnOnce() -> String,
    render_csv: impl FnOnce() -> String,
    render_table: impl FnOnce() -> String,
) -> Result<ExitCode, Failure> {
    report_to_stderr(
        format.json || format.csv.is_some(),
        results
            .iter()
            .flat_map(|r| r.warnings().iter().map(move |w| (r.channel(), w))),
        errors.iter().map(|e| &e.error),
    );
    emit(&format, render_json, render_csv, render_table)?;
    Ok(if errors.is_empty() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(2)
    })
}

/// A stimulus file `ampnote generate` wrote: its samples and its description, which must be of
/// the `wanted` kind (`tone`, `steps`, `sweep`, `twotone`, `square`, or alternatives such as
/// `square or sweep`).
pub fn read_stimulus(path: &Path, wanted: &'static str) -> Result<(Capture, Description), Failure> {
    let cap = Capture::read(path, false)?;
    let not = |why: String| Error::NotAStimulus {
        path: path.to_path_buf(),
        wanted,
        why,
    };
    let desc = Description::of_capture(&cap).map_err(not)?;
    if !wanted.split(" or ").any(|w| w == desc.kind.name()) {
        return Err(not(format!("it is a {} stimulus", desc.kind.name())).into());
    }
    Ok((cap, desc))
}

/// The stimulus file (of the `wanted` kind, as [`read_stimulus`]) for the recording at
/// `capture`: both read, and refused unless they share a sample rate.
pub fn stimulus_for(
    stimulus: &Path,
    wanted: &'static str,
    capture: &Path,
) -> Result<(Capture, Description, ampnote::capture::SourceInfo), Failure> {
    let (stim, desc) = read_stimulus(stimulus, wanted)?;
    let info = Capture::probe(capture)?;
    same_rate(desc.sample_rate_hz, info.sample_rate_hz)?;
    Ok((stim, desc, info))
}

/// Refuse a capture at another rate than its stimulus.
pub fn same_rate(stimulus_hz: u32, capture_hz: u32) -> Result<(), Failure> {
    if stimulus_hz != capture_hz {
        return Err(Error::SampleRateMismatch {
            stimulus_hz,
            capture_hz,
        }
        .into());
    }
    Ok(())
}

/// The results of one command, kept in the notebook the user named (if any) as one
/// measurement: every channel, or none (see [`ampnote::notebook::Notebook::save_measurement`]).
pub struct Keeper<'a> {
    save: &'a crate::cli::SaveArgs,
    pending: Vec<Pending>,
    /// What measured it (the rig's own description), kept as the `rig` setting.
    rig: Option<String>,
    /// The rig predicts rather than measures.
    predicted: bool,
}

struct Pending {
    channel: usize,
    calibration: ampnote::calibration::Calibration,
    analysis: Option<ampnote::notebook::AnalysisSettings>,
    files: Vec<(String, std::path::PathBuf)>,
    result: ampnote::results::RunResult,
}

impl<'a> Keeper<'a> {
    pub fn new(save: &'a crate::cli::SaveArgs) -> Self {
        Keeper {
            save,
            pending: Vec::new(),
            rig: None,
            predicted: false,
        }
    }

    /// Keep what measured the runs (a rig's description; nothing for a user's file) as the
    /// `rig` setting, unless `--set rig=...` said otherwise: a predicted run must say so.
    /// `predicted`: the rig predicts rather than measures ([`ampnote::rig::Rig::predicts`]).
    pub fn with_rig(mut self, rig: Option<String>, predicted: bool) -> Self {
        self.rig = rig;
        self.predicted = predicted;
        self
    }

    /// One channel's result, with the files that made it.
    pub fn add(
        &mut self,
        channel: usize,
        calibration: ampnote::calibration::Calibration,
        analysis: Option<ampnote::notebook::AnalysisSettings>,
        files: Vec<(&str, &Path)>,
        result: impl Into<ampnote::results::RunResult>,
    ) {
        if self.save.notebook.is_none() {
            return;
        }
        self.pending.push(Pending {
            channel,
            calibration,
            analysis,
            files: files
                .into_iter()
                .map(|(n, p)| (n.to_string(), p.to_path_buf()))
                .collect(),
            result: result.into(),
        });
    }

    /// Every channel's result, with the same calibration, settings and files.
    pub fn add_each<'r, R>(
        &mut self,
        results: &'r [R],
        calibration: ampnote::calibration::Calibration,
        analysis: Option<ampnote::notebook::AnalysisSettings>,
        files: Vec<(&str, &Path)>,
    ) where
        R: ampnote::report::ChannelResult,
        &'r R: Into<ampnote::results::RunResult>,
    {
        for r in results {
            self.add(r.channel(), calibration, analysis.clone(), files.clone(), r);
        }
    }

    /// Write every channel added, as one measurement.
    pub fn commit(self) -> Result<(), Failure> {
        let (Some(dir), Some(label)) = (&self.save.notebook, &self.save.label) else {
            return Ok(());
        };
        if self.pending.is_empty() {
            return Ok(());
        }
        let nb = ampnote::notebook::Notebook::open(dir)?;
        let mut settings = self.save.settings_map()?;
        if let Some(rig) = &self.rig {
            settings
                .entry("rig".to_string())
                .or_insert_with(|| rig.clone());
        }
        let runs: Vec<ampnote::notebook::NewRun> = self
            .pending
            .iter()
            .map(|p| ampnote::notebook::NewRun {
                label,
                channel: p.channel,
                notes: &self.save.note,
                settings: settings.clone(),
                calibration: p.calibration,
                analysis: p.analysis.clone(),
                files: p
                    .files
                    .iter()
                    .map(|(n, path)| (n.as_str(), path.as_path()))
                    .collect(),
                blobs: Vec::new(),
                result: p.result.clone(),
                predicted: self.predicted,
            })
            .collect();
        let kept = nb.save_measurement(runs)?;
        for run in kept {
            eprintln!("kept as {} in {}", run.meta.id, dir.display());
        }
        Ok(())
    }
}

/// Check the notebook and label before measuring, so a run is never made that cannot be kept.
pub fn check_save(save: &crate::cli::SaveArgs) -> Result<(), Failure> {
    if let (Some(dir), Some(label)) = (&save.notebook, &save.label) {
        ampnote::notebook::Notebook::open(dir)?;
        ampnote::notebook::check_label(label)?;
        save.settings_map()?;
    }
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

/// The sweep a rig plays where a command needs a response (square, separation): 10 Hz to the
/// rate's default top (0.45 x the rate, at most 40 kHz), 3 s, with 0.5 s of tail for the
/// hum and noise checks.
pub fn rig_sweep(rate_hz: u32, level_dbfs: f64) -> Result<Played, Failure> {
    let c = ampnote::signal::stimulus::Common {
        tail_s: 0.5,
        ..rig_common(rate_hz, level_dbfs, 0.0)
    };
    let top = ampnote::signal::stimulus::default_sweep_stop_hz(rate_hz);
    to_played(ampnote::signal::stimulus::sweep(&c, 10.0, top, 3.0))
}

/// A generated stimulus, ready for [`capture_or_record`].
pub fn to_played(
    s: ampnote::error::Result<ampnote::signal::stimulus::Stimulus>,
) -> Result<Played, Failure> {
    Ok(s.map(Into::into)?)
}

/// A command's capture: the file, the stimulus file a rig run wrote (if any), what the rig
/// noticed per channel (for the results' warnings), and the rig's own calibration (the simulated
/// bench knows its interface and load; a card rig carries the user's).
pub struct Recorded {
    pub capture: std::path::PathBuf,
    pub stimulus: Option<std::path::PathBuf>,
    /// The rig's description on a rig run.
    pub rig: Option<String>,
    /// The rig predicts rather than measures.
    pub predicted: bool,
    pub notes: Vec<(usize, ampnote::warning::Warning)>,
    pub calibration: Option<ampnote::calibration::Calibration>,
}

impl Recorded {
    /// The calibration to analyse with: the rig's on a rig run, else the user's.
    pub fn calibration_or(
        &self,
        user: ampnote::calibration::Calibration,
    ) -> ampnote::calibration::Calibration {
        self.calibration.unwrap_or(user)
    }
}

/// The capture a command analyses: the file the user gave, or a fresh one recorded on the rig the
/// user named (`make_stimulus` gives what to play at the rig's turn). With a rig, the stimulus and
/// the capture are written to the captures folder first, so the run is analysed (and kept) like
/// any recording; a run that fails half way keeps the channels it finished, as partial. With
/// `watts`, each channel's drive is the one that gives that power into the load (a tone stimulus
/// only; see [`ampnote::procedure::drive`]).
pub fn capture_or_record(
    capture: &Option<std::path::PathBuf>,
    rig_args: &crate::cli::RigArgs,
    calibration: ampnote::calibration::Calibration,
    procedure: &str,
    channel: Option<usize>,
    watts: Option<f64>,
    make_stimulus: impl FnOnce() -> Result<Played, Failure>,
) -> Result<Recorded, Failure> {
    let mut run = match prepare(
        capture,
        rig_args,
        calibration,
        procedure,
        watts.is_some(),
        make_stimulus,
    )? {
        Ready::File(recorded) => return Ok(recorded),
        Ready::Rig(run) => run,
    };
    let (rig, stim) = (&mut run.rig, &run.stim);
    let rate = stim.rate;
    let chosen = ampnote::capture::select_channels(rig.channels(), channel)?;
    let n = *chosen.iter().max().expect("at least one channel");
    let mut chans = vec![vec![0.0; stim.signal.len()]; n];
    let mut notes = Vec::new();
    let tone_hz = match stim.description.as_ref().map(|d| &d.kind) {
        Some(ampnote::signal::stimulus::Kind::Tone { frequency_hz }) => Some(*frequency_hz),
        _ => None,
    };
    let level = stim.description.as_ref().map_or(0.0, |d| d.level_dbfs);
    let progress = ampnote::progress::Progress::new(chosen.len() as u64, "channels");
    let seconds = stim.signal.len() as f64 / rate as f64;
    for (done, &ch) in chosen.iter().enumerate() {
        progress.message(format!("channel {ch}: playing {seconds:.1} s"));
        let scaled;
        let signal = match (watts, tone_hz) {
            (None, _) => &stim.signal,
            (Some(_), None) => return Err("--watts applies to a tone".into()),
            (Some(w), Some(f)) => {
                let found = ampnote::procedure::drive::drive_for_power(&mut **rig, ch, f, rate, w)?;
                eprintln!("channel {ch}: {}", found.describe(w));
                let miss = 10.0 * (found.confirmed_w / w).log10();
                if miss.abs() > ampnote::procedure::drive::TOLERANCE_DB {
                    notes.push((ch, ampnote::warning::WarningCode::Rig.say(format!(
                        "the drive found for {w} W gives {:.3} W ({miss:+.1} dB): the amplifier is not linear there (clipping or compression); the figures are at that power",
                        found.confirmed_w
                    ))));
                }
                scaled = ampnote::procedure::drive::rescaled(&stim.signal, level, found.drive_dbfs);
                &scaled
            }
        };
        let played = rig.play_and_record(ch, signal, rate);
        progress.inc(1);
        match played {
            Ok(y) => {
                chans[ch - 1] = y;
                notes.extend(rig.take_notes(ch).into_iter().map(|n| (ch, n)));
            }
            Err(err) => {
                let code = err.exit_code();
                let mut msg = err.to_string();
                if done > 0 {
                    let partial = run.partial_path();
                    write_float(&partial, rate, &chans)?;
                    msg.push_str(&format!(
                        "; the channel(s) measured before it are kept in {} (partial)",
                        partial.display()
                    ));
                }
                return Err(Failure { message: msg, code });
            }
        }
    }
    progress.finish();
    run.finish(&chans, notes)
}

/// [`capture_or_record`] for channel separation: the stimulus played into `driven` only and
/// every channel recorded at once ([`ampnote::rig::Rig::play_and_record_all`]). With `watts`,
/// the stimulus is played at the drive a 1 kHz tone of that power needs (its RMS level then
/// matches the tone's).
pub fn capture_or_record_all(
    capture: &Option<std::path::PathBuf>,
    rig_args: &crate::cli::RigArgs,
    calibration: ampnote::calibration::Calibration,
    procedure: &str,
    driven: usize,
    watts: Option<f64>,
    make_stimulus: impl FnOnce() -> Result<Played, Failure>,
) -> Result<Recorded, Failure> {
    let mut run = match prepare(
        capture,
        rig_args,
        calibration,
        procedure,
        watts.is_some(),
        make_stimulus,
    )? {
        Ready::File(recorded) => return Ok(recorded),
        Ready::Rig(run) => run,
    };
    let channels = run.rig.channels();
    if driven == 0 || driven > channels {
        return Err(ampnote::error::Error::NoSuchChannel {
            requested: driven,
            available: channels,
        }
        .into());
    }
    let rate = run.stim.rate;
    let mut notes = Vec::new();
    if let Some(w) = watts {
        let found =
            ampnote::procedure::drive::drive_for_power(&mut *run.rig, driven, 1000.0, rate, w)?;
        eprintln!("channel {driven}: {}", found.describe(w));
        let miss = 10.0 * (found.confirmed_w / w).log10();
        if miss.abs() > ampnote::procedure::drive::TOLERANCE_DB {
            notes.push((driven, ampnote::warning::WarningCode::Rig.say(format!(
                "the drive found for {w} W gives {:.3} W ({miss:+.1} dB): the amplifier is not linear there; the sweep played at that drive"
            , found.confirmed_w))));
        }
        let level = run.stim.description.as_ref().map_or(0.0, |d| d.level_dbfs);
        run.stim.signal =
            ampnote::procedure::drive::rescaled(&run.stim.signal, level, found.drive_dbfs);
        if let Some(d) = run.stim.description.as_mut() {
            d.level_dbfs = found.drive_dbfs;
        }
        run.rewrite_stimulus()?;
    }
    let seconds = run.stim.signal.len() as f64 / rate as f64;
    eprintln!("channel {driven} driven, {channels} recorded: playing {seconds:.1} s");
    let chans = run
        .rig
        .play_and_record_all(driven, &run.stim.signal, rate)?;
    notes.extend(run.rig.take_notes(driven).into_iter().map(|n| (driven, n)));
    run.finish(&chans, notes)
}

/// A rig run made ready: the rig open, the stimulus made and written to the captures folder,
/// and where its capture goes.
pub struct RigRun {
    rig: Box<dyn ampnote::rig::Rig>,
    stim: Played,
    dir: std::path::PathBuf,
    stamp: String,
    procedure: String,
    stim_path: std::path::PathBuf,
}

impl RigRun {
    /// Write the stimulus again after its level was changed (a drive found for a power).
    fn rewrite_stimulus(&self) -> Result<(), Failure> {
        let description = self.stim.description.as_ref().map(|d| d.to_json());
        ampnote::signal::wav::write_wav_described(
            &self.stim_path,
            self.stim.rate,
            std::slice::from_ref(&self.stim.signal),
            ampnote::signal::wav::WavFormat::Float32,
            1,
            description.as_deref(),
        )?;
        Ok(())
    }

    fn partial_path(&self) -> std::path::PathBuf {
        self.dir.join(format!(
            "{}-{}-capture.partial.wav",
            self.procedure, self.stamp
        ))
    }

    /// Write the capture and say where it and its stimulus are.
    fn finish(
        self,
        chans: &[Vec<f64>],
        notes: Vec<(usize, ampnote::warning::Warning)>,
    ) -> Result<Recorded, Failure> {
        let cap_path = self
            .dir
            .join(format!("{}-{}-capture.wav", self.procedure, self.stamp));
        write_float(&cap_path, self.stim.rate, chans)?;
        eprintln!(
            "recorded {} (stimulus {})",
            cap_path.display(),
            self.stim_path.display()
        );
        Ok(Recorded {
            capture: cap_path,
            stimulus: Some(self.stim_path),
            rig: Some(self.rig.describe()),
            predicted: self.rig.predicts(),
            notes,
            calibration: Some(self.rig.calibration()),
        })
    }
}

/// What [`prepare`] found: the user's file, or a rig run made ready.
pub enum Ready {
    File(Recorded),
    Rig(RigRun),
}

/// The start of every capture a command analyses: the file the user gave (refused with
/// `--watts`, which sets a rig's drive), or the rig opened, the stimulus made and written.
fn prepare(
    capture: &Option<std::path::PathBuf>,
    rig_args: &crate::cli::RigArgs,
    calibration: ampnote::calibration::Calibration,
    procedure: &str,
    watts: bool,
    make_stimulus: impl FnOnce() -> Result<Played, Failure>,
) -> Result<Ready, Failure> {
    let rig = rig_args.open(calibration)?;
    let rig = match (capture, rig) {
        (Some(_), Some(_)) => return Err("give a capture file or --rig, not both".into()),
        (Some(path), None) => {
            if watts {
                return Err("--watts sets the drive of a rig run; a capture file was recorded at whatever drive it was: drop --watts".into());
            }
            return Ok(Ready::File(Recorded {
                capture: path.clone(),
                stimulus: None,
                rig: None,
                predicted: false,
                notes: Vec::new(),
                calibration: None,
            }));
        }
        (None, None) => {
            return Err(format!(
                "give a capture file to analyse, or --rig sim (the simulated bench) or --rig card (the audio interface) to measure one ({procedure})"
            ).into())
        }
        (None, Some(rig)) => rig,
    };
    let stim = make_stimulus()?;
    let dir = rig_args.captures_dir.clone();
    std::fs::create_dir_all(&dir)
        .map_err(|e| format!("cannot create the captures folder {}: {e}", dir.display()))?;
    let stamp = ampnote::notebook::timestamp_for_file();
    let stim_path = dir.join(format!("{procedure}-{stamp}-stimulus.wav"));
    eprintln!("{}", rig.describe());
    let run = RigRun {
        rig,
        stim,
        dir,
        stamp,
        procedure: procedure.to_string(),
        stim_path,
    };
    run.rewrite_stimulus()?;
    Ok(Ready::Rig(run))
}

/// A rig's capture as 32-bit float WAV.
fn write_float(path: &std::path::Path, rate: u32, chans: &[Vec<f64>]) -> Result<(), Failure> {
    ampnote::signal::wav::write_wav(
        path,
        rate,
        chans,
        ampnote::signal::wav::WavFormat::Float32,
        1,
    )
    .map_err(|e| e.to_string().into())
}
