//! The stimuli ampnote plays: steady tone, staircase of tone levels, synchronized exponential
//! sweep, two-tone pairs. Each comes with a [`Description`] of what it holds, stored inside the
//! WAV so that a later analysis never asks the user to retype frequencies or timings.
//!
//! Level convention: `level_dbfs` is the RMS of the stimulus referred to a full-scale sine
//! (AES17), so a sine at 0 dBFS has a peak of 1.0, and a two-tone at 0 dBFS has the RMS of that sine.

use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

/// Version of the description layout.
pub const DESCRIPTION_VERSION: u32 = 1;

/// Which two-tone method a pair serves (IEC 60268-3).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum TwoToneMethod {
    /// Low tone and high tone at a 4:1 amplitude ratio (60 Hz + 7 kHz classically).
    Modulation,
    /// Two equal tones close together (19 + 20 kHz classically).
    DifferenceFrequency,
}

/// One level of a staircase.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Step {
    /// Level of this step, dBFS (RMS re full-scale sine).
    pub level_dbfs: f64,
    /// First sample of the step (the settle time starts here).
    pub start_sample: usize,
    /// First sample to analyse (after the settle time) and one past the last.
    pub analyse_from_sample: usize,
    pub analyse_to_sample: usize,
}

/// What a stimulus holds, by kind.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Kind {
    Tone {
        frequency_hz: f64,
    },
    Steps {
        frequency_hz: f64,
        start_dbfs: f64,
        stop_dbfs: f64,
        step_db: f64,
        dwell_s: f64,
        settle_s: f64,
        steps: Vec<Step>,
    },
    /// Synchronized exponential sweep (Novak, Lotton, Simon, JAES 63(10), 2015):
    /// `x(t) = sin(2 pi f1 L exp(t / L))`, `0 <= t < L ln(f2 / f1)`.
    Sweep {
        start_hz: f64,
        stop_hz: f64,
        /// Sweep rate parameter L in seconds, `round(f1 T / ln(f2/f1)) / f1`.
        rate_s: f64,
        duration_s: f64,
        fade_in_s: f64,
        fade_out_s: f64,
    },
    /// A square wave smoothed by a Gaussian filter whose -3 dB point is `bandwidth_hz`: no
    /// overshoot of its own, no aliasing (the filter is 60 dB down at the Nyquist frequency by
    /// default), a 10-90 % rise time of 0.3399 / `bandwidth_hz`.
    Square {
        frequency_hz: f64,
        bandwidth_hz: f64,
    },
    TwoTone {
        method: TwoToneMethod,
        low_hz: f64,
        high_hz: f64,
        /// Amplitude of the low tone over the high tone (4 for modulation, 1 for difference).
        ratio: f64,
    },
}

impl Kind {
    /// The `generate` subcommand that makes this kind.
    pub fn name(&self) -> &'static str {
        match self {
            Kind::Tone { .. } => "tone",
            Kind::Steps { .. } => "steps",
            Kind::Sweep { .. } => "sweep",
            Kind::TwoTone { .. } => "twotone",
            Kind::Square { .. } => "square",
        }
    }
}

/// Everything a later analysis needs to know about a stimulus file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Description {
    pub ampnote_stimulus: u32,
    #[serde(flatten)]
    pub kind: Kind,
    pub sample_rate_hz: u32,
    /// RMS level of the signal part, dBFS re full-scale sine (for steps: the first step).
    pub level_dbfs: f64,
    /// Channels in the file, and the 1-based channels that carry the signal (others are silent).
    pub channels: usize,
    pub signal_channels: Vec<usize>,
    /// Silence before and after the signal.
    pub lead_s: f64,
    pub tail_s: f64,
    /// First sample of the signal and its length in samples.
    pub signal_start_sample: usize,
    pub signal_samples: usize,
    pub total_samples: usize,
}

impl Description {
    pub fn to_json(&self) -> String {
        serde_json::to_string(self).expect("description serializes")
    }

    /// Parse a description found in a WAV; `None` when absent, not ampnote's, or inconsistent
    /// (a hand-edited chunk must not lead an analysis astray). [`Description::parse`] says why.
    pub fn from_json(text: &str) -> Option<Description> {
        Description::parse(text).ok()
    }

