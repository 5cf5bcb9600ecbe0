//! Channel separation (IEC 60268-3 crosstalk): with a sweep on one channel only, how far below
//! it every other channel stays, against frequency.
//!
//! Each channel's response to the one sweep is measured as usual ([`super::sweep`]; the undriven
//! ones without requiring the sweep to explain them, since they hold mostly their own hum and
//! noise); the separation at f is the driven channel's absolute gain there over the other
//! channel's, in dB (both carry the same stimulus, so the interface and the attenuator cancel).
//! Where the other channel's response reads within 20 dB of its own hum or noise floor the point
//! is a lower bound (marked, and left out of the worst figure). A channel whose crosstalk cannot
//! be measured at all gets a lower bound instead: its whole level during the sweep against the
//! driven channel's, which the crosstalk cannot exceed, and never more than the word length
//! resolves.

use super::sweep::{interpolate_log, Floor, ResponseAnalyzer, ResponseResult, SweepParams};
use crate::error::{Error, Result};
use crate::warning::{Warning, WarningCode as C};
use serde::{Deserialize, Serialize};

/// The separation is summarised over this band (the audio band, common practice).
pub const SUMMARY_BAND_HZ: (f64, f64) = (20.0, 20_000.0);

#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct SeparationPoint {
    pub frequency_hz: f64,
    pub separation_db: f64,
    /// The undriven channel's own floor reads within 20 dB of its crosstalk here: the
    /// separation is at least `separation_db`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub limited_by: Option<Floor>,
}

/// One undriven channel against the driven one.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChannelSeparation {
    pub channel: usize,
    pub points: Vec<SeparationPoint>,
    /// At 1 kHz (interpolated on the log-frequency grid), dB; `null` when the crosstalk there is
    /// under the channel's own floor (then `at_least_db` holds the bound).
    pub at_1khz_db: Option<f64>,
    /// The least separation over 20 Hz - 20 kHz (within the sweep, the points under the floor
    /// left out), and where.
    pub worst_db: Option<f64>,
    pub worst_hz: Option<f64>,
    /// When the crosstalk at 1 kHz (or everywhere) is under the channel's own hum or noise: the
    /// separation at 1 kHz is at least this, dB.
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
        .zip(&other.points)
        .map(|((f, g), p)| SeparationPoint {
            frequency_hz: f,
            separation_db: interpolate_log(&d, f) - g,
            limited_by: p.limited_by,
        })
        .collect();
    let pairs: Vec<(f64, f64)> = points
        .iter()
        .map(|p| (p.frequency_hz, p.separation_db))
        .collect();
    let in_band = points.iter().filter(|p| {
        (SUMMARY_BAND_HZ.0..=SUMMARY_BAND_HZ.1).contains(&p.frequency_hz) && p.limited_by.is_none()
    });
    let worst = in_band.min_by(|a, b| a.separation_db.total_cmp(&b.separation_db));
    let covers_1k =
        pairs.first().is_some_and(|p| p.0 <= 1000.0) && pairs.last().is_some_and(|p| p.0 >= 1000.0);
    let at_1k = covers_1k.then(|| interpolate_log(&pairs, 1000.0));
    // The two points 1 kHz is read between: either under the floor makes the reading a bound.
    let floored_1k = points
        .windows(2)
        .find(|w| w[0].frequency_hz <= 1000.0 && w[1].frequency_hz >= 1000.0)
        .is_some_and(|w| w[0].limited_by.is_some() || w[1].limited_by.is_some());
    ChannelSeparation {
        channel: other.channel,
        at_1khz_db: at_1k.filter(|_| !floored_1k),
        worst_db: worst.map(|p| p.separation_db),
        worst_hz: worst.map(|p| p.frequency_hz),
        points,
        at_least_db: at_1k.filter(|_| floored_1k),
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

/// The captures of one sweep played into channel `driven` (1-based) with every channel
/// recorded: `captures[k]` is channel k + 1, all at `fs`, of the same recording.
pub struct Recording<'a> {
    pub stimulus: &'a [f64],
    pub sweep: SweepParams,
    pub captures: &'a [&'a [f64]],
    pub driven: usize,
    pub fs: f64,
    pub overload_threshold: f64,
    pub resolution_bits: u32,
}

/// RMS level, dB re a full-scale sine, of `x[range]` in windows of `w` samples.
fn window_levels(x: &[f64], range: std::ops::Range<usize>, w: usize) -> Vec<f64> {
    let end = range.end.min(x.len());
    (range.start.min(end)..end)
        .step_by(w.max(1))
        .map(|a| {
            let part = &x[a..(a + w).min(end)];
            let ms = part.iter().map(|v| v * v).sum::<f64>() / part.len().max(1) as f64;
            10.0 * (ms / 0.5).max(1e-300).log10()
        })
        .collect()
}

