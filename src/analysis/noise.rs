//! Noise and hum with no signal: the amplifier's output with its input shorted or silent.
//!
//! The capture is windowed and transformed like a tone ([`super::tone::measure_spectrum`]); the
//! mains lines (50 or 60 Hz family, the stronger, or as given) are fitted and removed; what remains
//! in the band is the noise, flat and A-weighted (IEC 61672-1). Hum and noise together is the
//! band's whole content. With a calibration and a load, the signal-to-noise ratio is referred to
//! 1 W into the load (a common way to quote it; common practice).

use super::fit::fit_lines;
use super::spectrum::SpectrumPlanner;
use super::tone::{
    local_density, measure_spectrum, ChannelInput, Mains, GUARD_BINS, NOISE_FLOOR_FACTOR,
    TONE_WINDOW,
};
use super::weighting::a_weighting_power;
use crate::calibration::Calibration;
use crate::error::{Error, Result};
use serde::Serialize;

/// One mains line.
#[derive(Debug, Clone, Serialize)]
pub struct NoiseHumLine {
    pub order: usize,
    pub frequency_hz: f64,
    pub level_dbfs: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub level_vrms: Option<f64>,
    pub at_noise_floor: bool,
}

/// Noise and hum of one channel.
#[derive(Debug, Clone, Serialize)]
pub struct NoiseResult {
    pub channel: usize,
    pub duration_s: f64,
    pub band_hz: [f64; 2],
    /// Noise with the mains lines removed, flat over the band, dBFS.
    pub noise_dbfs: f64,
    /// The same, A-weighted.
    pub noise_a_dbfs: f64,
    /// Everything in the band (noise and hum), flat, dBFS.
    pub hum_and_noise_dbfs: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub noise_vrms: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub noise_a_vrms: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub hum_and_noise_vrms: Option<f64>,
    /// Signal-to-noise referred to 1 W into the load (flat, and A-weighted), dB.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub snr_re_1w_db: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub snr_a_re_1w_db: Option<f64>,
    pub mains_hz: f64,
    pub mains_source: &'static str,
    pub hum: Vec<NoiseHumLine>,
    pub dc_offset: f64,
    pub overload_samples: usize,
    pub warnings: Vec<String>,
}

/// The noise analyser; its planner caches FFT plans.
#[derive(Default)]
pub struct NoiseAnalyzer {
    planner: SpectrumPlanner,
}

impl NoiseAnalyzer {
    pub fn new() -> Self {
        Self::default()
    }

    /// Analyse one channel over `band_hz` (the high edge is limited to Nyquist).
    pub fn analyze(
        &self,
        input: &ChannelInput,
        band_hz: (f64, f64),
        mains: Mains,
        cal: &Calibration,
    ) -> Result<NoiseResult> {
        if input.samples.len() < super::tone::MIN_SAMPLES {
            return Err(Error::TooShort {
                channel: input.channel,
                have_samples: input.samples.len(),
                have_s: input.samples.len() as f64 / input.sample_rate_hz,
                need_samples: super::tone::MIN_SAMPLES,
                need_s: super::tone::MIN_SAMPLES as f64 / input.sample_rate_hz,
                why: String::new(),
            });
        }
        let (stats, plan, buffers) = measure_spectrum(&self.planner, input)?;
        let out = analyze_spectrum(
            input,
            &buffers.output,
            plan.len,
            band_hz,
            mains,
            cal,
            stats.dc,
            stats.overload,
        );
        plan.give_back(buffers);
        out
    }
}

