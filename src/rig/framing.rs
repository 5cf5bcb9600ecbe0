//! What a live rig plays around every stimulus, and how it checks what came back.
//!
//! A real interface gives no promise that the capture lines up with the stimulus, or that no
//! buffer was lost on the way: some sound-server routes drop buffers without reporting them. So
//! every stimulus is framed by two short low-level chirps (the *markers*):
//!
//! ```text
//! [guard][marker][gap][ stimulus ][gap][marker][guard]
//! ```
//!
//! Cross-correlating the capture with the marker finds the first marker (the latency, to a
//! fraction of a sample, and the polarity) and then the second. Their distance in the capture must
//! equal their distance as played: frames lost on the way shorten it, frames of silence slipped
//! in lengthen it, and a small steady difference is clock drift between output and input. Holes
//! that keep the length (a buffer of zeros in place of the data) are found by [`find_holes`].

use crate::analysis::spectrum::{fast_length_up, SpectrumPlanner};
use realfft::num_complex::Complex;

/// Peak level of the marker chirp: -30 dBFS, low enough for any amplifier at any setting.
pub const MARKER_PEAK: f64 = 0.0316;
/// Marker length and band: a 30 ms exponential chirp from 400 Hz to 6 kHz, inside the band of
/// any audio amplifier, tapered at both ends.
const MARKER_S: f64 = 0.030;
const MARKER_F0: f64 = 400.0;
const MARKER_F1: f64 = 6000.0;
/// Silence before the first marker, between marker and stimulus, and after the last marker.
const GUARD_S: f64 = 0.05;
const GAP_S: f64 = 0.12;

/// The marker chirp at `rate` Hz.
pub fn marker(rate: u32) -> Vec<f64> {
    let fs = rate as f64;
    let n = (MARKER_S * fs).round() as usize;
    let t_total = n as f64 / fs;
    let k = (MARKER_F1 / MARKER_F0).ln();
    let taper = n / 5;
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            // exponential sweep phase: 2 pi f0 T / ln(f1/f0) (e^{t k / T} - 1)
            let ph = 2.0 * std::f64::consts::PI * MARKER_F0 * t_total / k
                * ((t * k / t_total).exp() - 1.0);
            let w = if i < taper {
                0.5 - 0.5 * (std::f64::consts::PI * i as f64 / taper as f64).cos()
            } else if i >= n - taper {
                0.5 - 0.5 * (std::f64::consts::PI * (n - 1 - i) as f64 / taper as f64).cos()
            } else {
                1.0
            };
            MARKER_PEAK * w * ph.sin()
        })
        .collect()
}

/// A stimulus with its markers, ready to play.
#[derive(Debug, Clone)]
pub struct Framed {
    pub signal: Vec<f64>,
    pub marker: Vec<f64>,
    /// Index of the first marker, the stimulus and the second marker in `signal`.
    pub first_marker: usize,
    pub stimulus_start: usize,
    pub stimulus_len: usize,
    pub second_marker: usize,
}

/// Frame `stimulus` (at `rate` Hz) between two markers.
pub fn frame(stimulus: &[f64], rate: u32) -> Framed {
    let fs = rate as f64;
    let m = marker(rate);
    let guard = (GUARD_S * fs) as usize;
    let gap = (GAP_S * fs) as usize;
    let first_marker = guard;
    let stimulus_start = first_marker + m.len() + gap;
    let second_marker = stimulus_start + stimulus.len() + gap;
    let total = second_marker + m.len() + 2 * guard;
    let mut signal = vec![0.0; total];
    signal[first_marker..first_marker + m.len()].copy_from_slice(&m);
    signal[stimulus_start..stimulus_start + stimulus.len()].copy_from_slice(stimulus);
    signal[second_marker..second_marker + m.len()].copy_from_slice(&m);
    Framed {
        signal,
        marker: m,
        first_marker,
        stimulus_start,
        stimulus_len: stimulus.len(),
        second_marker,
    }
}

