//! Frequency response and harmonic distortion versus frequency from a synchronized swept sine.
//!
//! ## Method, and why
//! 1. **Deconvolution by spectral division.** The capture's spectrum is divided by the stimulus's
//!    own spectrum (both zero-padded to a fast length past their sum, so nothing wraps onto the
//!    responses). Dividing by the exact stimulus, rather than by the analytic inverse filter of
//!    Novak et al., makes the linear response exact for any linear system within the swept band;
//!    outside the band the division is faded to zero over a third of an octave.
//! 2. **Impulse responses** (Farina, AES preprint 5093, 2000): the linear response sits at the
//!    latency; the n-th harmonic's response arrives `L ln n` earlier, where `L` is the sweep rate.
//!    Because the sweep is synchronized (`f1 L` an integer; Novak, Lotton, Simon, JAES 63(10), 2015),
//!    the n-th harmonic of the sweep is the sweep itself advanced by `L ln n`, so its deconvolution
//!    is the harmonic's amplitude and phase, with no further correction.
//! 3. **Windows.** Each response is cut out with a raised-cosine-edged window that stops halfway
//!    to its neighbours, then transformed; the response at each reported frequency is read from an
//!    FFT bin (no interpolation), the transform being long enough that bins are finer than the
//!    spacing of the reported points wherever it matters.
//! 4. **HD_n(f0) = |G_n(n f0)| / |G_1(f0)|** (REFERENCES.md, swept sine).

use super::spectrum::{fast_length_up, SpectrumPlanner};
use crate::error::{Error, Result};
use crate::warning::WarningCode as C;
use realfft::num_complex::Complex64;
use serde::Serialize;
use std::f64::consts::PI;

/// What the analysis needs to know about the sweep (from the stimulus description).
#[derive(Debug, Clone, Copy)]
pub struct SweepParams {
    pub start_hz: f64,
    pub stop_hz: f64,
    /// Novak's L, seconds.
    pub rate_s: f64,
    /// First sample of the sweep in the stimulus file (the lead silence's length).
    pub start_sample: usize,
    /// One past the sweep's last sample in the stimulus file (lead silence included).
    pub end_sample: usize,
    /// Length of the sweep's fade-in, seconds.
    pub fade_in_s: f64,
}

impl SweepParams {
    /// The parameters of a sweep stimulus from its description; `None` for other kinds.
    pub fn from_description(d: &crate::signal::stimulus::Description) -> Option<SweepParams> {
        let crate::signal::stimulus::Kind::Sweep {
            start_hz,
            stop_hz,
            rate_s,
            fade_in_s,
            ..
        } = d.kind
        else {
            return None;
        };
        Some(SweepParams {
            start_hz,
            stop_hz,
            rate_s,
            start_sample: d.signal_start_sample,
            end_sample: d.signal_start_sample + d.signal_samples,
            fade_in_s,
        })
    }
}

/// Settings of the response analysis (kept with a notebook run, so a re-analysis repeats them).
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ResponseConfig {
    /// Magnitudes are reported relative to the response here (1 kHz by default).
    pub reference_hz: f64,
    /// Points per octave in the reported curves.
    pub points_per_octave: usize,
    /// 1/N-octave smoothing of the magnitude, when set.
    pub smoothing: Option<u32>,
    /// Highest harmonic order (2..=this) reported against frequency.
    pub max_harmonic: usize,
    /// Band over which the largest deviation is reported.
    pub deviation_band_hz: (f64, f64),
    /// The interface's own loopback response, `(frequency_hz, magnitude_db)` pairs, taken out of
    /// the magnitude (interpolated in log frequency, held flat beyond its ends); empty for none.
    pub correction_db: Vec<(f64, f64)>,
}

impl Default for ResponseConfig {
    fn default() -> Self {
        ResponseConfig {
            reference_hz: 1000.0,
            points_per_octave: 24,
            smoothing: None,
            max_harmonic: 5,
            deviation_band_hz: (20.0, 20_000.0),
            correction_db: Vec::new(),
        }
    }
}

#[derive(Debug, Clone, Copy, Serialize, serde::Deserialize)]
pub struct ResponsePoint {
    pub frequency_hz: f64,
    /// Relative to the response at the reference frequency.
    pub magnitude_db: f64,
    /// With the latency removed.
    pub phase_deg: f64,
    /// What the capture's own floor would read here within [`HUM_MARGIN_DB`] of this point:
    /// the point may be (partly) that floor, not the response. Set only when there is a floor to
    /// measure (see [`Floor`]).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub limited_by: Option<Floor>,
}

/// A floor a response point can sit on.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Floor {
    /// The mains hum found in the capture's silence, run through the same deconvolution.
    Hum,
    /// The noise of the impulse response (away from every response in it), in the same window
    /// and averaged over a sixth of an octave.
    Noise,
}

impl Floor {
    pub fn as_str(self) -> &'static str {
        match self {
            Floor::Hum => "hum",
            Floor::Noise => "noise",
        }
    }
}

#[derive(Debug, Clone, Copy, Serialize, serde::Deserialize)]
pub struct HarmonicPoint {
    /// The excitation frequency f0 (the harmonic itself is at order * f0).
    pub frequency_hz: f64,
    pub level_dbc: f64,
    /// The hum found in the capture's silence, run through the same deconvolution, reads within
    /// [`HUM_MARGIN_DB`] of this point's level: the hum, not (only) the harmonic, may be what it
    /// reads. Charts leave it out; the table marks it.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub hum_limited: bool,
}

/// Mains orders fitted in the silence: 1 to 4 of 50 and 60 Hz (our choice: the strong hum lines
/// of a tube amplifier, the mains and its rectifier's ripple).
const MAINS_ORDERS: usize = 4;

/// A harmonic point is hum-limited when the hum alone would read less than 20 dB below it (our
/// choice: a line 20 dB down moves the reading by up to 0.8 dB, 20 log10 1.1).
pub const HUM_MARGIN_DB: f64 = 20.0;

/// The least silence the hum is fitted in: 0.2 s, ten periods of 50 Hz (our choice: 50 and 60 Hz
/// lines then stand two resolution widths apart).
const MIN_SILENCE_S: f64 = 0.2;

/// The mains hum in a stretch of the capture where the sweep is not (`from..to`), as a signal
/// over the whole capture: the 50 and 60 Hz families (orders 1 to [`MAINS_ORDERS`]) fitted
/// jointly by least squares (IEEE 1057, several known frequencies) and each line continued at
/// its fitted amplitude and phase. Because the deconvolution is linear, this signal's own
/// deconvolution is what the hum adds to the measured responses.
fn hum_model(capture: &[f64], (from, to): (usize, usize), fs: f64) -> Option<Vec<f64>> {
    let seg = capture.get(from..to)?;
    if (seg.len() as f64) < MIN_SILENCE_S * fs {
        return None;
    }
    let freqs: Vec<f64> = [50.0, 60.0]
        .iter()
        .flat_map(|m| (1..=MAINS_ORDERS).map(move |k| k as f64 * m / fs))
        .collect();
    let (lines, _dc) = super::fit::sine_fit_time_domain(seg, &freqs)?;
    let w: Vec<f64> = freqs
        .iter()
        .map(|f| 2.0 * std::f64::consts::PI * f)
        .collect();
    Some(
        (0..capture.len())
            .map(|i| {
                let t = i as f64 - from as f64;
                lines
                    .iter()
                    .zip(&w)
                    .map(|((a, b), w)| a * (w * t).cos() + b * (w * t).sin())
                    .sum()
            })
            .collect(),
    )
}

