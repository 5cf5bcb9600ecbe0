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

use super::fit::{fit_lines, refine_frequency, LineFit};
use super::oscillation::{Oscillation, OscillationKind, OscillationSearch};
use super::spectrum::{fast_length, SpectrumPlan, SpectrumPlanner};
use super::steady::{find_steady, Steadiness};
use super::weighting::Weighting;
use super::window::{CosineSum, WindowGenerator, BLACKMAN_HARRIS_7, HANN, WINDOW_BLOCK};
use crate::calibration::Calibration;
use crate::error::{Error, Result};
use crate::warning::{Warning, WarningCode as C};
use realfft::num_complex::Complex64;
use serde::Serialize;
use std::f64::consts::PI;

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

        // Noise expected in one fitted line near bin `f`: local residual density times ENBW.
        let line_noise = |f: f64| -> f64 { local_density(spec, &all_model, f, n) * scale * enbw };

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

pub(crate) struct SampleStats {
    /// Mean of all samples.
    pub dc: f64,
    /// Mean of the samples inside the FFT (the capture may be trimmed to a fast length).
    pub dc_in_window: f64,
    pub crest_factor: f64,
    pub overload: usize,
}

/// One pass for validity, mean, spread, extremes and overload, in eight independent lanes so the
/// compiler can vectorise it. With `window` (the window and the FFT input of length N), the first
/// N samples are also written, windowed, into the FFT input, so the samples are read once.
pub(crate) fn sample_stats(
    x: &[f64],
    input: &ChannelInput,
    window: Option<(&WindowGenerator, &mut [f64])>,
) -> Result<SampleStats> {
    const L: usize = 8;
    let mut acc = Lanes::<L>::new();
    let thr = input.overload_threshold;
    let head_len = window.as_ref().map_or(0, |(_, out)| out.len());
    if let Some((win, out)) = window {
        let mut w = [0.0f64; WINDOW_BLOCK];
        for (b, (xb, ob)) in x[..head_len]
            .chunks(WINDOW_BLOCK)
            .zip(out.chunks_mut(WINDOW_BLOCK))
            .enumerate()
        {
            let w = &mut w[..xb.len()];
            win.fill_block(b * WINDOW_BLOCK, w);
            for ((c, wc), oc) in xb
                .chunks_exact(L)
                .zip(w.chunks_exact(L))
                .zip(ob.chunks_exact_mut(L))
            {
                for (j, ((&v, &wv), o)) in c.iter().zip(wc).zip(oc.iter_mut()).enumerate() {
                    acc.add(j, v, thr);
                    *o = v * wv;
                }
            }
            let done = xb.len() - xb.len() % L;
            for i in done..xb.len() {
                acc.add(i % L, xb[i], thr);
                ob[i] = xb[i] * w[i];
            }
        }
    }
    let rest = &x[head_len..];
    let head_sum = (head_len > 0).then(|| acc.sum.iter().sum::<f64>());
    for c in rest.chunks_exact(L) {
        for (j, &v) in c.iter().enumerate() {
            acc.add(j, v, thr);
        }
    }
    for (j, &v) in rest.chunks_exact(L).remainder().iter().enumerate() {
        acc.add(j, v, thr);
    }
    if acc.bad {
        let (i, v) = x
            .iter()
            .enumerate()
            .find(|(_, v)| !v.is_finite())
            .expect("a non-finite sample exists");
        return Err(Error::NotFinite {
            channel: input.channel,
            index: i,
            what: if v.is_nan() { "NaN" } else { "infinite" },
        });
    }
    let n = x.len().max(1) as f64;
    let dc = acc.sum.iter().sum::<f64>() / n;
    let max = acc.hi.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let min = acc.lo.iter().copied().fold(f64::INFINITY, f64::min);
    // Mean square about the mean; the subtraction loses precision only when the DC exceeds the
    // AC part by a factor of about 10^6, far outside any usable capture.
    let ms = (acc.sq.iter().sum::<f64>() / n - dc * dc).max(0.0);
    let rms = ms.sqrt();
    if rms <= 1e-12 || max - min <= 1e-15 {
        return Err(if dc == 0.0 && max == 0.0 && min == 0.0 {
            Error::Silent {
                channel: input.channel,
            }
        } else if dc.abs() <= (max - min).max(0.0) {
            // It moves, but by less than any converter resolves (-240 dBFS): not a DC level,
            // a file written at the wrong scale or damaged.
            Error::FarTooQuiet {
                channel: input.channel,
                peak: max.abs().max(min.abs()),
            }
        } else {
            Error::DcOnly {
                channel: input.channel,
                dc_fraction: dc,
            }
        });
    }
    Ok(SampleStats {
        dc,
        dc_in_window: head_sum.map_or(dc, |s| s / head_len as f64),
        crest_factor: (max - dc).max(dc - min) / rms,
        overload: acc.over.iter().sum::<u64>() as usize,
    })
}