#[allow(clippy::too_many_arguments)]
fn analyze_spectrum(
    input: &ChannelInput,
    spec: &[realfft::num_complex::Complex64],
    n: usize,
    band_hz: (f64, f64),
    mains: Mains,
    cal: &Calibration,
    dc: f64,
    overload: usize,
) -> Result<NoiseResult> {
    let fs = input.sample_rate_hz;
    let bin = fs / n as f64;
    let (lo, hi) = (band_hz.0, band_hz.1.min(fs / 2.0));
    let half = TONE_WINDOW.main_lobe_half_width() as f64 + 1.0;
    let top = n as f64 / 2.0 - half;
    let families: Vec<f64> = match mains {
        Mains::Hz(f) => vec![f],
        Mains::Auto => vec![50.0, 60.0],
    };
    let lines_for = |m: f64| -> Vec<(usize, f64)> {
        (1..=5)
            .map(|o| (o, m * o as f64 / bin))
            .filter(|&(_, f)| f >= half && f <= top)
            .collect()
    };
    // (mains Hz, lines as (order, bin), their joint fit, fitted power)
    type Family = (f64, Vec<(usize, f64)>, super::fit::LineFit, f64);
    let mut best: Option<Family> = None;
    for &m in &families {
        let lines = lines_for(m);
        let freqs: Vec<f64> = lines.iter().map(|l| l.1).collect();
        if freqs.windows(2).any(|w| w[1] - w[0] < GUARD_BINS) {
            continue;
        }
        let Some(fit) = fit_lines(spec, n, &TONE_WINDOW, &freqs) else {
            continue;
        };
        let p: f64 = fit.amplitudes.iter().map(|c| c.norm_sqr()).sum();
        if best.as_ref().is_none_or(|b| p > b.3) {
            best = Some((m, lines, fit, p));
        }
    }
    let scale = 2.0 / (n as f64 * n as f64 * TONE_WINDOW.mean_square());
    let k_lo = ((lo / bin).ceil() as usize).max(1);
    let k_hi = ((hi / bin).floor() as usize).min(n / 2);
    let model = best.as_ref().map(|b| b.2.full_model()).unwrap_or_default();
    let (mut total, mut flat, mut a_w) = (0.0, 0.0, 0.0);
    let mut mi = model.partition_point(|e| e.0 < k_lo);
    for (k, &x) in spec.iter().enumerate().take(k_hi + 1).skip(k_lo) {
        let mut r = x;
        if mi < model.len() && model[mi].0 == k {
            r -= model[mi].1;
            mi += 1;
        }
        let edge = if k == n / 2 { 0.5 } else { 1.0 };
        total += edge * x.norm_sqr();
        flat += edge * r.norm_sqr();
        a_w += edge * r.norm_sqr() * a_weighting_power(k as f64 * bin);
    }
    let dbfs = |p: f64| 10.0 * (p * scale / 0.5).max(1e-300).log10();
    let (noise_dbfs, noise_a_dbfs, hum_and_noise_dbfs) = (dbfs(flat), dbfs(a_w), dbfs(total));
    let enbw = TONE_WINDOW.enbw_bins();
    let (mains_hz, lines, fit) = match best {
        Some((m, l, f, _)) => (m, l, Some(f)),
        None => (families[0], Vec::new(), None),
    };
    let hum: Vec<NoiseHumLine> = lines
        .iter()
        .enumerate()
        .map(|(i, &(order, f))| {
            let c = fit.as_ref().map_or(0.0, |ft| ft.amplitudes[i].norm());
            let level_dbfs = 20.0 * c.max(1e-300).log10();
            let noise = local_density(spec, &model, f, n) * scale * enbw;
            NoiseHumLine {
                order,
                frequency_hz: mains_hz * order as f64,
                level_dbfs,
                level_vrms: cal.vrms_from_dbfs(level_dbfs),
                at_noise_floor: c * c / 2.0 < NOISE_FLOOR_FACTOR * noise,
            }
        })
        .collect();
    let mains_source = match mains {
        Mains::Hz(_) => "given",
        Mains::Auto if hum.iter().any(|h| !h.at_noise_floor) => "detected",
        Mains::Auto => "not detected (no mains line above the noise)",
    };
    // S/N re 1 W: the voltage of 1 W into the load over the noise voltage.
    let v1w = cal.load_ohms.filter(|_| cal.has_volts()).map(|r| r.sqrt());
    let noise_vrms = cal.vrms_from_dbfs(noise_dbfs);
    let noise_a_vrms = cal.vrms_from_dbfs(noise_a_dbfs);
    let mut warnings = Vec::new();
    // A strong line that is not mains: a signal is present.
    let strongest =
        (k_lo..=k_hi).max_by(|&a, &b| spec[a].norm_sqr().total_cmp(&spec[b].norm_sqr()));
    if let Some(k) = strongest {
        let f = k as f64 * bin;
        let is_mains = hum.iter().any(|h| (h.frequency_hz - f).abs() < 3.0 * bin);
        let line_db = dbfs(spec[k].norm_sqr() * enbw);
        if !is_mains && line_db > noise_dbfs + 20.0 && line_db > -100.0 {
            warnings.push(format!(
                "a line at {f:.1} Hz ({line_db:.1} dBFS) stands out of the noise: this capture carries a signal, so it is not a noise measurement; short or silence the amplifier's input"
            ));
        }
    }
    if overload > 0 {
        warnings.push(format!(
            "input overload: {overload} sample(s) at or beyond full scale"
        ));
    }
    if let Some(floor) = cal.loopback_noise_dbfs {
        if noise_dbfs < floor + 10.0 {
            warnings.push(format!(
                "noise ({noise_dbfs:.1} dBFS) is within 10 dB of the interface's own ({floor:.1} dBFS): reduce the attenuation or treat the figure as an upper bound"
            ));
        }
    }
    Ok(NoiseResult {
        channel: input.channel,
        duration_s: n as f64 / fs,
        band_hz: [lo, hi],
        noise_dbfs,
        noise_a_dbfs,
        hum_and_noise_dbfs,
        noise_vrms,
        noise_a_vrms,
        hum_and_noise_vrms: cal.vrms_from_dbfs(hum_and_noise_dbfs),
        snr_re_1w_db: v1w.zip(noise_vrms).map(|(v, nv)| 20.0 * (v / nv).log10()),
        snr_a_re_1w_db: v1w.zip(noise_a_vrms).map(|(v, nv)| 20.0 * (v / nv).log10()),
        mains_hz,
        mains_source,
        hum,
        dc_offset: dc,
        overload_samples: overload,
        warnings,
    })
}
