//! Steady-tone analysis: fundamental, harmonics, THD, THD+N, noise, hum, DC, crest factor.
//!
//! ## Method, and why
//! 1. **One window over the whole capture, no averaging of shorter frames.** The capture minus its
//!    mean is multiplied by a 7-term Blackman-Harris window ([`super::window`]) and transformed in
//!    one FFT of the largest fast length that fits. A single long transform gives the finest
//!    frequency resolution (hum lines 10 Hz apart separate in 1 s) and the most processing gain;
//!    the noise figures are sums over thousands of bins, so they need no averaging to be steady.
//! 2. **Lines are fitted, not read off peaks.** The fundamental's frequency is found by maximising
//!    the energy of a least-squares fit of the window's exact transform around the strongest peak
//!    (the IEEE 1057 four-parameter criterion, in the frequency domain; see [`super::fit`]). The
//!    harmonics sit at exact multiples of it; fundamental, harmonics and mains lines are then
//!    fitted jointly for amplitude and phase. No scalloping correction is needed and overlapping
//!    main lobes are separated.
//! 3. **The fundamental is removed in the spectrum.** THD+N's residual is the windowed spectrum
//!    minus the fitted fundamental's exact transform, summed over the band's bins (AES17 allows
//!    a frequency-domain band limit, cl. 5.2.10). Removing it bin by bin, rather than subtracting
//!    powers, keeps the analysis's own floor near -250 dB on double-precision data.
//! 4. **Noise** is what remains after removing every fitted line (fundamental, harmonics, hum),
//!    summed over the band, optionally A-weighted bin by bin.
//! 5. **Frequency stability** is checked by tracking the fundamental's phase over eight Hann-windowed
//!    segments; what a straight line through the phases leaves over would smear the fundamental
//!    into the THD+N residual, so a large wander is flagged.

use super::spectrum::{fast_length, SpectrumPlan, SpectrumPlanner};
use super::steady::{find_steady, Steadiness};
use super::weighting::Weighting;
use super::window::{CosineSum, WindowGenerator, BLACKMAN_HARRIS_7, HANN, WINDOW_BLOCK};
use crate::analysis::fit::{fit_lines, refine_frequency, LineFit};
use crate::analysis::oscillation::{Oscillation, OscillationKind, OscillationSearch};
use crate::calibration::Calibration;
use crate::error::{Error, Result};
use crate::warning::{Warning, WarningCode as C};
use realfft::num_complex::Complex64;
use serde::Serialize;
use std::f64::consts::PI;

mod checks;
mod lines;
mod sums;
pub(crate) use checks::*;
pub(crate) use lines::*;
pub(crate) use sums::*;

/// The window every steady-tone analysis uses (reasons in the module docs).
pub const TONE_WINDOW: CosineSum = BLACKMAN_HARRIS_7;

/// Which mains frequency to look for.
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Mains {
    /// Pick 50 or 60 Hz, whichever family of lines is stronger.
    #[default]
    Auto,
    /// A given mains frequency in Hz.
    Hz(f64),
}

/// Settings for the steady-tone analysis (kept with a notebook run, so a re-analysis repeats
/// them).
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ToneConfig {
    /// Measurement band (low, high) in Hz; `None` for the high edge means 20 kHz or Nyquist,
    /// whichever is lower.
    pub band_low_hz: f64,
    pub band_high_hz: Option<f64>,
    /// Weighting of the noise figure.
    pub weighting: Weighting,
    /// Highest harmonic order reported (2..=this).
    pub max_harmonic: usize,
    /// Mains frequency to look for.
    pub mains: Mains,
    /// How many mains lines (1x, 2x, ...) to report.
    pub hum_orders: usize,
    /// Expected fundamental in Hz: the search stays within 2 % of it.
    pub fundamental_hint_hz: Option<f64>,
}

impl Default for ToneConfig {
    fn default() -> Self {
        ToneConfig {
            band_low_hz: 20.0,
            band_high_hz: None,
            weighting: Weighting::None,
            max_harmonic: 10,
            mains: Mains::Auto,
            hum_orders: 4,
            fundamental_hint_hz: None,
        }
    }
}

