//! Intermodulation distortion from two-tone captures, per IEC 60268-3 (cl. 14.12.7 - 14.12.8).
//!
//! - Modulation method (low tone f_L and high tone f_H at 4:1):
//!   `d_m2 = (U(f_H - f_L) + U(f_H + f_L)) / U(f_H)`, `d_m3 = (U(f_H - 2 f_L) + U(f_H + 2 f_L)) / U(f_H)`;
//!   the total reported is `sqrt(d_m2^2 + d_m3^2)` (orders summed in power, each order's two
//!   sidebands in amplitude, as the definitions do).
//! - Difference-frequency method (two equal tones f1 < f2):
//!   `d_d2 = U(f2 - f1) / (U1 + U2)`, `d_d3 = (U(2 f1 - f2) + U(2 f2 - f1)) / (U1 + U2)`.
//!
//! Every line is fitted jointly to the 7-term Blackman-Harris spectrum, exactly as the steady-tone
//! analysis fits harmonics ([`super::fit`]), so sidebands close to a strong tone are separated
//! rather than read off a leaking peak.

use super::fit::{fit_lines, refine_frequency};
use super::spectrum::SpectrumPlanner;
use super::tone::{
    local_density, measure_spectrum, ChannelInput, GUARD_BINS, NOISE_FLOOR_FACTOR, TONE_WINDOW,
};
use crate::error::{Error, Result};
use crate::signal::stimulus::TwoToneMethod;
use crate::warning::WarningCode as C;
use realfft::num_complex::Complex64;
use serde::Serialize;

/// One line the analysis fitted.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct ImdLine {
    /// What the line is: "f_L", "f_H", "f_H - f_L", ...
    pub name: String,
    pub frequency_hz: f64,
    pub level_dbfs: f64,
    pub at_noise_floor: bool,
}

/// IMD of one channel. Percentages are amplitude ratios times 100.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct ImdResult {
    pub channel: usize,
    pub method: TwoToneMethod,
    /// Where the pair came from: "stimulus description", "given" or "detected".
    pub pair_source: std::borrow::Cow<'static, str>,
    pub low_hz: f64,
    pub high_hz: f64,
    /// Measured amplitude of the low tone over the high tone.
    pub measured_ratio: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub dm2_percent: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub dm3_percent: Option<f64>,
    /// sqrt(d_m2^2 + d_m3^2).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub imd_percent: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub dd2_percent: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub dd3_percent: Option<f64>,
    pub lines: Vec<ImdLine>,
    pub warnings: Vec<crate::warning::Warning>,
}

impl ImdResult {
    /// One line: the total (modulation method) or d2 and d3 (difference-frequency).
    pub fn headline(&self) -> String {
        match (self.imd_percent, self.dd2_percent, self.dd3_percent) {
            (Some(t), _, _) => {
                format!("IMD {t:.3} % ({:.0} + {:.0} Hz)", self.low_hz, self.high_hz)
            }
            (None, Some(d2), Some(d3)) => format!(
                "d2 {d2:.4} %, d3 {d3:.4} % ({:.0} + {:.0} Hz)",
                self.low_hz, self.high_hz
            ),
            _ => format!("IMD ({:.0} + {:.0} Hz)", self.low_hz, self.high_hz),
        }
    }
}

/// What is known of the pair before looking: the method and the two frequencies, or nothing.
#[derive(Debug, Clone, Copy)]
pub struct PairHint {
    pub method: TwoToneMethod,
    pub low_hz: f64,
    pub high_hz: f64,
    pub source: &'static str,
}

/// The IMD analyser; its planner caches FFT plans.
#[derive(Default)]
pub struct ImdAnalyzer {
    planner: SpectrumPlanner,
}

impl ImdAnalyzer {
    pub fn new() -> Self {
        Self::default()
    }

    pub fn analyze(&self, input: &ChannelInput, hint: Option<PairHint>) -> Result<ImdResult> {
        let (stats, plan, buffers) = measure_spectrum(&self.planner, input)?;
        let out = analyze_spectrum(input, &buffers.output, plan.len, hint, stats.overload);
        plan.give_back(buffers);
        out
    }
}