#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct HarmonicCurve {
    pub order: usize,
    pub points: Vec<HarmonicPoint>,
}

/// The response of one channel. Units in field names; dB relative to the reference frequency
/// unless the field says otherwise.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct ResponseResult {
    pub channel: usize,
    pub reference_hz: f64,
    /// Capture level over stimulus level at the reference frequency, dB (digital gain: dBFS in
    /// over dBFS out, through the whole chain).
    pub reference_gain_db: f64,
    pub points: Vec<ResponsePoint>,
    /// Where the magnitude first falls 1 dB and 3 dB below the reference, going down and up
    /// from it; `null` when it stays within that inside the swept range.
    pub low_1db_hz: Option<f64>,
    pub low_3db_hz: Option<f64>,
    pub high_1db_hz: Option<f64>,
    pub high_3db_hz: Option<f64>,
    /// Largest |magnitude| over the deviation band (within the swept range), and where.
    pub max_deviation_db: f64,
    pub max_deviation_hz: f64,
    pub deviation_band_hz: [f64; 2],
    pub latency_ms: f64,
    pub latency_samples: f64,
    /// "non-inverting" or "inverting".
    pub polarity: std::borrow::Cow<'static, str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub smoothing_octave_fraction: Option<u32>,
    /// The interface's loopback response was taken out of the magnitude.
    #[serde(default)]
    pub loopback_corrected: bool,
    pub harmonics: Vec<HarmonicCurve>,
    /// THD against excitation frequency: the harmonics H2..Hmax that stay inside the sweep.
    pub thd: Vec<HarmonicPoint>,
    /// Peak of the linear impulse response over the RMS of the response's noise, dB.
    pub impulse_snr_db: f64,
    /// Clock offset between player and recorder, ppm, from the second harmonic's response timed
    /// against the linear one; positive when the recorder's clock runs fast against the player's
    /// (`null` when H2 is too weak, or the sweep too narrow, to tell).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub clock_drift_ppm: Option<f64>,
    pub warnings: Vec<crate::warning::Warning>,
}

/// The sweep analyser; its planner caches FFT plans across channels and runs.
#[derive(Default)]
pub struct ResponseAnalyzer {
    pub config: ResponseConfig,
    planner: SpectrumPlanner,
}

/// Below this peak-to-noise ratio of the linear impulse response, the capture does not hold the
/// sweep (a Gaussian noise record of a million samples has peaks about 15 dB above its RMS).
const MIN_IMPULSE_SNR_DB: f64 = 25.0;

impl ResponseAnalyzer {
    pub fn new(config: ResponseConfig) -> Result<Self> {
        if !(1..=96).contains(&config.points_per_octave) || !(2..=20).contains(&config.max_harmonic)
        {
            return Err(Error::InvalidSetting(format!(
                "--points-per-octave must lie in 1..=96 and --harmonics in 2..=20, got {} and {}",
                config.points_per_octave, config.max_harmonic
            )));
        }
        if let Some(n) = config.smoothing {
            if !(1..=48).contains(&n) {
                return Err(Error::InvalidSetting(format!(
                    "--smooth takes N in 1..=48 (1/N octave), got {n}"
                )));
            }
        }
        if config.reference_hz.is_nan() || config.reference_hz <= 0.0 {
            return Err(Error::InvalidSetting(
                "the reference frequency must be above 0 Hz".into(),
            ));
        }
        Ok(ResponseAnalyzer {
            config,
            planner: SpectrumPlanner::new(),
        })
    }

    /// Analyse `capture` (one channel) against `stimulus` (the stimulus file's signal channel,
    /// lead silence included), both at `fs`.
    pub fn analyze(
        &self,
        channel: usize,
        stimulus: &[f64],
        sweep: SweepParams,
        capture: &[f64],
        fs: f64,
        overload_threshold: f64,
    ) -> Result<ResponseResult> {
        self.analyze_checked(
            channel,
            stimulus,
            sweep,
            capture,
            fs,
            overload_threshold,
            None,
        )
    }

    /// [`Self::analyze`] for a channel the sweep was not played into (crosstalk), recorded
    /// with the driven one on one clock: its response is read at the driven channel's latency
    /// (`latency_samples`, from its own analysis; crosstalk adds no delay that matters), since
    /// the crosstalk may stand too little above the channel's own hum and noise to be found by
    /// itself; nor is the capture, mostly that hum and noise, required to be explained by the
    /// response. The points' [`ResponsePoint::limited_by`] say where the crosstalk is under them.
    #[allow(clippy::too_many_arguments)]
    pub fn analyze_undriven(
        &self,
        channel: usize,
        stimulus: &[f64],
        sweep: SweepParams,
        capture: &[f64],
        fs: f64,
        overload_threshold: f64,
        latency_samples: f64,
    ) -> Result<ResponseResult> {
        self.analyze_checked(
            channel,
            stimulus,
            sweep,
            capture,
            fs,
            overload_threshold,
            Some(latency_samples),
        )
    }