/// Per-lane running statistics for [`sample_stats`].
struct Lanes<const L: usize> {
    sum: [f64; L],
    sq: [f64; L],
    hi: [f64; L],
    lo: [f64; L],
    over: [u64; L],
    bad: bool,
}

impl<const L: usize> Lanes<L> {
    fn new() -> Self {
        Lanes {
            sum: [0.0; L],
            sq: [0.0; L],
            hi: [f64::NEG_INFINITY; L],
            lo: [f64::INFINITY; L],
            over: [0; L],
            bad: false,
        }
    }

    #[inline(always)]
    fn add(&mut self, j: usize, v: f64, thr: f64) {
        self.bad |= !v.is_finite();
        self.sum[j] += v;
        self.sq[j] += v * v;
        self.hi[j] = self.hi[j].max(v);
        self.lo[j] = self.lo[j].min(v);
        self.over[j] += (v.abs() >= thr) as u64;
    }
}

struct BandSums {
    total: f64,
    without_fundamental: f64,
    noise_weighted: f64,
}

/// Sums over bins `k_lo..=k_hi` of `|X|^2`, `|X - fundamental|^2` and `g(k) |X - all lines|^2`,
/// each model given as sorted `(bin, value)` pairs. The Nyquist bin counts half (one-sided power).
fn band_sums(
    spec: &[Complex64],
    k_lo: usize,
    k_hi: usize,
    n: usize,
    fundamental: &[(usize, Complex64)],
    all: &[(usize, Complex64)],
    gain: impl Fn(usize) -> f64,
) -> BandSums {
    let mut s = BandSums {
        total: 0.0,
        without_fundamental: 0.0,
        noise_weighted: 0.0,
    };
    if k_hi < k_lo {
        return s;
    }
    let mut fi = fundamental.partition_point(|e| e.0 < k_lo);
    let mut ai = all.partition_point(|e| e.0 < k_lo);
    for (k, &x) in spec.iter().enumerate().take(k_hi + 1).skip(k_lo) {
        let edge = if k == n / 2 { 0.5 } else { 1.0 };
        let mut xf = x;
        if fi < fundamental.len() && fundamental[fi].0 == k {
            xf -= fundamental[fi].1;
            fi += 1;
        }
        let mut xa = x;
        if ai < all.len() && all[ai].0 == k {
            xa -= all[ai].1;
            ai += 1;
        }
        s.total += edge * x.norm_sqr();
        s.without_fundamental += edge * xf.norm_sqr();
        s.noise_weighted += edge * gain(k) * xa.norm_sqr();
    }
    s
}

/// Mean residual `|X - lines|^2` per bin within 50 bins of `f` (bins), excluding the line's own
/// main lobe: the noise a line at `f` would pick up.
pub(crate) fn local_density(
    spec: &[Complex64],
    all: &[(usize, Complex64)],
    f: f64,
    n: usize,
) -> f64 {
    let centre = f.round() as isize;
    let lo = (centre - 50).max(1) as usize;
    let hi = ((centre + 50) as usize).min(n / 2 - 1);
    let skip = TONE_WINDOW.main_lobe_half_width() as isize + 1;
    let mut sum = 0.0;
    let mut count = 0usize;
    for (k, r) in residuals(spec, all, lo, hi) {
        if (k as isize - centre).abs() > skip {
            sum += r.norm_sqr();
            count += 1;
        }
    }
    if count == 0 {
        0.0
    } else {
        sum / count as f64
    }
}

#[derive(Debug, Clone, Copy)]
struct Drift {
    drift_ppm: f64,
    wander_rad: f64,
}

