//! Command-line definitions (clap derive) and their conversion into library settings.
//! Nothing here touches files or devices.

use ampnote::analysis::tone::{Mains, ToneConfig};
use ampnote::analysis::weighting::Weighting;
use ampnote::calibration::{Calibration, Profile};
use ampnote::signal::stimulus::Common;
use ampnote::signal::wav::WavFormat;
use clap::{Args, Parser, Subcommand, ValueEnum};
use std::path::PathBuf;

#[derive(Debug, Parser)]
#[command(
    name = "ampnote",
    version,
    about = "Bench measurements for audio power amplifiers: THD, THD+N, harmonics, noise and hum",
    long_about = None
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Analyse a recorded steady tone: level, THD, THD+N, harmonics with phase, noise, hum, DC.
    Analyze(AnalyzeArgs),
    /// Write a stimulus WAV (tone, staircase, sweep, two-tone) that remembers what it holds.
    Generate {
        #[command(subcommand)]
        kind: GenerateKind,
    },
    /// Frequency response, phase, polarity, latency and harmonic distortion vs frequency from a
    /// recorded sweep.
    Response(ResponseArgs),
    /// Channel separation (IEC 60268-3 crosstalk) from a sweep played into one channel with every
    /// channel recorded: each other channel's level below it, against frequency.
    Separation(SeparationArgs),
    /// Intermodulation distortion from a recorded two-tone pair (IEC 60268-3).
    Imd(ImdArgs),
    /// Follow a steady tone over a long capture (a warm-up, a hum log): level, THD, THD+N, H2, H3
    /// and the strongest hum line per block, with the drift of each.
    Trend(TrendArgs),
    /// Noise and hum with no signal (input shorted or silent): flat and A-weighted, mains lines,
    /// and S/N re 1 W when calibrated.
    Noise(NoiseArgs),
    /// Output power at 1 %, 3 % and 10 % THD from a staircase of levels (a capture, or a rig).
    Power(PowerArgs),
    /// Output impedance and damping factor by the two-load method.
    Zout(ZoutArgs),
    /// Build a calibration profile: interface full scales, attenuator, load, loopback floor.
    Calibrate(CalibrateArgs),
    /// List the audio hosts and interfaces the live rig can use: channels, rates, formats.
    Devices {
        /// Print JSON instead of the list.
        #[arg(long)]
        json: bool,
    },
    /// Watch a steady tone live (level, THD, THD+N, H2, H3, hum) while trimming bias or hum
    /// balance; Ctrl-C stops it.
    Watch(WatchArgs),
    /// The whole bench on the simulated bench: an invented amplifier measured stock and reworked,
    /// kept in a notebook, compared and channel-matched.
    Demo {
        /// Folder for the demo's notebook.
        #[arg(long, default_value = "ampnote-demo", value_name = "DIR")]
        out: PathBuf,
    },
    /// Keep runs in a folder per amplifier.
    Notebook {
        #[command(subcommand)]
        action: NotebookAction,
    },
    /// Set two labels (or runs) side by side: before and after.
    Compare(CompareArgs),
    /// Check that two channels match within tolerances (exit code 1 when not).
    Match(MatchArgs),
    /// Print a shell completion script (bash, zsh, fish, elvish, powershell), e.g.
    /// `ampnote completions bash > ~/.local/share/bash-completion/completions/ampnote`.
    Completions {
        /// The shell.
        #[arg(value_enum)]
        shell: clap_complete::Shell,
    },
    /// Print the manual page (roff), or with --out write one page per command into a folder,
    /// e.g. `ampnote man | man -l -`.
    Man {
        /// Folder for ampnote.1 and a page per command (ampnote-analyze.1, ...).
        #[arg(long, value_name = "DIR")]
        out: Option<PathBuf>,
    },
    /// Write the notebook's report: one HTML page with its charts, and each chart as SVG.
    Report {
        /// The notebook folder.
        notebook: PathBuf,
        /// Folder for the report (default: NOTEBOOK/report).
        #[arg(long, value_name = "DIR")]
        out: Option<PathBuf>,
    },
}

#[derive(Debug, Subcommand)]
pub enum NotebookAction {
    /// Create a notebook folder.
    Init {
        /// Folder to create for the notebook (one per amplifier).
        dir: PathBuf,
        /// What the amplifier is.
        #[arg(long, value_name = "NAME")]
        amplifier: String,
        /// Channels of the amplifier.
        #[arg(long, default_value_t = 2, value_name = "N")]
        channels: usize,
        /// The dummy load in ohm, kept as the notebook's default.
        #[arg(long, value_name = "OHMS")]
        load_ohms: Option<f64>,
        /// Calibration profile to keep with the notebook.
        #[arg(long, value_name = "FILE.toml")]
        profile: Option<PathBuf>,
    },
    /// List the runs.
    Log {
        /// The notebook folder.
        dir: PathBuf,
        /// Print JSON instead of the table.
        #[arg(long)]
        json: bool,
    },
    /// Analyse stored captures again with this version's engine; the new result is kept beside
    /// the old one.
    Reanalyze {
        /// The notebook folder.
        dir: PathBuf,
        /// Only these runs (ids); default every run with a stored capture.
        runs: Vec<String>,
    },
    /// Keep DC operating points with a label: volts at a node, or across a resistor (then the
    /// current and the dissipation), checked against part ratings.
    Dc {
        /// The notebook folder.
        dir: PathBuf,
        /// The label they belong to, e.g. stock or "after driver rework".
        #[arg(long, value_name = "LABEL")]
        label: String,
        /// A reading: NAME=VOLTS, or NAME=VOLTS@OHMS across a resistor (k and M allowed: 1k, 4.7k).
        #[arg(long = "point", value_name = "NAME=VOLTS[@OHMS]", required = true)]
        points: Vec<String>,
        /// A part's power rating: NAME=WATTS (flags a point dissipating more).
        #[arg(long = "max-w", value_name = "NAME=W")]
        ratings: Vec<String>,
        /// The channel they belong to (1 for shared parts such as B+).
        #[arg(long, default_value_t = 1, value_name = "N")]
        channel: usize,
        /// A note kept with them.
        #[arg(long, value_name = "TEXT", default_value = "")]
        note: String,
    },
}