    #[allow(clippy::too_many_arguments)]
    fn analyze_checked(
        &self,
        channel: usize,
        stimulus: &[f64],
        sweep: SweepParams,
        capture: &[f64],
        fs: f64,
        overload_threshold: f64,
        known_latency: Option<f64>,
    ) -> Result<ResponseResult> {
        let must_be_explained = known_latency.is_none();
        if let Some((i, _)) = capture.iter().enumerate().find(|(_, v)| !v.is_finite()) {
            return Err(Error::NotFinite {
                channel,
                index: i,
                what: "not a finite number",
            });
        }
        // Shorter than the sweep itself: it cannot hold it, whatever the latency.
        let sweep_len = sweep.end_sample.saturating_sub(sweep.start_sample);
        if capture.len() < sweep_len {
            return Err(Error::CaptureEndsEarly {
                channel,
                missing_s: (sweep_len - capture.len()) as f64 / fs,
            });
        }
        let advance = |n: usize| sweep.rate_s * (n as f64).ln() * fs;
        let max_order = self.config.max_harmonic;
        // Transform length: both records plus room for the harmonic responses that land before
        // time zero and wrap to the end.
        let m =
            fast_length_up(capture.len() + stimulus.len() + advance(max_order + 1) as usize + 16);
        let gap = |n: usize| sweep.rate_s * ((n as f64 + 1.0) / n as f64).ln() * fs; // n+1 to n
        let pre1 = (0.5 * gap(1)).min(0.005 * fs);
        let wrap_zone = advance(max_order + 1) as usize + 16;
        let post1 = (0.5 * fs).min((m - wrap_zone) as f64 * 0.9);
        let nf = fast_length_up(((pre1 + post1) as usize * 2).max((fs / 0.25) as usize));
        // Two cores: plan the inverse and the response transforms while the forward one is
        // planned, then transform stimulus and capture side by side.
        let (fwd, inv) = std::thread::scope(|sc| {
            let other = sc.spawn(|| {
                let inv = self.planner.inverse(m);
                let _ = self.planner.forward_secondary(nf);
                inv
            });
            let fwd = self.planner.forward(m);
            (fwd, other.join().expect("planning thread"))
        });
        // Buffers are filled by writing (not left to the allocator's zero pages, which the FFT
        // would read first and then write, costing a second page fault per page).
        let spectrum = |x: &[f64]| -> Vec<Complex64> {
            let mut buf = written_zeros(m, 0.0);
            buf[..x.len()].copy_from_slice(x);
            let mut out = written_zeros(m / 2 + 1, Complex64::new(0.0, 0.0));
            fwd.process(&mut buf, &mut out)
                .expect("sizes match the plan");
            out
        };
        let (xs, h_spec) = std::thread::scope(|sc| {
            let stim = sc.spawn(|| spectrum(stimulus));
            let cap = spectrum(capture);
            (stim.join().expect("transform thread"), cap)
        });
        let bin_hz = fs / m as f64;
        let max_x = xs.iter().map(|c| c.norm_sqr()).fold(0.0, f64::max);
        let floor = max_x * 1e-14;
        // Below the sweep: a causal high-pass (divided out again when the response is read) takes
        // the response down first, so the zero-phase fade to nothing further down rings only
        // after the impulse, where the window keeps it, not before it.
        let guard = LowGuard::new(sweep.start_hz);
        let lo_end = sweep.start_hz / 8.0;
        let lo_full = sweep.start_hz / 4.0;
        let hi_edge = (sweep.stop_hz * 2f64.powf(1.0 / 6.0)).min(fs / 2.0);
        // Capture spectrum over stimulus spectrum, band-limited, back to an impulse response.
        let divide = |mut h_spec: Vec<Complex64>| -> Vec<f64> {
            for (k, (h, x)) in h_spec.iter_mut().zip(&xs).enumerate() {
                let f = k as f64 * bin_hz;
                let taper = band_taper(f, lo_end, lo_full, sweep.stop_hz, hi_edge);
                *h = if taper > 0.0 {
                    *h * x.conj() / (x.norm_sqr() + floor) * taper * guard.at(f)
                } else {
                    Complex64::new(0.0, 0.0)
                };
            }
            let mut ir = written_zeros(m, 0.0);
            // realfft's inverse wants purely real DC and Nyquist bins.
            h_spec[0].im = 0.0;
            if let Some(last) = h_spec.last_mut() {
                last.im = 0.0;
            }
            inv.process(&mut h_spec, &mut ir)
                .expect("sizes match the plan");
            let norm = 1.0 / m as f64;
            ir.iter_mut().for_each(|v| *v *= norm);
            ir
        };
        let ir = divide(h_spec);

        // --- the linear response's peak: latency and polarity --------------------------------
        // The linear response is the strongest peak among the latencies the capture allows
        // (from minus the lead silence, when the recorder started late, to what the capture's
        // length leaves after the sweep). With heavy distortion a harmonic response can be
        // stronger: a strong peak `L ln n` after the strongest one is then the linear response
        // (the harmonics always arrive before it).
        let lat_min = -(sweep.start_sample as isize);
        let lat_max = (capture.len() as isize - sweep_len as isize).max(0);
        let plausible = |i: usize| {
            let l = if i > m / 2 {
                i as isize - m as isize
            } else {
                i as isize
            };
            (lat_min..=lat_max).contains(&l)
        };
        let mut peak = (0..m)
            .filter(|&i| plausible(i))
            .max_by(|&a, &b| ir[a].abs().total_cmp(&ir[b].abs()))
            .expect("latency zero is always plausible");
        if let Some(l) = known_latency {
            peak = (l.round() as isize).rem_euclid(m as isize) as usize;
        }
        'later: loop {
            if known_latency.is_some() {
                break;
            }
            for n in 2..=max_order + 1 {
                let at = (peak as f64 + advance(n)).round() as isize;
                let best = (at - 3..=at + 3)
                    .map(|i| i.rem_euclid(m as isize) as usize)
                    .max_by(|&a, &b| ir[a].abs().total_cmp(&ir[b].abs()))
                    .expect("a window of seven samples");
                if plausible(best) && ir[best].abs() >= 0.25 * ir[peak].abs() {
                    peak = best;
                    continue 'later;
                }
            }
            break;
        }
        let peak_val = ir[peak];
        // Latency: negative when the recorder started during the stimulus's lead silence (the
        // response then wraps round to the end of the record). Realistic latencies are far below
        // half the record.
        let lat = if peak > m / 2 {
            peak as isize - m as isize
        } else {
            peak as isize
        };
        let at_offset = |o: isize| ir[(lat + o).rem_euclid(m as isize) as usize];
        let noise_rms = {
            // Noise: the response far from every impulse, after the linear response's tail and
            // before the wrapped harmonic responses.
            let from = (0.6 * fs) as isize;
            let to = m as isize - wrap_zone as isize - (0.1 * fs) as isize;
            if to > from + 1000 {
                ((from..to).map(|o| at_offset(o).powi(2)).sum::<f64>() / (to - from) as f64).sqrt()
            } else {
                (ir.iter().map(|v| v * v).sum::<f64>() / m as f64).sqrt()
            }
        };
        let impulse_snr_db = 20.0 * (peak_val.abs() / noise_rms.max(1e-300)).log10();
        if impulse_snr_db < MIN_IMPULSE_SNR_DB && known_latency.is_none() {
            // Nothing where the response could be. If a strong response sits before the earliest
            // possible latency, the recorder started after the sweep had begun.
            let global = (0..m)
                .max_by(|&a, &b| ir[a].abs().total_cmp(&ir[b].abs()))
                .expect("non-empty response");
            let g_snr = 20.0 * (ir[global].abs() / noise_rms.max(1e-300)).log10();
            if !plausible(global) && g_snr >= MIN_IMPULSE_SNR_DB {
                return Err(Error::CaptureStartsLate { channel });
            }
            return Err(Error::SweepNotFound {
                channel,
                snr_db: impulse_snr_db,
            });
        }
        // The capture must run until the sweep's last sample has come through.
        let needed = lat + sweep.end_sample.min(stimulus.len()) as isize;
        if (capture.len() as isize) < needed {
            return Err(Error::CaptureEndsEarly {
                channel,
                missing_s: (needed - capture.len() as isize) as f64 / fs,
            });
        }
        // --- does the response explain the capture? --------------------------------------------
        // The stimulus through the linear response found must reproduce the capture, less the
        // distortion and the noise. Another sweep (another length, start or rate) deconvolves to
        // something, but that something does not reproduce what was recorded.
        if must_be_explained {
            let fit = explained_by_response(
                &ExplainInput {
                    capture,
                    stimulus_spectrum: &xs,
                    ir: &ir,
                    latency: lat,
                    before: pre1 as usize,
                    after: post1 as usize,
                    fs,
                    guard: &guard,
                },
                &*fwd,
                &*inv,
            );
            check_explained(channel, &fit)?;
        }
        let latency_samples = match known_latency {
            Some(l) => l,
            None => lat as f64 + parabolic_peak(&ir, peak),
        };
        let polarity = if peak_val < 0.0 {
            "inverting"
        } else {
            "non-inverting"
        };