/// Tracks the fundamental's phase over Hann-windowed segments (8, or 4 for short captures, each
/// holding at least 8 periods). Returns `None` when the capture is too short to track.
///
/// Segment `s` starting at sample `a` gives `z_s = exp(-j w a) * sum_i x[a + i] T[i]` with the
/// table `T[i] = hann[i] exp(-j w i)` built once, so the pass over the samples is a plain dot
/// product with no loop-carried rotation.
fn phase_track(x: &[f64], dc: f64, f_cps: f64, fs: f64) -> Option<Drift> {
    let segments = [8usize, 4]
        .into_iter()
        .find(|&s| x.len() / s >= 256 && (x.len() / s) as f64 * f_cps >= 8.0)?;
    let len = x.len() / segments;
    let hann = HANN.samples(len);
    let step = Complex64::from_polar(1.0, -2.0 * PI * f_cps);
    let mut rot = Complex64::new(1.0, 0.0);
    let mut table_re = Vec::with_capacity(len);
    let mut table_im = Vec::with_capacity(len);
    for (i, &h) in hann.iter().enumerate() {
        if i % 1024 == 0 {
            // Re-anchor the rotating phasor so rounding cannot accumulate.
            rot = Complex64::from_polar(1.0, -2.0 * PI * (f_cps * i as f64).fract());
        }
        table_re.push(h * rot.re);
        table_im.push(h * rot.im);
        rot *= step;
    }
    // The mean was not removed from the samples: each segment's sum holds dc * sum(T) extra.
    let t_sum = Complex64::new(table_re.iter().sum(), table_im.iter().sum());
    let mut phases = Vec::with_capacity(segments);
    let mut times = Vec::with_capacity(segments);
    for s in 0..segments {
        let start = s * len;
        let seg = &x[start..start + len];
        let (mut re, mut im) = ([0.0f64; 4], [0.0f64; 4]);
        let chunks = seg
            .chunks_exact(4)
            .zip(table_re.chunks_exact(4))
            .zip(table_im.chunks_exact(4));
        for ((xv, tr), ti) in chunks {
            for (j, ((&v, &r), &i)) in xv.iter().zip(tr).zip(ti).enumerate() {
                re[j] += v * r;
                im[j] += v * i;
            }
        }
        let done = len - len % 4;
        let mut z = Complex64::new(re.iter().sum(), im.iter().sum());
        for i in done..len {
            z += Complex64::new(seg[i] * table_re[i], seg[i] * table_im[i]);
        }
        z -= t_sum * dc;
        z *= Complex64::from_polar(1.0, -2.0 * PI * (f_cps * start as f64).fract());
        phases.push(z.arg());
        times.push((start as f64 + len as f64 / 2.0) / fs);
    }
    for i in 1..phases.len() {
        while phases[i] - phases[i - 1] > PI {
            phases[i] -= 2.0 * PI;
        }
        while phases[i] - phases[i - 1] < -PI {
            phases[i] += 2.0 * PI;
        }
    }
    let lin = polyfit(&times, &phases, 1)?;
    let wander = (times
        .iter()
        .zip(&phases)
        .map(|(&t, &p)| (p - lin[0] - lin[1] * t).powi(2))
        .sum::<f64>()
        / phases.len() as f64)
        .sqrt();
    let quad = polyfit(&times, &phases, 2)?;
    let span = times[times.len() - 1] - times[0];
    let f0_hz = f_cps * fs;
    let drift_hz = 2.0 * quad[2] * span / (2.0 * PI);
    Some(Drift {
        drift_ppm: drift_hz / f0_hz * 1e6,
        wander_rad: wander,
    })
}

/// Least-squares polynomial fit of degree `deg`; coefficients from the constant term up.
fn polyfit(t: &[f64], y: &[f64], deg: usize) -> Option<Vec<f64>> {
    let m = deg + 1;
    let t0 = t.iter().sum::<f64>() / t.len() as f64;
    let mut g = vec![0.0; m * m];
    let mut b = vec![0.0; m];
    for (&ti, &yi) in t.iter().zip(y) {
        let u = ti - t0;
        let pows: Vec<f64> = (0..m).map(|p| u.powi(p as i32)).collect();
        for i in 0..m {
            b[i] += pows[i] * yi;
            for j in 0..m {
                g[i * m + j] += pows[i] * pows[j];
            }
        }
    }
    let c = super::fit::solve_spd(&mut g, &b, m)?;
    // Shift back from (t - t0) to t: only the linear and quadratic terms are used.
    Some(match deg {
        1 => vec![c[0] - c[1] * t0, c[1]],
        _ => vec![
            c[0] - c[1] * t0 + c[2] * t0 * t0,
            c[1] - 2.0 * c[2] * t0,
            c[2],
        ],
    })
}

/// The stronger mains family, fitted jointly with the lines already known (`fixed`: the tone and
/// its harmonics, or none in a noise capture).
pub(crate) struct MainsFit {
    pub mains_hz: f64,
    /// (order, bin) of each mains line fitted, in order after the `fixed` lines.
    pub lines: Vec<(usize, f64)>,
    pub fit: LineFit,
}

/// The one mains fit of the tone and the noise analyses: for each candidate mains frequency, its
/// orders 1..=`orders` inside `[half, top]` bins and at least [`GUARD_BINS`] from every fixed
/// line, fitted jointly with the fixed lines; the family whose lines take the more power wins.
/// A family whose own lines crowd each other closer than the guard (a capture too short to
/// part them) is not fitted.
pub(crate) fn fit_mains_family(
    spec: &[Complex64],
    n: usize,
    candidates: &[f64],
    orders: usize,
    bin_hz: f64,
    (half, top): (f64, f64),
    fixed: &[f64],
) -> Option<MainsFit> {
    let mut best: Option<(MainsFit, f64)> = None;
    for &m in candidates {
        let lines: Vec<(usize, f64)> = (1..=orders)
            .map(|o| (o, m * o as f64 / bin_hz))
            .filter(|&(_, f)| {
                f >= half && f <= top && fixed.iter().all(|&t| (t - f).abs() >= GUARD_BINS)
            })
            .collect();
        if lines.windows(2).any(|w| w[1].1 - w[0].1 < GUARD_BINS) {
            continue;
        }
        let mut freqs = fixed.to_vec();
        freqs.extend(lines.iter().map(|l| l.1));
        let Some(fit) = fit_lines(spec, n, &TONE_WINDOW, &freqs) else {
            continue;
        };
        let power: f64 = fit.amplitudes[fixed.len()..]
            .iter()
            .map(|c| c.norm_sqr())
            .sum();
        if best.as_ref().is_none_or(|b| power > b.1) {
            best = Some((
                MainsFit {
                    mains_hz: m,
                    lines,
                    fit,
                },
                power,
            ));
        }
    }
    best.map(|b| b.0)
}