    /// Parse and check a description: the chunk is untrusted input (a file can be edited by
    /// hand or damaged), so every field is range-checked before anything is sized from it.
    pub fn parse(text: &str) -> std::result::Result<Description, String> {
        if text.len() > 1 << 20 {
            return Err(format!(
                "its description chunk is {} bytes, far more than any stimulus needs",
                text.len()
            ));
        }
        let d: Description = serde_json::from_str(text)
            .map_err(|e| format!("its description chunk does not parse ({e})"))?;
        d.check()?;
        Ok(d)
    }

    /// Signal channels inside the file, the signal inside the samples, a staircase with steps in
    /// order, a sweep with sane parameters.
    pub fn is_consistent(&self) -> bool {
        self.check().is_ok()
    }

    /// Every field in range and consistent with the others; the error names the field.
    pub fn check(&self) -> std::result::Result<(), String> {
        let fs = self.sample_rate_hz as f64;
        let nyquist = fs / 2.0;
        let bad = |field: &str, why: String| Err(format!("its description's {field} {why}"));
        let finite_in = |x: f64, lo: f64, hi: f64| x.is_finite() && x >= lo && x <= hi;
        if self.ampnote_stimulus == 0 || self.ampnote_stimulus > DESCRIPTION_VERSION {
            return bad(
                "ampnote_stimulus",
                format!(
                    "is {}, a version this build does not know (it reads 1..={DESCRIPTION_VERSION})",
                    self.ampnote_stimulus
                ),
            );
        }
        if !(crate::capture::MIN_RATE_HZ..=crate::capture::MAX_RATE_HZ)
            .contains(&self.sample_rate_hz)
        {
            return bad(
                "sample_rate_hz",
                format!("{} lies outside 8000..384000 Hz", self.sample_rate_hz),
            );
        }
        if !finite_in(self.level_dbfs, -200.0, 0.0) {
            return bad(
                "level_dbfs",
                format!("{} lies outside -200..0 dBFS", self.level_dbfs),
            );
        }
        if !(1..=64).contains(&self.channels) {
            return bad("channels", format!("{} lies outside 1..64", self.channels));
        }
        if self.signal_channels.is_empty()
            || self
                .signal_channels
                .iter()
                .any(|&c| c == 0 || c > self.channels)
        {
            return bad(
                "signal_channels",
                format!(
                    "{:?} are not within 1..{}",
                    self.signal_channels, self.channels
                ),
            );
        }
        for (field, v) in [("lead_s", self.lead_s), ("tail_s", self.tail_s)] {
            if !finite_in(v, 0.0, MAX_STIMULUS_S) {
                return bad(field, format!("{v} lies outside 0..{MAX_STIMULUS_S} s"));
            }
        }
        let max_samples = (MAX_STIMULUS_S * fs) as usize;
        if self.total_samples > max_samples {
            return bad(
                "total_samples",
                format!(
                    "{} is more than {MAX_STIMULUS_S} s at its rate",
                    self.total_samples
                ),
            );
        }
        if self.signal_samples == 0
            || self
                .signal_start_sample
                .checked_add(self.signal_samples)
                .is_none_or(|end| end > self.total_samples)
        {
            return bad(
                "signal span",
                format!(
                    "({} samples from {}) does not lie within its {} samples",
                    self.signal_samples, self.signal_start_sample, self.total_samples
                ),
            );
        }
        if (self.signal_start_sample as f64 - self.lead_s * fs).abs() > 2.0 {
            return bad(
                "signal_start_sample",
                format!(
                    "{} does not match its lead of {} s",
                    self.signal_start_sample, self.lead_s
                ),
            );
        }
        let freq = |field: &str, f: f64| -> std::result::Result<(), String> {
            if f.is_finite() && f > 0.0 && f < nyquist {
                Ok(())
            } else {
                Err(format!(
                    "its description's {field} {f} Hz lies outside 0..{nyquist} Hz (the Nyquist frequency of its rate)"
                ))
            }
        };
        let secs_in = |field: &str, v: f64, hi: f64| -> std::result::Result<(), String> {
            if finite_in(v, 0.0, hi) {
                Ok(())
            } else {
                Err(format!(
                    "its description's {field} {v} s lies outside 0..{hi} s"
                ))
            }
        };
        let signal_s = self.signal_samples as f64 / fs;
        match &self.kind {
            Kind::Tone { frequency_hz } => freq("frequency_hz", *frequency_hz)?,
            Kind::Square {
                frequency_hz,
                bandwidth_hz,
            } => {
                freq("frequency_hz", *frequency_hz)?;
                freq("bandwidth_hz", *bandwidth_hz)?;
            }
            Kind::TwoTone {
                low_hz,
                high_hz,
                ratio,
                ..
            } => {
                freq("low_hz", *low_hz)?;
                freq("high_hz", *high_hz)?;
                if high_hz <= low_hz {
                    return bad(
                        "high_hz",
                        format!("{high_hz} Hz is not above low_hz {low_hz} Hz"),
                    );
                }
                if !finite_in(*ratio, 1e-3, 1e3) {
                    return bad("ratio", format!("{ratio} lies outside 0.001..1000"));
                }
            }
            Kind::Sweep {
                start_hz,
                stop_hz,
                rate_s,
                duration_s,
                fade_in_s,
                fade_out_s,
            } => {
                freq("start_hz", *start_hz)?;
                freq("stop_hz", *stop_hz)?;
                if *stop_hz <= 1.5 * start_hz {
                    return bad(
                        "stop_hz",
                        format!("{stop_hz} Hz is not well above start_hz {start_hz} Hz"),
                    );
                }
                // L ln(f2/f1) is the sweep's length, and the length is the signal span's.
                let expected = rate_s * (stop_hz / start_hz).ln();
                if !(rate_s.is_finite() && *rate_s > 0.0)
                    || (expected - signal_s).abs() > 0.01 * signal_s + 2.0 / fs
                {
                    return bad(
                        "rate_s",
                        format!("{rate_s} s gives a {expected:.4} s sweep, but its signal lasts {signal_s:.4} s"),
                    );
                }
                if (duration_s - signal_s).abs() > 2.0 / fs {
                    return bad(
                        "duration_s",
                        format!("{duration_s} s does not match its signal span of {signal_s:.4} s"),
                    );
                }
                secs_in("fade_in_s", *fade_in_s, signal_s)?;
                secs_in("fade_out_s", *fade_out_s, signal_s)?;
            }
            Kind::Steps {
                frequency_hz,
                start_dbfs,
                stop_dbfs,
                step_db,
                dwell_s,
                settle_s,
                steps,
            } => {
                freq("frequency_hz", *frequency_hz)?;
                if !(finite_in(*start_dbfs, -200.0, 0.0) && finite_in(*stop_dbfs, *start_dbfs, 0.0))
                {
                    return bad(
                        "start_dbfs/stop_dbfs",
                        format!(
                            "{start_dbfs}/{stop_dbfs} are not a rising run within -200..0 dBFS"
                        ),
                    );
                }
                if !finite_in(*step_db, 1e-3, 60.0) {
                    return bad("step_db", format!("{step_db} lies outside 0.001..60 dB"));
                }
                secs_in("dwell_s", *dwell_s, MAX_STIMULUS_S)?;
                secs_in("settle_s", *settle_s, *dwell_s)?;
                if steps.is_empty() || steps.len() > 1000 {
                    return bad(
                        "steps",
                        format!("has {} entries (1..1000 expected)", steps.len()),
                    );
                }
                let mut previous_end = 0;
                for (i, st) in steps.iter().enumerate() {
                    let ok = finite_in(st.level_dbfs, -200.0, 0.0)
                        && st.start_sample >= previous_end
                        && st.start_sample <= st.analyse_from_sample
                        && st.analyse_from_sample < st.analyse_to_sample
                        && st.analyse_to_sample <= self.total_samples;
                    if !ok {
                        return bad(
                            "steps",
                            format!("entry {} is out of order or outside the file", i + 1),
                        );
                    }
                    previous_end = st.analyse_to_sample;
                }
            }
        }
        Ok(())
    }