        // --- windows and spectra of the responses ---------------------------------------------
        let harmonic_in = |ir: &[f64], n: usize| {
            let centre = latency_samples - advance(n);
            windowed_spectrum(
                &self.planner,
                ir,
                centre.rem_euclid(m as f64),
                0.5 * gap(n),
                0.5 * gap(n - 1),
                nf,
            )
        };
        let harmonic = |n: usize| harmonic_in(&ir, n);
        // The higher harmonics on the second core, the linear response and H2 on this one.
        let (g1, gn) = std::thread::scope(|sc| {
            let upper = sc.spawn(|| (3..=max_order).map(harmonic).collect::<Vec<Shifted>>());
            let g1 = windowed_spectrum(
                &self.planner,
                &ir,
                latency_samples.rem_euclid(m as f64),
                pre1,
                post1,
                nf,
            );
            let mut gn = vec![harmonic(2)];
            gn.extend(upper.join().expect("transform thread"));
            (g1, gn)
        });
        let nf_bin = fs / nf as f64;
        let at = |spec: &Shifted, f: f64| -> Complex64 {
            let k = ((f / nf_bin).round() as usize).min(spec.spectrum.len() - 1);
            spec.bin(k) / guard.at(k as f64 * nf_bin)
        };

        // --- hum: what the capture's mains lines add to the harmonic responses ----------------
        // Fitted where the sweep is not: before it arrives, or after its response has died away
        // (0.1 s on), whichever stretch is longer; deconvolved as the capture was.
        let arrive = (sweep.start_sample as isize + lat - (0.01 * fs) as isize).max(0) as usize;
        let gone = ((sweep.end_sample as isize + lat + (0.1 * fs) as isize).max(0) as usize)
            .min(capture.len());
        let silence = if arrive.min(capture.len()) >= capture.len() - gone {
            (0, arrive.min(capture.len()))
        } else {
            (gone, capture.len())
        };
        let hum = hum_model(capture, silence, fs);
        let (hum_g1, hum_gn): (Option<Shifted>, Option<Vec<Shifted>>) = match &hum {
            Some(hum) => {
                let ir_hum = divide(spectrum(hum));
                let g1 = windowed_spectrum(
                    &self.planner,
                    &ir_hum,
                    latency_samples.rem_euclid(m as f64),
                    pre1,
                    post1,
                    nf,
                );
                let gn = (2..=max_order).map(|n| harmonic_in(&ir_hum, n)).collect();
                (Some(g1), Some(gn))
            }
            None => (None, None),
        };
        let hum_power = |n: usize, f: f64| {
            hum_gn
                .as_ref()
                .map_or(0.0, |h| at(&h[n - 2], n as f64 * f).norm_sqr())
        };
        let margin = 10f64.powf(HUM_MARGIN_DB / 10.0);
        // --- noise: what the capture's noise puts into the linear response -----------------------
        // Not read off the response itself: there, noise at f exists only at the offsets its
        // capture time maps to (a log sweep's deconvolution moves each frequency by its own
        // time), so away from the responses the top octaves have none. Instead: the noise's
        // spectrum in the capture's silence (hum lines taken out), through the deconvolution in
        // closed form: white noise of variance s2 gives E|G(f)|^2 = s2 sum(w^2) / |X(f)|^2 for a
        // window w on the response, X the stimulus's transform (Parseval on the circular
        // correlation of the noise with the inverse filter).
        let noise_psd = silence_noise_psd(&self.planner, capture, silence, hum.as_deref(), fs);
        let w2 = window_energy(pre1, post1);
        let noise_power = |f: f64| -> Option<f64> {
            let psd = noise_psd.as_ref()?;
            let band = |hz: f64, scale: f64| {
                (
                    ((hz * 2f64.powf(-1.0 / 12.0)) / scale).floor() as usize,
                    ((hz * 2f64.powf(1.0 / 12.0)) / scale).ceil() as usize,
                )
            };
            // 1 / |X|^2 averaged over a sixth of an octave of the stimulus's bins.
            let (lo, hi) = band(f, bin_hz);
            let (lo, hi) = (lo.max(1).min(xs.len() - 1), hi.max(1).min(xs.len() - 1));
            let inv_x = (lo..=hi)
                .map(|k| 1.0 / xs[k].norm_sqr().max(floor))
                .sum::<f64>()
                / (hi - lo + 1) as f64;
            Some(psd.at(f) * w2 * inv_x)
        };
        let floor_at = |f: f64, signal_power: f64| -> Option<Floor> {
            let hum = hum_g1.as_ref().map_or(0.0, |h| at(h, f).norm_sqr());
            let noise = noise_power(f).unwrap_or(0.0);
            // Their powers add: the two together must stand 20 dB under the point.
            if (hum + noise) * margin <= signal_power {
                None
            } else if hum >= noise {
                Some(Floor::Hum)
            } else {
                Some(Floor::Noise)
            }
        };

        // --- reported points ------------------------------------------------------------------
        let f_lo = sweep.start_hz;
        let f_hi = sweep.stop_hz.min(fs / 2.0);
        let reference_hz = if self.config.reference_hz > f_lo && self.config.reference_hz < f_hi {
            self.config.reference_hz
        } else {
            (f_lo * f_hi).sqrt()
        };
        let h_ref = at(&g1, reference_hz).norm();
        let freqs = log_points(f_lo, f_hi, self.config.points_per_octave, nf_bin);
        let correction = |f: f64| interpolate_log(&self.config.correction_db, f);
        let corr_ref = correction(reference_hz);
        let points: Vec<ResponsePoint> = freqs
            .iter()
            .map(|&f| {
                let g = at(&g1, f);
                let mag = match self.config.smoothing {
                    Some(n) => smoothed(&g1.spectrum, f, n, nf_bin) / guard.at(f).norm(),
                    None => g.norm(),
                };
                ResponsePoint {
                    frequency_hz: (f / nf_bin).round() * nf_bin,
                    magnitude_db: 20.0 * (mag / h_ref).max(1e-300).log10()
                        - (correction(f) - corr_ref),
                    phase_deg: g.arg().to_degrees(),
                    limited_by: floor_at(f, g.norm_sqr()),
                }
            })
            .collect();
        // Harmonic curves: the excitation must be past the fade-in (a faded excitation makes its
        // n-th harmonic fall n times faster than the fundamental), and the harmonic must stay a
        // sixteenth of an octave inside the sweep's top, where the division by the stimulus is
        // exact (closer, the band edge bends it by tenths of a dB).
        // A frequency f is swept through over about sqrt(L / f) seconds (stationary phase), so
        // the excitation counts as clear of the fade-in once it passes f at least two such spans
        // after the fade has ended.
        let mut f_ex_min = f_lo * (sweep.fade_in_s / sweep.rate_s).exp();
        while sweep.rate_s * (f_ex_min / f_lo).ln() - sweep.fade_in_s
            < 2.0 * (sweep.rate_s / f_ex_min).sqrt()
            && f_ex_min < f_hi
        {
            f_ex_min *= 1.01;
        }
        let f_h_max = f_hi * 2f64.powf(-1.0 / 16.0);
        let valid = |n: usize, f: f64| f >= f_ex_min && n as f64 * f <= f_h_max;
        let harmonics: Vec<HarmonicCurve> = (2..=max_order)
            .map(|n| HarmonicCurve {
                order: n,
                points: freqs
                    .iter()
                    .filter(|&&f| valid(n, f))
                    .map(|&f| HarmonicPoint {
                        frequency_hz: (f / nf_bin).round() * nf_bin,
                        level_dbc: 20.0
                            * (at(&gn[n - 2], n as f64 * f).norm() / at(&g1, f).norm())
                                .max(1e-300)
                                .log10(),
                        hum_limited: hum_power(n, f) * margin
                            > at(&gn[n - 2], n as f64 * f).norm_sqr(),
                    })
                    .collect(),
            })
            .collect();
        let thd: Vec<HarmonicPoint> = freqs
            .iter()
            .filter(|&&f| valid(2, f))
            .map(|&f| {
                let p: f64 = (2..=max_order)
                    .filter(|&n| valid(n, f))
                    .map(|n| at(&gn[n - 2], n as f64 * f).norm_sqr())
                    .sum();
                HarmonicPoint {
                    frequency_hz: (f / nf_bin).round() * nf_bin,
                    level_dbc: 10.0 * (p / at(&g1, f).norm_sqr()).max(1e-300).log10(),
                    hum_limited: (2..=max_order)
                        .filter(|&n| valid(n, f))
                        .map(|n| hum_power(n, f))
                        .sum::<f64>()
                        * margin
                        > p,
                }
            })
            .collect();