/// Measurement-quality warnings: what a technician must know before trusting the figures.
fn quality_warnings(
    r: &ToneResult,
    input: &ChannelInput,
    cal: &Calibration,
    p_thdn: f64,
    p1: f64,
    drift: Option<Drift>,
) -> Vec<Warning> {
    let mut w = Vec::new();
    if r.overload_samples > 0 {
        w.push(C::InputOverload.say(format!(
            "input overload: {} sample(s) at or beyond full scale; the figures include the interface's own clipping. Lower the level or add attenuation.",
            r.overload_samples
        )));
    }
    if r.duration_s < 0.5 {
        w.push(C::ShortCapture.say(format!(
            "short capture ({:.3} s): hum lines and low-frequency noise are poorly resolved; record 1 s or more.",
            r.duration_s
        )));
    }
    if r.fundamental_dbfs < -50.0 {
        w.push(C::LowLevel.say(format!(
            "low level ({:.1} dBFS): the interface's own noise weighs on THD+N; raise the level toward -10 dBFS or reduce the attenuation.",
            r.fundamental_dbfs
        )));
    }
    if r.fundamental_hz < r.band_hz[0] || r.fundamental_hz > r.band_hz[1] {
        w.push(C::OutsideBand.say(format!(
            "the fundamental ({:.1} Hz) lies outside the measurement band {}-{} Hz: THD+N is not meaningful; widen --band.",
            r.fundamental_hz, r.band_hz[0], r.band_hz[1]
        )));
    }
    if let Some(d) = drift {
        let implied_db = 20.0 * d.wander_rad.max(1e-300).log10();
        if implied_db > r.thdn_db - 6.0 {
            w.push(C::FrequencyUnstable.say(format!(
                "frequency unstable: the fundamental's phase wanders {:.3} degrees RMS (drift {:.1} ppm), enough to raise THD+N; check the player's clock or record the interface's own output.",
                d.wander_rad.to_degrees(),
                d.drift_ppm
            )));
        }
    }
    // Harmonics past the band's top: THD counts fewer orders, or none.
    if r.thd_highest_order.is_none_or(|o| o < 3) {
        let fs = input.sample_rate_hz;
        let f0 = r.fundamental_hz;
        let h3_rate = [48_000.0, 96_000.0, 192_000.0, 384_000.0]
            .into_iter()
            .find(|&rate| 0.95 * rate / 2.0 >= 3.06 * f0);
        let fix = match h3_rate {
            Some(rate) if rate > fs => format!(
                "record at {rate:.0} Hz or more and widen the band (--band {}:{:.0}) to hold H2 and H3",
                r.band_hz[0],
                3.06 * f0
            ),
            Some(_) => format!(
                "widen the band (--band {}:{:.0}) to hold H2 and H3",
                r.band_hz[0],
                (3.06 * f0).min(0.95 * fs / 2.0)
            ),
            None => "no common rate holds H2 and H3 of a tone this high".to_string(),
        };
        w.push(C::HarmonicsOutOfBand.say(match r.thd_highest_order {
            None => format!(
                "THD not measurable: H2 ({:.0} Hz) lies above the band's top ({:.0} Hz){}; THD+N still holds. To measure THD, {fix}.",
                2.0 * f0,
                r.band_hz[1],
                if 2.0 * f0 > fs / 2.0 { " and past Nyquist" } else { "" }
            ),
            Some(_) => format!(
                "THD counts H2 only: H3 ({:.0} Hz) lies above the band's top ({:.0} Hz). To include H3, {fix}.",
                3.0 * f0,
                r.band_hz[1]
            ),
        }));
    }
    // Resolution floor of the stored samples: an ideal B-bit quantizer's noise in the band,
    // SNR = 6.02 B + 1.76 dB for a full-scale sine over the whole Nyquist band (quantization
    // theory), less the fraction of that band measured.
    let fs = input.sample_rate_hz;
    let band_fraction = ((r.band_hz[1] - r.band_hz[0]) / (fs / 2.0)).clamp(1e-9, 1.0);
    let full_band_snr = 6.02 * input.resolution_bits as f64 + 1.76 - 10.0 * band_fraction.log10();
    let level_ref = if input.overload_threshold >= 1.0 && input.resolution_bits == 24 {
        0.0 // float: the mantissa's noise scales with the signal
    } else {
        r.fundamental_dbfs
    };
    let floor_db = -full_band_snr - level_ref;
    if r.thdn_db < floor_db + 3.0 {
        w.push(C::ResolutionFloor.say(format!(
            "THD+N ({:.1} dB) is at the resolution floor of the file's samples ({}-bit resolution: {:.1} dB at this level): the amplifier may be better than this reading.",
            r.thdn_db, input.resolution_bits, floor_db
        )));
    }
    // Higher harmonics under the noise are the normal case (each carries its own flag); it is
    // worth a warning when the dominant low orders are, because THD is then an upper bound.
    let floor_orders: Vec<String> = r
        .harmonics
        .iter()
        .filter(|h| h.upper_bound && h.in_band && h.order <= 3)
        .map(|h| format!("H{}", h.order))
        .collect();
    if floor_orders.len()
        == r.harmonics
            .iter()
            .filter(|h| h.in_band && h.order <= 3)
            .count()
        && !floor_orders.is_empty()
    {
        w.push(C::UnderNoise.say(format!(
            "{} at the noise floor: the distortion is below the noise, so THD is an upper bound; THD+N is the figure to quote.",
            floor_orders.join(" and ")
        )));
    }
    // The interface's own floor (from the calibration profile): readings within 10 dB of it
    // measure the interface (DESIGN: measurement quality, common practice).
    w.extend(against_loopback(
        "THD+N",
        r.thdn_db,
        "dB",
        cal.loopback_thdn_db,
        "the reading says as much about the interface as the amplifier",
    ));
    w.extend(against_loopback(
        "noise",
        r.noise_dbfs,
        "dBFS",
        cal.loopback_noise_dbfs,
        "reduce the attenuation or treat the figure as an upper bound",
    ));
    if r.dc_offset.abs() > 0.01 {
        w.push(C::DcOffset.say(format!(
            "DC offset of {:.2} % of full scale at the interface input: check for a DC-coupled input or a leaky coupling capacitor.",
            r.dc_offset * 100.0
        )));
    }
    let hum_power: f64 = r
        .hum
        .iter()
        .filter(|h| h.frequency_hz >= r.band_hz[0] && h.frequency_hz <= r.band_hz[1])
        .map(|h| 10f64.powf(h.level_dbc / 10.0) * p1)
        .sum();
    if hum_power > 0.5 * p_thdn && !r.hum.iter().all(|h| h.upper_bound) {
        w.push(C::HumDominates.say(format!(
            "mains hum dominates the THD+N residual ({:.1} dBc of hum): check grounding, heater wiring and filter capacitors before reading THD+N as distortion.",
            10.0 * (hum_power / p1).log10()
        )));
    }
    w
}

