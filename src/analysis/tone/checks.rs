//! What a technician must know before trusting a tone's figures: quality warnings, captures
//! that are not one steady tone, the interface's own floor, oscillations.

use super::*;

/// Measurement-quality warnings: what a technician must know before trusting the figures.
pub(super) fn quality_warnings(
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
pub(super) const MAX_FREQUENCY_CHANGE: f64 = 0.02;

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
pub(super) fn find_oscillations(
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
    found.extend(pumping(spec, all, n, fs, f0_bins).filter(|o| {
        o.level_dbfs > crate::analysis::oscillation::quantisation_floor_dbfs(resolution_bits)
    }));
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
    use crate::analysis::oscillation::{search_factor, SUBAUDIO_TOP_HZ};
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
    let floor_dbfs = crate::analysis::oscillation::quantisation_floor_dbfs(resolution_bits);
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
pub(super) fn refine_peak(spec: &[Complex64], all: &[(usize, Complex64)], k: usize) -> f64 {
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
    k as f64 + crate::analysis::oscillation::parabolic_offset(db(k - 1), db(k), db(k + 1))
}

/// Sidebands at f0 +/- d for d from the resolution to 10 Hz, both standing out: the level
/// pumping at d Hz (see [`super::oscillation`]).
pub(super) fn pumping(
    spec: &[Complex64],
    all: &[(usize, Complex64)],
    n: usize,
    fs: f64,
    f0_bins: f64,
) -> Option<Oscillation> {
    use crate::analysis::oscillation::{search_factor, SUBAUDIO_TOP_HZ};
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
