//! Oscillation checks: lines that belong neither to the stimulus, its harmonics, the mains family
//! nor the noise, above the audio band (an ultrasonic parasitic oscillation) or below it (a
//! sub-audio line, or the level pumping at a few hertz: motorboating, the low-frequency
//! instability a rework of the supply decoupling can cause or cure).
//!
//! ## Method
//! On the spectrum the analysis already made, with every fitted line removed:
//! - **Search threshold.** Noise alone gives each bin an exponentially distributed power around
//!   the local density; the largest of `M` bins reaches about `ln M` times the mean. A line counts
//!   when its peak bin exceeds the local density by `ln M + 10` (the chance that noise alone does
//!   so anywhere in the search is about e^-10; the same 10 the detection limits use).
//! - **Ultrasonic**: from the top of the band (at least 20 kHz) to Nyquist, less the window's main
//!   lobe. A multiple of the tone (or an alias of one) is a harmonic only when it is no more than
//!   10 dB above the strongest in-band harmonic: harmonics fall with order, an 85th "harmonic" at
//!   -40 dBc beside an H2 at -100 dBc is an oscillation that happens to sit on the grid.
//! - **Sub-audio**: below 10 Hz, above the window's resolution (two main-lobe half-widths).
//! - **Motorboating**: a pair of sidebands at f0 +/- d, d from the resolution to 10 Hz, both above
//!   the threshold: amplitude modulation of index m puts m/2 of the carrier in each, so
//!   m = sqrt(r_low) + sqrt(r_high) (r: power over the fundamental's). The offset is refined by
//!   parabolic interpolation of the peak bins' dB levels on both sides and averaged.
//!
//! The rate limits what can be seen: the result says up to which frequency it looked.

use serde::{Deserialize, Serialize};

/// What kind of unexplained line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum OscillationKind {
    /// A line above the audio band.
    Ultrasonic,
    /// A line below 10 Hz.
    SubAudio,
    /// The tone's level pumping periodically at a few hertz (sidebands at f0 +/- f).
    Motorboating,
}

/// One oscillation found.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Oscillation {
    pub kind: OscillationKind,
    /// The line's frequency; for motorboating, the pumping rate.
    pub frequency_hz: f64,
    /// Level, dBFS (for motorboating, the stronger sideband's).
    pub level_dbfs: f64,
    /// The same against the tone's fundamental (none in a noise capture), dB.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub level_dbc: Option<f64>,
    /// Motorboating: the amplitude modulation index, percent.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub modulation_percent: Option<f64>,
}

impl Oscillation {
    /// Its level as said in messages: dBc beside a tone, dBFS in a noise capture.
    pub fn level_text(&self) -> String {
        match self.level_dbc {
            Some(c) => format!("{c:.1} dBc"),
            None => format!("{:.1} dBFS", self.level_dbfs),
        }
    }

    /// The warning that names it.
    pub fn warning(&self) -> crate::warning::Warning {
        use crate::warning::WarningCode as C;
        let code = match self.kind {
            OscillationKind::Motorboating => C::Motorboating,
            _ => C::Oscillation,
        };
        code.say(match self.kind {
            OscillationKind::Ultrasonic => format!(
                "an ultrasonic line at {:.1} kHz ({}) is no harmonic of the signal nor mains: the amplifier may be oscillating (a parasitic oscillation); look with a scope, and do not trust THD+N, noise or power figures until it is gone",
                self.frequency_hz / 1000.0,
                self.level_text()
            ),
            OscillationKind::SubAudio => format!(
                "a sub-audio line at {:.2} Hz ({}): a slow oscillation (motorboating) or the capture's own drift; check the supply decoupling and the recording",
                self.frequency_hz,
                self.level_text()
            ),
            OscillationKind::Motorboating => format!(
                "the level pumps at {:.2} Hz ({:.1} % amplitude modulation): motorboating, a low-frequency instability (often the supply decoupling); the figures wander with it",
                self.frequency_hz,
                self.modulation_percent.unwrap_or(0.0)
            ),
        })
    }
}

/// Where the checks could look.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
pub struct OscillationSearch {
    /// Ultrasonic lines were looked for up to this frequency (Nyquist less the window's lobe);
    /// `None` when the rate leaves nothing above the band to search.
    pub ultrasonic_to_hz: Option<f64>,
    /// Sub-audio lines and pumping were looked for down to this frequency (the capture's
    /// resolution); `None` when the capture is too short to resolve anything below 10 Hz.
    pub subaudio_from_hz: Option<f64>,
}

/// Threshold factor over the local density for a search over `bins` bins (see module docs).
pub(crate) fn search_factor(bins: usize) -> f64 {
    (bins.max(1) as f64).ln() + 10.0
}

/// Parabolic interpolation of a peak from three dB values: the offset in bins from the middle.
pub(crate) fn parabolic_offset(a: f64, b: f64, c: f64) -> f64 {
    let den = a - 2.0 * b + c;
    if den.abs() < 1e-12 {
        0.0
    } else {
        (0.5 * (a - c) / den).clamp(-0.5, 0.5)
    }
}

/// 10 dB above the whole quantisation noise of a `bits`-bit word (6.02 b + 1.76 dB below a
/// full-scale sine): no rounding pattern of the file reaches it.
pub(crate) fn quantisation_floor_dbfs(bits: u32) -> f64 {
    -(6.02 * bits as f64 + 1.76) + 10.0
}

/// Sub-audio and pumping checks need at least this to be meaningful.
pub(crate) const SUBAUDIO_TOP_HZ: f64 = 10.0;