/// A relative change of the tone's frequency across the span beyond this (2 %) is a sweep, not a
/// tone: a player's speed error or a drifting oscillator stays well under it (common practice).
const MAX_FREQUENCY_CHANGE: f64 = 0.02;

/// Refuse a capture that is not one steady tone: a staircase of levels or a sweep.
pub(crate) fn check_steady_kind(channel: usize, s: &Steadiness, fs: f64) -> Result<()> {
    if s.levels_db.len() >= 3 {
        let (hi, lo) = (s.levels_db[0], s.levels_db[s.levels_db.len() - 1]);
        return Err(Error::WrongKind {
            channel,
            found: format!(
                "the capture holds {} steady levels from {lo:.1} to {hi:.1} dBFS between {:.2} s and {:.2} s: a staircase, not one steady tone",
                s.levels_db.len(),
                s.tone_start as f64 / fs,
                s.tone_end as f64 / fs
            ),
            next: "Measure a staircase with `ampnote power CAPTURE.wav --stimulus STEPS.wav`, or record one level for `analyze`.".into(),
        });
    }
    if let Some(c) = s.frequency_change {
        if c.abs() > MAX_FREQUENCY_CHANGE {
            return Err(Error::WrongKind {
                channel,
                found: format!(
                    "the signal's frequency changes by {:+.0} % across the capture: a sweep, not a steady tone",
                    100.0 * c
                ),
                next: "Measure a sweep with `ampnote response CAPTURE.wav --stimulus SWEEP.wav`.".into(),
            });
        }
    }
    Ok(())
}