#[derive(Debug, Args)]
pub struct CompareArgs {
    /// Before: a label (or LABEL:CH, or a run id) in the notebook, or a capture file.
    pub a: String,
    /// After.
    pub b: String,
    /// The notebook the labels live in; without it A and B are capture files.
    #[arg(long, value_name = "DIR")]
    pub notebook: Option<PathBuf>,
    /// With capture files: the stimulus they recorded (a tone, staircase or sweep).
    #[arg(long, value_name = "FILE.wav")]
    pub stimulus: Option<PathBuf>,
    #[command(flatten)]
    pub calibration: CalibrationArgs,
    /// Print JSON instead of the sentences.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct MatchArgs {
    /// A label (its channels 1 and 2 are matched), or LABEL:CH / a run id, with B; or capture
    /// files (one stereo file, or two files).
    pub a: String,
    /// With A as LABEL:CH or a run id: the other channel's; with A a capture file: the second file.
    pub b: Option<String>,
    /// The notebook the labels live in; without it A (and B) are capture files.
    #[arg(long, value_name = "DIR")]
    pub notebook: Option<PathBuf>,
    /// With capture files: the stimulus they recorded.
    #[arg(long, value_name = "FILE.wav")]
    pub stimulus: Option<PathBuf>,
    /// Largest gain difference between the channels, dB.
    #[arg(long, default_value_t = 0.5, value_name = "DB")]
    pub gain_tolerance: f64,
    /// Largest response deviation between the channels, 20 Hz-20 kHz, dB.
    #[arg(long, default_value_t = 0.5, value_name = "DB")]
    pub response_tolerance: f64,
    /// Largest phase difference between the channels, 20 Hz-20 kHz, degrees.
    #[arg(long, default_value_t = 10.0, value_name = "DEG")]
    pub phase_tolerance: f64,
    /// Largest THD difference at the same power, dB.
    #[arg(long, default_value_t = 3.0, value_name = "DB")]
    pub thd_tolerance: f64,
    /// Largest difference of power at 1 % THD, dB.
    #[arg(long, default_value_t = 1.0, value_name = "DB")]
    pub power_tolerance: f64,
    /// Largest noise difference, dB.
    #[arg(long, default_value_t = 3.0, value_name = "DB")]
    pub noise_tolerance: f64,
    /// Least channel separation at 1 kHz, dB (from `ampnote separation` runs).
    #[arg(long, default_value_t = 60.0, value_name = "DB")]
    pub min_separation: f64,
    /// Print JSON instead of the verdict table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct PowerArgs {
    /// A recording of the `generate steps` stimulus (or use --rig).
    pub capture: Option<PathBuf>,
    /// The staircase file `ampnote generate steps` wrote.
    #[arg(long, value_name = "STEPS.wav")]
    pub stimulus: Option<PathBuf>,
    #[command(flatten)]
    pub rig: RigArgs,
    /// Amplifier channel(s): a number from 1, or `all`.
    #[arg(long, default_value = "all", value_name = "N|all")]
    pub channel: ChannelChoice,
    /// Frequencies for a rig run, e.g. 997 or 40,997,10000 (power bandwidth); 997 Hz is the AES17 test tone.
    #[arg(long, default_value = "997", value_name = "HZ[,HZ...]", value_delimiter = ',', value_parser = hertz)]
    pub freq: Vec<f64>,
    /// First drive level of a rig run, dBFS.
    #[arg(long = "from", default_value_t = -30.0, value_name = "DBFS", allow_negative_numbers = true)]
    pub from_dbfs: f64,
    /// Step size of a rig run, dB (refined to a fifth across each THD target).
    #[arg(
        long,
        allow_negative_numbers = true,
        default_value_t = 1.0,
        value_name = "DB"
    )]
    pub step: f64,
    /// Stop a rig run once THD passes this, percent.
    #[arg(
        long,
        allow_negative_numbers = true,
        default_value_t = 10.0,
        value_name = "PCT"
    )]
    pub stop_thd: f64,
    /// Never drive into a step whose predicted output passes this, watts.
    #[arg(
        long,
        allow_negative_numbers = true,
        default_value_t = 25.0,
        value_name = "W"
    )]
    pub max_w: f64,
    /// Sample rate of a rig run.
    #[arg(long, default_value_t = 48_000, value_name = "HZ")]
    pub rate: u32,
    /// Time analysed per step, and time left before it to settle.
    #[arg(long, default_value_t = 0.5, value_name = "S")]
    pub dwell: f64,
    /// Seconds each step plays before it is analysed (the amplifier and coupling settle).
    #[arg(long, default_value_t = 0.25, value_name = "S")]
    pub settle: f64,
    #[command(flatten)]
    pub calibration: CalibrationArgs,
    /// Print JSON instead of the table.
    #[arg(long)]
    pub json: bool,
    /// Print CSV instead (one row per channel; power: per step), to stdout or to FILE.
    #[arg(long, value_name = "FILE", num_args = 0..=1, default_missing_value = "-", conflicts_with = "json")]
    pub csv: Option<PathBuf>,
    /// Analyse what a truncated file holds instead of refusing it.
    #[arg(long)]
    pub accept_truncated: bool,

    #[command(flatten)]
    pub save: SaveArgs,
}