/// Cross-correlation `c[k] = sum_i m[i] x[k + i]` for every `k` where `m` fits inside `x`.
pub fn correlate(x: &[f64], m: &[f64]) -> Vec<f64> {
    if m.is_empty() || x.len() < m.len() {
        return Vec::new();
    }
    // One planner for every correlation: the lengths repeat from run to run, so each is planned
    // once per process.
    static PLANNER: std::sync::OnceLock<SpectrumPlanner> = std::sync::OnceLock::new();
    let planner = PLANNER.get_or_init(SpectrumPlanner::new);
    let n = fast_length_up(x.len() + m.len());
    let fwd = planner.forward(n);
    let inv = planner.inverse(n);
    let mut a = vec![0.0; n];
    a[..x.len()].copy_from_slice(x);
    let mut b = vec![0.0; n];
    b[..m.len()].copy_from_slice(m);
    let mut fa = fwd.make_output_vec();
    let mut fb = fwd.make_output_vec();
    fwd.process(&mut a, &mut fa).expect("sizes match");
    fwd.process(&mut b, &mut fb).expect("sizes match");
    for (p, q) in fa.iter_mut().zip(&fb) {
        *p *= q.conj();
    }
    // The inverse of a real signal's spectrum needs real DC and Nyquist bins.
    fa[0] = Complex::new(fa[0].re, 0.0);
    if let Some(last) = fa.last_mut() {
        *last = Complex::new(last.re, 0.0);
    }
    let mut out = vec![0.0; n];
    inv.process(&mut fa, &mut out).expect("sizes match");
    let scale = 1.0 / n as f64;
    out.truncate(x.len() - m.len() + 1);
    out.iter_mut().for_each(|v| *v *= scale);
    out
}

/// One marker found in a capture.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MarkerHit {
    /// Position of the marker's first sample in the capture, to a fraction of a sample.
    pub position: f64,
    /// The capture's gain for the marker: the correlation peak over the marker's energy (1 for a
    /// straight wire; negative when the polarity is inverted).
    pub gain: f64,
    /// Normalised correlation there (1 for an exact, scaled copy of the marker).
    pub match_quality: f64,
}

/// A marker is taken as found where the normalised correlation reaches this.
pub const MIN_MATCH: f64 = 0.5;

/// Which marker a search wants.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Pick {
    /// The earliest place the marker matches (the first marker: the stimulus comes after it).
    Earliest,
    /// The best match (the second marker, searched near where it should be).
    Best,
}

/// Find the marker in `x[from..to]` (clamped to `x`): the normalised correlation (the correlation
/// over the marker's and the capture's local energy) tells a marker from a loud stimulus, which
/// correlates with a chirp too but never like a copy of it.
pub fn find_marker(
    x: &[f64],
    marker: &[f64],
    from: usize,
    to: usize,
    pick: Pick,
) -> Option<MarkerHit> {
    let to = to.min(x.len());
    let m = marker.len();
    if to <= from || to - from < m {
        return None;
    }
    let seg = &x[from..to];
    let c = correlate(seg, marker);
    let em: f64 = marker.iter().map(|v| v * v).sum();
    // Local energy of the capture under the marker, by a running sum, with a floor far below any
    // real interface's noise so digital silence does not divide by zero.
    let floor = m as f64 * 1e-14;
    let mut ex: f64 = seg[..m].iter().map(|v| v * v).sum();
    let mut ncc = Vec::with_capacity(c.len());
    for (k, ck) in c.iter().enumerate() {
        if k > 0 {
            ex += seg[k + m - 1] * seg[k + m - 1] - seg[k - 1] * seg[k - 1];
        }
        ncc.push(ck / (em * ex.max(0.0) + em * floor).sqrt());
    }
    let k = match pick {
        Pick::Earliest => {
            let first = ncc.iter().position(|v| v.abs() >= MIN_MATCH)?;
            // The peak of the match that starts there (within a marker's length).
            (first..(first + m).min(c.len())).max_by(|&a, &b| c[a].abs().total_cmp(&c[b].abs()))?
        }
        Pick::Best => {
            let (k, v) = ncc
                .iter()
                .enumerate()
                .max_by(|a, b| a.1.abs().total_cmp(&b.1.abs()))?;
            if v.abs() < MIN_MATCH {
                return None;
            }
            k
        }
    };
    // Parabolic interpolation on |c| around the peak.
    let frac = if k > 0 && k + 1 < c.len() {
        let (l, m0, r) = (c[k - 1].abs(), c[k].abs(), c[k + 1].abs());
        let d = l - 2.0 * m0 + r;
        if d.abs() > 0.0 {
            (0.5 * (l - r) / d).clamp(-0.5, 0.5)
        } else {
            0.0
        }
    } else {
        0.0
    };
    Some(MarkerHit {
        position: (from + k) as f64 + frac,
        gain: c[k] / em,
        match_quality: ncc[k].abs(),
    })
}

