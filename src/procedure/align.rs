//! Finding where a stimulus sits in a capture.

/// Level envelope in dB: RMS of consecutive blocks of `block` samples, floored at -150 dB.
fn envelope_db(x: &[f64], block: usize) -> Vec<f64> {
    x.chunks(block)
        .map(|c| {
            let ms = c.iter().map(|v| v * v).sum::<f64>() / c.len() as f64;
            10.0 * ms.max(1e-15).log10()
        })
        .collect()
}

/// The lag in samples (negative when the recorder started after the stimulus file did) that best
/// lines up the capture's level envelope with the stimulus's, searched over
/// `-max_lead..=max_lag` samples, to within half a `block`; with the correlation there (Pearson's r
/// of the dB envelopes, 1 for a perfect match).
///
/// Envelopes rather than waveforms: a staircase of one steady frequency correlates with itself at
/// every period and every step, so a waveform match is ambiguous; its level pattern is not. The
/// dB scale makes the amplifier's gain an offset, which the correlation ignores.
pub fn find_envelope_lag(
    capture: &[f64],
    reference: &[f64],
    block: usize,
    max_lead: usize,
    max_lag: usize,
) -> Option<(isize, f64)> {
    let block = block.max(1);
    let (es, ec) = (envelope_db(reference, block), envelope_db(capture, block));
    let (lo, hi) = (-((max_lead / block) as isize), (max_lag / block) as isize);
    let mut best: Option<(isize, f64)> = None;
    for lag in lo..=hi {
        // pairs (es[i], ec[i + lag]) over the overlap
        let i0 = (-lag).max(0) as usize;
        let i1 = es.len().min((ec.len() as isize - lag).max(0) as usize);
        if i1 <= i0 + 8 {
            continue;
        }
        let n = (i1 - i0) as f64;
        let (mut sa, mut sb, mut saa, mut sbb, mut sab) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for i in i0..i1 {
            let a = es[i];
            let b = ec[(i as isize + lag) as usize];
            sa += a;
            sb += b;
            saa += a * a;
            sbb += b * b;
            sab += a * b;
        }
        let cov = sab / n - sa * sb / (n * n);
        let va = saa / n - sa * sa / (n * n);
        let vb = sbb / n - sb * sb / (n * n);
        let r = cov / (va * vb).sqrt().max(1e-300);
        if best.is_none_or(|(_, br)| r > br) {
            best = Some((lag, r));
        }
    }
    best.map(|(lag, r)| (lag * block as isize, r))
}