#[derive(Debug, Args)]
pub struct ZoutArgs {
    /// Capture into the first load, then into the second (or use --rig).
    pub captures: Vec<PathBuf>,
    /// The two loads in ohms, in the captures' order (e.g. 8,16: the rated load and twice it).
    #[arg(long, default_value = "8,16", value_name = "R1,R2", value_delimiter = ',', value_parser = ohms)]
    pub loads: Vec<f64>,
    /// The sweep the captures recorded (gives the impedance across the band); without it the
    /// captures are steady tones.
    #[arg(long, value_name = "SWEEP.wav")]
    pub stimulus: Option<PathBuf>,
    #[command(flatten)]
    pub rig: RigArgs,
    #[command(flatten)]
    pub calibration: CalibrationArgs,
    /// With --rig: sample rate.
    #[arg(long, default_value_t = 48_000, value_name = "HZ")]
    pub rate: u32,
    /// With --rig: measure across the band with a sweep instead of one tone.
    #[arg(long)]
    pub sweep: bool,
    /// With --rig: tone frequency and level.
    #[arg(long, default_value_t = 997.0, value_name = "HZ")]
    pub freq: f64,
    /// The tone's RMS level at the interface output, dBFS.
    #[arg(long, default_value_t = -20.0, value_name = "DBFS", allow_negative_numbers = true)]
    pub level: f64,
    /// Instead of --level: the power the tone should give into the first load; the drive is found
    /// from a short -40 dBFS probe. Needs the calibration with a load.
    #[arg(long, value_name = "W", conflicts_with = "level")]
    pub watts: Option<f64>,
    /// Channel to measure: a number from 1, or `all`.
    #[arg(long, default_value = "all", value_name = "N|all")]
    pub channel: ChannelChoice,
    /// Print JSON instead of the table.
    #[arg(long)]
    pub json: bool,
    /// Print CSV instead (one row per channel; power: per step), to stdout or to FILE.
    #[arg(long, value_name = "FILE", num_args = 0..=1, default_missing_value = "-", conflicts_with = "json")]
    pub csv: Option<PathBuf>,

    #[command(flatten)]
    pub save: SaveArgs,
}

#[derive(Debug, Args)]
pub struct CalibrateArgs {
    /// Where to write the profile.
    #[arg(short = 'o', long = "out", value_name = "FILE.toml")]
    pub out: PathBuf,
    /// A name for the profile.
    #[arg(long)]
    pub name: Option<String>,
    /// RMS volts your meter read at the interface output while the calibration tone played
    /// (the tone is -20 dBFS; `--tone FILE.wav` writes it).
    #[arg(long, value_name = "V")]
    pub meter_vrms: Option<f64>,
    /// Write the calibration tone (997 Hz, -20 dBFS, 30 s) to this file first.
    #[arg(long, value_name = "FILE.wav")]
    pub tone: Option<PathBuf>,
    /// A recording of the calibration tone looped from the interface output straight to its
    /// input: gives the input full scale and the interface's own floor.
    #[arg(long, value_name = "FILE.wav")]
    pub loopback: Option<PathBuf>,
    /// Attenuator: the measured ratio (amplifier V / interface V) ...
    #[arg(long, value_name = "X")]
    pub attenuation: Option<f64>,
    /// ... or the divider's resistors and the interface's input impedance.
    #[arg(long, value_name = "OHMS")]
    pub r_top: Option<f64>,
    /// Divider: the bottom resistor (to ground), ohm.
    #[arg(long, value_name = "OHMS")]
    pub r_bottom: Option<f64>,
    /// The interface input's own impedance, ohm (it loads the divider's bottom resistor).
    #[arg(long, value_name = "OHMS")]
    pub input_impedance: Option<f64>,
    /// Dummy-load resistance.
    #[arg(long, value_name = "OHMS")]
    pub load_ohms: Option<f64>,
    /// Output and input full scales when already known (instead of the meter and the loopback).
    #[arg(long, value_name = "V")]
    pub output_fs_vrms: Option<f64>,
    /// RMS voltage at the interface input that reads as a full-scale sine (0 dBFS), if known.
    #[arg(long, value_name = "V")]
    pub input_fs_vrms: Option<f64>,
    /// Never ask: fail when a value is missing (for scripts).
    #[arg(long)]
    pub no_prompt: bool,
    /// With --rig card: play the calibration tone through the interface, output 1 wired straight
    /// to input 1 (no amplifier), and read the input full scale and the floor from it.
    #[command(flatten)]
    pub rig: RigArgs,
}