/// What the two markers say about one capture.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Located {
    /// Capture index minus played index of the first marker (latency, in samples).
    pub latency_samples: f64,
    /// Gain and polarity at the first marker.
    pub gain: f64,
    /// Second-marker distance in the capture minus as played, samples (0 for a perfect capture).
    pub slip_samples: f64,
    /// The slip as clock drift, parts per million (input clock relative to output clock).
    pub drift_ppm: f64,
    /// The latency less the whole samples the stimulus was cut at (-0.5 to 0.5 for the first
    /// capture of a path; [`assess_near`] keeps later ones on its grid). 0 until [`assess`].
    pub residual: f64,
}

/// Why a capture could not be located.
#[derive(Debug, Clone, PartialEq)]
pub enum LocateError {
    /// The first marker is not there: nothing (or something else) came back on this input.
    NoSignal,
    /// The second marker is missing: the capture stopped early or lost its end.
    NoEnd,
}

/// Largest latency searched for, seconds.
pub const MAX_LATENCY_S: f64 = 1.0;

/// Find both markers of `framed` in `capture` (sampled at `rate`).
pub fn locate(capture: &[f64], framed: &Framed, rate: u32) -> Result<Located, LocateError> {
    let fs = rate as f64;
    let m = &framed.marker;
    let search_to = framed.first_marker + (MAX_LATENCY_S * fs) as usize + m.len();
    let first =
        find_marker(capture, m, 0, search_to, Pick::Earliest).ok_or(LocateError::NoSignal)?;
    let played = (framed.second_marker - framed.first_marker) as f64;
    // The second marker is searched within a slack that takes a lost or doubled buffer of up to
    // 8192 frames, or 0.2 % of drift, whichever is more.
    let slack = (8192.0f64).max(0.002 * played) as usize;
    let expect = (first.position + played).round() as usize;
    let second = find_marker(
        capture,
        m,
        expect.saturating_sub(slack),
        expect + slack + m.len(),
        Pick::Best,
    )
    .ok_or(LocateError::NoEnd)?;
    let slip = (second.position - first.position) - played;
    Ok(Located {
        latency_samples: first.position - framed.first_marker as f64,
        gain: first.gain,
        slip_samples: slip,
        drift_ppm: slip / played * 1e6,
        residual: 0.0,
    })
}

/// Largest slip taken as clock drift rather than lost or added frames: 2 samples plus 200 ppm of
/// the marker distance (two interface clocks of +-50 ppm each stay well inside it).
pub fn slip_tolerance(played_samples: usize) -> f64 {
    2.0 + 200e-6 * played_samples as f64
}

