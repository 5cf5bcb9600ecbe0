//! The library's error type. Every variant carries the numbers that explain it, and its message
//! ends with what the user can do next.

use std::path::PathBuf;

/// Everything that can stop a measurement. Measurement-quality problems that still leave a usable
/// number are *warnings* in the result instead (see [`crate::analysis::tone::ToneResult::warnings`]).
#[derive(Debug, thiserror::Error)]
pub enum Error {
    #[error("cannot open {path}: {source}. Check the path and that the file is readable.")]
    Open {
        path: PathBuf,
        source: std::io::Error,
    },

    #[error("cannot write {path}: {}", write_advice(source))]
    Write {
        path: PathBuf,
        source: std::io::Error,
    },

    #[error("{path} is not an audio file ampnote reads ({detail}). ampnote reads WAV (also BWF, RF64 and BW64), FLAC and AIFF: export the recording as WAV or FLAC and try again.")]
    NotAudio { path: PathBuf, detail: String },

    #[error("{path} is not a WAV file ({detail}). Export the recording as WAV (RIFF/WAVE, PCM or float) or FLAC and try again.")]
    NotWav { path: PathBuf, detail: String },

    #[error("{path}: its {format} data cannot be decoded ({detail}); the file is damaged. Export it again from the recorder, or as WAV.")]
    Undecodable {
        path: PathBuf,
        format: &'static str,
        detail: String,
    },

    #[error("{path} is in a format ampnote does not read ({detail}). Supported: 8- to 32-bit integer PCM and 32- or 64-bit float, in WAV, RF64, FLAC or AIFF; convert it, for example with `sox in.wav -b 24 out.wav`.")]
    UnsupportedFormat { path: PathBuf, detail: String },

    #[error("{path} has a sample rate of {rate_hz} Hz; ampnote reads 8000 Hz to 384000 Hz. Resample the file or record at a common rate such as 48000 or 96000 Hz.")]
    UnsupportedRate { path: PathBuf, rate_hz: u32 },

    #[error("{path} holds no audio (its data chunk is empty). Check that the recorder actually captured the input.")]
    Empty { path: PathBuf },

    #[error("{path} is truncated: the header promises {expected_frames} frames but the file ends after {read_frames}. Re-export it, or pass --accept-truncated to analyse the {read_frames} frames that are there.")]
    Truncated {
        path: PathBuf,
        expected_frames: u64,
        read_frames: u64,
    },

    #[error("sample {index} of channel {channel} is {what}. The recording holds invalid floating-point data; re-export it from the recorder.")]
    NotFinite {
        channel: usize,
        index: usize,
        what: &'static str,
    },

    #[error("channel {requested} does not exist: the capture has {available} channel(s). Pick --channel 1..{available} or --channel all.")]
    NoSuchChannel { requested: usize, available: usize },

    #[error("channel {channel} is silent (every sample is zero). Check the cable, the input selected on the interface, and --channel.")]
    Silent { channel: usize },

    #[error("channel {channel}: its samples reach only {peak:.1e} of full scale, far below what any converter resolves (-240 dBFS): the file was written at the wrong scale or is damaged. Re-export it from the recorder at its real level (24-bit PCM or 32-bit float).")]
    FarTooQuiet { channel: usize, peak: f64 },

    #[error("channel {channel} holds only a DC level ({dc_fraction:.6} of full scale) and no tone. Check that the stimulus is playing and reaching this input.")]
    DcOnly { channel: usize, dc_fraction: f64 },

    #[error("channel {channel} is too short for steady-tone analysis: {have_samples} samples ({have_s:.4} s) where at least {need_samples} ({need_s:.4} s) are needed{why}. Record at least 1 s of the steady tone.")]
    TooShort {
        channel: usize,
        have_samples: usize,
        have_s: f64,
        need_samples: usize,
        need_s: f64,
        why: String,
    },

    #[error("channel {channel}: no steady tone found. The strongest line, at {strongest_hz:.1} Hz, stands only {above_noise_db:.1} dB above the noise. Check that the stimulus reaches this input, or give its frequency with --fundamental.")]
    NoTone {
        channel: usize,
        strongest_hz: f64,
        above_noise_db: f64,
    },