        let edge = |limit: f64, upward: bool| -> Option<f64> {
            crossing(&points, reference_hz, -limit, upward)
        };
        let (low_1db_hz, low_3db_hz) = (edge(1.0, false), edge(3.0, false));
        let (high_1db_hz, high_3db_hz) = (edge(1.0, true), edge(3.0, true));
        let (dlo, dhi) = self.config.deviation_band_hz;
        let (max_deviation_db, max_deviation_hz) = points
            .iter()
            .filter(|p| p.frequency_hz >= dlo && p.frequency_hz <= dhi)
            .map(|p| (p.magnitude_db, p.frequency_hz))
            .max_by(|a, b| a.0.abs().total_cmp(&b.0.abs()))
            .unwrap_or((0.0, reference_hz));
        let reference_gain_db = 20.0 * (h_ref).log10();
        let drift = if max_order >= 2 {
            drift_from_harmonics(&g1, &gn[0], nf_bin, (2.0 * f_ex_min, f_h_max), sweep.rate_s)
        } else {
            None
        };
        let clock_drift_ppm = drift.map(|d| d.0);
        let overload = capture
            .iter()
            .filter(|v| v.abs() >= overload_threshold)
            .count();

        let mut warnings = Vec::new();
        if overload > 0 {
            warnings.push(C::InputOverload.say(format!(
                "input overload: {overload} sample(s) at or beyond full scale; the sweep was clipped and the harmonic curves show the interface's clipping. Lower the level or add attenuation."
            )));
        }
        if impulse_snr_db < 60.0 {
            warnings.push(C::NoisySweep.say(format!(
                "noisy measurement: the impulse response stands only {impulse_snr_db:.1} dB above its noise; raise the level or use a longer sweep."
            )));
        }
        // Warn only on a clear offset: over 10 ppm (where the harmonic curves start to smear on
        // a long sweep; common practice) and four standard errors from zero (a normal estimate
        // passes that by chance with probability 6e-5).
        if let Some((d, se)) = drift {
            if d.abs() > 10.0 && d.abs() > 4.0 * se {
                warnings.push(C::ClockOffset.say(format!(
                    "the player's and recorder's clocks differ by about {d:.0} ppm: magnitudes hold, but phase and the harmonic curves are smeared. Play and record on one interface."
                )));
            }
        }
        if reference_hz != self.config.reference_hz {
            warnings.push(C::ReferenceOutsideSweep.say(format!(
                "the reference frequency {} Hz lies outside the sweep ({f_lo:.0}-{f_hi:.0} Hz): magnitudes are relative to {reference_hz:.0} Hz, the sweep's geometric centre, instead. Give --reference inside the sweep.",
                crate::error::shown(self.config.reference_hz)
            )));
        }
        let in_band: Vec<&ResponsePoint> = points
            .iter()
            .filter(|p| p.frequency_hz >= dlo && p.frequency_hz <= dhi)
            .collect();
        let floored = in_band.iter().filter(|p| p.limited_by.is_some()).count();
        if must_be_explained && floored > 0 {
            warnings.push(C::NoisySweep.say(format!(
                "{floored} of {} points from {dlo:.0} Hz to {dhi:.0} Hz read within {HUM_MARGIN_DB:.0} dB of the capture's own hum or noise (marked): there the response is partly that floor. Raise the level, or use a longer sweep.",
                in_band.len()
            )));
        }
        if dlo < f_lo || dhi > f_hi {
            warnings.push(C::SweepNarrow.say(format!(
                "the sweep covers {f_lo:.0}-{f_hi:.0} Hz, less than the {dlo:.0}-{dhi:.0} Hz deviation band; figures outside the sweep are not reported."
            )));
        }
        Ok(ResponseResult {
            channel,
            reference_hz,
            reference_gain_db,
            points,
            low_1db_hz,
            low_3db_hz,
            high_1db_hz,
            high_3db_hz,
            max_deviation_db,
            max_deviation_hz,
            deviation_band_hz: [dlo.max(f_lo), dhi.min(f_hi)],
            latency_ms: latency_samples / fs * 1000.0,
            latency_samples,
            polarity: polarity.into(),
            smoothing_octave_fraction: self.config.smoothing,
            loopback_corrected: !self.config.correction_db.is_empty(),
            harmonics,
            thd,
            impulse_snr_db,
            clock_drift_ppm,
            warnings,
        })
    }
}

/// What [`explained_by_response`] needs: the capture, the stimulus's spectrum (length `m/2+1`),
/// the impulse response (length `m`), the linear response's latency and the window kept around
/// it (samples).
struct ExplainInput<'a> {
    capture: &'a [f64],
    stimulus_spectrum: &'a [Complex64],
    ir: &'a [f64],
    latency: isize,
    before: usize,
    after: usize,
    fs: f64,
    guard: &'a LowGuard,
}

/// How much of a capture the stimulus through the linear response reproduces.
#[derive(Debug, Clone, Copy)]
struct Explained {
    /// Residual energy (capture minus prediction) over the capture's energy.
    residual_share: f64,
    /// Loud parts of the capture (within 20 dB of its loudest 10 ms) that the prediction leaves
    /// mostly unexplained (residual above half the block's energy): their total length, and the
    /// first and last of them, seconds.
    unexplained_s: f64,
    first_s: f64,
    last_s: f64,
}