#[derive(Debug, Subcommand)]
pub enum GenerateKind {
    /// A steady tone.
    Tone {
        /// Frequency in Hz (997 Hz is the AES17 test tone).
        #[arg(long, default_value_t = 997.0, value_name = "HZ")]
        freq: f64,
        /// Length of the tone.
        #[arg(long, default_value_t = 5.0, value_name = "S")]
        seconds: f64,
        #[command(flatten)]
        common: GenerateCommon,
    },
    /// A staircase of tone levels for the output-power procedure.
    Steps {
        /// The staircase's tone, Hz.
        #[arg(long, default_value_t = 997.0, value_name = "HZ")]
        freq: f64,
        /// First (lowest) step, dBFS.
        #[arg(long = "from", default_value_t = -40.0, value_name = "DBFS", allow_negative_numbers = true)]
        start: f64,
        /// Last (highest) step, dBFS.
        #[arg(long = "to", default_value_t = -6.0, value_name = "DBFS", allow_negative_numbers = true)]
        stop: f64,
        /// Step size in dB.
        #[arg(long, default_value_t = 1.0, value_name = "DB")]
        step: f64,
        /// Time at each level.
        #[arg(long, default_value_t = 1.0, value_name = "S")]
        dwell: f64,
        /// Part of each step left for the amplifier to settle (not analysed).
        #[arg(long, default_value_t = 0.25, value_name = "S")]
        settle: f64,
        #[command(flatten)]
        common: GenerateCommon,
    },
    /// A synchronized exponential sweep (Novak et al. 2015).
    Sweep {
        /// Start frequency in Hz.
        #[arg(long, default_value_t = 10.0, value_name = "HZ")]
        from: f64,
        /// Stop frequency in Hz (default: 0.45 x the rate, at most 40 kHz).
        #[arg(long, value_name = "HZ")]
        to: Option<f64>,
        /// Approximate length (adjusted so the sweep is synchronized).
        #[arg(long, default_value_t = 5.0, value_name = "S")]
        seconds: f64,
        #[command(flatten)]
        common: GenerateCommon,
    },
    /// A two-tone pair for intermodulation: the modulation pair (default 60 Hz + 7 kHz, 4:1) or
    /// the difference-frequency pair (default 19 + 20 kHz, 1:1).
    Twotone {
        /// IMD method: modulation (SMPTE-like, low and high tone 4:1) or difference frequency (two high tones 1:1).
        #[arg(long, value_enum, default_value_t = TwoToneArg::Modulation)]
        method: TwoToneArg,
        /// Low tone in Hz.
        #[arg(long, value_name = "HZ")]
        low: Option<f64>,
        /// High tone in Hz.
        #[arg(long, value_name = "HZ")]
        high: Option<f64>,
        /// Amplitude of the low tone over the high tone.
        #[arg(long, value_name = "R")]
        ratio: Option<f64>,
        /// Length of the pair, seconds.
        #[arg(long, default_value_t = 5.0, value_name = "S")]
        seconds: f64,
        #[command(flatten)]
        common: GenerateCommon,
    },
}

#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum TwoToneArg {
    Modulation,
    Difference,
}

impl TwoToneArg {
    /// The method with its standard low tone, high tone and amplitude ratio (IEC 60268-3).
    pub fn defaults(self) -> (ampnote::signal::stimulus::TwoToneMethod, f64, f64, f64) {
        use ampnote::signal::stimulus::TwoToneMethod;
        match self {
            TwoToneArg::Modulation => (TwoToneMethod::Modulation, 60.0, 7000.0, 4.0),
            TwoToneArg::Difference => (TwoToneMethod::DifferenceFrequency, 19_000.0, 20_000.0, 1.0),
        }
    }
}

/// Options every stimulus takes.
#[derive(Debug, Args)]
pub struct GenerateCommon {
    /// Sample rate in Hz.
    #[arg(long, default_value_t = 48_000, value_name = "HZ")]
    pub rate: u32,
    /// Sample format: 16 or 24-bit integer (TPDF dither) or 32-bit float.
    #[arg(long, value_enum, default_value = "24")]
    pub bits: Bits,
    /// RMS level in dBFS (0 dBFS = a full-scale sine) [default: -12; a staircase takes --from
    /// and --to instead]
    #[arg(long, value_name = "DBFS", allow_negative_numbers = true)]
    pub level: Option<f64>,
    /// Channels in the file.
    #[arg(long, default_value_t = 1, value_name = "N")]
    pub channels: usize,
    /// Channels that carry the signal (e.g. 1 or 1,2); the others stay silent.
    #[arg(long, default_value = "all", value_name = "LIST|all")]
    pub signal_on: ChannelList,
    /// Silence before the signal.
    #[arg(long, default_value_t = 0.2, value_name = "S")]
    pub lead: f64,
    /// Silence after the signal (sweeps need it for the response's tail).
    #[arg(long, default_value_t = 0.5, value_name = "S")]
    pub tail: f64,
    /// Raised-cosine fade at each end (sweeps: fade-in only; default a few periods of the start).
    #[arg(long, value_name = "S")]
    pub fade: Option<f64>,
    /// Seed of the dither (the same seed gives the same file).
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Output WAV file.
    #[arg(short = 'o', long = "out", value_name = "FILE.wav")]
    pub out: PathBuf,
}

#[derive(Debug, Args)]
pub struct ResponseArgs {
    /// The recording of the sweep, or use --rig.
    pub capture: Option<PathBuf>,
    /// The sweep file `ampnote generate sweep` wrote.
    #[arg(long, value_name = "SWEEP.wav")]
    pub stimulus: Option<PathBuf>,
    #[command(flatten)]
    pub rig: RigArgs,
    /// With --rig: the sweep played.
    #[arg(long = "from", default_value_t = 10.0, value_name = "HZ")]
    pub from_hz: f64,
    /// Highest sweep frequency, Hz (default: 20 kHz, or 0.45 x the rate when lower).
    #[arg(long = "to", value_name = "HZ")]
    pub to_hz: Option<f64>,
    /// With --rig: the sweep's RMS level, dBFS.
    #[arg(long, default_value_t = -20.0, value_name = "DBFS", allow_negative_numbers = true)]
    pub level: f64,
    /// With --rig: the sweep's length, seconds.
    #[arg(long, default_value_t = 3.0, value_name = "S")]
    pub seconds: f64,
    /// With --rig: the sample rate, Hz.
    #[arg(long, default_value_t = 48_000, value_name = "HZ")]
    pub rate: u32,
    /// Channel of the capture to analyse: a number from 1, or `all`.
    #[arg(long, default_value = "all", value_name = "N|all")]
    pub channel: ChannelChoice,
    /// Smooth the magnitude over 1/N octave.
    #[arg(long, value_name = "N")]
    pub smooth: Option<u32>,
    /// Points per octave in the curves.
    #[arg(long, default_value_t = 24, value_name = "N")]
    pub points_per_octave: usize,
    /// Highest harmonic order reported against frequency.
    #[arg(long, default_value_t = 5, value_name = "N")]
    pub harmonics: usize,
    /// Reference frequency for the relative magnitude.
    #[arg(long, default_value_t = 1000.0, value_name = "HZ")]
    pub reference: f64,
    #[command(flatten)]
    pub calibration: CalibrationArgs,
    /// Print JSON instead of the table.
    #[arg(long)]
    pub json: bool,
    /// Also write every point (response and harmonics) as CSV to FILE.
    #[arg(long, value_name = "FILE")]
    pub csv: Option<PathBuf>,
    /// Analyse what a truncated file holds instead of refusing it.
    #[arg(long)]
    pub accept_truncated: bool,