    #[error("channel {channel}: {found}. {next}")]
    WrongKind {
        channel: usize,
        /// What the capture holds instead, with the numbers that show it.
        found: String,
        /// What to do instead.
        next: String,
    },

    #[error("the stimulus is at {stimulus_hz} Hz but the capture at {capture_hz} Hz. Record at the stimulus's rate, or generate the stimulus at the recorder's rate (--rate {capture_hz}).")]
    SampleRateMismatch { stimulus_hz: u32, capture_hz: u32 },

    #[error("{path} is not one of ampnote's {wanted} stimuli: {why}. Give the file `ampnote generate {wanted}` wrote (a copy made with a file manager keeps it whole; an editor's export does not).")]
    NotAStimulus {
        path: PathBuf,
        wanted: &'static str,
        why: String,
    },

    #[error("channel {channel}: the capture does not contain the sweep (the best match stands only {snr_db:.1} dB above the rest). Check that this is the recording of this stimulus and of the right channel.")]
    SweepNotFound { channel: usize, snr_db: f64 },

    #[error("channel {channel}: the capture ends {missing_s:.3} s before the sweep does. Record until the sweep and its tail have finished.")]
    CaptureEndsEarly { channel: usize, missing_s: f64 },

    #[error("channel {channel}: the capture starts after the sweep began. Start the recorder before the player.")]
    CaptureStartsLate { channel: usize },

    #[error("calibration profile {path}: {detail}. See calibration/README.md for the format.")]
    BadProfile { path: PathBuf, detail: String },

    #[error("invalid setting: {0}")]
    InvalidSetting(String),

    #[error("the two tones ({low_hz:.1} and {high_hz:.1} Hz) are too close to separate in this capture; record longer (the lines need a few bins between them), or space the tones further apart.")]
    TonesNotSeparable { low_hz: f64, high_hz: f64 },

    #[error("cannot tell which two-tone method this capture follows (strongest lines at {low_hz:.1} and {high_hz:.1} Hz, amplitude ratio {ratio:.2}); give the stimulus with --stimulus.")]
    TwoToneMethodUnknown {
        low_hz: f64,
        high_hz: f64,
        ratio: f64,
    },

