//! Noise and hum with no signal: the amplifier's output with its input shorted or silent.
//!
//! The capture is windowed and transformed like a tone ([`super::tone::measure_spectrum`]); the
//! mains lines (50 or 60 Hz family, the stronger, or as given) are fitted and removed; what remains
//! in the band is the noise, flat and A-weighted (IEC 61672-1). Hum and noise together is the
//! band's whole content. With a calibration and a load, the signal-to-noise ratio is referred to
//! 1 W into the load (a common way to quote it; common practice).

use super::spectrum::SpectrumPlanner;
use super::tone::{
    local_density, measure_spectrum, near_multiple, residuals, ChannelInput, Mains,
    NOISE_FLOOR_FACTOR, TONE_WINDOW,
};
use super::weighting::a_weighting_power;
use crate::calibration::Calibration;
use crate::error::{Error, Result};
use crate::warning::WarningCode as C;
use serde::Serialize;

/// One mains line.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct NoiseHumLine {
    pub order: usize,
    pub frequency_hz: f64,
    pub level_dbfs: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub level_vrms: Option<f64>,
    pub at_noise_floor: bool,
}

/// Noise and hum of one channel.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
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
    pub mains_source: std::borrow::Cow<'static, str>,
    pub hum: Vec<NoiseHumLine>,
    pub dc_offset: f64,
    pub overload_samples: usize,
    /// Lines above the band or below 10 Hz that mains does not explain (see
    /// [`super::oscillation`]); each also has a warning.
    #[serde(default)]
    pub oscillations: Vec<super::oscillation::Oscillation>,
    #[serde(default)]
    pub oscillation_search: super::oscillation::OscillationSearch,
    pub warnings: Vec<crate::warning::Warning>,
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
        if let Some((from, to)) = moving_line(&self.planner, input, band_hz, mains) {
            return Err(Error::WrongKind {
                channel: input.channel,
                found: format!(
                    "a line stands out of the noise in each part of the capture and moves from {from:.0} Hz to {to:.0} Hz across it: the capture holds a sweep, so it is not a noise measurement"
                ),
                next: "Short the amplifier's input (or stop the source) and record again; measure a sweep with `ampnote response CAPTURE.wav --stimulus SWEEP.wav`.".into(),
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
    let best = super::tone::fit_mains_family(spec, n, &families, 5, bin, (half, top), &[]);
    let scale = 2.0 / (n as f64 * n as f64 * TONE_WINDOW.mean_square());
    let k_lo = ((lo / bin).ceil() as usize).max(1);
    let k_hi = ((hi / bin).floor() as usize).min(n / 2);
    let model = best
        .as_ref()
        .map(|b| b.fit.full_model())
        .unwrap_or_default();
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
        Some(b) => (b.mains_hz, b.lines, Some(b.fit)),
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
    // A line that is not mains and stands out of the noise around it: a signal is present.
    if let Some(line) = signal_line(spec, &model, k_lo, k_hi, n, bin, mains_hz) {
        let level_dbfs = dbfs(line.power);
        let share = line.power / flat.max(1e-300);
        let f = line.bin as f64 * bin;
        let found = format!(
            "a tone at {f:.1} Hz ({level_dbfs:.1} dBFS) stands {:.0} dB above the noise around it and makes {:.0} % of what would be read as noise",
            10.0 * line.above_noise.log10(),
            100.0 * share.min(1.0)
        );
        if share > MAX_SIGNAL_SHARE {
            return Err(Error::WrongKind {
                channel: input.channel,
                found: format!("{found}: the capture carries a signal, so it is not a noise measurement"),
                next: "Short the amplifier's input (or stop the source) and record again; measure a tone with `ampnote analyze`.".into(),
            });
        }
        warnings.push(C::Oscillation.say(format!(
            "{found}; it is counted in the noise figures. Look for a source left playing, interference or an oscillation."
        )));
    }
    if overload > 0 {
        warnings.push(C::InputOverload.say(format!(
            "input overload: {overload} sample(s) at or beyond full scale"
        )));
    }
    // Oscillation checks: lines above the band and below 10 Hz. Mains and its rectifier buzz
    // end well inside the band (40th order, common practice), so nothing there is explained.
    let (oscillations, oscillation_search) =
        super::tone::line_checks(spec, &model, n, fs, hi, input.resolution_bits, |_, _| false);
    warnings.extend(oscillations.iter().map(|o| o.warning()));
    warnings.extend(super::tone::against_loopback(
        "noise",
        noise_dbfs,
        "dBFS",
        cal.loopback_noise_dbfs,
        "reduce the attenuation or treat the figure as an upper bound",
    ));
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
        mains_source: mains_source.into(),
        hum,
        dc_offset: dc,
        overload_samples: overload,
        oscillations,
        oscillation_search,
        warnings,
    })
}