/// Channel separation from one recording of every channel (see the module's notes).
pub fn from_recording(analyzer: &ResponseAnalyzer, r: &Recording) -> Result<SeparationResult> {
    let n = r.captures.len();
    if n < 2 {
        return Err(Error::WrongKind {
            channel: 1,
            found: "the recording has one channel".into(),
            next: "Separation needs the driven channel and at least one other, recorded together."
                .into(),
        });
    }
    if r.driven == 0 || r.driven > n {
        return Err(Error::NoSuchChannel {
            requested: r.driven,
            available: n,
        });
    }
    let driven = analyzer.analyze(
        r.driven,
        r.stimulus,
        r.sweep,
        r.captures[r.driven - 1],
        r.fs,
        r.overload_threshold,
    )?;
    // Where the sweep lies in the capture, for the level bound of an unmeasurable channel.
    let lat = driven.latency_samples.round() as isize;
    let shift = |i: usize| (i as isize + lat).max(0) as usize;
    let span = shift(r.sweep.start_sample)..shift(r.sweep.end_sample);
    let w = ((0.05 * r.fs) as usize).max(1);
    let driven_levels = window_levels(r.captures[r.driven - 1], span.clone(), w);
    // What the word length resolves: quantisation noise, dB re a full-scale sine.
    let resolved_dbfs = -(6.02 * r.resolution_bits as f64 + 1.76);
    let mut result = SeparationResult {
        driven_channel: r.driven,
        channels: Vec::new(),
        warnings: driven.warnings.clone(),
    };
    for ch in (1..=n).filter(|&c| c != r.driven) {
        let capture = r.captures[ch - 1];
        // A digitally silent channel has no floor to judge its points by: the bound below.
        let measured = capture
            .iter()
            .any(|v| *v != 0.0)
            .then(|| {
                analyzer.analyze_undriven(
                    ch,
                    r.stimulus,
                    r.sweep,
                    capture,
                    r.fs,
                    r.overload_threshold,
                    driven.latency_samples,
                )
            })
            .and_then(|m| m.ok());
        let c = match measured {
            Some(m) => between(&driven, &m),
            None => {
                // Over the windows where the sweep plays at full level (the fade-in and the
                // band edges left out): in each, the crosstalk is at most all the channel holds,
                // and nothing under the word length's resolution is told apart.
                let other = window_levels(capture, span.clone(), w);
                let top = driven_levels
                    .iter()
                    .copied()
                    .fold(f64::NEG_INFINITY, f64::max);
                let bound = driven_levels
                    .iter()
                    .zip(&other)
                    .filter(|(d, _)| **d >= top - 10.0)
                    .map(|(d, o)| d - o.max(resolved_dbfs))
                    .fold(f64::INFINITY, f64::min);
                if !bound.is_finite() {
                    return Err(Error::WrongKind {
                        channel: r.driven,
                        found: "the sweep is not in the driven channel's capture where its response says".into(),
                        next: "Record the sweep again with every channel.".into(),
                    });
                }
                at_least(ch, 0.0, -bound)
            }
        };
        if c.at_1khz_db.is_some_and(|s| s < 0.0) {
            return Err(Error::WrongKind {
                channel: ch,
                found: format!(
                    "it carries the sweep {:.1} dB louder than channel {} at 1 kHz",
                    -c.at_1khz_db.unwrap_or(0.0),
                    r.driven
                ),
                next: format!(
                    "Check --driven: the channel the sweep was played into is probably {ch}."
                ),
            });
        }
        result.warnings.extend(floor_note(&c, r.driven));
        result.channels.push(c);
    }
    Ok(result)
}

/// Say where a channel's crosstalk is under its own floor (a lower bound there).
fn floor_note(c: &ChannelSeparation, driven: usize) -> Option<Warning> {
    if c.points.is_empty() {
        return c.at_least_db.map(|b| {
            C::SeparationBound.say(format!(
                "channel {}: its crosstalk from channel {driven} is under its own noise and hum over the whole sweep: the separation is at least {b:.1} dB",
                c.channel
            ))
        });
    }
    let band =
        |p: &&SeparationPoint| (SUMMARY_BAND_HZ.0..=SUMMARY_BAND_HZ.1).contains(&p.frequency_hz);
    let all = c.points.iter().filter(band).count();
    let under: Vec<&SeparationPoint> = c
        .points
        .iter()
        .filter(band)
        .filter(|p| p.limited_by.is_some())
        .collect();
    if under.is_empty() {
        return None;
    }
    let hum = under
        .iter()
        .filter(|p| p.limited_by == Some(Floor::Hum))
        .count();
    let what = match (hum, under.len() - hum) {
        (0, _) => "noise",
        (_, 0) => "hum",
        _ => "hum and noise",
    };
    let (lo, hi) = (under[0].frequency_hz, under[under.len() - 1].frequency_hz);
    Some(C::SeparationBound.say(format!(
        "channel {}: at {} of {all} points from 20 Hz to 20 kHz ({lo:.0}-{hi:.0} Hz) its crosstalk from channel {driven} is within 20 dB of its own {what}: there the separation is at least the value shown, and the worst figure leaves them out",
        c.channel,
        under.len()
    )))
}
