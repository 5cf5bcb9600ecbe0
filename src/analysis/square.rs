//! Square-wave response: the scope test of an amplifier, in figures.
//!
//! One period of the amplifier's output to a square wave is built from its Fourier series, either
//! measured from a recording of `ampnote generate square` (the harmonics of the fundamental,
//! read over a whole number of periods of the steady span: every period averaged, at any time
//! resolution) or predicted from a measured response (a sweep): the square's own series times the
//! response at each harmonic, the same Gaussian edge as the generated square. On that period:
//!
//! - the **step** is the height of the rising edge: the top's level extrapolated back to the edge
//!   minus the base's level extrapolated forward to it (each a straight line, in log terms when
//!   it stays on one side of the midline, fitted over the later part of its half period: from 55 %, and short of the next
//!   edge by three rise times, where ringing has died away);
//! - **rise time** 10-90 % of the step; the amplifier's own is the measured one less the
//!   stimulus's own in quadrature (rise times of cascaded stages add as root-sum-square, exact
//!   for Gaussian responses; common practice);
//! - **overshoot**: the highest point after the edge over the top's line, in % of the step;
//! - **ringing**: what the top does about its line after the overshoot: its frequency from the
//!   zero crossings and its decay time from the successive peaks (exponential, fitted);
//! - **settling**: from the edge's midpoint until the top stays within 1 % of the step of its
//!   line;
//! - **tilt**: how far the top droops over the half period, in % of its level above the
//!   midline at the edge (a first-order high-pass of time constant tau gives 1 - exp(-T/(2 tau))).

use crate::analysis::sweep::{interpolate_log, ResponseResult};
use crate::error::{Error, Result};
use realfft::num_complex::Complex64;
use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

/// The figures of one square wave.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct SquareFigures {
    pub frequency_hz: f64,
    /// The amplifier's own 10-90 % rise time (the measured one less the stimulus's edge in
    /// quadrature); `null` when the measured edge is less than [`RESOLVED_RATIO`] times the
    /// stimulus's: the amplifier's edge is then too fast for this stimulus to show (the
    /// quadrature rule holds for edges that compose like Gaussians; a small peaking can even
    /// make the measured edge faster than the stimulus's).
    pub rise_time_us: Option<f64>,
    /// 10-90 % of the step as measured, stimulus edge included.
    pub measured_rise_time_us: f64,
    /// The stimulus's own 10-90 % rise time (its Gaussian edge).
    pub stimulus_rise_time_us: f64,
    pub overshoot_percent: f64,
    /// `null` when the top does not swing about its line at least once (no ringing).
    pub ringing_hz: Option<f64>,
    /// The ringing's exponential decay time constant.
    pub ringing_decay_us: Option<f64>,
    /// From the edge's midpoint until the top stays within 1 % of the step; `null` when it never
    /// settles within the half period.
    pub settling_us: Option<f64>,
    pub tilt_percent: f64,
    /// One period, the rising edge in the middle: `(microseconds from the edge, level)`, the level
    /// in units of half the step about the midline (so a perfect square reads -1 then +1).
    pub trace: Vec<(f64, f64)>,
}

/// How a square's response was obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SquareSource {
    /// From a recording of a square wave.
    Recorded,
    /// Predicted from a measured response (a sweep).
    FromSweep,
}

/// The square-wave result of one channel.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct SquareResult {
    pub channel: usize,
    pub source: SquareSource,
    pub squares: Vec<SquareFigures>,
    pub warnings: Vec<crate::warning::Warning>,
}

/// Ringing peaks are counted while they stand above 0.3 % of the step (our choice: below it the
/// top's fitted line, not the ringing, decides the sign).
const RINGING_FLOOR: f64 = 0.003;

/// Points across one period of the reconstructed trace kept in the result (the figures are read
/// on the fine grid; this is what a chart draws).
const TRACE_POINTS: usize = 1000;

/// The period rebuilt from its Fourier series `c` (`c[n]`: the complex amplitude of harmonic
/// n, `c[0]` the mean; the waveform is `c0 + sum Re(c[n] e^{j n theta})`), on `m` points.
fn period_from_series(c: &[Complex64], m: usize) -> Vec<f64> {
    let mut planner = realfft::RealFftPlanner::<f64>::new();
    let inv = planner.plan_fft_inverse(m);
    let mut spec = inv.make_input_vec();
    for (k, v) in c.iter().enumerate().take(m / 2) {
        // irfft sums X[k] e^{+j 2 pi k i / m} over k and its mirror: half of each amplitude.
        spec[k] = if k == 0 { *v } else { v * 0.5 };
    }
    spec[0].im = 0.0;
    if let Some(last) = spec.last_mut() {
        last.im = 0.0;
    }
    let mut out = inv.make_output_vec();
    inv.process(&mut spec, &mut out)
        .expect("sizes match the plan");
    out
}