fn analyze_spectrum(
    input: &ChannelInput,
    spec: &[Complex64],
    n: usize,
    hint: Option<PairHint>,
    overload: usize,
) -> Result<ImdResult> {
    let fs = input.sample_rate_hz;
    let bin = fs / n as f64;
    let half = TONE_WINDOW.main_lobe_half_width() as f64 + 1.0;
    let top = n as f64 / 2.0 - half;
    let peak_near = |f_hz: f64| -> usize {
        let c = f_hz / bin;
        let w = (0.02 * c).max(3.0);
        let lo = ((c - w).floor().max(half)) as usize;
        let hi = ((c + w).ceil().min(top)) as usize;
        (lo..=hi.max(lo))
            .max_by(|&a, &b| spec[a].norm_sqr().total_cmp(&spec[b].norm_sqr()))
            .unwrap_or(lo)
    };
    let (method, k_low, k_high, source) = match hint {
        Some(h) => (
            h.method,
            peak_near(h.low_hz),
            peak_near(h.high_hz),
            h.source,
        ),
        None => detect_pair(input.channel, spec, bin, half, top)?,
    };
    let f_low = refine_frequency(spec, n, &TONE_WINDOW, k_low as f64, &[]);
    let f_high = refine_frequency(spec, n, &TONE_WINDOW, k_high as f64, &[]);
    let d = f_high - f_low;
    if d < 2.0 * GUARD_BINS {
        return Err(Error::TonesNotSeparable {
            low_hz: f_low * bin,
            high_hz: f_high * bin,
        });
    }
    let named: Vec<(&str, f64)> = match method {
        TwoToneMethod::Modulation => vec![
            ("f_L", f_low),
            ("f_H", f_high),
            ("f_H - f_L", f_high - f_low),
            ("f_H + f_L", f_high + f_low),
            ("f_H - 2 f_L", f_high - 2.0 * f_low),
            ("f_H + 2 f_L", f_high + 2.0 * f_low),
        ],
        TwoToneMethod::DifferenceFrequency => vec![
            ("f1", f_low),
            ("f2", f_high),
            ("f2 - f1", d),
            ("2 f1 - f2", 2.0 * f_low - f_high),
            ("2 f2 - f1", 2.0 * f_high - f_low),
        ],
    };
    // Lines that fall off the spectrum or onto another line are left out (and say so).
    let mut warnings = Vec::new();
    let mut kept: Vec<(&str, f64)> = Vec::new();
    for &(name, f) in &named {
        if f < half || f > top {
            warnings.push(C::ProductLost.say(format!(
                "{name} at {:.1} Hz lies outside what this capture can resolve; it counts as zero.",
                f * bin
            )));
        } else if kept.iter().any(|k| (k.1 - f).abs() < GUARD_BINS) {
            warnings.push(C::ProductLost.say(format!(
                "{name} at {:.1} Hz coincides with another line; it counts as zero.",
                f * bin
            )));
        } else {
            kept.push((name, f));
        }
    }
    let freqs: Vec<f64> = kept.iter().map(|k| k.1).collect();
    let fit = fit_lines(spec, n, &TONE_WINDOW, &freqs).ok_or(Error::TonesNotSeparable {
        low_hz: f_low * bin,
        high_hz: f_high * bin,
    })?;
    let model = fit.full_model();
    let scale = 2.0 / (n as f64 * n as f64 * TONE_WINDOW.mean_square());
    let enbw = TONE_WINDOW.enbw_bins();
    let amp = |name: &str| -> f64 {
        kept.iter()
            .position(|k| k.0 == name)
            .map_or(0.0, |i| fit.amplitudes[i].norm())
    };
    let lines: Vec<ImdLine> = kept
        .iter()
        .enumerate()
        .map(|(i, &(name, f))| {
            let a = fit.amplitudes[i].norm();
            let noise = local_density(spec, &model, f, n) * scale * enbw;
            ImdLine {
                name: name.to_string(),
                frequency_hz: f * bin,
                level_dbfs: 20.0 * a.max(1e-300).log10(),
                at_noise_floor: a * a / 2.0 < NOISE_FLOOR_FACTOR * noise,
            }
        })
        .collect();
    let (u_low, u_high) = (amp(named[0].0), amp(named[1].0));
    check_pair(
        input.channel,
        spec,
        &model,
        n,
        bin,
        (half, top),
        [(f_low, u_low), (f_high, u_high)],
        match hint {
            Some(h) => [h.low_hz, h.high_hz],
            None => [f_low * bin, f_high * bin],
        },
    )?;
    let mut r = ImdResult {
        channel: input.channel,
        method,
        pair_source: source.into(),
        low_hz: f_low * bin,
        high_hz: f_high * bin,
        measured_ratio: u_low / u_high,
        dm2_percent: None,
        dm3_percent: None,
        imd_percent: None,
        dd2_percent: None,
        dd3_percent: None,
        lines,
        warnings,
    };
    match method {
        TwoToneMethod::Modulation => {
            let dm2 = (amp("f_H - f_L") + amp("f_H + f_L")) / u_high;
            let dm3 = (amp("f_H - 2 f_L") + amp("f_H + 2 f_L")) / u_high;
            r.dm2_percent = Some(100.0 * dm2);
            r.dm3_percent = Some(100.0 * dm3);
            r.imd_percent = Some(100.0 * (dm2 * dm2 + dm3 * dm3).sqrt());
            if !(2.0..=8.0).contains(&r.measured_ratio) {
                r.warnings.push(C::ToneRatio.say(format!(
                    "the tones stand {:.2}:1, not near the 4:1 the modulation method assumes; compare figures only with others taken at this ratio.",
                    r.measured_ratio
                )));
            }
        }
        TwoToneMethod::DifferenceFrequency => {
            let sum = u_low + u_high;
            r.dd2_percent = Some(100.0 * amp("f2 - f1") / sum);
            r.dd3_percent = Some(100.0 * (amp("2 f1 - f2") + amp("2 f2 - f1")) / sum);
        }
    }
    if overload > 0 {
        r.warnings.push(C::InputOverload.say(format!(
            "input overload: {overload} sample(s) at or beyond full scale; the figures include the interface's clipping."
        )));
    }
    let floor_lines: Vec<&str> = r
        .lines
        .iter()
        .skip(2)
        .filter(|l| l.at_noise_floor)
        .map(|l| l.name.as_str())
        .collect();
    if !floor_lines.is_empty() {
        r.warnings.push(C::UnderNoise.say(format!(
            "{} at the noise floor: the figures that use them are upper bounds.",
            floor_lines.join(", ")
        )));
    }
    Ok(r)
}