/// One channel's samples and what is known about how they were stored.
#[derive(Debug, Clone, Copy)]
pub struct ChannelInput<'a> {
    /// 1-based channel number, for messages and results.
    pub channel: usize,
    pub samples: &'a [f64],
    pub sample_rate_hz: f64,
    /// Magnitude at or beyond which a sample counts as overload.
    pub overload_threshold: f64,
    /// Word length (integer) or mantissa (float) in bits, for resolution-floor warnings.
    pub resolution_bits: u32,
}

/// One harmonic of the fundamental.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct Harmonic {
    pub order: usize,
    pub frequency_hz: f64,
    /// Level relative to the fundamental, dB.
    pub level_dbc: f64,
    /// Level relative to the fundamental, percent of its amplitude.
    pub level_percent: f64,
    /// phi_n - n phi_1 for x = sum a_n sin(n w t + phi_n), degrees in (-180, 180].
    pub phase_deg: f64,
    /// Inside the measurement band (only in-band harmonics count toward THD).
    pub in_band: bool,
    /// The line is not distinguishable from the noise around it: `level_dbc` and
    /// `level_percent` are then its detection limit (see [`detection_limit`]), an upper bound,
    /// and the phase means nothing.
    #[serde(default)]
    pub upper_bound: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub level_vrms: Option<f64>,
}

/// One mains-related line.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct HumLine {
    /// 1 for the mains frequency itself, 2 for twice it (full-wave ripple), ...
    pub order: usize,
    pub frequency_hz: f64,
    pub level_dbc: f64,
    pub level_dbfs: f64,
    /// Under the noise: the levels are the detection limit, an upper bound.
    #[serde(default)]
    pub upper_bound: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub level_vrms: Option<f64>,
}

fn one() -> usize {
    1
}

/// Details of how the analysis was done, for reproducibility.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct AnalysisInfo {
    pub window: std::borrow::Cow<'static, str>,
    pub fft_length: usize,
    pub enbw_bins: f64,
    pub bin_width_hz: f64,
    /// Blocks of `fft_length` samples the figures combine (1 unless the capture was long; see
    /// [`super::blocks`]).
    #[serde(default = "one")]
    pub blocks: usize,
}

/// Everything the steady-tone analysis says about one channel. Units are in the field names;
/// dBFS is referred to a full-scale sine (AES17), dBc to the fundamental. Fields added after the
/// first version read as 0, false or empty in runs kept before them.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct ToneResult {
    /// 1-based channel number.
    pub channel: usize,
    pub samples_analysed: usize,
    pub duration_s: f64,
    /// The steady span of the tone that was analysed, seconds from the capture's start (the
    /// floor, fades and settling around it are left out; see [`super::steady`]).
    #[serde(default)]
    pub analysed_from_s: f64,
    #[serde(default)]
    pub analysed_to_s: f64,
    /// How far the level moves across the analysed span (its last tenth against its first), dB.
    #[serde(default)]
    pub level_drift_db: f64,
    pub fundamental_hz: f64,
    pub fundamental_dbfs: f64,
    /// One standard deviation of `fundamental_dbfs` from the noise around the line: the fitted
    /// amplitude's radial scatter is `sqrt(line noise)` (a line fitted to noise of power N has
    /// complex scatter of mean square 2N), over the amplitude, in dB. It leaves out the
    /// calibration's own uncertainty and any wander of the level itself.
    #[serde(default)]
    pub fundamental_sigma_db: f64,
    /// RMS volts at the amplifier output (calibrated only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fundamental_vrms: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fundamental_dbv: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fundamental_dbu: Option<f64>,
    /// Watts into the load (calibrated with a load only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub output_w: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub load_ohms: Option<f64>,
    /// THD_F: in-band harmonics H2..Hmax over the fundamental; `null` when no harmonic lies in
    /// the band (a warning says what rate or band would hold them).
    pub thd_percent: Option<f64>,
    pub thd_db: Option<f64>,
    /// The highest harmonic order THD counts (the last one inside the band).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub thd_highest_order: Option<usize>,
    /// THD is mostly made of detection limits: the true figure is at most this.
    #[serde(default)]
    pub thd_upper_bound: bool,
    /// AES17 THD+N: everything in band but the fundamental, over everything in band.
    pub thdn_percent: f64,
    pub thdn_db: f64,
    /// SINAD = -THD+N in dB.
    pub sinad_db: f64,
    /// Effective number of bits, (SINAD - 1.76) / 6.02.
    pub enob_bits: f64,
    /// [low, high] in Hz.
    pub band_hz: [f64; 2],
    pub harmonics: Vec<Harmonic>,
    /// The mains frequency the hum lines refer to, and whether it was detected or given.
    pub mains_hz: f64,
    pub mains_source: std::borrow::Cow<'static, str>,
    pub hum: Vec<HumLine>,
    /// In-band noise with every fitted line removed, dBFS.
    pub noise_dbfs: f64,
    pub noise_weighting: Weighting,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub noise_vrms: Option<f64>,
    /// Mean of the samples as a fraction of full scale.
    pub dc_offset: f64,
    /// Peak over RMS of the signal minus its mean (sqrt 2 = 1.414 for a sine).
    pub crest_factor: f64,
    pub overload_samples: usize,
    /// Change of the fundamental's frequency from the start to the end of the capture, in ppm.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub frequency_drift_ppm: Option<f64>,
    /// RMS phase wander of the fundamental around a steady frequency, degrees.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub phase_wander_deg: Option<f64>,
    /// Lines no stimulus, harmonic, mains or noise explains, above or below the audio band, and a
    /// level pumping at a few hertz (see [`super::oscillation`]); each also has a warning.
    #[serde(default)]
    pub oscillations: Vec<Oscillation>,
    /// How far the oscillation checks could look at this rate and length.
    #[serde(default)]
    pub oscillation_search: OscillationSearch,
    pub analysis: AnalysisInfo,
    pub warnings: Vec<crate::warning::Warning>,
}