/// A noise figure is refused when one line makes more than half of it (it would then read the
/// line, not the noise, by over 3 dB).
const MAX_SIGNAL_SHARE: f64 = 0.5;

/// A line counts as a signal when its peak bin stands this far (30 dB) above the mean residual
/// density around it. For noise alone each bin's power is exponentially distributed (chi-square
/// with two degrees of freedom), so a bin passes 1000 times the mean with probability e^-1000:
/// never by chance.
const SIGNAL_LINE_RATIO: f64 = 1e3;

/// A line found in a noise capture.
struct SignalLine {
    bin: usize,
    /// Power over the line's main lobe, in the spectrum's squared units.
    power: f64,
    /// Peak bin over the mean residual density around it (power ratio).
    above_noise: f64,
}

/// The strongest residual line in `k_lo..=k_hi` that is no mains line (up to the 40th order:
/// rectifier buzz reaches a few kHz, common practice) and stands [`SIGNAL_LINE_RATIO`] above
/// the noise around it.
fn signal_line(
    spec: &[realfft::num_complex::Complex64],
    model: &[(usize, realfft::num_complex::Complex64)],
    k_lo: usize,
    k_hi: usize,
    n: usize,
    bin: f64,
    mains_hz: f64,
) -> Option<SignalLine> {
    let half = TONE_WINDOW.main_lobe_half_width() + 1;
    let tol = half as f64 * bin;
    let is_mains = |k: usize| near_multiple(k as f64 * bin, mains_hz, 40.0, tol);
    let (k, p) = residuals(spec, model, k_lo, k_hi)
        .filter(|&(k, _)| !is_mains(k))
        .map(|(k, r)| (k, r.norm_sqr()))
        .max_by(|a, b| a.1.total_cmp(&b.1))?;
    let density = local_density(spec, model, k as f64, n);
    let above_noise = p / density.max(1e-300);
    if above_noise < SIGNAL_LINE_RATIO {
        return None;
    }
    let power = residuals(
        spec,
        model,
        k.saturating_sub(half).max(1),
        (k + half).min(n / 2),
    )
    .map(|(_, r)| r.norm_sqr())
    .sum();
    Some(SignalLine {
        bin: k,
        power,
        above_noise,
    })
}

/// A line moving across the capture: eight parts, each Hann-windowed; when at least six hold a
/// line 30 dB over their median bin (no bin of noise reaches that: chi-square, 2 degrees of
/// freedom) that is not a mains line, and those lines climb or fall steadily over more than an
/// octave, the capture holds a sweep. Returns the first and last line's frequency.
fn moving_line(
    planner: &SpectrumPlanner,
    input: &ChannelInput,
    band_hz: (f64, f64),
    mains: Mains,
) -> Option<(f64, f64)> {
    const PARTS: usize = 8;
    let len = input.samples.len() / PARTS;
    if len < 2048 {
        return None;
    }
    let fs = input.sample_rate_hz;
    let bin = fs / len as f64;
    let fft = planner.forward(len);
    let window = super::window::HANN.samples(len);
    let families: Vec<f64> = match mains {
        Mains::Hz(f) => vec![f],
        Mains::Auto => vec![50.0, 60.0],
    };
    let is_mains = |f: f64| {
        families
            .iter()
            .any(|&m| near_multiple(f, m, 40.0, 3.0 * bin))
    };
    let k_lo = ((band_hz.0 / bin).ceil() as usize).max(2);
    let k_hi = ((band_hz.1.min(fs / 2.0) / bin).floor() as usize).min(len / 2 - 1);
    if k_hi <= k_lo + 16 {
        return None;
    }
    let mut buf = vec![0.0; len];
    let mut out = fft.make_output_vec();
    let mut lines = Vec::new();
    for part in input.samples.chunks_exact(len).take(PARTS) {
        let mean = part.iter().sum::<f64>() / len as f64;
        for ((b, &x), &w) in buf.iter_mut().zip(part).zip(&window) {
            *b = (x - mean) * w;
        }
        fft.process(&mut buf, &mut out).ok()?;
        let mut power: Vec<(usize, f64)> = (k_lo..=k_hi).map(|k| (k, out[k].norm_sqr())).collect();
        let Some(&(k, p)) = power
            .iter()
            .filter(|(k, _)| !is_mains(*k as f64 * bin))
            .max_by(|a, b| a.1.total_cmp(&b.1))
        else {
            continue;
        };
        power.sort_by(|a, b| a.1.total_cmp(&b.1));
        let median = power[power.len() / 2].1;
        if p > 1e3 * median {
            lines.push(k as f64 * bin);
        }
    }
    if lines.len() < 6 {
        return None;
    }
    let rising = lines.windows(2).all(|w| w[1] > w[0]);
    let falling = lines.windows(2).all(|w| w[1] < w[0]);
    let (first, last) = (lines[0], lines[lines.len() - 1]);
    ((rising || falling) && first.max(last) > 2.0 * first.min(last)).then_some((first, last))
}