/// The measured edge must be at least this many times the stimulus's for the amplifier's own
/// rise to be read from it (our choice: the amplifier's edge is then two thirds of the
/// stimulus's or more, sqrt(1.2^2 - 1) = 0.66, where a departure from the quadrature rule of a
/// few percent of the measured edge moves the reading by a similar share, not by multiples).
pub const RESOLVED_RATIO: f64 = 1.2;

/// A least-squares line `a + b t` through `(t, y)`.
fn line(t: &[f64], y: &[f64]) -> (f64, f64) {
    let n = t.len() as f64;
    let (mt, my) = (t.iter().sum::<f64>() / n, y.iter().sum::<f64>() / n);
    let (mut sxy, mut sxx) = (0.0, 0.0);
    for (a, b) in t.iter().zip(y) {
        sxy += (a - mt) * (b - my);
        sxx += (a - mt) * (a - mt);
    }
    let b = if sxx > 0.0 { sxy / sxx } else { 0.0 };
    (my - b * mt, b)
}

/// A level along a half period: a straight line, in log terms about the midline (an exponential
/// droop, as a coupling network gives) when `log`.
#[derive(Debug, Clone, Copy)]
struct Level {
    a: f64,
    b: f64,
    mid: f64,
    log: bool,
    sign: f64,
}

impl Level {
    /// Fitted over `from..to`, in log terms when every point there lies on one side of the
    /// midline by more than 1 % of `scale`.
    fn fit(y: &[f64], from: usize, to: usize, mid: f64, scale: f64) -> Level {
        let idx: Vec<f64> = (from..to).map(|i| i as f64).collect();
        let vals: Vec<f64> = (from..to).map(|i| y[i] - mid).collect();
        let positive = vals.iter().all(|v| *v > 0.01 * scale);
        let negative = vals.iter().all(|v| *v < -0.01 * scale);
        let (log, sign) = (positive || negative, if negative { -1.0 } else { 1.0 });
        let fitted: Vec<f64> = if log {
            vals.iter().map(|v| (v * sign).ln()).collect()
        } else {
            vals
        };
        let (a, b) = line(&idx, &fitted);
        Level {
            a,
            b,
            mid,
            log,
            sign,
        }
    }

    /// The level at point `i`.
    fn at(&self, i: f64) -> f64 {
        let v = self.a + self.b * i;
        self.mid + if self.log { self.sign * v.exp() } else { v }
    }
}

/// The rising edge of a period whose rising edge is in the middle, and the levels either side.
struct Edge {
    top: Level,
    top_start: f64,
    top_end: f64,
    step: f64,
    /// The point before the 50 % crossing, and the 10, 50 and 90 % crossings (in points).
    c50: usize,
    t10: f64,
    t50: f64,
    t90: f64,
}

/// The edge of `y` (its rising edge at the middle), the levels fitted over the last part of each
/// half period short of the next edge by `guard` points (at least a tenth of the half period).
fn edge(y: &[f64], mid: f64, range: f64, guard: usize) -> Result<Edge> {
    let m = y.len();
    let (e, half) = (m / 2, m / 2);
    let to = half.saturating_sub(guard).max(half / 10 + 1);
    let from = (half * 55 / 100).min(to - half / 10);
    let base = Level::fit(y, from, to, mid, range);
    let top = Level::fit(y, e + from, e + to, mid, range);
    let (top_start, top_end, base_end) = (top.at(e as f64), top.at(m as f64), base.at(e as f64));
    let step = top_start - base_end;
    if step.is_nan() || step <= 0.0 {
        return Err(Error::WrongKind {
            channel: 0,
            found: "no rising edge stands out of the period".into(),
            next: "Check that the capture holds the square wave.".into(),
        });
    }
    // Crossing of `level` between i and i+1, interpolated.
    let cross = |i: usize, level: f64| {
        let (a, b) = (y[i], y[i + 1]);
        i as f64 + if b != a { (level - a) / (b - a) } else { 0.0 }
    };
    let (l10, l50, l90) = (
        base_end + 0.1 * step,
        base_end + 0.5 * step,
        base_end + 0.9 * step,
    );
    // The 50 % crossing nearest the steepest point, then 10 % backward and 90 % forward.
    let mut c50 = e;
    while c50 > 1 && y[c50] > l50 {
        c50 -= 1;
    }
    while c50 + 2 < m && y[c50 + 1] < l50 {
        c50 += 1;
    }
    let t50 = cross(c50, l50);
    let mut i = c50;
    while i > 1 && y[i] > l10 {
        i -= 1;
    }
    let t10 = cross(i, l10);
    let mut i = c50;
    while i + 2 < m && y[i + 1] < l90 {
        i += 1;
    }
    let t90 = cross(i, l90);
    Ok(Edge {
        top,
        top_start,
        top_end,
        step,
        c50,
        t10,
        t50,
        t90,
    })
}