/// Runs of the capture that cannot be the amplifier's answer to the stimulus: stretches of at
/// least 8 exact zeros, or 2 ms blocks more than 30 dB below their neighbours' level relative to
/// the stimulus, while the stimulus there is within 30 dB of its own loudest block. `capture` and
/// `stimulus` are aligned (same length). Returns (first sample, length) of each hole.
pub fn find_holes(capture: &[f64], stimulus: &[f64], rate: u32) -> Vec<(usize, usize)> {
    let n = capture.len().min(stimulus.len());
    let mut holes = Vec::new();
    // Exact-zero runs where the stimulus is clearly not silent.
    let mut run_start = None;
    for i in 0..=n {
        let zero = i < n && capture[i] == 0.0 && stimulus[i].abs() > 1e-4;
        match (zero, run_start) {
            (true, None) => run_start = Some(i),
            (false, Some(s)) => {
                if i - s >= 8 {
                    holes.push((s, i - s));
                }
                run_start = None;
            }
            _ => {}
        }
    }
    // Level holes, block by block.
    let block = ((0.002 * rate as f64) as usize).max(16);
    let blocks = n / block;
    if blocks >= 5 {
        let rms = |x: &[f64]| (x.iter().map(|v| v * v).sum::<f64>() / x.len() as f64).sqrt();
        let s: Vec<f64> = (0..blocks)
            .map(|b| rms(&stimulus[b * block..(b + 1) * block]))
            .collect();
        let c: Vec<f64> = (0..blocks)
            .map(|b| rms(&capture[b * block..(b + 1) * block]))
            .collect();
        let loudest = s.iter().cloned().fold(0.0, f64::max);
        let active: Vec<bool> = s.iter().map(|&v| v > loudest * 0.0316).collect();
        let ratio: Vec<f64> = (0..blocks)
            .map(|b| if active[b] { c[b] / s[b] } else { f64::NAN })
            .collect();
        let mut near: Vec<f64> = Vec::with_capacity(21);
        for b in 0..blocks {
            if !active[b] {
                continue;
            }
            // The neighbours' median ratio (10 blocks each side, active ones only).
            near.clear();
            near.extend(
                (b.saturating_sub(10)..(b + 11).min(blocks))
                    .filter(|&j| j.abs_diff(b) > 1 && active[j])
                    .map(|j| ratio[j]),
            );
            if near.len() < 4 {
                continue;
            }
            near.sort_by(f64::total_cmp);
            let med = near[near.len() / 2];
            if ratio[b] < med * 0.0316 {
                holes.push((b * block, block));
            }
        }
    }
    holes.sort_unstable();
    holes.dedup();
    holes
}

/// The verdict on one raw capture of a framed stimulus.
#[derive(Debug, Clone, PartialEq)]
pub enum Verdict {
    /// Whole: the stimulus's part of the capture, aligned, and what the markers said.
    Whole { aligned: Vec<f64>, located: Located },
    /// Something went wrong on the way; the text says what (for the user).
    Broken(String),
}

/// Check a raw capture of `framed` (played at `rate`): both markers present, their distance kept
/// (within [`slip_tolerance`]), no holes, and no gaps the audio layer itself reported
/// (`reported_gaps`: xruns, dropped or late callbacks). A whole capture comes back aligned.
pub fn assess(capture: &[f64], framed: &Framed, rate: u32, reported_gaps: u64) -> Verdict {
    assess_near(capture, framed, rate, reported_gaps, 0.0)
}

/// [`assess`] with the stimulus cut out on the whole-sample grid of an earlier capture of the
/// same path: `residual` is that capture's latency less the whole samples it was cut at
/// ([`Located::residual`], -0.5 to 0.5). Cut by plain rounding, two captures of one path whose
/// latencies sit either side of a half sample (123.49 and 123.51) would land a sample apart,
/// 7.5 degrees at 1 kHz at 48 kHz, and their phases could not be set against each other
/// (zout's two loads). No fractional shift is made: what the amplifier itself does to the phase
/// between two captures (a load's effect on an inductive output) must stay in them, and the
/// markers pass through the amplifier too.
pub fn assess_near(
    capture: &[f64],
    framed: &Framed,
    rate: u32,
    reported_gaps: u64,
    residual: f64,
) -> Verdict {
    let fs = rate as f64;
    let located = match locate(capture, framed, rate) {
        Ok(l) => l,
        Err(LocateError::NoSignal) => {
            return Verdict::Broken("the start marker did not come back on this input: check the connection, the input chosen and the amplifier's power".into())
        }
        Err(LocateError::NoEnd) => {
            return Verdict::Broken(
                "the end marker is missing: the capture lost its end or a long stretch".into(),
            )
        }
    };
    if reported_gaps > 0 {
        return Verdict::Broken(format!(
            "the audio layer reported {reported_gaps} gap(s) (xruns or dropped buffers)"
        ));
    }
    let played = framed.second_marker - framed.first_marker;
    if located.slip_samples.abs() > slip_tolerance(played) {
        return Verdict::Broken(format!(
            "{:.0} frames were {} between the markers ({:.1} ms)",
            located.slip_samples.abs(),
            if located.slip_samples < 0.0 {
                "lost"
            } else {
                "inserted"
            },
            located.slip_samples.abs() / fs * 1e3
        ));
    }
    let start = (located.latency_samples + framed.stimulus_start as f64 - residual).round();
    if start < 0.0 || start as usize + framed.stimulus_len > capture.len() {
        return Verdict::Broken("the capture does not hold the whole stimulus".into());
    }
    let located = Located {
        residual: located.latency_samples + framed.stimulus_start as f64 - start,
        ..located
    };
    let start = start as usize;
    let aligned = capture[start..start + framed.stimulus_len].to_vec();
    let stim = &framed.signal[framed.stimulus_start..framed.stimulus_start + framed.stimulus_len];
    let holes = find_holes(&aligned, stim, rate);
    if let Some(&(at, len)) = holes.first() {
        return Verdict::Broken(format!(
            "{} hole(s) in the capture, the first {len} samples at {:.3} s into the stimulus",
            holes.len(),
            at as f64 / fs
        ));
    }
    Verdict::Whole { aligned, located }
}