/// The steady-tone analyser: holds its settings and a planner that caches FFT plans and windows,
/// so analysing many captures of the same length (a power staircase) plans once.
pub struct ToneAnalyzer {
    pub config: ToneConfig,
    planner: SpectrumPlanner,
}

/// The amplitude below which a fitted line cannot be told from the noise, given the noise power
/// `line_noise` that one line fitted at that place picks up (local density times the window's
/// ENBW). A line fitted to noise alone has an exponentially distributed power (chi-square with 2
/// degrees of freedom, mean `line_noise`): it exceeds [`NOISE_FLOOR_FACTOR`] times the mean with
/// probability e^-10 = 4.5e-5, so a line below that amplitude is reported as "< limit".
pub(crate) fn detection_limit(line_noise: f64) -> f64 {
    (2.0 * NOISE_FLOOR_FACTOR * line_noise).sqrt()
}

/// A line no harmonic or mains line explains, stronger than this against the fundamental
/// (-20 dBc), is a second tone: the capture is a two-tone pair, not one tone. Below it and above
/// -50 dBc, it is worth a warning (an oscillation, interference); both common practice.
const SECOND_TONE_RATIO: f64 = 0.01;
const OTHER_LINE_RATIO: f64 = 1e-5;

/// Lines closer than this many bins to a stronger line are not fitted separately.
pub(crate) const GUARD_BINS: f64 = 8.0;
/// A line less than 10 dB above the noise expected in one line is "at the noise floor". Noise alone
/// fitted as a line has an exponentially distributed power (chi-square, 2 degrees of freedom), so
/// it exceeds 10x its mean with probability e^-10: a line above that is real.
pub(crate) const NOISE_FLOOR_FACTOR: f64 = 10.0;
/// The fundamental must stand this far (20 dB) above the noise in its line to count as a tone.
const MIN_TONE_SNR: f64 = 100.0;