/// The figures of one period `y` (errors name channel 0: the caller knows the channel) (`m` points over the period `1 / f0`) of the response to a
/// square whose own rise time is `stimulus_rise_s`.
pub fn figures(y: &[f64], f0: f64, stimulus_rise_s: f64) -> Result<SquareFigures> {
    let m = y.len();
    let dt = 1.0 / f0 / m as f64;
    let mid = y.iter().sum::<f64>() / m as f64;
    let range =
        y.iter().fold(f64::MIN, |a, &v| a.max(v)) - y.iter().fold(f64::MAX, |a, &v| a.min(v));
    if !(range > 0.0 && range.is_finite()) {
        return Err(Error::WrongKind {
            channel: 0,
            found: "the square wave's period is flat".into(),
            next: "Check that the square reaches this input.".into(),
        });
    }
    // The rising edge: the steepest rise; put it in the middle of the period.
    let steepest = (0..m)
        .max_by(|&a, &b| (y[(a + 1) % m] - y[a]).total_cmp(&(y[(b + 1) % m] - y[b])))
        .expect("a period");
    let shift = (steepest + m - m / 2) % m;
    let y: Vec<f64> = (0..m).map(|i| y[(i + shift) % m]).collect();
    let e = m / 2;
    let half = m / 2;
    // The top's and base's lines, fitted short of the next edge by `guard` points: three rise
    // times (a slow edge's foot starts well before its midpoint), at least 5 % of the half
    // period. First the stimulus's own rise (the amplifier only slows it), then the measured
    // one, until the guard settles.
    let guard_for = |rise_points: f64| (half / 20).max((3.0 * rise_points).ceil() as usize);
    let mut guard = guard_for(stimulus_rise_s / dt);
    let mut found = edge(&y, mid, range, guard)?;
    for _ in 0..4 {
        let next = guard_for(found.t90 - found.t10);
        if next == guard {
            break;
        }
        guard = next;
        found = edge(&y, mid, range, guard)?;
    }
    // The levels need room: the edge and its guard at most 3/4 of the half period, and the
    // crossings in order inside the period.
    let rise = (found.t90 - found.t10) * dt;
    if guard > half * 3 / 4
        || !(0.0 < found.t10 && found.t10 < found.t50 && found.t50 < found.t90)
        || found.t90 >= m as f64
    {
        return Err(Error::WrongKind {
            channel: 0,
            found: format!(
                "the {f0} Hz square's edge could not be read apart from its levels (its rise takes about {:.0} us of a {:.0} us half period)",
                rise.max(0.0) * 1e6,
                0.5e6 / f0
            ),
            next: "Use a lower square frequency, or check that the capture holds the square wave.".into(),
        });
    }
    let (top, step, c50, t50) = (found.top, found.step, found.c50, found.t50);
    let (top_start, top_end, t10, t90) = (found.top_start, found.top_end, found.t10, found.t90);
    let measured_rise = (t90 - t10) * dt;
    // Overshoot: the highest point over the top's line in the first half of the high half.
    let (peak_i, over) = (c50..e + half / 2)
        .map(|i| (i, y[i] - top.at(i as f64)))
        .max_by(|a, b| a.1.total_cmp(&b.1))
        .unwrap_or((c50, 0.0));
    let overshoot_percent = 100.0 * over.max(0.0) / step;
    // Settling: the last point of the high half (short of the last 5 %, the next edge's) off
    // the line by more than 1 % of the step.
    let settled_from = (c50..e + half * 95 / 100)
        .rev()
        .find(|&i| (y[i] - top.at(i as f64)).abs() > 0.01 * step)
        .map(|i| i + 1);
    let settling_us = settled_from
        .filter(|&i| i < e + half * 95 / 100)
        .map(|i| (i as f64 - t50) * dt * 1e6);
    // Ringing: sign changes of the top about its line after the peak, while they stand above
    // 0.1 % of the step.
    let r: Vec<f64> = (peak_i..e + half * 95 / 100)
        .map(|i| y[i] - top.at(i as f64))
        .collect();
    let mut zeros = Vec::new();
    for k in 0..r.len().saturating_sub(1) {
        if (r[k] > 0.0) != (r[k + 1] > 0.0) {
            let t = peak_i as f64 + k as f64 + r[k] / (r[k] - r[k + 1]);
            zeros.push(t);
        }
    }
    // The extreme between successive zero crossings, while it stands out of what the top's
    // line can be trusted to (see RINGING_FLOOR).
    let mut extremes: Vec<(f64, f64)> = Vec::new();
    let mut start = peak_i as f64;
    for &z in &zeros {
        let (a, b) = (start as usize, z as usize);
        if b > a {
            let (k, v) = (a..=b)
                .map(|i| (i, (y[i] - top.at(i as f64)).abs()))
                .max_by(|p, q| p.1.total_cmp(&q.1))
                .expect("a stretch");
            if v > RINGING_FLOOR * step {
                extremes.push((k as f64, v));
            } else {
                break;
            }
        }
        start = z;
    }
    let ringing = extremes.len() >= 3;
    let ringing_hz = ringing.then(|| {
        let n = extremes.len() - 1;
        n as f64 / (2.0 * (extremes[n].0 - extremes[0].0) * dt)
    });
    let ringing_decay_us = if ringing {
        let t: Vec<f64> = extremes.iter().map(|p| p.0 * dt * 1e6).collect();
        let l: Vec<f64> = extremes.iter().map(|p| p.1.ln()).collect();
        let (_, slope) = line(&t, &l);
        (slope < 0.0).then(|| -1.0 / slope)
    } else {
        None
    };
    let tilt_percent = 100.0 * (top_start - top_end) / (top_start - mid);
    let stim = stimulus_rise_s;
    let rise_time_us = (measured_rise > stim * RESOLVED_RATIO)
        .then(|| (measured_rise * measured_rise - stim * stim).sqrt() * 1e6);
    let every = (m / TRACE_POINTS).max(1);
    let trace = (0..m)
        .step_by(every)
        .map(|i| ((i as f64 - t50) * dt * 1e6, (y[i] - mid) / (step / 2.0)))
        .collect();
    Ok(SquareFigures {
        frequency_hz: f0,
        rise_time_us,
        measured_rise_time_us: measured_rise * 1e6,
        stimulus_rise_time_us: stim * 1e6,
        overshoot_percent,
        ringing_hz,
        ringing_decay_us,
        settling_us,
        tilt_percent,
        trace,
    })
}