    #[command(flatten)]
    pub save: SaveArgs,
}

#[derive(Debug, Args)]
pub struct SeparationArgs {
    /// The recording of every channel while the sweep played into one of them.
    pub capture: PathBuf,
    /// The sweep file `ampnote generate sweep` wrote.
    #[arg(long, value_name = "SWEEP.wav")]
    pub stimulus: PathBuf,
    /// The channel the sweep was played into (1-based).
    #[arg(long, value_name = "N")]
    pub driven: usize,
    #[command(flatten)]
    pub calibration: CalibrationArgs,
    /// Print JSON instead of the table.
    #[arg(long)]
    pub json: bool,
    /// Print CSV instead (one row per channel and frequency), to stdout or to FILE.
    #[arg(long, value_name = "FILE", num_args = 0..=1, default_missing_value = "-", conflicts_with = "json")]
    pub csv: Option<PathBuf>,
    /// Analyse what a truncated file holds instead of refusing it.
    #[arg(long)]
    pub accept_truncated: bool,
    #[command(flatten)]
    pub save: SaveArgs,
}

#[derive(Debug, Args)]
pub struct TrendArgs {
    /// Block length in seconds: one line of figures per block.
    #[arg(long, default_value_t = 1.0, value_name = "S")]
    pub every: f64,
    /// The tone's settings, the rig (with --rig, --seconds is the length of the log), the
    /// calibration and the notebook, as for `analyze`.
    #[command(flatten)]
    pub tone: AnalyzeArgs,
}

#[derive(Debug, Args)]
pub struct NoiseArgs {
    /// The recording of the amplifier's output with no signal, or use --rig (it plays silence).
    pub capture: Option<PathBuf>,
    #[command(flatten)]
    pub rig: RigArgs,
    /// With --rig: how long to listen.
    #[arg(long, default_value_t = 3.0, value_name = "S")]
    pub seconds: f64,
    /// With --rig: the sample rate, Hz.
    #[arg(long, default_value_t = 48_000, value_name = "HZ")]
    pub rate: u32,
    /// Channel to analyse: a number from 1, or `all`.
    #[arg(long, default_value = "all", value_name = "N|all")]
    pub channel: ChannelChoice,
    /// Measurement band in Hz.
    #[arg(long, default_value = "20:20000", value_name = "LO:HI")]
    pub band: Band,
    /// Mains frequency for the hum lines: auto (50 or 60, whichever is present), or a value in Hz.
    #[arg(long, default_value = "auto", value_name = "auto|50|60|HZ")]
    pub mains: MainsChoice,
    #[command(flatten)]
    pub calibration: CalibrationArgs,
    /// Print JSON instead of the table.
    #[arg(long)]
    pub json: bool,
    /// Print CSV instead (one row per channel; power: per step), to stdout or to FILE.
    #[arg(long, value_name = "FILE", num_args = 0..=1, default_missing_value = "-", conflicts_with = "json")]
    pub csv: Option<PathBuf>,

    #[command(flatten)]
    pub save: SaveArgs,
}

#[derive(Debug, Args)]
pub struct ImdArgs {
    /// The recording of the two-tone pair, or use --rig.
    pub capture: Option<PathBuf>,
    #[command(flatten)]
    pub rig: RigArgs,
    /// With --rig: the pair played (the method's standard frequencies and ratio).
    #[arg(long, value_enum, default_value_t = TwoToneArg::Modulation)]
    pub method: TwoToneArg,
    /// With --rig: the pair's RMS level, dBFS.
    #[arg(long, default_value_t = -20.0, value_name = "DBFS", allow_negative_numbers = true)]
    pub level: f64,
    /// With --rig: the pair's length, seconds.
    #[arg(long, default_value_t = 2.0, value_name = "S")]
    pub seconds: f64,
    /// With --rig: the sample rate, Hz.
    #[arg(long, default_value_t = 48_000, value_name = "HZ")]
    pub rate: u32,
    #[command(flatten)]
    pub calibration: CalibrationArgs,
    /// The two-tone file `ampnote generate twotone` wrote (tells the method and frequencies).
    #[arg(long, value_name = "FILE.wav")]
    pub stimulus: Option<PathBuf>,
    /// Channel of the capture to analyse: a number from 1, or `all`.
    #[arg(long, default_value = "all", value_name = "N|all")]
    pub channel: ChannelChoice,
    /// Print JSON instead of the table.
    #[arg(long)]
    pub json: bool,
    /// Print CSV instead (one row per channel; power: per step), to stdout or to FILE.
    #[arg(long, value_name = "FILE", num_args = 0..=1, default_missing_value = "-", conflicts_with = "json")]
    pub csv: Option<PathBuf>,
    /// Analyse what a truncated file holds instead of refusing it.
    #[arg(long)]
    pub accept_truncated: bool,

    #[command(flatten)]
    pub save: SaveArgs,
}

#[derive(Debug, Args)]
pub struct AnalyzeArgs {
    /// The recording (WAV, RF64, FLAC or AIFF; integer PCM or float), or use --rig.
    pub capture: Option<PathBuf>,

    #[command(flatten)]
    pub rig: RigArgs,

