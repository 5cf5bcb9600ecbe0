//! The steady part of a tone capture, and what else the capture holds.
//!
//! A recorder is started before the player and stopped after it: every real recording has floor
//! before and after the tone, fades at its ends, and sometimes a level still settling. The tone
//! analysis must look only at the part where the tone itself is steady, or the silence and the
//! fades dilute the fundamental and spread it into the THD+N residual.
//!
//! ## Method
//! 1. **Envelope.** Mean square (mean removed) in hops of about 1 ms, then a moving mean over a
//!    whole number of the tone's periods spanning at least 10 ms. The period comes from
//!    up-crossings with hysteresis (at half the loud part's peak) counted where the capture is
//!    loud, so the moving mean of a sine has no ripple beyond what rounding to a hop leaves; the
//!    window takes as many periods as keep that under 1 % (0.043 dB; see `envelope_window`).
//! 2. **Flat stretches.** A hop is flat when the envelope stays within a tolerance over the next
//!    window length; the tolerance follows the envelope's own scatter between disjoint windows
//!    (six robust standard deviations, from the median absolute difference; at least 0.15 dB).
//!    Runs of flat hops lasting 50 ms or more are plateaus; two at the same level whose gap
//!    stays within twice the tolerance of it are one (noise, not a change).
//! 3. **The tone's plateaus** are those within 20 dB of the loudest envelope (a recording's floor
//!    around a tone that the analysis can use lies further down: the tone analysis itself demands
//!    20 dB of signal over noise in one line, far more over the whole band). The longest is the
//!    steady span analysed. Other plateaus at another level (more than 1 dB away) are level
//!    jumps, or, three levels and more, a staircase; dips of more than 6 dB between the tone's
//!    first and last plateau are dropouts.
//! 4. **Frequency.** Up-crossing rates in the first and last quarter of the span tell a steady
//!    tone from a sweep (a change of more than 2 %).
//!
//! Generic over the sample storage, so a long capture kept as 32-bit float is judged in place.
//!
//! Nothing here decides; [`Steadiness`] says what was found and the callers refuse or warn.

use crate::capture::Store;

/// Envelope hop: about 1 ms (our choice: fine enough to place a fade or a dropout to a few ms).
const HOP_S: f64 = 0.001;
/// The envelope's moving mean spans at least this long (and a whole number of periods): 10 ms
/// holds ten periods of 1 kHz and keeps the envelope's noise scatter small (our choice).
const MIN_WINDOW_S: f64 = 0.010;
/// A flat run must last this long to count as a plateau (our choice: five envelope windows; a
/// staircase step lasts far longer, a click far shorter).
const MIN_PLATEAU_S: f64 = 0.050;
/// Plateaus this far below the loudest envelope are the floor, not the tone (see module docs).
const TONE_RANGE_DB: f64 = 20.0;
/// Plateaus whose levels differ by more than this are different levels (our choice: far above
/// the flatness tolerance, below the 2 dB of a coarse staircase step).
const LEVEL_STEP_DB: f64 = 1.0;
/// A dip this deep between two stretches of the tone is a dropout: half the amplitude, far
/// beyond any level wander (common practice).
const DROPOUT_DB: f64 = 6.0;
/// Smallest flatness tolerance: above the 0.05 dB ripple the hop rounding can leave.
const MIN_TOLERANCE_DB: f64 = 0.15;
/// Largest flatness tolerance, however noisy the envelope.
const MAX_TOLERANCE_DB: f64 = 1.5;

/// One stretch at a steady level.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Plateau {
    /// Samples `[start, end)`.
    pub start: usize,
    pub end: usize,
    /// Mean-square level, dB re a full-scale sine's (dBFS of the whole signal, not the line).
    pub level_db: f64,
}

/// A stretch where the level fell well below the tone on both sides of it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Dropout {
    pub at_s: f64,
    pub length_s: f64,
    pub depth_db: f64,
}