    /// The description of the stimulus file `cap` (every channel decoded), checked against the
    /// file itself: its rate, channels and length, a silent lead and a signal at about the level
    /// the description states (the first step's, for a staircase).
    pub fn of_capture(cap: &crate::capture::Capture) -> std::result::Result<Description, String> {
        let text = cap
            .description_json
            .as_deref()
            .ok_or("it carries no description (any WAV a recorder or editor writes)")?;
        let d = Description::parse(text)?;
        if d.sample_rate_hz != cap.sample_rate_hz {
            return Err(format!(
                "its description says {} Hz but the file is at {} Hz (resampled after it was made?)",
                d.sample_rate_hz, cap.sample_rate_hz
            ));
        }
        if d.channels != cap.channel_count {
            return Err(format!(
                "its description says {} channel(s) but the file has {}",
                d.channels, cap.channel_count
            ));
        }
        if d.total_samples != cap.frames() {
            return Err(format!(
                "its description says {} frames but the file has {} (edited or cut after it was made?)",
                d.total_samples,
                cap.frames()
            ));
        }
        let Some(x) = cap.channel(d.signal_channels[0]) else {
            return Err("its signal channel was not decoded".into());
        };
        let rms_db = |v: &[f64]| {
            let p = v.iter().map(|s| s * s).sum::<f64>() / v.len().max(1) as f64;
            // dBFS re a full-scale sine: RMS sqrt(1/2) is 0 dBFS.
            10.0 * (2.0 * p).max(1e-30).log10()
        };
        let (from, len) = match &d.kind {
            Kind::Steps { steps, .. } => (
                steps[0].analyse_from_sample,
                steps[0].analyse_to_sample - steps[0].analyse_from_sample,
            ),
            _ => (d.signal_start_sample, d.signal_samples),
        };
        let level = rms_db(&x[from..from + len]);
        // Fades take a little off; dither and the sweep's own fade-in a little more at low
        // levels. 3 dB either way is far tighter than an edited level and far looser than these.
        if (level - d.level_dbfs).abs() > 3.0 {
            return Err(format!(
                "its signal reads {level:.1} dBFS where its description says {:.1} dBFS (the samples were changed after it was made?)",
                d.level_dbfs
            ));
        }
        // Silent means 40 dB under the signal, or under -90 dBFS for a quiet one (16-bit TPDF
        // dither alone reads about -101 dBFS).
        let silent_below = (d.level_dbfs - 40.0).max(-90.0);
        if d.signal_start_sample > 0 && rms_db(&x[..d.signal_start_sample]) > silent_below {
            return Err(
                "its lead, silent when it was made, holds signal (the samples were changed after it was made?)".into(),
            );
        }
        Ok(d)
    }
}

