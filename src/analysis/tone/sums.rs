//! The tone analysis's passes over samples and bins: sample statistics, band sums, the
//! fundamental's phase track.

use super::*;

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
pub(super) struct Lanes<const L: usize> {
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

pub(super) struct BandSums {
    pub(super) total: f64,
    pub(super) without_fundamental: f64,
    pub(super) noise_weighted: f64,
}

/// Sums over bins `k_lo..=k_hi` of `|X|^2`, `|X - fundamental|^2` and `g(k) |X - all lines|^2`,
/// each model given as sorted `(bin, value)` pairs. The Nyquist bin counts half (one-sided power).
pub(super) fn band_sums(
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
pub(super) struct Drift {
    pub(super) drift_ppm: f64,
    pub(super) wander_rad: f64,
}

/// Tracks the fundamental's phase over Hann-windowed segments (8, or 4 for short captures, each
/// holding at least 8 periods). Returns `None` when the capture is too short to track.
///
/// Segment `s` starting at sample `a` gives `z_s = exp(-j w a) * sum_i x[a + i] T[i]` with the
/// table `T[i] = hann[i] exp(-j w i)` built once, so the pass over the samples is a plain dot
/// product with no loop-carried rotation.
pub(super) fn phase_track(x: &[f64], dc: f64, f_cps: f64, fs: f64) -> Option<Drift> {
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
pub(super) fn polyfit(t: &[f64], y: &[f64], deg: usize) -> Option<Vec<f64>> {
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
    let c = crate::analysis::fit::solve_spd(&mut g, &b, m)?;
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