    /// With --rig: the tone played.
    #[arg(long, default_value_t = 997.0, value_name = "HZ")]
    pub freq: f64,
    /// With --rig: the tone's RMS level, dBFS.
    #[arg(long, default_value_t = -20.0, value_name = "DBFS", allow_negative_numbers = true)]
    pub level: f64,
    /// With --rig, instead of --level: the power into the load the tone should give ("THD at
    /// 1 W"); the drive is found from a short -40 dBFS probe. Needs the calibration with a load.
    #[arg(long, value_name = "W", conflicts_with = "level")]
    pub watts: Option<f64>,
    /// With --rig: the tone's length, seconds.
    #[arg(long, default_value_t = 2.0, value_name = "S")]
    pub seconds: f64,
    /// With --rig: the sample rate, Hz.
    #[arg(long, default_value_t = 48_000, value_name = "HZ")]
    pub rate: u32,

    /// Channel to analyse: a number from 1, or `all`.
    #[arg(long, default_value = "all", value_name = "N|all")]
    pub channel: ChannelChoice,

    /// Measurement band in Hz (default 20:20000, or up to Nyquist when the rate is lower).
    #[arg(long, value_name = "LO:HI")]
    pub band: Option<Band>,

    /// Weighting of the noise figure.
    #[arg(long, value_enum, default_value_t = WeightingArg::None)]
    pub weighting: WeightingArg,

    /// Highest harmonic order to report (H2..HN).
    #[arg(long, default_value_t = 10, value_name = "N")]
    pub harmonics: usize,

    /// Mains frequency for the hum lines: auto (50 or 60, whichever is present), or a value in Hz.
    #[arg(long, default_value = "auto", value_name = "auto|50|60|HZ")]
    pub mains: MainsChoice,

    /// Expected fundamental in Hz (the search stays within 2 % of it).
    #[arg(long, value_name = "HZ")]
    pub fundamental: Option<f64>,

    #[command(flatten)]
    pub calibration: CalibrationArgs,

    /// Print JSON instead of the table.
    #[arg(long, conflicts_with = "csv")]
    pub json: bool,

    /// Print CSV (one row per channel), to stdout or to FILE.
    #[arg(long, value_name = "FILE", num_args = 0..=1, default_missing_value = "-")]
    pub csv: Option<PathBuf>,

    /// Analyse what a truncated file holds instead of refusing it.
    #[arg(long)]
    pub accept_truncated: bool,

    #[command(flatten)]
    pub save: SaveArgs,
}

/// Where the signal goes and comes from on a rig run, shared by every measuring command.
#[derive(Debug, Args)]
pub struct RigArgs {
    /// Measure on a rig instead of a capture file: sim[:MODEL] (the simulated bench; models
    /// stock, reworked, or a model file) or card[:NAME] (the audio interface; needs a build
    /// with --features live). On a real amplifier: attenuator and dummy load first.
    #[arg(long, value_name = "sim[:MODEL]|card[:NAME]")]
    pub rig: Option<String>,
    /// Live rig: the audio host (alsa, jack, pulseaudio, ...; `ampnote devices` lists them).
    #[arg(long, value_name = "NAME")]
    pub host: Option<String>,
    /// Live rig: the input device, when it is not the output device.
    #[arg(long, value_name = "NAME")]
    pub input_device: Option<String>,
    /// Live rig: the interface output feeding each amplifier channel (1 for channel 1, ...).
    #[arg(long, default_value = "1,2", value_name = "LIST", value_delimiter = ',', value_parser = output_channel)]
    pub outputs: Vec<usize>,
    /// Live rig: the interface input reading each amplifier channel (through the attenuator).
    #[arg(long, default_value = "1,2", value_name = "LIST", value_delimiter = ',', value_parser = input_channel)]
    pub inputs: Vec<usize>,
    /// Live rig, JACK only: connect ampnote's outputs to its inputs (checks the rig itself,
    /// with no amplifier).
    #[arg(long)]
    pub self_patch: bool,
    /// Live rig: frames per buffer to ask the host for.
    #[arg(long, value_name = "FRAMES")]
    pub buffer: Option<u32>,
    /// Where rig runs keep their stimulus and capture files (and partial captures).
    #[arg(long, default_value = "ampnote-captures", value_name = "DIR")]
    pub captures_dir: PathBuf,
}

impl RigArgs {
    /// The live settings, checked.
    pub fn options(&self, calibration: Calibration) -> Result<ampnote::rig::RigOptions, String> {
        Ok(ampnote::rig::RigOptions {
            host: self.host.clone(),
            input_device: self.input_device.clone(),
            outputs: self.outputs.clone(),
            inputs: self.inputs.clone(),
            self_patch: self.self_patch,
            buffer_frames: self.buffer,
            keep_dir: self.captures_dir.clone(),
            calibration,
            test_drop_frames: 0,
        })
    }

    /// The rig the user named, if any. Its errors keep their kind (a device fault exits 3).
    pub fn open(
        &self,
        calibration: Calibration,
    ) -> Result<Option<Box<dyn ampnote::rig::Rig>>, ampnote::Error> {
        let Some(spec) = &self.rig else {
            return Ok(None);
        };
        let options = self
            .options(calibration)
            .map_err(ampnote::Error::InvalidSetting)?;
        ampnote::rig::parse_rig_with(spec, &options).map(Some)
    }
}