/// What the steady-span search found that the user must know: the span analysed, jumps,
/// dropouts, settling.
pub(crate) fn steady_warnings(s: &Steadiness, fs: f64) -> Vec<Warning> {
    let mut w = Vec::new();
    let secs = |i: usize| i as f64 / fs;
    if s.levels_db.len() == 2 {
        w.push(C::LevelJump.say(format!(
            "level jump: the tone sits at {:.1} dBFS for part of the capture and {:.1} dBFS for another; only the longest steady part ({:.2}-{:.2} s) was analysed. Record one level, or cut the file.",
            s.levels_db[0],
            s.levels_db[1],
            secs(s.start),
            secs(s.end)
        )));
    }
    for d in &s.dropouts {
        w.push(C::Dropout.say(format!(
            "dropout at {:.3} s: the level fell {} for about {:.0} ms; only the longest steady part ({:.2}-{:.2} s) was analysed. Check cables and the recorder's buffer settings.",
            d.at_s,
            if d.depth_db > 60.0 {
                "to nothing".to_string()
            } else {
                format!("{:.0} dB", d.depth_db)
            },
            d.length_s * 1000.0,
            secs(s.start),
            secs(s.end)
        )));
    }
    // Less than half the tone steady, or a level moving more than 0.5 dB across the span: worth
    // saying (common practice: a settled level holds to a tenth of a dB or so).
    let tone_len = s.tone_end.saturating_sub(s.tone_start);
    let steady_len = s.end - s.start;
    if s.judged && tone_len > 0 && (steady_len as f64) < 0.5 * tone_len as f64 {
        w.push(C::PartlySteady.say(format!(
            "only {:.2} s of the {:.2} s tone is steady within {:.2} dB (the level settles or wanders): the figures are from that part. Let the amplifier settle before recording, or record longer.",
            secs(steady_len),
            secs(tone_len),
            s.tolerance_db
        )));
    }
    if s.drift_db.abs() > 0.5 {
        w.push(C::LevelDrift.say(format!(
            "the level moves {:+.2} dB across the analysed span: the amplifier or the supply is still settling; the figures are an average over it.",
            s.drift_db
        )));
    }
    w
}

/// Whether a line at `f` Hz, `ratio` (power) below the fundamental, is explained by the tone (a
/// harmonic, or its alias folded back from above Nyquist), the mains family, or hum sidebands on
/// the tone, within `tol` Hz. A harmonic of order n carries at most about 4/(pi n) of the
/// fundamental's amplitude (a square wave, the limit of clipping; Fourier series), so only
/// orders up to 1.3 / sqrt(ratio) can explain a line that strong. Mains lines beyond the 20th
/// order (1 or 1.2 kHz) are not expected as distinct lines (common practice).
fn explained(f: f64, ratio: f64, f0: f64, mains: f64, fs: f64, tol: f64) -> bool {
    let max_order = (1.3 / ratio.max(1e-12).sqrt()).min(400.0);
    if near_multiple(f, mains, 20.0, tol) || near_multiple(f, f0, max_order, tol) {
        return true;
    }
    // Hum sidebands: the tone modulated by the supply's ripple.
    let offset = (f - f0).abs();
    if (1..=4).any(|k| (offset - k as f64 * mains).abs() <= tol) {
        return true;
    }
    harmonic_alias(f, f0, fs, (max_order as usize).min(40), tol)
}

/// Whether `f` lies within `tol` of a harmonic of `f0` (order 2 to `orders`) folded down from
/// above Nyquist: |n f0 - m fs| (all in Hz).
fn harmonic_alias(f: f64, f0: f64, fs: f64, orders: usize, tol: f64) -> bool {
    (2..=orders).any(|n| {
        let h = n as f64 * f0;
        let folded = (h - (h / fs).round() * fs).abs();
        h > fs / 2.0 && (folded - f).abs() <= tol
    })
}

/// Whether `f` lies within `tol` of a multiple of `of` from the first to the `orders`-th (all in
/// Hz): a harmonic of a tone, or a line of the mains family.
pub(crate) fn near_multiple(f: f64, of: f64, orders: f64, tol: f64) -> bool {
    let k = (f / of).round();
    k >= 1.0 && k <= orders && (f - k * of).abs() <= tol
}

/// The strongest residual bin (spectrum minus every fitted line) in `k_lo..=k_hi` that
/// `explained` does not account for: `(bin, |residual|^2)`.
pub(crate) fn strongest_unexplained_line(
    spec: &[Complex64],
    all: &[(usize, Complex64)],
    k_lo: usize,
    k_hi: usize,
    explained: impl Fn(usize, f64) -> bool,
) -> Option<(usize, f64)> {
    let mut best: Option<(usize, f64)> = None;
    for (k, r) in residuals(spec, all, k_lo, k_hi) {
        let p = r.norm_sqr();
        if best.is_none_or(|b| p > b.1) && !explained(k, p) {
            best = Some((k, p));
        }
    }
    best
}