/// Settings common to every stimulus.
#[derive(Debug, Clone)]
pub struct Common {
    pub sample_rate_hz: u32,
    pub level_dbfs: f64,
    pub channels: usize,
    pub signal_channels: Vec<usize>,
    pub lead_s: f64,
    pub tail_s: f64,
    /// Fade in and out for tones and two-tones (raised-cosine), seconds.
    pub fade_s: f64,
}

impl Common {
    /// One channel carrying the signal, no lead, tail or fade: the plainest stimulus, for tests,
    /// benchmarks and procedures that place it themselves.
    pub fn mono(sample_rate_hz: u32, level_dbfs: f64) -> Common {
        Common {
            sample_rate_hz,
            level_dbfs,
            channels: 1,
            signal_channels: vec![1],
            lead_s: 0.0,
            tail_s: 0.0,
            fade_s: 0.0,
        }
    }
}

/// A generated stimulus: one signal (placed on the signal channels) and its description.
#[derive(Debug, Clone)]
pub struct Stimulus {
    pub signal: Vec<f64>,
    pub description: Description,
}

impl Stimulus {
    /// The file's channels: the signal on the signal channels, silence elsewhere.
    pub fn channel_data(&self) -> Vec<Vec<f64>> {
        (1..=self.description.channels)
            .map(|c| {
                if self.description.signal_channels.contains(&c) {
                    self.signal.clone()
                } else {
                    vec![0.0; self.signal.len()]
                }
            })
            .collect()
    }
}

fn amplitude_of(level_dbfs: f64) -> f64 {
    10f64.powf(level_dbfs / 20.0)
}