#[derive(Debug, Args)]
pub struct WatchArgs {
    #[command(flatten)]
    pub rig: RigArgs,
    /// Amplifier channel to watch.
    #[arg(long, default_value_t = 1, value_name = "N")]
    pub channel: usize,
    /// The tone played, Hz.
    #[arg(long, default_value_t = 997.0, value_name = "HZ")]
    pub freq: f64,
    /// The tone's RMS level at the interface output, dBFS.
    #[arg(long, default_value_t = -20.0, value_name = "DBFS", allow_negative_numbers = true)]
    pub level: f64,
    /// Instead of --level: the power into the load the tone should give; the drive is found
    /// from a short -40 dBFS probe. Needs the calibration with a load.
    #[arg(long, value_name = "W", conflicts_with = "level")]
    pub watts: Option<f64>,
    /// Sample rate, Hz.
    #[arg(long, default_value_t = 48_000, value_name = "HZ")]
    pub rate: u32,
    /// Readings per second (5 to 50).
    #[arg(long, default_value_t = 8.0, value_name = "N")]
    pub refresh: f64,
    /// Stop after this many seconds (default: until Ctrl-C).
    #[arg(long, value_name = "S")]
    pub seconds: Option<f64>,
    /// Print each reading as one JSON object per line (JSON Lines: the trend's point with its
    /// time) instead of the redrawn line.
    #[arg(long)]
    pub json: bool,
    /// Keep every reading, with its time, in this CSV file (a new file; the columns of
    /// `ampnote trend --csv`). Each line is written as it is read, so Ctrl-C loses nothing.
    #[arg(long, value_name = "FILE.csv")]
    pub log: Option<PathBuf>,
    #[command(flatten)]
    pub calibration: CalibrationArgs,
}

/// Keeping a run in a notebook, shared by every measuring command.
#[derive(Debug, Args)]
pub struct SaveArgs {
    /// Keep the run (stimulus, capture, result) in this notebook folder.
    #[arg(long, value_name = "DIR", requires = "label")]
    pub notebook: Option<PathBuf>,
    /// The run's label, e.g. stock or "after driver rework".
    #[arg(long, value_name = "LABEL", requires = "notebook")]
    pub label: Option<String>,
    /// A note kept with the run.
    #[arg(long, value_name = "TEXT", default_value = "")]
    pub note: String,
    /// A free-form setting kept with the run, e.g. --set mains=229V --set valves="set B".
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub settings: Vec<String>,
}

impl SaveArgs {
    /// The settings as a map; a setting without `=` is refused.
    pub fn settings_map(&self) -> Result<std::collections::BTreeMap<String, String>, String> {
        self.settings
            .iter()
            .map(|kv| {
                kv.split_once('=')
                    .map(|(k, v)| (k.trim().to_string(), v.trim().to_string()))
                    .ok_or_else(|| format!("--set takes KEY=VALUE, got `{kv}`"))
            })
            .collect()
    }
}

/// Calibration flags shared by every analysing command.
#[derive(Debug, Args)]
pub struct CalibrationArgs {
    /// Calibration profile (TOML, see calibration/README.md); the flags below override it.
    #[arg(long, value_name = "FILE.toml")]
    pub profile: Option<PathBuf>,

    /// RMS voltage at the interface input that reads as a full-scale sine (0 dBFS).
    #[arg(long, value_name = "V")]
    pub input_fs_vrms: Option<f64>,

    /// Attenuator ratio: amplifier output voltage / interface input voltage (e.g. 10 for 20 dB).
    #[arg(long, value_name = "X")]
    pub attenuation: Option<f64>,

    /// Dummy-load resistance in ohms (gives watts).
    #[arg(long, value_name = "OHMS")]
    pub load_ohms: Option<f64>,

    /// RMS voltage of a full-scale sine at the interface output (gives absolute gain).
    #[arg(long, value_name = "V")]
    pub output_fs_vrms: Option<f64>,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum WeightingArg {
    None,
    A,
}

impl GenerateCommon {
    /// The validated common stimulus settings (fade: the kind's default when not given).
    pub fn common(&self, default_fade_s: f64) -> Result<Common, String> {
        let signal_channels = match &self.signal_on {
            ChannelList::All => (1..=self.channels).collect(),
            ChannelList::These(v) => v.clone(),
        };
        Ok(Common {
            sample_rate_hz: self.rate,
            level_dbfs: self.level.unwrap_or(-12.0),
            channels: self.channels,
            signal_channels,
            lead_s: self.lead,
            tail_s: self.tail,
            fade_s: self.fade.unwrap_or(default_fade_s),
        })
    }

    pub fn format(&self) -> Result<WavFormat, String> {
        Ok(match self.bits {
            Bits::Int16 => WavFormat::Int { bits: 16 },
            Bits::Int24 => WavFormat::Int { bits: 24 },
            Bits::Float32 => WavFormat::Float32,
        })
    }
}

impl AnalyzeArgs {
    /// The channel choice: `None` for all.
    pub fn channel_choice(&self) -> Result<Option<usize>, String> {
        Ok(self.channel.get())
    }

    /// The validated analysis settings.
    pub fn tone_config(&self) -> Result<ToneConfig, String> {
        let mut cfg = ToneConfig::default();
        if let Some(b) = self.band {
            cfg.band_low_hz = b.low_hz;
            cfg.band_high_hz = Some(b.high_hz);
        }
        cfg.weighting = match self.weighting {
            WeightingArg::None => Weighting::None,
            WeightingArg::A => Weighting::A,
        };
        cfg.max_harmonic = self.harmonics;
        cfg.mains = self.mains.0;
        cfg.fundamental_hint_hz = self.fundamental;
        Ok(cfg)
    }
}

impl CalibrationArgs {
    /// The profile (if any) with the flags over it, checked.
    pub fn calibration(&self) -> Result<Calibration, String> {
        self.over(Calibration::default())
    }

    /// The calibration of a run that may be kept in a notebook: the notebook's own (its profile
    /// and load, copied in at `notebook init`) under the profile given here, under the flags.
    pub fn resolve(&self, save: &SaveArgs) -> Result<Calibration, String> {
        let base = match &save.notebook {
            Some(dir) => ampnote::notebook::Notebook::open(dir)
                .and_then(|nb| nb.calibration())
                .map_err(|e| e.to_string())?,
            None => Calibration::default(),
        };
        self.over(base)
    }

