//! Command-line definitions (clap derive) and their conversion into library settings.
//! Nothing here touches files or devices.

use ampnote::analysis::tone::{Mains, ToneConfig};
use ampnote::analysis::weighting::Weighting;
use ampnote::calibration::{Calibration, Profile};
use ampnote::signal::stimulus::Common;
use ampnote::signal::wav::WavFormat;
use clap::{Args, Parser, Subcommand, ValueEnum};
use std::path::PathBuf;

mod flags;
mod generate;
mod measure;
mod notebook;
mod shared;
pub use flags::*;
pub use generate::*;
pub use measure::*;
pub use notebook::*;
pub use shared::*;

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
    /// channel recorded: each other channel's level below it, against frequency. On a rig the
    /// sweep (10 Hz to 0.45 x the rate, at most 40 kHz) goes into --driven and every channel is
    /// recorded at once.
    Separation(SeparationArgs),
    /// Square-wave response (rise time, overshoot, ringing, settling, tilt) from a recorded
    /// square, or predicted from a recorded sweep. On a rig a sweep is played (10 Hz to 0.45 x the
    /// rate, at most 40 kHz) and the squares are predicted from the response it measures.
    Square(SquareArgs),
    /// Intermodulation distortion from a recorded two-tone pair (IEC 60268-3).
    Imd(ImdArgs),
    /// Follow a steady tone over a long capture (a warm-up, a hum log): level, THD, THD+N, H2, H3
    /// and the strongest hum line per block, with the drift of each. The tone's settings, the rig
    /// (with --rig, --seconds is the log's length), calibration and notebook are as for `analyze`.
    Trend(TrendArgs),
    /// Noise and hum with no signal (input shorted or silent): flat and A-weighted, mains lines,
    /// and S/N re 1 W when calibrated.
    Noise(NoiseArgs),
    /// Output power at 1 %, 3 % and 10 % THD from a staircase of levels (a capture, or a rig).
    Power(PowerArgs),
    /// Output impedance and damping factor by the two-load method.
    Zout(ZoutArgs),
    /// Build a calibration profile: interface full scales, attenuator, load, loopback floor.
    /// With `--rig card`, the calibration tone is played through the interface (output 1 wired
    /// straight to input 1, no amplifier) and the input full scale and floor are read from it.
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
        /// Leave out the example circuits' predictions (made with ngspice when it is installed;
        /// several minutes on two cores).
        #[arg(long)]
        no_circuits: bool,
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
