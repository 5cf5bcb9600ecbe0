//! `ampnote generate`: the stimuli and their shared flags.

use super::*;

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
    /// A square wave for the square-wave response (`ampnote square`): its edges smoothed by a
    /// Gaussian filter, so it neither overshoots nor aliases by itself.
    Square {
        /// Frequency in Hz (a low one shows tilt, a high one overshoot and ringing).
        #[arg(long, default_value_t = 1000.0, value_name = "HZ")]
        freq: f64,
        /// The edge filter's -3 dB point (default: 60 dB down at the Nyquist frequency, 0.112 x
        /// the rate); the edge's 10-90 % rise time is 0.34 / this.
        #[arg(long, value_name = "HZ")]
        bandwidth: Option<f64>,
        /// Length (whole periods).
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