/// `(k, X[k] - model[k])` for the bins `lo..=hi` (none when `hi < lo`), the model given as
/// sorted `(bin, value)` pairs.
pub(crate) fn residuals<'a>(
    spec: &'a [Complex64],
    model: &'a [(usize, Complex64)],
    lo: usize,
    hi: usize,
) -> impl Iterator<Item = (usize, Complex64)> + 'a {
    let mut mi = model.partition_point(|e| e.0 < lo);
    spec.iter()
        .enumerate()
        .take(hi.saturating_add(1))
        .skip(lo)
        .map(move |(k, &x)| {
            if mi < model.len() && model[mi].0 == k {
                mi += 1;
                (k, x - model[mi - 1].1)
            } else {
                (k, x)
            }
        })
}

/// A reading set against the interface's own loopback figure from the calibration profile:
/// within 10 dB of it, the reading measures the interface too (common practice); clearly below
/// it (3 dB, past any scatter of a noise reading), the capture cannot have come through that
/// interface, or the profile is out of date.
pub(crate) fn against_loopback(
    what: &str,
    value: f64,
    unit: &str,
    floor: Option<f64>,
    near_advice: &str,
) -> Option<Warning> {
    let floor = floor?;
    if value < floor - 3.0 {
        Some(C::InterfaceFloor.say(format!(
            "{what} ({value:.1} {unit}) reads {:.1} dB below the interface's own loopback figure ({floor:.1} {unit}) in the calibration: this capture did not pass through that interface (a generated or processed file?), or the profile is out of date (run `ampnote calibrate` again).",
            floor - value
        )))
    } else if value < floor + 10.0 {
        Some(C::InterfaceFloor.say(format!(
            "{what} ({value:.1} {unit}) is within 10 dB of the interface's own loopback figure ({floor:.1} {unit}): {near_advice}."
        )))
    } else {
        None
    }
}

/// The oscillation checks on a tone's spectrum (see [`super::oscillation`]): ultrasonic lines,
/// sub-audio lines and a pumping level. `max_harmonic_ratio` is the strongest in-band harmonic's
/// power over the fundamental's; `peak_power` the fundamental's peak bin power and `a1` its
/// fitted amplitude.
#[allow(clippy::too_many_arguments)]
fn find_oscillations(
    spec: &[Complex64],
    all: &[(usize, Complex64)],
    n: usize,
    fs: f64,
    f0_bins: f64,
    band_hi: f64,
    peak_power: f64,
    a1: f64,
    max_harmonic_ratio: f64,
    resolution_bits: u32,
) -> (Vec<Oscillation>, OscillationSearch) {
    let bin_hz = fs / n as f64;
    let half = TONE_WINDOW.main_lobe_half_width() as f64 + 1.0;
    let tol = 3.0 * bin_hz * half;
    let f0 = f0_bins * bin_hz;
    let harmonic_like =
        |f: f64| near_multiple(f, f0, f64::INFINITY, tol) || harmonic_alias(f, f0, fs, 400, tol);
    let (mut found, search) = line_checks(spec, all, n, fs, band_hi, resolution_bits, |f, p| {
        harmonic_like(f) && p / peak_power <= 10.0 * max_harmonic_ratio
    });
    for o in &mut found {
        o.level_dbc = Some(o.level_dbfs - 20.0 * a1.max(1e-300).log10());
    }
    found.extend(
        pumping(spec, all, n, fs, f0_bins).filter(|o| {
            o.level_dbfs > super::oscillation::quantisation_floor_dbfs(resolution_bits)
        }),
    );
    (found, search)
}