fn check_common(c: &Common) -> Result<()> {
    let bad = |m: String| Err(Error::InvalidSetting(m));
    crate::capture::check_rate(c.sample_rate_hz)?;
    if !(c.level_dbfs.is_finite() && (-200.0..=0.0).contains(&c.level_dbfs)) {
        return bad(format!(
            "--level {} dBFS: the level must be 0 dBFS or below (0 dBFS is a full-scale sine)",
            c.level_dbfs
        ));
    }
    if c.channels == 0 || c.signal_channels.iter().any(|&s| s == 0 || s > c.channels) {
        return bad(format!(
            "signal channels {:?} must lie within 1..{} (--channels)",
            c.signal_channels, c.channels
        ));
    }
    for (name, v) in [
        ("--lead", c.lead_s),
        ("--tail", c.tail_s),
        ("--fade", c.fade_s),
    ] {
        if !(v.is_finite() && (0.0..=MAX_STIMULUS_S).contains(&v)) {
            return bad(format!(
                "{name} must lie between 0 and {MAX_STIMULUS_S} s, got {v}"
            ));
        }
    }
    Ok(())
}

/// The longest stimulus ampnote makes (10 minutes: at 384 kHz that is 230 million samples, the
/// most a capture of it can be held in memory as comfortably as the analyses need).
pub const MAX_STIMULUS_S: f64 = 600.0;

/// A signal length in seconds, checked before anything is allocated: finite, above 0 and with
/// the lead and tail at most [`MAX_STIMULUS_S`] altogether.
fn check_seconds(c: &Common, name: &str, seconds: f64) -> Result<()> {
    let total = seconds + c.lead_s + c.tail_s;
    if !(seconds.is_finite() && seconds > 0.0 && total <= MAX_STIMULUS_S) {
        return Err(Error::InvalidSetting(format!(
            "{name} {seconds} s: a stimulus lasts above 0 and at most {MAX_STIMULUS_S} s with its lead and tail; record longer runs as several"
        )));
    }
    Ok(())
}

fn check_freq(c: &Common, name: &str, f: f64) -> Result<()> {
    let nyquist = c.sample_rate_hz as f64 / 2.0;
    if !(f.is_finite() && f >= 1.0 && f < nyquist) {
        return Err(Error::InvalidSetting(format!(
            "{name} {} Hz must lie between 1 Hz and the Nyquist frequency {nyquist} Hz",
            crate::error::shown(f)
        )));
    }
    Ok(())
}

fn secs(c: &Common, s: f64) -> usize {
    (s * c.sample_rate_hz as f64).round() as usize
}

/// Pads `body` with the lead and tail silence and builds the description.
fn finish(c: &Common, kind: Kind, body: Vec<f64>) -> Stimulus {
    let lead = secs(c, c.lead_s);
    let tail = secs(c, c.tail_s);
    let signal_samples = body.len();
    let mut signal = vec![0.0; lead];
    signal.extend(body);
    signal.extend(std::iter::repeat_n(0.0, tail));
    let description = Description {
        ampnote_stimulus: DESCRIPTION_VERSION,
        kind,
        sample_rate_hz: c.sample_rate_hz,
        level_dbfs: c.level_dbfs,
        channels: c.channels,
        signal_channels: c.signal_channels.clone(),
        lead_s: c.lead_s,
        tail_s: c.tail_s,
        signal_start_sample: lead,
        signal_samples,
        total_samples: signal.len(),
    };
    Stimulus {
        signal,
        description,
    }
}

/// Raised-cosine fade of `n` samples at both ends.
fn fade(x: &mut [f64], n_in: usize, n_out: usize) {
    let len = x.len();
    for (i, v) in x.iter_mut().take(n_in).enumerate() {
        *v *= 0.5 - 0.5 * (PI * i as f64 / n_in as f64).cos();
    }
    for (i, v) in x.iter_mut().rev().take(n_out.min(len)).enumerate() {
        *v *= 0.5 - 0.5 * (PI * i as f64 / n_out as f64).cos();
    }
}

/// A steady tone.
pub fn tone(c: &Common, frequency_hz: f64, seconds: f64) -> Result<Stimulus> {
    check_common(c)?;
    check_freq(c, "--freq", frequency_hz)?;
    check_seconds(c, "--seconds", seconds)?;
    let n = secs(c, seconds);
    if n == 0 {
        return Err(Error::InvalidSetting("--seconds must be above 0".into()));
    }
    let a = amplitude_of(c.level_dbfs);
    let w = 2.0 * PI * frequency_hz / c.sample_rate_hz as f64;
    let mut x: Vec<f64> = (0..n).map(|i| a * (w * i as f64).sin()).collect();
    let f = secs(c, c.fade_s);
    fade(&mut x, f, f);
    Ok(finish(c, Kind::Tone { frequency_hz }, x))
}