/// What the envelope says about a capture.
#[derive(Debug, Clone, PartialEq)]
pub struct Steadiness {
    /// The samples to analyse, `[start, end)`: the longest plateau, or all of it when the capture
    /// is too short to judge or holds no plateau.
    pub start: usize,
    pub end: usize,
    /// The tone's extent: from the first to the end of the last sample above the floor.
    pub tone_start: usize,
    pub tone_end: usize,
    /// Flatness tolerance used, dB.
    pub tolerance_db: f64,
    /// Level change across the analysed span (last 10 % against first 10 %), dB.
    pub drift_db: f64,
    /// Distinct steady levels of the tone (1 for a steady tone), loudest first.
    pub levels_db: Vec<f64>,
    pub dropouts: Vec<Dropout>,
    /// Relative change of the tone's frequency from the first to the last quarter of the span
    /// (up-crossing rates); `None` when there are too few crossings to say.
    pub frequency_change: Option<f64>,
    /// The envelope could be judged (long enough, some level).
    pub judged: bool,
}

impl Steadiness {
    fn whole(n: usize) -> Self {
        Steadiness {
            start: 0,
            end: n,
            tone_start: 0,
            tone_end: n,
            tolerance_db: MIN_TOLERANCE_DB,
            drift_db: 0.0,
            levels_db: Vec::new(),
            dropouts: Vec::new(),
            frequency_change: None,
            judged: false,
        }
    }
}

/// Largest ripple the envelope's window may leave on a steady sine, as a fraction of its mean
/// square: 1 % is 0.043 dB either way, well inside the smallest flatness tolerance.
const MAX_WINDOW_RIPPLE: f64 = 0.01;

/// The envelope's moving-mean length in hops: a whole number of the tone's periods, at least
/// [`MIN_WINDOW_S`], rounded to whole hops. Rounding leaves the window `d` samples off a whole
/// number of periods, and the mean square of A sin(wt) over W samples then moves by at most
/// (A^2 / 2) * 2 min(d, P / (4 pi)) / W (the leftover integral of cos 2wt, closed form); the
/// fewest periods that keep this under [`MAX_WINDOW_RIPPLE`] are taken. A low tone whose period
/// is no multiple of the hop needs about 100 ms (81 Hz: 10 ms is under one period, and the
/// rounded window rippled by 0.35 dB, more than the flatness tolerance).
fn envelope_window(period: f64, hop: usize, fs: f64) -> usize {
    let hop_f = hop as f64;
    let k0 = (MIN_WINDOW_S * fs / period).ceil().max(1.0) as usize;
    let ripple = |k: usize| {
        let span = k as f64 * period;
        let hops = (span / hop_f).round().max(1.0);
        let d = (hops * hop_f - span).abs();
        (
            hops as usize,
            2.0 * d.min(period / (4.0 * std::f64::consts::PI)) / (hops * hop_f),
        )
    };
    // At most a second of periods: beyond that, the best found.
    let k_max = ((fs / period).ceil() as usize).max(k0);
    let mut best = ripple(k0);
    for k in k0..=k_max {
        let (w, r) = ripple(k);
        if r <= MAX_WINDOW_RIPPLE {
            return w;
        }
        if r < best.1 {
            best = (w, r);
        }
    }
    best.0
}