/// Lines above the band (to Nyquist) and below 10 Hz that `explained(hz, peak power)` does not
/// account for and that stand out of the noise (see [`super::oscillation`] for the threshold);
/// levels from a fit at the refined frequency, in dBFS.
///
/// A line must also stand 10 dB above the quantisation noise of `resolution_bits` (all of it,
/// over the whole band): the rounding of a coherent signal to the file's word length leaves
/// periodic errors, which are real lines of the file but none of the amplifier.
pub(crate) fn line_checks(
    spec: &[Complex64],
    all: &[(usize, Complex64)],
    n: usize,
    fs: f64,
    band_hi: f64,
    resolution_bits: u32,
    explained: impl Fn(f64, f64) -> bool,
) -> (Vec<Oscillation>, OscillationSearch) {
    use super::oscillation::{search_factor, SUBAUDIO_TOP_HZ};
    let bin_hz = fs / n as f64;
    let half = TONE_WINDOW.main_lobe_half_width() as f64 + 1.0;
    let mut found = Vec::new();
    let mut search = OscillationSearch::default();
    let line = |kind, k: usize| {
        let f = refine_peak(spec, all, k);
        let a = fit_lines(spec, n, &TONE_WINDOW, &[f]).map_or(0.0, |x| x.amplitudes[0].norm());
        Oscillation {
            kind,
            frequency_hz: f * bin_hz,
            level_dbfs: 20.0 * a.max(1e-300).log10(),
            level_dbc: None,
            modulation_percent: None,
        }
    };
    let floor_dbfs = super::oscillation::quantisation_floor_dbfs(resolution_bits);
    let mut keep = |o: Oscillation| {
        if o.level_dbfs > floor_dbfs {
            found.push(o);
        }
    };
    let top = (n as f64 / 2.0 - half).floor() as usize;
    let u_lo = (band_hi.max(20_000.0) / bin_hz + half).ceil() as usize;
    if top > u_lo + 2 * half as usize {
        search.ultrasonic_to_hz = Some(top as f64 * bin_hz);
        let factor = search_factor(top - u_lo + 1);
        let best = strongest_unexplained_line(spec, all, u_lo, top, |k, p| {
            explained(k as f64 * bin_hz, p)
        });
        if let Some((k, p)) = best {
            if p > factor * local_density(spec, all, k as f64, n) {
                keep(line(OscillationKind::Ultrasonic, k));
            }
        }
    }
    let s_lo = (2.0 * half).ceil() as usize;
    let s_hi = (SUBAUDIO_TOP_HZ / bin_hz).floor() as usize;
    if s_hi > s_lo {
        search.subaudio_from_hz = Some(s_lo as f64 * bin_hz);
        let factor = search_factor(s_hi - s_lo + 1);
        if let Some((k, p)) = strongest_unexplained_line(spec, all, s_lo, s_hi, |_, _| false) {
            if p > factor * local_density(spec, all, k as f64, n) {
                keep(line(OscillationKind::SubAudio, k));
            }
        }
    }
    (found, search)
}

/// A residual peak's position refined by parabolic interpolation of its dB levels, in bins.
fn refine_peak(spec: &[Complex64], all: &[(usize, Complex64)], k: usize) -> f64 {
    let db = |k: usize| {
        10.0 * residuals(spec, all, k, k)
            .next()
            .map_or(0.0, |(_, r)| r.norm_sqr())
            .max(1e-300)
            .log10()
    };
    if k == 0 || k + 1 >= spec.len() {
        return k as f64;
    }
    k as f64 + super::oscillation::parabolic_offset(db(k - 1), db(k), db(k + 1))
}

/// Sidebands at f0 +/- d for d from the resolution to 10 Hz, both standing out: the level
/// pumping at d Hz (see [`super::oscillation`]).
fn pumping(
    spec: &[Complex64],
    all: &[(usize, Complex64)],
    n: usize,
    fs: f64,
    f0_bins: f64,
) -> Option<Oscillation> {
    use super::oscillation::{search_factor, SUBAUDIO_TOP_HZ};
    let bin_hz = fs / n as f64;
    let half = TONE_WINDOW.main_lobe_half_width() as f64 + 1.0;
    let s_lo = (2.0 * half).ceil() as usize;
    let s_hi = (SUBAUDIO_TOP_HZ / bin_hz).floor() as usize;
    let k0 = f0_bins.round() as usize;
    if s_hi <= s_lo || k0 <= s_hi + 1 || k0 + s_hi + 1 >= n / 2 {
        return None;
    }
    let factor = search_factor(2 * (s_hi - s_lo + 1));
    let residual_at = |k: usize| {
        residuals(spec, all, k, k)
            .next()
            .map_or(0.0, |(_, r)| r.norm_sqr())
    };
    let stands = |k: usize, p: f64| p > factor * local_density(spec, all, k as f64, n);
    let (ku, pu) = strongest_unexplained_line(spec, all, k0 + s_lo, k0 + s_hi, |_, _| false)?;
    let fu = refine_peak(spec, all, ku);
    let mirror = (2.0 * f0_bins - fu).round() as usize;
    let (kl, pl) = (mirror - 1..=mirror + 1)
        .map(|k| (k, residual_at(k)))
        .max_by(|a, b| a.1.total_cmp(&b.1))?;
    if !(stands(ku, pu) && stands(kl, pl)) {
        return None;
    }
    let fl = refine_peak(spec, all, kl);
    let d = 0.5 * ((fu - f0_bins) + (f0_bins - fl));
    // The sidebands' amplitudes from a joint fit with the fundamental.
    let fit = fit_lines(spec, n, &TONE_WINDOW, &[f0_bins, fu, fl])?;
    let a1 = fit.amplitudes[0].norm().max(1e-300);
    let (ru, rl) = (fit.amplitudes[1].norm() / a1, fit.amplitudes[2].norm() / a1);
    let dbc = 20.0 * ru.max(rl).max(1e-300).log10();
    Some(Oscillation {
        kind: OscillationKind::Motorboating,
        frequency_hz: d * bin_hz,
        level_dbfs: 20.0 * a1.log10() + dbc,
        level_dbc: Some(dbc),
        modulation_percent: Some(100.0 * (ru + rl)),
    })
}