/// Predict the capture as the stimulus convolved with the windowed linear response, and compare.
fn explained_by_response(
    x: &ExplainInput,
    fwd: &dyn realfft::RealToComplex<f64>,
    inv: &dyn realfft::ComplexToReal<f64>,
) -> Explained {
    let m = x.ir.len();
    let mut h = written_zeros(m, 0.0);
    for o in -(x.before as isize)..=x.after as isize {
        let i = (x.latency + o).rem_euclid(m as isize) as usize;
        h[i] = x.ir[i];
    }
    let mut spec = written_zeros(m / 2 + 1, Complex64::new(0.0, 0.0));
    fwd.process(&mut h, &mut spec)
        .expect("sizes match the plan");
    // The response carries the low guard's high-pass (see `LowGuard`): divide it out again where
    // it leaves anything to divide.
    let bin_hz = x.fs / m as f64;
    for (k, (s, xs)) in spec.iter_mut().zip(x.stimulus_spectrum).enumerate() {
        let g = x.guard.at(k as f64 * bin_hz);
        *s = if g.norm() > 1e-3 {
            *s * xs / (g * m as f64)
        } else {
            Complex64::new(0.0, 0.0)
        };
    }
    spec[0].im = 0.0;
    if let Some(last) = spec.last_mut() {
        last.im = 0.0;
    }
    let mut predicted = written_zeros(m, 0.0);
    inv.process(&mut spec, &mut predicted)
        .expect("sizes match the plan");
    let block = ((0.01 * x.fs) as usize).max(1);
    // Per 10 ms block: the capture's energy, the residual's, the prediction's.
    let blocks: Vec<(f64, f64, f64)> = x
        .capture
        .chunks(block)
        .zip(predicted.chunks(block))
        .map(|(c, p)| {
            c.iter()
                .zip(p)
                .fold((0.0, 0.0, 0.0), |(ec, er, ep), (&c, &p)| {
                    (ec + c * c, er + (c - p) * (c - p), ep + p * p)
                })
        })
        .collect();
    let (e_cap, e_res) = blocks
        .iter()
        .fold((0.0, 0.0), |a, b| (a.0 + b.0, a.1 + b.1));
    let loudest = blocks.iter().map(|b| b.0).fold(0.0, f64::max);
    // What the amplifier adds of its own while the sweep plays (distortion, hum, noise): the
    // median residual over the blocks where the prediction is active. Signal outside the sweep
    // at that level is the same hum and noise, not another signal.
    let predicted_top = blocks.iter().map(|b| b.2).fold(0.0, f64::max);
    let mut own: Vec<f64> = blocks
        .iter()
        .filter(|b| b.2 >= 0.01 * predicted_top)
        .map(|b| b.1)
        .collect();
    own.sort_by(f64::total_cmp);
    let own_level = own.get(own.len() / 2).copied().unwrap_or(0.0);
    let bad: Vec<usize> = blocks
        .iter()
        .enumerate()
        .filter(|(_, b)| b.0 >= 0.01 * loudest && b.1 > 0.5 * b.0 && b.1 > 10.0 * own_level)
        .map(|(i, _)| i)
        .collect();
    let secs = |i: usize| (i * block) as f64 / x.fs;
    Explained {
        residual_share: e_res / e_cap.max(1e-300),
        unexplained_s: secs(bad.len()),
        first_s: bad.first().map_or(0.0, |&i| secs(i)),
        last_s: bad.last().map_or(0.0, |&i| secs(i + 1)),
    }
}

/// A capture the response leaves more than half unexplained (residual within 3 dB of the
/// capture), or with more than 50 ms of loud signal it does not explain (10 dB above what the
/// amplifier adds of its own while the sweep plays, so hum and noise before and after the sweep
/// do not count), is not a recording of this sweep. Harmonic distortion stays far under that:
/// 30 % THD leaves a residual of -10 dB.
const MAX_RESIDUAL_SHARE: f64 = 0.5;
const MAX_UNEXPLAINED_S: f64 = 0.05;

fn check_explained(channel: usize, e: &Explained) -> Result<()> {
    let found = if e.residual_share > MAX_RESIDUAL_SHARE {
        format!(
            "the response to the given sweep reproduces only {:.0} % of what was recorded (the rest, {:.1} dB against the capture, is neither its distortion nor its noise)",
            100.0 * (1.0 - e.residual_share).max(0.0),
            10.0 * e.residual_share.log10()
        )
    } else if e.unexplained_s > MAX_UNEXPLAINED_S {
        format!(
            "from {:.2} s to {:.2} s the capture holds {:.2} s of loud signal that the given sweep does not explain",
            e.first_s, e.last_s, e.unexplained_s
        )
    } else {
        return Ok(());
    };
    Err(Error::WrongKind {
        channel,
        found: format!("{found}: this is a recording of another signal (a different sweep?)"),
        next: "Give the sweep file this capture was recorded from with --stimulus, or record this sweep again (one sweep per capture).".into(),
    })
}

/// Sum of the squared window [`windowed_spectrum`] lays on a response (`pre` and `post`
/// samples either side of the peak).
fn window_energy(pre: f64, post: f64) -> f64 {
    let pre_n = pre.floor() as isize;
    let post_n = post.floor() as isize;
    let fall = (post_n / 5).max(1);
    (-pre_n..=post_n)
        .map(|off| {
            let w = if off < 0 {
                0.5 - 0.5 * (PI * (off + pre_n) as f64 / pre_n.max(1) as f64).cos()
            } else if off > post_n - fall {
                0.5 + 0.5 * (PI * (off - (post_n - fall)) as f64 / fall as f64).cos()
            } else {
                1.0
            };
            w * w
        })
        .sum()
}

/// A noise spectrum as variance per sample at each frequency (white noise of variance s2 reads
/// s2 everywhere), on a grid of `step` Hz.
struct NoisePsd {
    power: Vec<f64>,
    step: f64,
}

impl NoisePsd {
    /// Averaged over a sixth of an octave around `f` (at least the bins either side).
    fn at(&self, f: f64) -> f64 {
        let last = self.power.len() - 1;
        let c = ((f / self.step).round() as usize).min(last);
        let lo = ((f * 2f64.powf(-1.0 / 12.0) / self.step).floor() as usize)
            .min(c.saturating_sub(1))
            .max(1)
            .min(last);
        let hi = ((f * 2f64.powf(1.0 / 12.0) / self.step).ceil() as usize)
            .max(c + 1)
            .min(last);
        let lo = lo.min(hi);
        self.power[lo..=hi].iter().sum::<f64>() / (hi - lo + 1) as f64
    }
}

/// The least silence the noise spectrum is read from: 0.1 s (our choice: 10 Hz resolution).
const MIN_NOISE_SILENCE_S: f64 = 0.1;

/// The noise in the capture's silence (`from..to`), the fitted `hum` taken out: Welch's method
/// (Hann segments of a power of two up to 65536 samples, half overlapping), each segment's
/// periodogram divided by the window's energy so that white noise of variance s2 reads s2.
fn silence_noise_psd(
    planner: &SpectrumPlanner,
    capture: &[f64],
    (from, to): (usize, usize),
    hum: Option<&[f64]>,
    fs: f64,
) -> Option<NoisePsd> {
    let seg = capture.get(from..to)?;
    if (seg.len() as f64) < MIN_NOISE_SILENCE_S * fs {
        return None;
    }
    let clean: Vec<f64> = match hum {
        Some(h) => seg.iter().zip(&h[from..to]).map(|(v, h)| v - h).collect(),
        None => seg.to_vec(),
    };
    let mut n = 1usize << (usize::BITS - 1 - clean.len().leading_zeros());
    n = n.min(65_536);
    let window: Vec<f64> = (0..n)
        .map(|i| 0.5 - 0.5 * (2.0 * PI * (i as f64 + 0.5) / n as f64).cos())
        .collect();
    let energy: f64 = window.iter().map(|w| w * w).sum();
    let fft = planner.forward(n);
    let mut power = vec![0.0; n / 2 + 1];
    let mut count = 0usize;
    let mut start = 0;
    let mut buf = vec![0.0; n];
    let mut out = fft.make_output_vec();
    while start + n <= clean.len() {
        for ((b, v), w) in buf.iter_mut().zip(&clean[start..start + n]).zip(&window) {
            *b = v * w;
        }
        fft.process(&mut buf, &mut out)
            .expect("sizes match the plan");
        for (p, c) in power.iter_mut().zip(&out) {
            *p += c.norm_sqr() / energy;
        }
        count += 1;
        start += n / 2;
    }
    power.iter_mut().for_each(|p| *p /= count.max(1) as f64);
    Some(NoisePsd {
        power,
        step: fs / n as f64,
    })
}

