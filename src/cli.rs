//! Command-line definitions (clap derive) and their conversion into library settings.
//! Nothing here touches files or devices.

use ampnote::analysis::tone::{Mains, ToneConfig};
use ampnote::analysis::weighting::Weighting;
use ampnote::calibration::Calibration;
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
}

#[derive(Debug, Args)]
pub struct AnalyzeArgs {
    /// The recording (WAV: 16/24/32-bit integer or 32-bit float).
    pub capture: PathBuf,

    /// Channel to analyse: a number from 1, or `all`.
    #[arg(long, default_value = "all", value_name = "N|all")]
    pub channel: String,

    /// Measurement band in Hz (default 20:20000, or up to Nyquist when the rate is lower).
    #[arg(long, value_name = "LO:HI")]
    pub band: Option<String>,

    /// Weighting of the noise figure.
    #[arg(long, value_enum, default_value_t = WeightingArg::None)]
    pub weighting: WeightingArg,

    /// Highest harmonic order to report (H2..HN).
    #[arg(long, default_value_t = 10, value_name = "N")]
    pub harmonics: usize,

    /// Mains frequency for the hum lines: auto (50 or 60, whichever is present), or a value in Hz.
    #[arg(long, default_value = "auto", value_name = "auto|50|60|HZ")]
    pub mains: String,

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
}

/// Calibration flags shared by every analysing command.
#[derive(Debug, Args)]
pub struct CalibrationArgs {
    /// RMS voltage at the interface input that reads as a full-scale sine (0 dBFS).
    #[arg(long, value_name = "V")]
    pub input_fs_vrms: Option<f64>,

    /// Attenuator ratio: amplifier output voltage / interface input voltage (e.g. 10 for 20 dB).
    #[arg(long, value_name = "X")]
    pub attenuation: Option<f64>,

    /// Dummy-load resistance in ohms (gives watts).
    #[arg(long, value_name = "OHMS")]
    pub load_ohms: Option<f64>,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum WeightingArg {
    None,
    A,
}

impl AnalyzeArgs {
    /// The channel choice: `None` for all.
    pub fn channel_choice(&self) -> Result<Option<usize>, String> {
        if self.channel.eq_ignore_ascii_case("all") {
            return Ok(None);
        }
        self.channel.parse::<usize>().map(Some).map_err(|_| {
            format!(
                "--channel takes a number from 1 or `all`, got `{}`",
                self.channel
            )
        })
    }

    /// The validated analysis settings.
    pub fn tone_config(&self) -> Result<ToneConfig, String> {
        let mut cfg = ToneConfig::default();
        if let Some(b) = &self.band {
            let (lo, hi) = b.split_once(':').ok_or_else(|| {
                format!("--band takes LO:HI in Hz, for example 20:20000; got `{b}`")
            })?;
            let parse = |s: &str| {
                s.trim().parse::<f64>().map_err(|_| {
                    format!("--band takes LO:HI in Hz, for example 20:20000; `{s}` is not a number")
                })
            };
            cfg.band_low_hz = parse(lo)?;
            cfg.band_high_hz = Some(parse(hi)?);
        }
        cfg.weighting = match self.weighting {
            WeightingArg::None => Weighting::None,
            WeightingArg::A => Weighting::A,
        };
        cfg.max_harmonic = self.harmonics;
        cfg.mains = if self.mains.eq_ignore_ascii_case("auto") {
            Mains::Auto
        } else {
            Mains::Hz(self.mains.parse::<f64>().map_err(|_| {
                format!(
                    "--mains takes auto, 50, 60 or a frequency in Hz; got `{}`",
                    self.mains
                )
            })?)
        };
        cfg.fundamental_hint_hz = self.fundamental;
        Ok(cfg)
    }
}

impl CalibrationArgs {
    pub fn calibration(&self) -> Calibration {
        Calibration {
            input_fs_vrms: self.input_fs_vrms,
            attenuation: self.attenuation,
            load_ohms: self.load_ohms,
        }
    }
}
