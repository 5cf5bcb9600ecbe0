//! Channel separation (IEC 60268-3 crosstalk): with a sweep on one channel only, how far below
//! it every other channel stays, against frequency.
//!
//! Each channel's response to the one sweep is measured as usual ([`super::sweep`]); the
//! separation at f is the driven channel's absolute gain there over the other channel's, in dB
//! (both carry the same stimulus, so the interface and the attenuator cancel). A channel whose
//! crosstalk is too weak to measure (its capture is its own noise) gets a lower bound instead: its
//! whole level during the sweep against the driven channel's, which the crosstalk cannot exceed.

use super::sweep::{interpolate_log, ResponseResult};
use serde::{Deserialize, Serialize};

/// The separation is summarised over this band (the audio band, common practice).
pub const SUMMARY_BAND_HZ: (f64, f64) = (20.0, 20_000.0);

#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct SeparationPoint {
    pub frequency_hz: f64,
    pub separation_db: f64,
}

/// One undriven channel against the driven one.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChannelSeparation {
    pub channel: usize,
    pub points: Vec<SeparationPoint>,
    /// At 1 kHz (interpolated on the log-frequency grid), dB.
    pub at_1khz_db: Option<f64>,
    /// The least separation over 20 Hz - 20 kHz (within the sweep), and where.
    pub worst_db: Option<f64>,
    pub worst_hz: Option<f64>,
    /// When the crosstalk could not be measured: the separation is at least this, dB.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub at_least_db: Option<f64>,
}

/// What `ampnote separation` finds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SeparationResult {
    pub driven_channel: usize,
    pub channels: Vec<ChannelSeparation>,
    #[serde(default)]
    pub warnings: Vec<crate::warning::Warning>,
}

/// The absolute gain of a response at each of its points, dB.
fn gains(r: &ResponseResult) -> Vec<(f64, f64)> {
    r.points
        .iter()
        .map(|p| (p.frequency_hz, r.reference_gain_db + p.magnitude_db))
        .collect()
}

/// The separation of `other` from `driven` (both measured on the same sweep with the same
/// settings, so on the same frequency grid).
pub fn between(driven: &ResponseResult, other: &ResponseResult) -> ChannelSeparation {
    let d = gains(driven);
    let points: Vec<SeparationPoint> = gains(other)
        .into_iter()
        .map(|(f, g)| SeparationPoint {
            frequency_hz: f,
            separation_db: interpolate_log(&d, f) - g,
        })
        .collect();
    let pairs: Vec<(f64, f64)> = points
        .iter()
        .map(|p| (p.frequency_hz, p.separation_db))
        .collect();
    let in_band = points
        .iter()
        .filter(|p| (SUMMARY_BAND_HZ.0..=SUMMARY_BAND_HZ.1).contains(&p.frequency_hz));
    let worst = in_band.min_by(|a, b| a.separation_db.total_cmp(&b.separation_db));
    let covers_1k =
        pairs.first().is_some_and(|p| p.0 <= 1000.0) && pairs.last().is_some_and(|p| p.0 >= 1000.0);
    ChannelSeparation {
        channel: other.channel,
        at_1khz_db: covers_1k.then(|| interpolate_log(&pairs, 1000.0)),
        worst_db: worst.map(|p| p.separation_db),
        worst_hz: worst.map(|p| p.frequency_hz),
        points,
        at_least_db: None,
    }
}

/// A channel whose crosstalk could not be measured: at least `driven_dbfs - other_dbfs` (their
/// RMS levels over the sweep), since the crosstalk is part of what the other channel holds.
pub fn at_least(channel: usize, driven_dbfs: f64, other_dbfs: f64) -> ChannelSeparation {
    ChannelSeparation {
        channel,
        points: Vec::new(),
        at_1khz_db: None,
        worst_db: None,
        worst_hz: None,
        at_least_db: Some(driven_dbfs - other_dbfs),
    }
}