/// Find the steady span of the tone in `x` (sampled at `fs`) and what else the capture holds.
pub fn find_steady<T: Store>(x: &[T], fs: f64) -> Steadiness {
    let n = x.len();
    let hop = ((HOP_S * fs).round() as usize).max(1);
    let hops = n / hop;
    if hops < 100 || !x.iter().all(|v| v.to_f64().is_finite()) {
        return Steadiness::whole(n);
    }
    let mean = x.iter().map(|v| v.to_f64()).sum::<f64>() / n as f64;
    // Mean square per hop (the remainder after the last whole hop joins the last one's span
    // when the span reaches the end).
    let p: Vec<f64> = x[..hops * hop]
        .chunks_exact(hop)
        .map(|c| {
            c.iter()
                .map(|v| (v.to_f64() - mean) * (v.to_f64() - mean))
                .sum::<f64>()
                / hop as f64
        })
        .collect();
    let p_max = p.iter().copied().fold(0.0, f64::max);
    if p_max <= 0.0 {
        return Steadiness::whole(n);
    }
    // --- the tone's period from up-crossings where it is loud ----------------------------------
    // Loud where the mean square over 50 ms around the hop (a whole period down to 20 Hz) is:
    // judged hop by hop, a low tone's hops near its zero crossings would break every period
    // into pieces with no whole crossing in any.
    let half_span = ((0.025 * fs / hop as f64).round() as usize).max(1);
    let mut prefix = Vec::with_capacity(hops + 1);
    prefix.push(0.0);
    for &v in &p {
        prefix.push(prefix.last().copied().unwrap_or(0.0) + v);
    }
    let smooth: Vec<f64> = (0..hops)
        .map(|j| {
            let (a, b) = (j.saturating_sub(half_span), (j + half_span + 1).min(hops));
            (prefix[b] - prefix[a]) / (b - a) as f64
        })
        .collect();
    let smooth_max = smooth.iter().copied().fold(0.0, f64::max);
    let loud_hops: Vec<usize> = (0..hops)
        .filter(|&j| smooth[j] >= 0.25 * smooth_max)
        .collect();
    let loud_ms = loud_hops.iter().map(|&j| p[j]).sum::<f64>() / loud_hops.len() as f64;
    let threshold = 0.5 * (2.0 * loud_ms).sqrt();
    // Runs of consecutive loud hops, each counted on its own (no crossing across a gap).
    // Whole periods between the first and last crossing of each run: the run's ends hold
    // partial periods, which a count over the run's length would spread over the whole ones
    // (2 % at 20 Hz in one second, enough to leave the envelope rippling).
    let (mut cycles, mut cycle_samples) = (0usize, 0usize);
    let mut run_start = 0;
    for i in 1..=loud_hops.len() {
        if i == loud_hops.len() || loud_hops[i] != loud_hops[i - 1] + 1 {
            let (from, to) = (loud_hops[run_start] * hop, (loud_hops[i - 1] + 1) * hop);
            let c = up_crossings(&x[from..to], mean, threshold);
            if c.count >= 2 && c.last > c.first {
                cycles += c.count - 1;
                cycle_samples += c.last - c.first;
            }
            run_start = i;
        }
    }
    let period = if cycles >= 3 {
        cycle_samples as f64 / cycles as f64
    } else {
        0.02 * fs
    };
    let w = envelope_window(period, hop, fs).clamp(1, hops / 4);
    // --- envelope, dB -------------------------------------------------------------------------
    let count = hops - w + 1;
    let mut env = Vec::with_capacity(count);
    let mut acc: f64 = p[..w].iter().sum();
    env.push(acc / w as f64);
    for j in 1..count {
        acc += p[j + w - 1] - p[j - 1];
        env.push((acc / w as f64).max(0.0));
    }
    let floor = p_max * 1e-30;
    let env_db: Vec<f64> = env
        .iter()
        .map(|&e| 10.0 * (e.max(floor) / 0.5).log10())
        .collect();
    let top = env_db.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let in_tone = |v: f64| v >= top - TONE_RANGE_DB;

    // --- tolerance from the scatter between disjoint windows within the tone ------------------
    let mut diffs: Vec<f64> = (0..count.saturating_sub(w))
        .filter(|&j| in_tone(env_db[j]) && in_tone(env_db[j + w]))
        .map(|j| (env_db[j + w] - env_db[j]).abs())
        .collect();
    let tolerance_db = if diffs.is_empty() {
        MIN_TOLERANCE_DB
    } else {
        let mid = diffs.len() / 2;
        let med = *diffs.select_nth_unstable_by(mid, f64::total_cmp).1;
        // |a - b| of two independent normals with standard deviation s has median
        // 0.6745 sqrt(2) s (the half-normal's median). Six s: a range over the (overlapping,
        // so about two independent) windows of a flatness check passes it with probability
        // under 1e-4 when the tone is steady.
        let sigma = med / 0.6745 / std::f64::consts::SQRT_2;
        (6.0 * sigma).clamp(MIN_TOLERANCE_DB, MAX_TOLERANCE_DB)
    };

    // --- flat hops and plateaus -----------------------------------------------------------------
    // flat[j]: the envelope's range over j..=j+w stays within the tolerance.
    let mut flat = vec![false; count];
    for (j, f) in flat.iter_mut().enumerate() {
        let end = (j + w).min(count - 1);
        let (lo, hi) = env_db[j..=end]
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
                (a.min(v), b.max(v))
            });
        *f = hi - lo <= tolerance_db;
    }
    let min_run = ((MIN_PLATEAU_S * fs / hop as f64).ceil() as usize).max(1);
    let mut plateaus: Vec<Plateau> = Vec::new();
    let mut j = 0;
    while j < count {
        if !flat[j] {
            j += 1;
            continue;
        }
        let s = j;
        while j < count && flat[j] {
            j += 1;
        }
        let e = j - 1; // last flat hop
        let mut levels: Vec<f64> = env_db[s..=e].to_vec();
        let mid = levels.len() / 2;
        let level = *levels.select_nth_unstable_by(mid, f64::total_cmp).1;
        // The run's windows cover hops s .. e + w (exclusive).
        let run_hops = e + w - s;
        if run_hops >= min_run && in_tone(level) {
            let end = if e + w >= hops { n } else { (e + w) * hop };
            plateaus.push(Plateau {
                start: s * hop,
                end,
                level_db: level,
            });
        }
    }
    // Two plateaus at one level whose gap never leaves it by more than twice the tolerance
    // were split by the envelope's own scatter: join them.
    let mut joined: Vec<Plateau> = Vec::with_capacity(plateaus.len());
    for p in plateaus {
        if let Some(q) = joined.last_mut() {
            let (g0, g1) = ((q.end / hop).min(count), (p.start / hop).min(count));
            let gap = if g0 < g1 { &env_db[g0..g1] } else { &[][..] };
            if (q.level_db - p.level_db).abs() <= tolerance_db
                && gap
                    .iter()
                    .all(|&v| (v - q.level_db).abs() <= 2.0 * tolerance_db)
            {
                let (lq, lp) = ((q.end - q.start) as f64, (p.end - p.start) as f64);
                q.level_db = (q.level_db * lq + p.level_db * lp) / (lq + lp);
                q.end = p.end;
                continue;
            }
        }
        joined.push(p);
    }
    let plateaus = joined;
    let Some(mut main) = plateaus.iter().copied().max_by_key(|p| p.end - p.start) else {
        let mut s = Steadiness::whole(n);
        s.tolerance_db = tolerance_db;
        s.judged = true;
        return s;
    };
    // A flat window may still hold a little of the floor at the plateau's ends: the tolerance
    // lets a fraction f = 1 - 10^(-tol / 10) of the window's energy be missing, and g missing
    // samples around a zero crossing of a low tone cost far less than g / W of it. Missing
    // samples that hold a whole period cost at least (g - P) / W, so g < P + f W: the span is
    // trimmed by that (and a hop) at each end, unless that would leave under half of it.
    let missing = 1.0 - 10f64.powf(-tolerance_db / 10.0);
    let margin = (period + missing * (w * hop) as f64).ceil() as usize + hop;
    if main.end - main.start > 4 * margin {
        main.start += margin;
        main.end -= margin;
    }
    // Distinct levels, loudest first: plateaus more than LEVEL_STEP_DB from every level so far.
    let mut by_level: Vec<f64> = plateaus.iter().map(|p| p.level_db).collect();
    by_level.sort_by(|a, b| b.total_cmp(a));
    let mut levels_db: Vec<f64> = Vec::new();
    for l in by_level {
        if levels_db.iter().all(|&k| (k - l).abs() > LEVEL_STEP_DB) {
            levels_db.push(l);
        }
    }
    // The tone's extent, and dips between its first and last plateau.
    let tone_lo = env_db.iter().position(|&v| in_tone(v)).unwrap_or(0);
    let tone_hi = env_db
        .iter()
        .rposition(|&v| in_tone(v))
        .unwrap_or(count - 1);
    // Dips between consecutive plateaus, against the lower of the two levels around them.
    let mut dropouts = Vec::new();
    for pair in plateaus.windows(2) {
        let (before, after) = (pair[0], pair[1]);
        let reference = before.level_db.min(after.level_db);
        let (from, to) = (
            (before.end / hop).min(count),
            (after.start / hop).min(count),
        );
        let mut j = from;
        while j < to {
            if env_db[j] >= reference - DROPOUT_DB {
                j += 1;
                continue;
            }
            let s = j;
            let mut deepest = env_db[j];
            while j < to && env_db[j] < reference - DROPOUT_DB {
                deepest = deepest.min(env_db[j]);
                j += 1;
            }
            dropouts.push(Dropout {
                at_s: (s * hop) as f64 / fs,
                // A window of w hops reads 6 dB down once three quarters of it lie in the gap,
                // so a gap of g hops (g >= w) shows as g - w/2 hops under the threshold.
                length_s: (((j - s) as f64 + 0.5 * w as f64) * hop as f64) / fs,
                depth_db: reference - deepest,
            });
        }
    }
    // Level change across the span: last tenth against first tenth of its envelope.
    let (a, b) = (
        main.start / hop,
        ((main.end / hop).min(count)).max(main.start / hop + 1),
    );
    let tenth = ((b - a) / 10).max(1);
    let avg = |r: &[f64]| r.iter().sum::<f64>() / r.len().max(1) as f64;
    let drift_db = avg(&env_db[(b - tenth).max(a)..b]) - avg(&env_db[a..(a + tenth).min(b)]);
    Steadiness {
        start: main.start,
        end: main.end,
        tone_start: tone_lo * hop,
        tone_end: if tone_hi + w >= hops {
            n
        } else {
            (tone_hi + w) * hop
        },
        tolerance_db,
        drift_db,
        levels_db,
        dropouts,
        frequency_change: frequency_change(&x[main.start..main.end], mean, threshold),
        judged: true,
    }
}