impl ToneAnalyzer {
    pub fn new(config: ToneConfig) -> Result<Self> {
        if !(config.band_low_hz.is_finite() && config.band_low_hz >= 0.0) {
            return Err(Error::InvalidSetting(format!(
                "the band's low edge must be 0 Hz or more, got {} Hz",
                config.band_low_hz
            )));
        }
        if let Some(hi) = config.band_high_hz {
            if !(hi.is_finite() && hi > config.band_low_hz) {
                return Err(Error::InvalidSetting(format!(
                    "the band's high edge ({hi} Hz) must be above its low edge ({} Hz); write --band LO:HI",
                    config.band_low_hz
                )));
            }
        }
        if !(2..=1000).contains(&config.max_harmonic) {
            return Err(Error::InvalidSetting(format!(
                "--harmonics must lie in 2..=1000 (H2 is the first harmonic reported), got {}",
                config.max_harmonic
            )));
        }
        if let Mains::Hz(f) = config.mains {
            if !(f.is_finite() && (10.0..=1000.0).contains(&f)) {
                return Err(Error::InvalidSetting(format!(
                    "--mains must be a frequency between 10 and 1000 Hz, such as 50 or 60, got {f}"
                )));
            }
        }
        Ok(ToneAnalyzer {
            config,
            planner: SpectrumPlanner::new(),
        })
    }

    /// The band's high edge at rate `fs`: as set, or 20 kHz or Nyquist, whichever is lower.
    pub fn band_high(&self, fs: f64) -> Result<f64> {
        let nyquist = fs / 2.0;
        let band_hi = self.config.band_high_hz.unwrap_or(20_000f64.min(nyquist));
        if band_hi > nyquist + 1e-9 {
            return Err(Error::InvalidSetting(format!(
                "the band's high edge {band_hi} Hz is above the capture's Nyquist frequency {nyquist} Hz; use --band {}:{nyquist}",
                self.config.band_low_hz
            )));
        }
        Ok(band_hi)
    }

    /// Analyse one channel.
    pub fn analyze(&self, input: &ChannelInput, cal: &Calibration) -> Result<ToneResult> {
        let fs = input.sample_rate_hz;
        self.band_high(fs)?;
        if input.samples.len() < MIN_SAMPLES {
            // Invalid data is reported for what it is; anything else this short is too short.
            if let Err(e @ Error::NotFinite { .. }) = sample_stats(input.samples, input, None) {
                return Err(e);
            }
            return Err(too_short(input, MIN_SAMPLES, ""));
        }
        let steady = find_steady(input.samples, fs);
        self.analyze_steady(input, &steady, cal)
    }

    /// Analyse the steady span `steady` found in `input` (see [`find_steady`]): refuse what is
    /// not one steady tone, analyse the span, and add what the envelope showed.
    pub fn analyze_steady(
        &self,
        input: &ChannelInput,
        steady: &Steadiness,
        cal: &Calibration,
    ) -> Result<ToneResult> {
        let fs = input.sample_rate_hz;
        check_steady_kind(input.channel, steady, fs)?;
        let span = ChannelInput {
            samples: &input.samples[steady.start..steady.end],
            ..*input
        };
        if span.samples.len() < MIN_SAMPLES {
            return Err(too_short(&span, MIN_SAMPLES, " of steady tone"));
        }
        let mut result = self.analyze_block(&span, cal)?;
        result.analysed_from_s = steady.start as f64 / fs;
        result.analysed_to_s = (steady.start + result.samples_analysed) as f64 / fs;
        result.level_drift_db = steady.drift_db;
        result.warnings.splice(0..0, steady_warnings(steady, fs));
        Ok(result)
    }

    /// Analyse all of `input` as one steady stretch, with no judgement of its envelope (the
    /// caller judged the whole capture; a long one is analysed in such blocks).
    pub fn analyze_block(&self, input: &ChannelInput, cal: &Calibration) -> Result<ToneResult> {
        let fs = input.sample_rate_hz;
        let band_hi = self.band_high(fs)?;
        if input.samples.len() < MIN_SAMPLES {
            return Err(too_short(input, MIN_SAMPLES, ""));
        }
        let (stats, plan, buffers) = measure_spectrum(&self.planner, input)?;
        let outcome = self.analyze_spectrum(input, cal, &stats, &plan, &buffers.output, band_hi);
        plan.give_back(buffers);
        outcome
    }