/// A square whose edge (10-90 %, `rise_s`) takes more than a quarter of its half period has
/// too few harmonics to show overshoot, settling or tilt apart (our choice: the edge's own
/// width then blurs them).
fn check_square(f0: f64, rise_s: f64) -> Result<()> {
    let half = 0.5 / f0;
    if rise_s > half / 4.0 {
        return Err(Error::SquareTooFast {
            frequency_hz: f0,
            edge_us: rise_s * 1e6,
            half_us: half * 1e6,
            max_hz: 0.5 / (4.0 * rise_s),
        });
    }
    Ok(())
}

/// Points on the rebuilt period: enough for 0.5 us steps or 8 per harmonic, a power of two,
/// at most 2^20.
fn grid(f0: f64, harmonics: usize) -> usize {
    let want = ((1.0 / f0) / 0.5e-6).max(8.0 * harmonics as f64);
    (want as usize).next_power_of_two().clamp(1024, 1 << 20)
}

/// The square response at `f0` predicted from a measured response `r` (magnitude and phase with
/// the latency removed, interpolated in log frequency between its points): the Gaussian-edged
/// square of bandwidth `bandwidth_hz` (odd harmonics 4 / (pi n) times the Gaussian) through it,
/// up to the response's top frequency (the Gaussian must be negligible there; see
/// [`crate::signal::stimulus::square_bandwidth`]).
pub fn from_response(r: &ResponseResult, f0: f64, bandwidth_hz: f64) -> Result<SquareFigures> {
    check_square(f0, crate::signal::stimulus::gaussian_rise_s(bandwidth_hz))?;
    let top = r.points.last().map_or(0.0, |p| p.frequency_hz);
    let bottom = r.points.first().map_or(f64::INFINITY, |p| p.frequency_hz);
    if f0 < bottom {
        return Err(Error::InvalidSetting(format!(
            "a {f0} Hz square needs the response at {f0} Hz, but the sweep starts at {bottom:.1} Hz; sweep from lower down"
        )));
    }
    let mag: Vec<(f64, f64)> = r
        .points
        .iter()
        .map(|p| (p.frequency_hz, p.magnitude_db))
        .collect();
    // Phase unwrapped along the points so the interpolation does not jump.
    let mut unwrapped = Vec::with_capacity(r.points.len());
    let mut last: Option<f64> = None;
    for p in &r.points {
        let mut ph = p.phase_deg;
        if let Some(l) = last {
            ph -= 360.0 * ((ph - l) / 360.0).round();
        }
        unwrapped.push((p.frequency_hz, ph));
        last = Some(ph);
    }
    let sigma = crate::signal::stimulus::gaussian_sigma_s(bandwidth_hz);
    let n_max = (top / f0).floor() as usize;
    let mut c = vec![Complex64::new(0.0, 0.0); n_max + 1];
    for (n, slot) in c.iter_mut().enumerate().skip(1).step_by(2) {
        let f = n as f64 * f0;
        let g = (-2.0 * PI * PI * sigma * sigma * f * f).exp();
        let h = Complex64::from_polar(
            10f64.powf(interpolate_log(&mag, f) / 20.0),
            interpolate_log(&unwrapped, f).to_radians(),
        );
        // sin(n theta) = Re(-j e^{j n theta}).
        *slot = Complex64::new(0.0, -4.0 / (PI * n as f64)) * g * h;
    }
    let y = period_from_series(&c, grid(f0, n_max));
    figures(
        &y,
        f0,
        crate::signal::stimulus::gaussian_rise_s(bandwidth_hz),
    )
}