/// An analog 4th-order Butterworth high-pass an octave below the sweep's start, evaluated on the
/// DFT grid: causal, so what it removes below the sweep rings after the impulse, not before.
/// At the start frequency it takes off 0.017 dB, which is divided out when the response is read.
struct LowGuard {
    corner_hz: f64,
}

impl LowGuard {
    fn new(start_hz: f64) -> Self {
        LowGuard {
            corner_hz: start_hz / 2.0,
        }
    }

    fn at(&self, f: f64) -> Complex64 {
        if f <= 0.0 {
            return Complex64::new(0.0, 0.0);
        }
        // s^4 / B(s), B the 4th-order Butterworth polynomial s^4 + a s^3 + b s^2 + a s + 1 with
        // a = sqrt(4 + 2 sqrt 2), b = 2 + sqrt 2; at s = jw its parts are real and imaginary.
        const A: f64 = 2.613_125_929_752_753;
        const B: f64 = 3.414_213_562_373_095;
        let w = f / self.corner_hz;
        let w2 = w * w;
        let den = Complex64::new(w2 * w2 - B * w2 + 1.0, A * w * (1.0 - w2));
        Complex64::new(w2 * w2, 0.0) / den
    }
}

/// A vector of `len` copies of `zero`, written element by element. `vec![0.0; n]` maps the
/// kernel's shared zero page, so a transform that reads a page before writing it takes two
/// faults (and, with two threads, a TLB shootdown) per page; writing first takes one.
fn written_zeros<T: Copy>(len: usize, zero: T) -> Vec<T> {
    let mut v = Vec::with_capacity(len);
    v.resize(len, zero);
    v
}

/// Linear interpolation in log frequency through `(Hz, dB)` pairs sorted by frequency, held flat
/// beyond the ends; 0 for no pairs.
pub fn interpolate_log(pairs: &[(f64, f64)], f: f64) -> f64 {
    match pairs {
        [] => 0.0,
        [only] => only.1,
        _ => {
            if f <= pairs[0].0 {
                return pairs[0].1;
            }
            for w in pairs.windows(2) {
                if f <= w[1].0 {
                    let t = (f / w[0].0).ln() / (w[1].0 / w[0].0).ln();
                    return w[0].1 + t * (w[1].1 - w[0].1);
                }
            }
            pairs[pairs.len() - 1].1
        }
    }
}

/// 1 inside [f1, f2], raised-cosine down to 0 at `lo` and `hi`.
fn band_taper(f: f64, lo: f64, f1: f64, f2: f64, hi: f64) -> f64 {
    if f <= lo || f >= hi {
        0.0
    } else if f < f1 {
        0.5 - 0.5 * (PI * (f / lo).ln() / (f1 / lo).ln()).cos()
    } else if f > f2 {
        0.5 + 0.5 * (PI * (f / f2).ln() / (hi / f2).ln()).cos()
    } else {
        1.0
    }
}

/// Sub-sample offset of a peak, in [-0.5, 0.5]: the maximum of the band-limited interpolation
/// (Whittaker-Shannon, a sinc kernel of 32 samples either side under a Blackman window) of |x|
/// near `i`, found by golden-section search. The response is band-limited by the deconvolution's
/// taper, so the interpolation is the response between samples; a parabola through three
/// samples is biased by up to 0.01 sample away from the sample grid (half a degree at 10 kHz
/// and 48 kHz). The response is circular (a latency of zero or less wraps round), so the
/// neighbours of the first and last samples are the last and first.
fn parabolic_peak(x: &[f64], i: usize) -> f64 {
    const HALF: isize = 32;
    let m = x.len() as isize;
    if m < 2 * HALF + 1 {
        return 0.0;
    }
    let at = |t: f64| -> f64 {
        let mut sum = 0.0;
        for k in -HALF..=HALF {
            let u = t - k as f64;
            let sinc = if u.abs() < 1e-12 {
                1.0
            } else {
                (PI * u).sin() / (PI * u)
            };
            // Blackman window over (-HALF - 1, HALF + 1).
            let r = (u + HALF as f64 + 1.0) / (2.0 * HALF as f64 + 2.0);
            let w = 0.42 - 0.5 * (2.0 * PI * r).cos() + 0.08 * (4.0 * PI * r).cos();
            sum += x[(i as isize + k).rem_euclid(m) as usize] * sinc * w;
        }
        sum.abs()
    };
    super::fit::golden_min(-0.5, 0.5, 40, 1e-9, |t| -at(t)).clamp(-0.5, 0.5)
}

/// Cuts the response around `centre` (fractional sample, taken modulo the record) from
/// `centre - pre` to `centre + post`, with raised-cosine edges (the first `pre` samples rise,
/// the last fifth of `post` falls), rotates `centre` to time zero, and transforms at length `nf`.
/// The fractional part of `centre` is kept beside the spectrum, so phases refer to the peak.
fn windowed_spectrum(
    planner: &SpectrumPlanner,
    ir: &[f64],
    centre: f64,
    pre: f64,
    post: f64,
    nf: usize,
) -> Shifted {
    let m = ir.len();
    let c = centre.floor() as isize;
    let frac = centre - c as f64;
    let pre_n = pre.floor() as isize;
    let post_n = post.floor() as isize;
    let fall = (post_n / 5).max(1);
    let mut buf = written_zeros(nf, 0.0);
    for off in -pre_n..=post_n {
        let src = (c + off).rem_euclid(m as isize) as usize;
        let w = if off < 0 {
            0.5 - 0.5 * (PI * (off + pre_n) as f64 / pre_n.max(1) as f64).cos()
        } else if off > post_n - fall {
            0.5 + 0.5 * (PI * (off - (post_n - fall)) as f64 / fall as f64).cos()
        } else {
            1.0
        };
        let dst = off.rem_euclid(nf as isize) as usize;
        buf[dst] += ir[src] * w;
    }
    let fwd = planner.forward(nf);
    let mut out = written_zeros(nf / 2 + 1, Complex64::new(0.0, 0.0));
    fwd.process(&mut buf, &mut out)
        .expect("sizes match the plan");
    Shifted {
        spectrum: out,
        frac,
    }
}

/// A response's spectrum with its peak rotated to index 0, and the fractional sample by which
/// the peak sat after that index, taken out as each bin is read ([`Shifted::bin`]).
struct Shifted {
    spectrum: Vec<Complex64>,
    frac: f64,
}

impl Shifted {
    fn bin(&self, k: usize) -> Complex64 {
        let n = 2 * (self.spectrum.len() - 1);
        self.spectrum[k] * Complex64::from_polar(1.0, 2.0 * PI * k as f64 * self.frac / n as f64)
    }
}