/// Each tone of a pair must stand this far (30 dB) above the noise around it: a real two-tone
/// capture clears it by far more, a sweep or noise (whose bins only scatter about their mean)
/// never does.
const MIN_PAIR_SNR: f64 = 1e3;

/// The weaker tone may sit at most this far (30 dB, amplitude 1/31.6) below the stronger: the
/// standard pairs are 4:1 (12 dB) and 1:1.
const MIN_PAIR_RATIO: f64 = 1e-3;

/// Refuse a capture that does not hold the pair: a tone missing or lost in the noise (a single
/// tone, a sweep, noise), or a stronger line elsewhere (another tone or another pair). `tones`
/// are (bin, fitted amplitude) of the low and the high tone.
#[allow(clippy::too_many_arguments)]
fn check_pair(
    channel: usize,
    spec: &[Complex64],
    model: &[(usize, Complex64)],
    n: usize,
    bin: f64,
    (half, top): (f64, f64),
    tones: [(f64, f64); 2],
    nominal_hz: [f64; 2],
) -> Result<()> {
    let scale = 2.0 / (n as f64 * n as f64 * TONE_WINDOW.mean_square());
    let enbw = TONE_WINDOW.enbw_bins();
    let pair = format!("{:.1} and {:.1} Hz", nominal_hz[0], nominal_hz[1]);
    let strongest = ((2.0 * half) as usize..=top as usize)
        .max_by(|&a, &b| spec[a].norm_sqr().total_cmp(&spec[b].norm_sqr()));
    let wrong = |found: String| {
        Error::WrongKind {
        channel,
        found,
        next: "Record the pair `ampnote generate twotone` wrote and give that file with --stimulus; measure a single tone with `ampnote analyze`, a sweep with `ampnote response`.".into(),
    }
    };
    let a_max = tones[0].1.max(tones[1].1);
    let strongest_note = strongest.map_or(String::new(), |k| {
        format!(" (the strongest line is at {:.1} Hz)", k as f64 * bin)
    });
    for (&(f, a), nominal) in tones.iter().zip(nominal_hz) {
        let noise = local_density(spec, model, f, n) * scale * enbw;
        let snr = a * a / 2.0 / noise.max(1e-300);
        if snr < MIN_PAIR_SNR {
            return Err(wrong(format!(
                "no tone at {nominal:.1} Hz: the line there reads {:+.1} dB against the noise around it{strongest_note}, so the capture does not hold the two-tone pair ({pair})",
                10.0 * snr.max(1e-30).log10()
            )));
        }
        if (a / a_max).powi(2) < MIN_PAIR_RATIO {
            return Err(wrong(format!(
                "the tone at {nominal:.1} Hz stands {:.1} dB below the other: not the two-tone pair ({pair})",
                -20.0 * (a / a_max).log10()
            )));
        }
    }
    if let Some(k) = strongest {
        let near = |f: f64| (k as f64 - f).abs() <= GUARD_BINS;
        if !near(tones[0].0) && !near(tones[1].0) {
            return Err(wrong(format!(
                "the strongest line is at {:.1} Hz, not one of the pair ({pair}): the capture holds another signal",
                k as f64 * bin
            )));
        }
    }
    Ok(())
}

