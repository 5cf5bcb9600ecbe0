//! The notebook's commands: keeping runs, comparing labels, matching channels.

use super::*;

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