    #[error(
        "{dir} is not a notebook (no notebook.toml); create one with `ampnote notebook init {dir}`"
    )]
    NotANotebook { dir: PathBuf },

    #[error("{dir} is already a notebook; open it with --notebook {dir}")]
    AlreadyANotebook { dir: PathBuf },

    #[error("no run labelled `{label}`{on} in {dir}; it holds: {holds}", on = channel.map_or(String::new(), |c| format!(" on channel {c}")))]
    NoSuchRun {
        label: String,
        channel: Option<usize>,
        dir: PathBuf,
        /// The labels (and channels) the notebook does hold.
        holds: String,
    },

    #[error("channel {channel} is not in this notebook (channels 1..{channels})")]
    ChannelNotInNotebook { channel: usize, channels: usize },

    #[error("the two readings ({a:.6} and {b:.6}) do not differ enough to give an output impedance: use loads further apart (the rated load and about twice it), or a higher level.")]
    ReadingsTooClose { a: f64, b: f64 },

    #[error("{watts} W cannot be reached from channel {channel}: it would take {drive_dbfs:+.1} dBFS of drive (the probe at {probe_dbfs} dBFS read {probe_w:.3e} W, so full scale gives about {full_scale_w:.3} W if the amplifier stays linear); lower --watts, or raise the interface's output level")]
    PowerOutOfReach {
        watts: f64,
        channel: usize,
        drive_dbfs: f64,
        probe_dbfs: f64,
        probe_w: f64,
        full_scale_w: f64,
    },

    #[error("the stimulus would reach {reach_dbfs:+.1} dBFS at the interface input (its peak {peak_dbfs:+.1} dBFS times a gain of {gain_db:+.1} dB): lower the level, or add attenuation")]
    WouldClipInput {
        reach_dbfs: f64,
        peak_dbfs: f64,
        gain_db: f64,
    },

    #[error("{first} and {other} were not recorded the same way ({detail}): record every load with the same rate and channels")]
    TakesDiffer {
        first: PathBuf,
        other: PathBuf,
        detail: String,
    },

    #[error("no recording was given for the {ohms} ohm load (recordings: {given}); give one capture per load, in the order of --loads")]
    NoTakeForLoad { ohms: f64, given: String },

    #[error("a {frequency_hz} Hz square is not square here: its edge alone takes {edge_us:.1} us of its {half_us:.1} us half period (at most a quarter of it is usable); use {max_hz:.0} Hz or lower, or a higher sample rate and a sweep reaching higher")]
    SquareTooFast {
        frequency_hz: f64,
        edge_us: f64,
        half_us: f64,
        max_hz: f64,
    },

    #[error("ngspice was not found (`{binary}`): the circuit rig runs the system's ngspice. Install it (Debian and Ubuntu: `apt install ngspice`), or name the binary with AMPNOTE_NGSPICE=/path/to/ngspice")]
    SpiceMissing { binary: String },

    #[error("the circuit simulation failed: {detail}. Check the netlist (ngspice's own messages name the part or node)")]
    Spice { detail: String },

    #[error("the circuit simulation took longer than {seconds:.0} s and was stopped (the deck is {deck}); a netlist that does not converge, or a time step far too small, does this: check the circuit, or allow more time")]
    SpiceTimedOut { seconds: f64, deck: PathBuf },

    #[error("{rig} records one channel at a time; channel separation needs every channel recorded while one is driven. Use --rig sim, --rig card with --inputs naming every channel, or a circuit with two channels (`.subckt amp IN1 IN2 OUT1 OUT2`), or record all channels at once and give the file")]
    RecordsOneChannel { rig: String },

    /// The audio interface or its server failed. `retryable`: a transient fault (a stalled
    /// stream, a gap, a busy device) that running the command again may clear.
    #[error("audio interface: {detail}{}", if *retryable { " (this can be transient: run the command again; if it persists, close other audio programs or raise the buffer size)" } else { "" })]
    Device { detail: String, retryable: bool },

    #[error("report: {0}")]
    Report(String),

    #[error("stopped by Ctrl-C (the output was silenced first){0}")]
    Interrupted(String),
}

impl Error {
    /// The process exit code this error ends a command with: 3 for the audio interface (a
    /// device or rig fault), 130 for Ctrl-C (the shells' convention for an interrupt), 2 for
    /// everything the user gave (usage and input).
    pub fn exit_code(&self) -> u8 {
        match self {
            Error::Device { .. }
            | Error::RecordsOneChannel { .. }
            | Error::SpiceMissing { .. }
            | Error::Spice { .. }
            | Error::SpiceTimedOut { .. } => 3,
            Error::Interrupted(_) => 130,
            _ => 2,
        }
    }
}

/// Shorthand used across the library.
pub type Result<T> = std::result::Result<T, Error>;

/// What a failed write means, in plain words, and what to do.
fn write_advice(e: &std::io::Error) -> String {
    use std::io::ErrorKind as K;
    match e.kind() {
        K::StorageFull | K::FileTooLarge => {
            "the disk is full (or a file-size limit was reached). Free some space and run the command again; nothing half-written was kept.".into()
        }
        K::PermissionDenied | K::ReadOnlyFilesystem => {
            format!("permission denied ({e}). Choose a folder you can write to.")
        }
        K::NotFound => format!("{e}. Check that the folder exists."),
        _ => format!("{e}. Check that the folder exists and has space."),
    }
}

/// A number as a user typed it back in a message: plain when ordinary, in exponent form when
/// tiny or huge (so 1e-300 never prints as three hundred zeros).
pub fn shown(x: f64) -> String {
    if x != 0.0 && x.is_finite() && !(1e-3..1e6).contains(&x.abs()) {
        format!("{x:e}")
    } else {
        format!("{x}")
    }
}
