//! What the report draws of a kept capture, computed here so that the renderer only draws.

use super::spectrum::{fast_length, SpectrumPlanner};
use super::tone::TONE_WINDOW;
use serde::{Deserialize, Serialize};

/// A steady tone as the report draws it.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct ToneViews {
    /// `(Hz, dBFS)`: the spectrum under the tone analysis's window, each of 600 log-spaced slices
    /// from 10 Hz to 20 kHz (or Nyquist) reduced to its peak bin, so every line shows whatever
    /// the plot's resolution.
    pub spectrum: Vec<(f64, f64)>,
    /// `(degrees, %)`: the capture minus its fitted fundamental, averaged cycle by cycle at each
    /// of 180 phases of one period, in percent of the fundamental's peak (the distortion's shape).
    pub residual: Vec<(f64, f64)>,
}

/// The views of `seg` (a steady tone at `fundamental_hz`, sampled at `fs`); `None` when it is
/// too short for a 1024-point spectrum or the fundamental cannot be fitted.
pub fn tone_views(seg: &[f64], fs: f64, fundamental_hz: f64) -> Option<ToneViews> {
    let n = fast_length(seg.len());
    if n < 1024 {
        return None;
    }
    let planner = SpectrumPlanner::new();
    let plan = planner.plan(TONE_WINDOW, n);
    let mut buf = plan.make_buffers();
    let mean = seg[..n].iter().sum::<f64>() / n as f64;
    plan.transform(seg, mean, &mut buf);
    let scale = 2.0 / (n as f64 * TONE_WINDOW.coherent_gain());
    let bin = fs / n as f64;
    let slices = 600;
    let (lo, hi) = (10f64, 20_000f64.min(fs / 2.0));
    let mut spectrum = Vec::with_capacity(slices);
    for i in 0..slices {
        let f_a = lo * (hi / lo).powf(i as f64 / slices as f64);
        let f_b = lo * (hi / lo).powf((i + 1) as f64 / slices as f64);
        let (ka, kb) = (
            (f_a / bin).ceil() as usize,
            ((f_b / bin).floor() as usize).min(buf.output.len() - 1),
        );
        if kb < ka {
            continue;
        }
        let peak = buf.output[ka..=kb]
            .iter()
            .map(|c| c.norm())
            .fold(0.0, f64::max)
            * scale;
        spectrum.push(((f_a * f_b).sqrt(), 20.0 * peak.max(1e-9).log10()));
    }
    // Residual over one period.
    let f0 = fundamental_hz;
    let (lines, dc) = crate::analysis::fit::sine_fit_time_domain(seg, &[f0 / fs])?;
    let (a, b) = lines[0];
    let peak = (a * a + b * b).sqrt();
    let phi = a.atan2(b); // x = peak sin(w n + phi)
    let bins = 180;
    let mut acc = vec![(0.0, 0usize); bins];
    for (i, &v) in seg.iter().enumerate() {
        let wn = 2.0 * std::f64::consts::PI * f0 / fs * i as f64;
        let r = v - dc - a * wn.cos() - b * wn.sin();
        let theta = (wn + phi).rem_euclid(2.0 * std::f64::consts::PI);
        let k = ((theta / (2.0 * std::f64::consts::PI)) * bins as f64) as usize % bins;
        acc[k].0 += r;
        acc[k].1 += 1;
    }
    let residual = acc
        .iter()
        .enumerate()
        .filter(|(_, (_, c))| *c > 0)
        .map(|(k, (sum, c))| {
            (
                (k as f64 + 0.5) * 360.0 / bins as f64,
                100.0 * sum / *c as f64 / peak,
            )
        })
        .collect();
    Some(ToneViews { spectrum, residual })
}