/// Where the stimulus starts in a capture whose markers were `located` (every input recorded in
/// the same stream shares it); [`assess`] has checked it lies inside the capture.
pub fn stimulus_start(located: &Located, framed: &Framed) -> usize {
    (located.latency_samples + framed.stimulus_start as f64 - located.residual)
        .round()
        .max(0.0) as usize
}

/// What the pre-flight chirp found wrong.
#[derive(Debug, Clone, PartialEq)]
pub enum PreflightFault {
    /// It came back on another input only (0-based).
    Elsewhere {
        output: usize,
        expected: usize,
        other: usize,
    },
    /// It came back nowhere.
    Nowhere { output: usize, expected: usize },
    /// It came back on the expected input and, within 20 dB, on another one too.
    Shared {
        output: usize,
        expected: usize,
        other: usize,
        relative_db: f64,
    },
}

impl std::fmt::Display for PreflightFault {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match *self {
            PreflightFault::Elsewhere { output, expected, other } => write!(
                f,
                "the chirp sent to output {} came back on input {}, not on input {}: swap the leads, or name the inputs with --inputs",
                output + 1, other + 1, expected + 1
            ),
            PreflightFault::Nowhere { output, expected } => write!(
                f,
                "the chirp sent to output {} did not come back on input {} (nor on any other): check the cables, the attenuator, the amplifier's power and volume",
                output + 1, expected + 1
            ),
            PreflightFault::Shared { output, expected, other, relative_db } => write!(
                f,
                "the chirp sent to output {} reaches input {} too, at {relative_db:.1} dB of input {}: two inputs share one signal (a wiring fault?)",
                output + 1, other + 1, expected + 1
            ),
        }
    }
}

/// Judge the pre-flight: the chirp sent to `output` must come back on input `expected` (both
/// 0-based) and on no other input within 20 dB. `found` holds what [`locate`] found on each
/// input listened to.
pub fn judge_preflight(
    output: usize,
    expected: usize,
    found: &[(usize, Option<Located>)],
) -> Result<Located, PreflightFault> {
    let mine = found
        .iter()
        .find(|(i, _)| *i == expected)
        .and_then(|(_, l)| *l);
    let Some(l) = mine else {
        return Err(match found.iter().find(|(_, l)| l.is_some()) {
            Some(&(other, _)) => PreflightFault::Elsewhere {
                output,
                expected,
                other,
            },
            None => PreflightFault::Nowhere { output, expected },
        });
    };
    for &(other, o) in found {
        if let Some(o) = o.filter(|_| other != expected) {
            if o.gain.abs() > 0.1 * l.gain.abs() {
                return Err(PreflightFault::Shared {
                    output,
                    expected,
                    other,
                    relative_db: 20.0 * (o.gain.abs() / l.gain.abs()).log10(),
                });
            }
        }
    }
    Ok(l)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn correlate_matches_direct_sum() {
        let x: Vec<f64> = (0..500).map(|i| ((i * 7919) % 101) as f64 - 50.0).collect();
        let m: Vec<f64> = (0..37).map(|i| ((i * 31) % 13) as f64 - 6.0).collect();
        let c = correlate(&x, &m);
        assert_eq!(c.len(), x.len() - m.len() + 1);
        for k in [0, 1, 100, 463] {
            let direct: f64 = m.iter().enumerate().map(|(i, v)| v * x[k + i]).sum();
            assert!((c[k] - direct).abs() < 1e-6 * direct.abs().max(1.0));
        }
    }
}