/// Finds the two strongest lines and tells the method from their spacing and ratio: a low tone
/// well below a weaker high tone is the modulation method; two similar tones close together are
/// the difference-frequency method.
fn detect_pair(
    channel: usize,
    spec: &[Complex64],
    bin: f64,
    half: f64,
    top: f64,
) -> Result<(TwoToneMethod, usize, usize, &'static str)> {
    let lo = (2.0 * half) as usize;
    let hi = top as usize;
    let strongest = |exclude: Option<usize>| -> Option<usize> {
        (lo..=hi)
            .filter(|&k| {
                exclude.is_none_or(|e| (k as f64 - e as f64).abs() > 2.0 * GUARD_BINS + half)
            })
            .max_by(|&a, &b| spec[a].norm_sqr().total_cmp(&spec[b].norm_sqr()))
    };
    let first = strongest(None).ok_or_else(|| {
        Error::InvalidSetting("the capture is too short for a two-tone analysis".into())
    })?;
    let single = |detail: String| {
        Error::WrongKind {
        channel,
        found: format!("only one tone, at {:.1} Hz{detail}: not a two-tone pair", first as f64 * bin),
        next: "Record the pair `ampnote generate twotone` wrote and give that file with --stimulus; measure a single tone with `ampnote analyze`.".into(),
    }
    };
    let second = strongest(Some(first)).ok_or_else(|| single(String::new()))?;
    let (k_low, k_high) = (first.min(second), first.max(second));
    let ratio = spec[k_low].norm() / spec[k_high].norm();
    let weaker = spec[second].norm_sqr() / spec[first].norm_sqr();
    // A harmonic of the first line, or anything this far down, is no second tone.
    let harmonic = {
        let r = second as f64 / first as f64;
        r > 1.5 && (r - r.round()).abs() * first as f64 <= GUARD_BINS
    };
    if weaker < MIN_PAIR_RATIO || harmonic {
        return Err(single(format!(
            " (the next line, at {:.1} Hz, stands {:.1} dB below it{})",
            second as f64 * bin,
            -10.0 * weaker.log10(),
            if harmonic { " and is its harmonic" } else { "" }
        )));
    }
    if k_low * 5 <= k_high && ratio > 1.5 {
        Ok((TwoToneMethod::Modulation, k_low, k_high, "detected"))
    } else if (k_high - k_low) * 2 < k_low && (0.5..=2.0).contains(&ratio) {
        Ok((
            TwoToneMethod::DifferenceFrequency,
            k_low,
            k_high,
            "detected",
        ))
    } else {
        Err(Error::TwoToneMethodUnknown {
            low_hz: k_low as f64 * bin,
            high_hz: k_high as f64 * bin,
            ratio,
        })
    }
}