    /// Everything after the transform: fits, sums, figures, warnings.
    fn analyze_spectrum(
        &self,
        input: &ChannelInput,
        cal: &Calibration,
        stats: &SampleStats,
        plan: &SpectrumPlan,
        spec: &[Complex64],
        band_hi: f64,
    ) -> Result<ToneResult> {
        let fs = input.sample_rate_hz;
        let n = plan.len;
        let band_lo = self.config.band_low_hz;
        let half = TONE_WINDOW.main_lobe_half_width() as f64 + 1.0;
        let too_short = |need: usize, why: &str| too_short(input, need, why);
        // DC offset as the window-weighted mean: X[0] / sum(w) is what is left after removing the
        // plain mean. The plain mean of a tone over a fractional number of periods is biased by up
        // to A / (pi * periods); the weighted mean's bias is the window's leakage, below -180 dB.
        let dc = stats.dc_in_window + spec[0].re / (n as f64 * TONE_WINDOW.coherent_gain());
        let bin_hz = fs / n as f64;
        let to_bins = |hz: f64| hz / bin_hz;

        // --- fundamental: strongest peak, then a fitted frequency -------------------------------
        let k_min = (2.0 * half).ceil() as usize;
        let k_max = (n as f64 / 2.0 - half).floor() as usize;
        let (search_lo, search_hi) = match self.config.fundamental_hint_hz {
            Some(h) => {
                let c = to_bins(h);
                let w = (0.02 * c).max(3.0);
                (
                    ((c - w).floor().max(1.0)) as usize,
                    ((c + w).ceil() as usize).min(k_max),
                )
            }
            None => (k_min, k_max),
        };
        if search_hi <= search_lo {
            let need = ((2.0 * half + 2.0) * fs / self.config.fundamental_hint_hz.unwrap_or(20.0))
                as usize;
            return Err(too_short(
                need.max(MIN_SAMPLES),
                " to resolve the fundamental",
            ));
        }
        let k_peak = (search_lo..=search_hi)
            .max_by(|&a, &b| spec[a].norm_sqr().total_cmp(&spec[b].norm_sqr()))
            .unwrap_or(search_lo);
        let mains_candidates: Vec<f64> = match self.config.mains {
            Mains::Hz(f) => vec![f],
            Mains::Auto => vec![50.0, 60.0],
        };
        let near_peak: Vec<f64> = mains_candidates
            .iter()
            .flat_map(|&m| (1..=self.config.hum_orders).map(move |o| to_bins(m * o as f64)))
            .filter(|&f| (f - k_peak as f64).abs() > 3.0 && (f - k_peak as f64).abs() <= 2.0 * half)
            .collect();
        let f0_bins = refine_frequency(spec, n, &TONE_WINDOW, k_peak as f64, &near_peak);
        if f0_bins < 2.0 * half {
            let need = ((2.0 * half + 1.0) / f0_bins * n as f64).ceil() as usize;
            return Err(too_short(need, " for a tone this low"));
        }
        let f0_hz = f0_bins * bin_hz;

        // --- lines: fundamental, harmonics, then the stronger mains family ---------------------
        let top = n as f64 / 2.0 - half;
        let mut tone_lines = vec![f0_bins];
        for order in 2..=self.config.max_harmonic {
            let f = order as f64 * f0_bins;
            if f > top {
                break;
            }
            tone_lines.push(f);
        }
        let best = fit_mains_family(
            spec,
            n,
            &mains_candidates,
            self.config.hum_orders,
            bin_hz,
            (half, top),
            &tone_lines,
        );
        let (mains_hz, hum_lines, fit) = match best {
            Some(b) => (b.mains_hz, b.lines, b.fit),
            None => {
                let fit = fit_lines(spec, n, &TONE_WINDOW, &tone_lines).ok_or_else(|| {
                    Error::InvalidSetting("the fundamental and its harmonics could not be separated; record a longer capture".into())
                })?;
                (mains_candidates[0], Vec::new(), fit)
            }
        };

        // --- band sums -------------------------------------------------------------------------
        let k_lo = (to_bins(band_lo).ceil() as usize).max(1);
        let k_hi = (to_bins(band_hi).floor() as usize).min(n / 2);
        let fundamental_model = fit.sparse_model([0]);
        let all_model = fit.full_model();
        let sums = band_sums(spec, k_lo, k_hi, n, &fundamental_model, &all_model, |k| {
            self.config.weighting.power_gain(k as f64 * bin_hz)
        });
        let scale = plan.power_scale();
        let p_total = sums.total * scale;
        let p_thdn = sums.without_fundamental * scale;
        let p_noise = sums.noise_weighted * scale;
        let enbw = TONE_WINDOW.enbw_bins();

        // Noise expected in one fitted line near bin `f`: local residual density times ENBW,
        // and never less than the share of one line of the quantisation noise the source
        // declares (a step q = 2^(1-B) of the +/-1 full scale, power q^2/12 spread evenly up
        // to half the rate; Bennett's classic model): a capture computed in double precision
        // (a circuit simulation) has a residual far under what its arithmetic can stand behind,
        // and no line is read below that.
        let q = 2f64.powi(1 - input.resolution_bits.min(1000) as i32);
        let quantisation_line = q * q / 12.0 * enbw * 2.0 / n as f64;
        let line_noise = |f: f64| -> f64 {
            (local_density(spec, &all_model, f, n) * scale * enbw).max(quantisation_line)
        };

        let a1 = fit.amplitudes[0].norm();
        let p1 = a1 * a1 / 2.0;
        if p1 < MIN_TONE_SNR * line_noise(f0_bins) || a1 == 0.0 {
            return Err(Error::NoTone {
                channel: input.channel,
                strongest_hz: f0_hz,
                above_noise_db: 10.0 * (p1 / line_noise(f0_bins).max(1e-300)).log10(),
            });
        }
        // --- anything else that stands out: a second tone, an oscillation, interference ------
        let peak_power = spec[k_peak].norm_sqr().max(1e-300);
        let other = strongest_unexplained_line(spec, &all_model, k_lo, k_hi, |k, p| {
            let f = k as f64 * bin_hz;
            explained(f, p / peak_power, f0_hz, mains_hz, fs, 3.0 * bin_hz * half)
        });
        let mut other_line = None;
        if let Some((k_x, r2)) = other {
            // Both lines under the same window: the ratio of peak bins is the ratio of powers
            // (to within the window's scalloping, under 1 dB for this window).
            let ratio = r2 / peak_power;
            let significant = r2 * scale * enbw > NOISE_FLOOR_FACTOR * line_noise(k_x as f64);
            let f_x = k_x as f64 * bin_hz;
            if ratio > SECOND_TONE_RATIO {
                return Err(Error::WrongKind {
                    channel: input.channel,
                    found: format!(
                        "a second tone at {f_x:.1} Hz stands {:.1} dB below the one at {f0_hz:.1} Hz and is no harmonic of it: the capture holds two tones (an IMD pair?), not one",
                        -10.0 * ratio.log10()
                    ),
                    next: "Measure a two-tone pair with `ampnote imd CAPTURE.wav`; for THD, play one tone.".into(),
                });
            }
            if ratio > OTHER_LINE_RATIO && significant {
                other_line = Some((f_x, 10.0 * ratio.log10()));
            }
        }
        let max_harmonic_ratio = fit.amplitudes[1..tone_lines.len()]
            .iter()
            .zip(&tone_lines[1..])
            .filter(|(_, &f)| f * bin_hz <= band_hi)
            .map(|(c, _)| (c.norm() / a1).powi(2))
            .fold(0.0, f64::max);
        let (oscillations, oscillation_search) = find_oscillations(
            spec,
            &all_model,
            n,
            fs,
            f0_bins,
            band_hi,
            peak_power,
            a1,
            max_harmonic_ratio,
            input.resolution_bits,
        );
        // A pumping level's sidebands are not a line of their own.
        if let Some((f_x, _)) = other_line {
            if oscillations.iter().any(|o| {
                o.kind == OscillationKind::Motorboating
                    && ((f_x - f0_hz).abs() - o.frequency_hz).abs() < 3.0 * bin_hz
            }) {
                other_line = None;
            }
        }
        let fundamental_dbfs = 20.0 * a1.log10();
        // sin-convention phase: Re(C e^{jwn}) = |C| sin(wn + arg C + pi/2)
        let phase_sin = |c: Complex64| c.arg() + PI / 2.0;
        let phi1 = phase_sin(fit.amplitudes[0]);
        let in_band = |hz: f64| hz >= band_lo && hz <= band_hi;

        let harmonics: Vec<Harmonic> = (1..tone_lines.len())
            .map(|i| {
                let order = i + 1;
                let c = fit.amplitudes[i];
                let frequency_hz = order as f64 * f0_hz;
                let limit = detection_limit(line_noise(tone_lines[i]));
                let upper_bound = c.norm() < limit;
                let amplitude = if upper_bound { limit } else { c.norm() };
                let ratio = amplitude / a1;
                let level_dbfs = 20.0 * amplitude.max(1e-300).log10();
                Harmonic {
                    order,
                    frequency_hz,
                    level_dbc: 20.0 * ratio.max(1e-300).log10(),
                    level_percent: 100.0 * ratio,
                    phase_deg: wrap_degrees((phase_sin(c) - order as f64 * phi1).to_degrees()),
                    in_band: in_band(frequency_hz),
                    upper_bound,
                    level_vrms: cal.vrms_from_dbfs(level_dbfs),
                }
            })
            .collect();
        let hum: Vec<HumLine> = hum_lines
            .iter()
            .enumerate()
            .map(|(j, &(order, f))| {
                let c = fit.amplitudes[tone_lines.len() + j];
                let limit = detection_limit(line_noise(f));
                let upper_bound = c.norm() < limit;
                let level_dbfs = 20.0 * c.norm().max(limit).max(1e-300).log10();
                HumLine {
                    order,
                    frequency_hz: mains_hz * order as f64,
                    level_dbc: level_dbfs - fundamental_dbfs,
                    level_dbfs,
                    upper_bound,
                    level_vrms: cal.vrms_from_dbfs(level_dbfs),
                }
            })
            .collect();
        let mains_source = match self.config.mains {
            Mains::Hz(_) => "given",
            Mains::Auto if hum.iter().any(|h| !h.upper_bound) => "detected",
            Mains::Auto => "not detected (no mains line above the noise)",
        };

        let power_of = |h: &Harmonic| (h.level_percent / 100.0 * a1).powi(2) / 2.0;
        let counted: Vec<&Harmonic> = harmonics.iter().filter(|h| h.in_band).collect();
        let harmonic_power: f64 = counted.iter().map(|h| power_of(h)).sum();
        let bound_power: f64 = counted
            .iter()
            .filter(|h| h.upper_bound)
            .map(|h| power_of(h))
            .sum();
        // THD needs at least H2 in the band; with none, it is not measured (never 0).
        let thd_ratio = (!counted.is_empty()).then(|| (harmonic_power / p1).sqrt());
        let thd_highest_order = counted.last().map(|h| h.order);
        // More than 1 % of the sum (0.04 dB) from detection limits: THD is a bound.
        let thd_upper_bound = bound_power > 0.01 * harmonic_power;
        let thdn_ratio = if p_total > 0.0 {
            (p_thdn / p_total).sqrt()
        } else {
            0.0
        };
        let thdn_db = 20.0 * thdn_ratio.max(1e-300).log10();
        let noise_dbfs = 10.0 * (p_noise / 0.5).max(1e-300).log10();
        let fundamental_vrms = cal.vrms_from_dbfs(fundamental_dbfs);
        let drift = phase_track(input.samples, stats.dc, f0_hz / fs, fs);

        let mut result = ToneResult {
            channel: input.channel,
            samples_analysed: n,
            duration_s: n as f64 / fs,
            analysed_from_s: 0.0,
            analysed_to_s: n as f64 / fs,
            level_drift_db: 0.0,
            fundamental_hz: f0_hz,
            fundamental_dbfs,
            fundamental_sigma_db: 20.0 / std::f64::consts::LN_10 * line_noise(f0_bins).sqrt() / a1,
            fundamental_vrms,
            fundamental_dbv: fundamental_vrms.map(crate::calibration::dbv),
            fundamental_dbu: fundamental_vrms.map(crate::calibration::dbu),
            output_w: cal.watts_from_dbfs(fundamental_dbfs),
            load_ohms: cal.load_ohms.filter(|_| cal.has_volts()),
            thd_percent: thd_ratio.map(|r| 100.0 * r),
            thd_db: thd_ratio.map(|r| 20.0 * r.max(1e-300).log10()),
            thd_highest_order,
            thd_upper_bound,
            thdn_percent: 100.0 * thdn_ratio,
            thdn_db,
            sinad_db: -thdn_db,
            enob_bits: (-thdn_db - 1.76) / 6.02,
            band_hz: [band_lo, band_hi],
            harmonics,
            mains_hz,
            mains_source: mains_source.into(),
            hum,
            noise_dbfs,
            noise_weighting: self.config.weighting,
            noise_vrms: cal.vrms_from_dbfs(noise_dbfs),
            dc_offset: dc,
            crest_factor: stats.crest_factor,
            overload_samples: stats.overload,
            frequency_drift_ppm: drift.map(|d| d.drift_ppm),
            phase_wander_deg: drift.map(|d| d.wander_rad.to_degrees()),
            oscillations,
            oscillation_search,
            analysis: AnalysisInfo {
                window: TONE_WINDOW.name.into(),
                fft_length: n,
                enbw_bins: enbw,
                bin_width_hz: bin_hz,
                blocks: 1,
            },
            warnings: Vec::new(),
        };
        result.warnings = quality_warnings(&result, input, cal, p_thdn, p1, drift);
        let named: Vec<Warning> = result.oscillations.iter().map(|o| o.warning()).collect();
        result.warnings.extend(named);
        if let Some((f_x, dbc)) = other_line {
            result.warnings.push(C::Oscillation.say(format!(
                "a line at {f_x:.1} Hz ({dbc:.1} dBc) is neither a harmonic of the tone nor mains hum: an oscillation, interference or a second signal. THD+N and the noise include it; find its source before reading them as the amplifier's distortion."
            )));
        }
        Ok(result)
    }
}

