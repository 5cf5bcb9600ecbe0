//! The measuring commands' flags.

use super::*;

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
    pub common: ReadingArgs,
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
    #[command(flatten)]
    pub print: PrintArgs,

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
    // With --rig card the calibration tone is played through the interface (the command's help).
    #[command(flatten)]
    pub rig: RigArgs,
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
    /// The recording of every channel while the sweep played into one of them (or use --rig).
    pub capture: Option<PathBuf>,
    /// The sweep file `ampnote generate sweep` wrote (a rig run writes its own).
    #[arg(long, value_name = "SWEEP.wav")]
    pub stimulus: Option<PathBuf>,
    /// The channel the sweep is played into (1-based); every other channel is recorded with it.
    #[arg(long, value_name = "N")]
    pub driven: usize,
    // On a rig: the sweep into --driven, every channel recorded (the command's help).
    #[command(flatten)]
    pub rig: RigArgs,
    /// With --rig: the sweep's RMS level, dBFS.
    #[arg(long, default_value_t = -20.0, value_name = "DBFS", allow_negative_numbers = true)]
    pub level: f64,
    /// With --rig: the sample rate, Hz.
    #[arg(long, default_value_t = 48_000, value_name = "HZ")]
    pub rate: u32,
    /// With --rig: play the sweep at the drive that gives this power (W) at 1 kHz, found with
    /// a tone first, instead of at --level (common practice: separation at 1 W or rated power).
    #[arg(long, value_name = "W", conflicts_with = "level")]
    pub watts: Option<f64>,
    #[command(flatten)]
    pub common: ReadingArgs,
}

#[derive(Debug, Args)]
pub struct SquareArgs {
    /// The recording of the amplifier's output while the stimulus played (or use --rig).
    pub capture: Option<PathBuf>,
    /// What was played: a square (`ampnote generate square`), or a sweep (`ampnote generate
    /// sweep`), from whose measured response the squares are predicted.
    #[arg(long, value_name = "FILE.wav")]
    pub stimulus: Option<PathBuf>,
    // On a rig: a sweep, the squares predicted from it (the command's help).
    #[command(flatten)]
    pub rig: RigArgs,
    /// With --rig: the sweep's RMS level, dBFS.
    #[arg(long, default_value_t = -20.0, value_name = "DBFS", allow_negative_numbers = true)]
    pub level: f64,
    /// With --rig: the sample rate, Hz (96 kHz: the sweep then reaches 40 kHz and the squares'
    /// edges are sharper).
    #[arg(long, default_value_t = 96_000, value_name = "HZ")]
    pub rate: u32,
    /// With a sweep: the square waves to predict, Hz.
    #[arg(long, value_name = "HZ,...", value_delimiter = ',', value_parser = hertz, default_value = "40,1000")]
    pub freq: Vec<f64>,
    /// Channel to analyse: a number from 1, or `all`.
    #[arg(long, default_value = "all", value_name = "N|all")]
    pub channel: ChannelChoice,
    #[command(flatten)]
    pub common: ReadingArgs,
}

#[derive(Debug, Args)]
pub struct TrendArgs {
    /// Block length in seconds: one line of figures per block.
    #[arg(long, default_value_t = 1.0, value_name = "S")]
    pub every: f64,
    // The tone's settings, rig, calibration and notebook, as for `analyze` (the command's help).
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
    #[command(flatten)]
    pub print: PrintArgs,

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
    /// The two-tone file `ampnote generate twotone` wrote (tells the method and frequencies).
    #[arg(long, value_name = "FILE.wav")]
    pub stimulus: Option<PathBuf>,
    /// Channel of the capture to analyse: a number from 1, or `all`.
    #[arg(long, default_value = "all", value_name = "N|all")]
    pub channel: ChannelChoice,
    #[command(flatten)]
    pub common: ReadingArgs,
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
    pub common: ReadingArgs,
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