    /// `base` with the profile given here over it, then the flags.
    fn over(&self, notebook: Calibration) -> Result<Calibration, String> {
        let base = match &self.profile {
            Some(p) => Profile::load(p)
                .and_then(|p| p.calibration())
                .map_err(|e| e.to_string())?,
            None => Calibration::default(),
        };
        notebook
            .overridden_by(base)
            .overridden_by(Calibration {
                input_fs_vrms: self.input_fs_vrms,
                attenuation: self.attenuation,
                load_ohms: self.load_ohms,
                output_fs_vrms: self.output_fs_vrms,
                ..Calibration::default()
            })
            .validated()
            .map_err(|e| e.to_string())
    }
}

// --- flag values, parsed and checked by clap before a command runs ------------------------------
// Every value below is parsed with its `FromStr` (clap's `value_parser!` picks it up), so a typo
// in `--channel`, `--band` or `--freq` is a usage error before any file or rig is opened.

/// `--channel`: one channel, or all of them.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ChannelChoice {
    All,
    One(usize),
}

impl ChannelChoice {
    /// `None` for all.
    pub fn get(self) -> Option<usize> {
        match self {
            ChannelChoice::All => None,
            ChannelChoice::One(n) => Some(n),
        }
    }
}

impl std::str::FromStr for ChannelChoice {
    type Err = String;
    fn from_str(text: &str) -> Result<Self, String> {
        if text.eq_ignore_ascii_case("all") {
            return Ok(ChannelChoice::All);
        }
        text.trim()
            .parse::<usize>()
            .map(ChannelChoice::One)
            .map_err(|_| format!("--channel takes a number from 1 or `all`, got `{text}`"))
    }
}

/// A list of channel numbers from 1 (`1` or `1,2`), or `all`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ChannelList {
    All,
    These(Vec<usize>),
}

impl std::str::FromStr for ChannelList {
    type Err = String;
    fn from_str(text: &str) -> Result<Self, String> {
        if text.eq_ignore_ascii_case("all") {
            return Ok(ChannelList::All);
        }
        text.split(',')
            .map(|t| t.trim().parse::<usize>().ok().filter(|&n| n >= 1))
            .collect::<Option<Vec<_>>>()
            .map(ChannelList::These)
            .ok_or_else(|| {
                format!("takes channel numbers from 1 like 1 or 1,2, or `all`; got `{text}`")
            })
    }
}

/// `--band LO:HI` in Hz.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Band {
    pub low_hz: f64,
    pub high_hz: f64,
}

impl std::str::FromStr for Band {
    type Err = String;
    fn from_str(text: &str) -> Result<Self, String> {
        let said = || format!("--band takes LO:HI in Hz, for example 20:20000; got `{text}`");
        let (lo, hi) = text.split_once(':').ok_or_else(said)?;
        let number = |s: &str| {
            s.trim().parse::<f64>().map_err(|_| {
                format!("--band takes LO:HI in Hz, for example 20:20000; `{s}` is not a number")
            })
        };
        let (low_hz, high_hz) = (number(lo)?, number(hi)?);
        if !(low_hz.is_finite() && high_hz.is_finite() && low_hz >= 0.0 && high_hz > low_hz) {
            return Err(format!(
                "--band takes LO:HI with 0 <= LO < HI in Hz, for example 20:20000; got `{text}`"
            ));
        }
        Ok(Band { low_hz, high_hz })
    }
}

/// `--mains auto|50|60|HZ`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MainsChoice(pub Mains);

impl std::str::FromStr for MainsChoice {
    type Err = String;
    fn from_str(text: &str) -> Result<Self, String> {
        if text.eq_ignore_ascii_case("auto") {
            return Ok(MainsChoice(Mains::Auto));
        }
        text.trim()
            .parse::<f64>()
            .ok()
            .filter(|f| f.is_finite() && *f > 0.0)
            .map(|f| MainsChoice(Mains::Hz(f)))
            .ok_or_else(|| format!("--mains takes auto, 50, 60 or a frequency in Hz; got `{text}`"))
    }
}

/// A frequency in Hz, above 0 (the range against the rate is checked where the rate is known).
pub fn hertz(text: &str) -> Result<f64, String> {
    text.trim()
        .parse::<f64>()
        .ok()
        .filter(|f| f.is_finite() && *f > 0.0)
        .ok_or_else(|| {
            format!("takes frequencies in Hz above 0, like 997 or 40,997,10000; got `{text}`")
        })
}

fn interface_channel(flag: &str, text: &str) -> Result<usize, String> {
    text.trim()
        .parse::<usize>()
        .ok()
        .filter(|&n| n >= 1)
        .ok_or_else(|| {
            format!("--{flag} takes interface channel numbers from 1, like 1 or 1,2; got `{text}`")
        })
}

/// `--outputs`: interface outputs from 1.
pub fn output_channel(text: &str) -> Result<usize, String> {
    interface_channel("outputs", text)
}

/// `--inputs`: interface inputs from 1.
pub fn input_channel(text: &str) -> Result<usize, String> {
    interface_channel("inputs", text)
}

/// A resistance in ohms, above 0.
pub fn ohms(text: &str) -> Result<f64, String> {
    text.trim()
        .parse::<f64>()
        .ok()
        .filter(|r| r.is_finite() && *r > 0.0)
        .ok_or_else(|| format!("takes resistances in ohms above 0, like 8,16; got `{text}`"))
}

/// `--bits`: the sample format of a written stimulus.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Bits {
    // (No doc comments on the values: clap would switch every help line to the long layout.)
    #[value(name = "16")]
    Int16,
    #[value(name = "24")]
    Int24,
    #[value(name = "32f", alias = "32")]
    Float32,
}