/// The Gaussian filter's standard deviation in time (seconds) for a -3 dB point at `f3` Hz: its
/// response exp(-2 pi^2 sigma^2 f^2) is 1/sqrt 2 at f3 (Gaussian filter, closed form).
pub fn gaussian_sigma_s(f3: f64) -> f64 {
    (2f64.ln()).sqrt() / (2.0 * PI * f3)
}

/// A Gaussian filter's 10-90 % rise time, seconds: 2 x 1.2816 sigma (the normal distribution's
/// 10 % and 90 % points).
pub fn gaussian_rise_s(f3: f64) -> f64 {
    2.0 * 1.281_551_565_5 * gaussian_sigma_s(f3)
}

/// The default bandwidth of a square wave at `rate` Hz: the Gaussian filter then stands 60 dB
/// down at the Nyquist frequency (exp(-2 pi^2 sigma^2 (rate/2)^2) = 1e-3), so sampling it
/// aliases nothing that matters.
pub fn square_bandwidth(rate: u32) -> f64 {
    square_bandwidth_below(rate as f64 / 2.0)
}

/// The Gaussian edge filter's -3 dB point that puts it 60 dB down at `top_hz` (0.224 x it).
pub fn square_bandwidth_below(top_hz: f64) -> f64 {
    // sigma from G(top) = 1e-3, then f3 from sigma.
    let sigma = (1e3f64.ln() / 2.0).sqrt() / (PI * top_hz);
    (2f64.ln()).sqrt() / (2.0 * PI * sigma)
}

/// A square wave at `frequency_hz` (RMS `c.level_dbfs` re a full-scale sine, so its peak is
/// that level minus 3.01 dB), its edges smoothed by a Gaussian filter with its -3 dB point at
/// `bandwidth_hz` (default [`square_bandwidth`]). Each sample is the ideal square convolved with
/// the Gaussian: far from an edge it is exactly the level, near one the sum of the edges' error
/// functions. It starts and ends at a rising edge's centre (zero), so it needs no fade.
pub fn square(
    c: &Common,
    frequency_hz: f64,
    bandwidth_hz: Option<f64>,
    seconds: f64,
) -> Result<Stimulus> {
    check_common(c)?;
    check_freq(c, "--freq", frequency_hz)?;
    check_seconds(c, "--seconds", seconds)?;
    let fs = c.sample_rate_hz as f64;
    let f3 = bandwidth_hz.unwrap_or_else(|| square_bandwidth(c.sample_rate_hz));
    check_freq(c, "--bandwidth", f3)?;
    let half = 0.5 / frequency_hz;
    // Whole periods, at least one.
    let periods = (seconds * frequency_hz).round().max(1.0);
    let n = (periods / frequency_hz * fs).round() as usize;
    let a = amplitude_of(c.level_dbfs) / 2f64.sqrt();
    let sigma = gaussian_sigma_s(f3);
    // Beyond 9 sigma a smoothed step is whole to 1e-18 (erfc(9 / sqrt 2)).
    let reach = 9.0 * sigma;
    let phi = |t: f64| 0.5 * (1.0 + libm::erf(t / (2f64.sqrt() * sigma)));
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            // Edges at k half-periods: rising for even k, falling for odd. Edges passed by more
            // than `reach` count whole; those within it count by their smoothed step.
            let passed = ((t - reach) / half).floor();
            let mut v = if passed < 0.0 || passed as i64 % 2 == 1 {
                -1.0
            } else {
                1.0
            };
            let first = (passed + 1.0).max(0.0) as i64;
            let last = ((t + reach) / half).floor() as i64;
            for k in first..=last {
                let sign = if k % 2 == 0 { 2.0 } else { -2.0 };
                v += sign * phi(t - k as f64 * half);
            }
            a * v
        })
        .collect();
    Ok(finish(
        c,
        Kind::Square {
            frequency_hz,
            bandwidth_hz: f3,
        },
        x,
    ))
}