/// The square response measured from a recording: `x` the steady span of the capture (whole
/// periods of a square at about `f0`; `f0_measured` the fundamental's frequency read from it,
/// which follows the recorder's clock), `fs` its rate, `bandwidth_hz` the generated square's.
/// The harmonics are read over the whole number of periods that best fits a whole number of
/// samples (rectangular window: every harmonic then sits on a bin).
pub fn from_recording(
    x: &[f64],
    fs: f64,
    f0_measured: f64,
    bandwidth_hz: f64,
) -> Result<SquareFigures> {
    check_square(
        f0_measured,
        crate::signal::stimulus::gaussian_rise_s(bandwidth_hz),
    )?;
    let p = fs / f0_measured;
    let max_k = (x.len() as f64 / p).floor() as usize;
    if max_k < 4 {
        return Err(Error::InvalidSetting(format!(
            "the square's steady part holds {max_k} period(s); record at least 4 (one second is plenty)"
        )));
    }
    // The number of periods (at least 3/4 of what fits) whose length is closest to whole samples.
    let k = ((max_k * 3 / 4).max(4)..=max_k)
        .min_by(|&a, &b| {
            let fa = (a as f64 * p - (a as f64 * p).round()).abs();
            let fb = (b as f64 * p - (b as f64 * p).round()).abs();
            fa.total_cmp(&fb)
        })
        .expect("a range");
    let n = (k as f64 * p).round() as usize;
    let mut planner = realfft::RealFftPlanner::<f64>::new();
    let fwd = planner.plan_fft_forward(n);
    let mut buf = x[..n].to_vec();
    let mut spec = fwd.make_output_vec();
    fwd.process(&mut buf, &mut spec)
        .expect("sizes match the plan");
    let harmonics = (spec.len() - 1) / k;
    let c: Vec<Complex64> = (0..=harmonics)
        .map(|h| {
            let v = spec[h * k] / n as f64;
            if h == 0 {
                v
            } else {
                v * 2.0
            }
        })
        .collect();
    let y = period_from_series(&c, grid(f0_measured, harmonics));
    figures(
        &y,
        f0_measured,
        crate::signal::stimulus::gaussian_rise_s(bandwidth_hz),
    )
}