/// Log-spaced points from `lo` to `hi`, `per_octave` to the octave, snapped to bins and
/// de-duplicated (at low frequencies several targets can share a bin).
fn log_points(lo: f64, hi: f64, per_octave: usize, bin: f64) -> Vec<f64> {
    let octaves = (hi / lo).log2();
    let count = (octaves * per_octave as f64).floor() as usize + 1;
    let mut out: Vec<f64> = Vec::with_capacity(count);
    for i in 0..count {
        let f = lo * 2f64.powf(i as f64 / per_octave as f64);
        let snapped = (f / bin).round() * bin;
        if out.last().is_none_or(|&l| snapped > l) && snapped >= lo && snapped <= hi {
            out.push(snapped);
        }
    }
    out
}

/// Power-averaged magnitude over 1/n octave centred on `f`.
fn smoothed(spec: &[Complex64], f: f64, n: u32, bin: f64) -> f64 {
    let half = 2f64.powf(0.5 / n as f64);
    let lo = ((f / half) / bin).floor().max(0.0) as usize;
    let hi = (((f * half) / bin).ceil() as usize).min(spec.len() - 1);
    let sum: f64 = spec[lo..=hi].iter().map(|c| c.norm_sqr()).sum();
    (sum / (hi - lo + 1) as f64).sqrt()
}

/// Where the magnitude first reaches `level_db` walking from the reference down (or up),
/// interpolated in log frequency between the two points that bracket it.
fn crossing(
    points: &[ResponsePoint],
    reference_hz: f64,
    level_db: f64,
    upward: bool,
) -> Option<f64> {
    let start = points.iter().position(|p| p.frequency_hz >= reference_hz)?;
    let idx: Vec<usize> = if upward {
        (start..points.len()).collect()
    } else {
        (0..=start).rev().collect()
    };
    for w in idx.windows(2) {
        let (a, b) = (&points[w[0]], &points[w[1]]);
        if a.magnitude_db > level_db && b.magnitude_db <= level_db {
            let t = (a.magnitude_db - level_db) / (a.magnitude_db - b.magnitude_db);
            return Some(
                (a.frequency_hz.ln() + t * (b.frequency_hz.ln() - a.frequency_hz.ln())).exp(),
            );
        }
    }
    None
}

/// H2 weaker than this (-80 dBc) is not timed for the clock offset.
const MIN_TIMED_H2: f64 = 1e-4;

/// Clock offset between player and recorder, ppm, from where the second harmonic's response sits
/// against the linear one (Farina's harmonic impulses, timed).
///
/// A recorder running fast by `e` (relative) compresses the captured sweep in time: frequency `f`
/// arrives `e L ln(f / f1)` early. At one output frequency `F` the linear response saw the sweep
/// at `F`, the second harmonic's at `F / 2`, which arrived `L ln 2` sooner, so the harmonic's
/// delay relative to the linear one at `F` grows by `e L ln 2` on top of the `L ln 2` the
/// analysis already takes out. Both passed whatever filters follow the nonlinearity (an output
/// transformer's roll-offs) at the same `F`, so the amplifier's own group delay cancels; what is
/// left is the group delay of the stages before the nonlinearity at `F / 2` against `F`,
/// negligible above 2 kHz for any coupling network (a 5 Hz high-pass: 0.6 us).
///
/// The phase of `q(F) = G2(F) conj(G1(F))` falls along a straight line in `2 pi F` with slope
/// `-e L ln 2`; the slope is a least-squares fit from 2 kHz to the harmonic curves' top. Returns `(ppm, standard error in ppm)`, or `None` when H2 is too weak or the span
/// too short to tell (a clean amplifier: no claim either way). The linear response alone cannot
/// tell drift from the amplifier's own group delay (a transformer's treble roll-off with a little
/// peaking is flat to 0.1 dB over 2-10 kHz while its delay moves by microseconds), so it is not
/// used.
fn drift_from_harmonics(
    g1: &Shifted,
    g2: &Shifted,
    nf_bin: f64,
    (f_from, f_to): (f64, f64),
    rate_s: f64,
) -> Option<(f64, f64)> {
    let (lo, hi) = (f_from.max(2000.0), f_to);
    if hi < 2.0 * lo {
        return None;
    }
    // About 400 evenly spaced bins.
    let step = ((hi - lo) / 400.0 / nf_bin).round().max(1.0) as usize;
    let (k_lo, k_hi) = (
        (lo / nf_bin).ceil() as usize,
        ((hi / nf_bin) as usize).min(g1.spectrum.len() - 1),
    );
    let q: Vec<Complex64> = (k_lo..=k_hi)
        .step_by(step)
        .map(|k| g2.bin(k) * g1.bin(k).conj())
        .collect();
    // H2 under -80 dBc is no harmonic to time: what the H2 window holds then is the linear
    // response's own leakage (the band taper's ringing), which has a slope of its own.
    let mut ratios: Vec<f64> = (k_lo..=k_hi)
        .step_by(step)
        .map(|k| g2.bin(k).norm() / g1.bin(k).norm().max(1e-300))
        .collect();
    let mid = ratios.len() / 2;
    if ratios.is_empty() || *ratios.select_nth_unstable_by(mid, f64::total_cmp).1 < MIN_TIMED_H2 {
        return None;
    }
    if q.len() < 32 {
        return None;
    }
    // Unwrapped phase: the running sum of the (wrapped) steps between neighbours.
    let mut phase = Vec::with_capacity(q.len());
    let mut acc = q[0].arg();
    phase.push(acc);
    for w in q.windows(2) {
        acc += (w[1] * w[0].conj()).arg();
        phase.push(acc);
    }
    // Least-squares line through the points where H2 is not lost (at least 0.3 of the median
    // |q|: the harmonic curves' top, where a roll-off takes H2 into the noise, drops out).
    let mut mags: Vec<f64> = q.iter().map(|v| v.norm()).collect();
    let mid = mags.len() / 2;
    let median = *mags.select_nth_unstable_by(mid, f64::total_cmp).1;

    let pts: Vec<(f64, f64)> = q
        .iter()
        .zip(&phase)
        .enumerate()
        .filter(|(_, (v, _))| v.norm() >= 0.3 * median)
        .map(|(i, (_, &p))| (2.0 * PI * (k_lo + i * step) as f64 * nf_bin, p))
        .collect();
    if pts.len() < 32 {
        return None;
    }
    let n = pts.len() as f64;
    let (mw, mp) = (
        pts.iter().map(|p| p.0).sum::<f64>() / n,
        pts.iter().map(|p| p.1).sum::<f64>() / n,
    );
    let sww: f64 = pts.iter().map(|p| (p.0 - mw).powi(2)).sum();
    let swp: f64 = pts.iter().map(|p| (p.0 - mw) * (p.1 - mp)).sum();
    let slope = swp / sww;
    let resid = pts
        .iter()
        .map(|p| (p.1 - mp - slope * (p.0 - mw)).powi(2))
        .sum::<f64>()
        / (n - 2.0);
    let slope_se = (resid / sww).sqrt();
    // e above is the capture's time compression; a recorder whose clock runs fast stretches the
    // capture instead, so the figure reported (recorder fast: positive) is -e.
    let scale = 1e6 / (rate_s * std::f64::consts::LN_2);
    let ppm = slope * scale;
    // Two crystal clocks differ by tens of ppm, 200 at the very most (each within 100 ppm, common
    // practice); a figure far past that is something else in the window, not the clocks.
    (ppm.abs() < 1000.0).then_some((ppm, slope_se * scale))
}