/// A staircase of tone levels from `start_dbfs` to `stop_dbfs` in `step_db` steps, each held
/// `dwell_s` seconds, of which the first `settle_s` are for the amplifier to settle and are not
/// analysed. The phase runs on across steps so no step boundary clicks.
pub fn steps(
    c: &Common,
    frequency_hz: f64,
    start_dbfs: f64,
    stop_dbfs: f64,
    step_db: f64,
    dwell_s: f64,
    settle_s: f64,
) -> Result<Stimulus> {
    check_common(c)?;
    check_freq(c, "--freq", frequency_hz)?;
    if !(step_db.is_finite() && step_db > 0.0) {
        return Err(Error::InvalidSetting(format!(
            "--step must be above 0 dB, got {step_db}"
        )));
    }
    if !(stop_dbfs <= 0.0 && start_dbfs <= stop_dbfs) {
        return Err(Error::InvalidSetting(format!(
            "the staircase runs upward to at most 0 dBFS: --from {start_dbfs} must not exceed --to {stop_dbfs}"
        )));
    }
    if !(dwell_s > settle_s && settle_s >= 0.0) {
        return Err(Error::InvalidSetting(format!(
            "--dwell ({dwell_s} s) must exceed --settle ({settle_s} s)"
        )));
    }
    let count = ((stop_dbfs - start_dbfs) / step_db + 1e-9).floor() as usize + 1;
    if count > 1000 {
        return Err(Error::InvalidSetting(format!(
            "{count} steps is too many; use a larger --step"
        )));
    }
    check_seconds(c, "the staircase (steps x --dwell)", count as f64 * dwell_s)?;
    let w = 2.0 * PI * frequency_hz / c.sample_rate_hz as f64;
    let dwell = secs(c, dwell_s);
    let settle = secs(c, settle_s);
    let lead = secs(c, c.lead_s);
    let mut x = Vec::with_capacity(count * dwell);
    let mut table = Vec::with_capacity(count);
    for k in 0..count {
        let level = start_dbfs + k as f64 * step_db;
        let a = amplitude_of(level);
        let start = x.len();
        x.extend((start..start + dwell).map(|i| a * (w * i as f64).sin()));
        table.push(Step {
            level_dbfs: level,
            start_sample: lead + start,
            analyse_from_sample: lead + start + settle,
            analyse_to_sample: lead + start + dwell,
        });
    }
    let f = secs(c, c.fade_s);
    fade(&mut x, f, f);
    // The fade-out must not reach into what the last step analyses.
    if let Some(last) = table.last_mut() {
        last.analyse_to_sample = last
            .analyse_to_sample
            .saturating_sub(f)
            .max(last.analyse_from_sample + 1);
    }
    let mut cc = c.clone();
    cc.level_dbfs = start_dbfs;
    Ok(finish(
        &cc,
        Kind::Steps {
            frequency_hz,
            start_dbfs,
            stop_dbfs,
            step_db,
            dwell_s,
            settle_s,
            steps: table,
        },
        x,
    ))
}

/// The sweep's default top at `rate_hz`: 0.45 x the rate (inside the converters' passband), at
/// most 40 kHz.
pub fn default_sweep_stop_hz(rate_hz: u32) -> f64 {
    (0.45 * rate_hz as f64).min(40_000.0)
}