/// Up-crossings of `x - mean` through `+threshold` after it was below `-threshold` (hysteresis, so
/// noise and harmonics riding on the tone do not count twice): how many, and where the first and
/// last were.
struct Crossings {
    count: usize,
    first: usize,
    last: usize,
}

fn up_crossings<T: Store>(x: &[T], mean: f64, threshold: f64) -> Crossings {
    let mut c = Crossings {
        count: 0,
        first: 0,
        last: 0,
    };
    let mut armed = false;
    for (i, v) in x.iter().map(|v| v.to_f64()).enumerate() {
        let v = v - mean;
        if v < -threshold {
            armed = true;
        } else if armed && v > threshold {
            armed = false;
            if c.count == 0 {
                c.first = i;
            }
            c.count += 1;
            c.last = i;
        }
    }
    c
}

/// Relative change of the up-crossing rate (whole periods between the first and last crossing)
/// from the first to the last quarter of `x`.
fn frequency_change<T: Store>(x: &[T], mean: f64, threshold: f64) -> Option<f64> {
    let q = x.len() / 4;
    let rate = |part: &[T]| -> Option<f64> {
        let c = up_crossings(part, mean, threshold);
        (c.count > 8 && c.last > c.first).then(|| (c.count - 1) as f64 / (c.last - c.first) as f64)
    };
    let (a, b) = (rate(&x[..q])?, rate(&x[x.len() - q..])?);
    Some(b / a - 1.0)
}