/// The capture's statistics and its spectrum under [`TONE_WINDOW`] with the mean removed, from one
/// pass over the samples. The caller hands the buffers back to the plan when done.
pub(crate) fn measure_spectrum(
    planner: &SpectrumPlanner,
    input: &ChannelInput,
) -> Result<(
    SampleStats,
    std::sync::Arc<SpectrumPlan>,
    super::spectrum::SpectrumBuffers,
)> {
    let n = fast_length(input.samples.len());
    let plan = planner.plan(TONE_WINDOW, n);
    let mut buffers = plan.take_buffers();
    // One pass over the samples gathers the statistics and fills the FFT input with the
    // windowed samples; the mean is taken out of the spectrum afterwards.
    match sample_stats(
        input.samples,
        input,
        Some((&plan.window_generator, &mut buffers.input)),
    ) {
        Ok(stats) => {
            plan.transform_prepared(&mut buffers);
            // A constant d windowed shows only in bins 0..=M-1 of the DFT, as d * W(k).
            for k in 0..TONE_WINDOW.coefficients.len().min(buffers.output.len()) {
                buffers.output[k] -= TONE_WINDOW.kernel(k as f64, n) * stats.dc_in_window;
            }
            Ok((stats, plan, buffers))
        }
        Err(e) => {
            plan.give_back(buffers);
            Err(e)
        }
    }
}

/// Fewer samples than this cannot hold a resolvable tone and its harmonics.
pub(crate) const MIN_SAMPLES: usize = 512;

fn too_short(input: &ChannelInput, need_samples: usize, why: &str) -> Error {
    let fs = input.sample_rate_hz;
    Error::TooShort {
        channel: input.channel,
        have_samples: input.samples.len(),
        have_s: input.samples.len() as f64 / fs,
        need_samples,
        need_s: need_samples as f64 / fs,
        why: why.to_string(),
    }
}

/// Wraps degrees into (-180, 180].
pub fn wrap_degrees(d: f64) -> f64 {
    let w = d.rem_euclid(360.0);
    if w > 180.0 {
        w - 360.0
    } else {
        w
    }
}