/// The synchronized exponential sweep from `start_hz` to `stop_hz` lasting about `seconds`
/// (Novak et al. 2015): `L = round(f1 T / ln(f2/f1)) / f1` makes `f1 L` an integer, so the n-th
/// harmonic of the sweep is the sweep itself advanced by `L ln n` and the harmonic responses keep
/// their phases.
pub fn sweep(c: &Common, start_hz: f64, stop_hz: f64, seconds: f64) -> Result<Stimulus> {
    check_common(c)?;
    check_freq(c, "--from", start_hz)?;
    check_freq(c, "--to", stop_hz)?;
    if stop_hz <= start_hz * 1.5 {
        return Err(Error::InvalidSetting(format!(
            "--to ({stop_hz} Hz) must be well above --from ({start_hz} Hz)"
        )));
    }
    check_seconds(c, "--seconds", seconds)?;
    if start_hz < 1.0 {
        return Err(Error::InvalidSetting(format!(
            "--from {} Hz: a sweep starts at 1 Hz or above",
            crate::error::shown(start_hz)
        )));
    }
    let ln = (stop_hz / start_hz).ln();
    let rate_s = (start_hz * seconds / ln).round().max(1.0) / start_hz;
    let duration_s = rate_s * ln;
    // Synchronising rounds the length; it must still fit what a stimulus may last.
    check_seconds(c, "the synchronised sweep's length", duration_s)?;
    let fs = c.sample_rate_hz as f64;
    let n = (duration_s * fs).floor() as usize;
    if n < 1024 {
        return Err(Error::InvalidSetting(format!(
            "a {duration_s:.3} s sweep is too short; use --seconds 1 or more"
        )));
    }
    let amp = amplitude_of(c.level_dbfs);
    let mut x: Vec<f64> = (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            // phase 2 pi f1 L e^{t/L}; subtracting the integer 2 pi f1 L keeps it small at t = 0
            // without changing the sine (f1 L is an integer).
            let ph = 2.0 * PI * start_hz * rate_s * (t / rate_s).exp_m1();
            amp * ph.sin()
        })
        .collect();
    // Fade-in: `fade_s` when given, else three periods of the start frequency (at most a tenth of
    // the sweep); fade-out: the last 2 ms. Both lie outside the band a sweep is meant to measure.
    let fade_in_s = if c.fade_s > 0.0 {
        c.fade_s
    } else {
        (3.0 / start_hz).min(duration_s / 10.0)
    };
    let fade_out_s = 0.002f64.min(duration_s / 10.0);
    fade(&mut x, secs(c, fade_in_s), secs(c, fade_out_s));
    Ok(finish(
        c,
        Kind::Sweep {
            start_hz,
            stop_hz,
            rate_s,
            duration_s: n as f64 / fs,
            fade_in_s,
            fade_out_s,
        },
        x,
    ))
}

/// A two-tone pair: `ratio` is the low tone's amplitude over the high tone's (4 for the
/// modulation method, 1 for difference-frequency). The level is the pair's RMS.
pub fn two_tone(
    c: &Common,
    method: TwoToneMethod,
    low_hz: f64,
    high_hz: f64,
    ratio: f64,
    seconds: f64,
) -> Result<Stimulus> {
    check_common(c)?;
    check_freq(c, "--low", low_hz)?;
    check_freq(c, "--high", high_hz)?;
    if high_hz <= low_hz {
        return Err(Error::InvalidSetting(format!(
            "--high ({high_hz} Hz) must be above --low ({low_hz} Hz)"
        )));
    }
    if !(ratio.is_finite() && ratio > 0.0) {
        return Err(Error::InvalidSetting(format!(
            "--ratio must be above 0, got {ratio}"
        )));
    }
    check_seconds(c, "--seconds", seconds)?;
    // RMS of the pair = sqrt((aL^2 + aH^2) / 2) = 10^(L/20) / sqrt 2
    let total = amplitude_of(c.level_dbfs);
    let a_high = total / (1.0 + ratio * ratio).sqrt();
    let a_low = ratio * a_high;
    if a_low + a_high > 1.0 {
        return Err(Error::InvalidSetting(format!(
            "at {} dBFS the pair's peak ({:.3}) passes full scale; lower --level to {:.1} dBFS or less",
            c.level_dbfs,
            a_low + a_high,
            c.level_dbfs + 20.0 * (1.0 / (a_low + a_high)).log10()
        )));
    }
    let n = secs(c, seconds);
    if n == 0 {
        return Err(Error::InvalidSetting("--seconds must be above 0".into()));
    }
    let fs = c.sample_rate_hz as f64;
    let (wl, wh) = (2.0 * PI * low_hz / fs, 2.0 * PI * high_hz / fs);
    let mut x: Vec<f64> = (0..n)
        .map(|i| a_low * (wl * i as f64).sin() + a_high * (wh * i as f64).sin())
        .collect();
    let f = secs(c, c.fade_s);
    fade(&mut x, f, f);
    Ok(finish(
        c,
        Kind::TwoTone {
            method,
            low_hz,
            high_hz,
            ratio,
        },
        x,
    ))
}
