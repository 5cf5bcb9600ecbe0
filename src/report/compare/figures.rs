//! Each kind of run's figures set side by side: DC points, power, tone, response, noise, IMD,
//! output impedance.

use super::*;

/// DC operating points, by name: volts as a difference, current in mA, dissipation.
pub(super) fn compare_dc(s: &mut Sink, a: &[Run], b: &[Run]) {
    let ch = s.ch;
    let name_a = s.name_a;
    if let (Some(da), Some(db)) = (
        latest::<crate::procedure::dc::DcResult>(a, ch),
        latest::<crate::procedure::dc::DcResult>(b, ch),
    ) {
        for p in &da.points {
            let Some(q) = db.points.iter().find(|q| q.name == p.name) else {
                s.skipped.push(C::NotCompared.say(format!(
                    "channel {ch}: DC point {} only on `{name_a}`: not compared",
                    crate::notebook::printable(&p.name)
                )));
                continue;
            };
            let name = crate::notebook::printable(&p.name);
            s.add(
                &format!("DC {name}"),
                measured(Some(p.volts)),
                measured(Some(q.volts)),
                Unit::VoltsDc,
                None,
            );
            s.add(
                &format!("DC {name} current"),
                measured(p.current_ma),
                measured(q.current_ma),
                Unit::Milliamps,
                None,
            );
            s.add(
                &format!("DC {name} dissipation"),
                measured(p.dissipation_w),
                measured(q.dissipation_w),
                Unit::Watts,
                None,
            );
        }
    }
}

/// Staircases, frequency by frequency: power at 1, 3 and 10 % THD and THD at 1 W.
pub(super) fn compare_power(s: &mut Sink, a: &[Run], b: &[Run]) {
    let ch = s.ch;
    let name_a = s.name_a;
    let (pa, pb) = (power_runs(a, ch), power_runs(b, ch));
    let several = pa.len() > 1 || pb.len() > 1;
    for p in &pa {
        let Some(q) = pb
            .iter()
            .find(|q| (q.frequency_hz / p.frequency_hz - 1.0).abs() < 1e-3)
        else {
            if several {
                s.skipped.push(C::NotCompared.say(format!(
                    "channel {ch}: a staircase at {} only on `{name_a}`: not compared",
                    fmt(p.frequency_hz, Unit::Hz)
                )));
            }
            continue;
        };
        let at_f = if several {
            format!(" ({})", fmt(p.frequency_hz, Unit::Hz))
        } else {
            String::new()
        };
        for t in [1.0, 3.0, 10.0] {
            match (power_at(p, t), power_at(q, t)) {
                (Some((x, u)), Some((y, v))) if u == v => s.add(
                    &format!("power at {t} % THD{at_f}"),
                    measured(Some(x)),
                    measured(Some(y)),
                    u,
                    None,
                ),
                (Some((_, u)), Some((_, v))) => s.skipped.push(C::NotCompared.say(format!(
                    "channel {ch}: power at {t} %{at_f} is in {} on one side and {} on the other: not compared (give both sides a calibration)",
                    u.symbol(),
                    v.symbol()
                ))),
                _ => {}
            }
        }
        s.add(
            &format!("THD at 1 W (staircase){at_f}"),
            measured(thd_at_power(p, 1.0)),
            measured(thd_at_power(q, 1.0)),
            Unit::Percent,
            None,
        );
    }
}

/// Tone runs, at the same output level only: THD, THD+N, H2..H5, noise and hum.
pub(super) fn compare_tone(s: &mut Sink, a: &[Run], b: &[Run]) {
    let ch = s.ch;
    if let (Some(ta), Some(tb)) = (latest::<ToneView>(a, ch), latest::<ToneView>(b, ch)) {
        let (diff, at_a, at_b) = tone_levels(ta, tb);
        let unlike_text = format!(
            "the tone runs were at different levels ({at_a} and {at_b}, {diff:+.1} dB); distortion depends on level, so measure both at the same output (for example --watts 1)"
        );
        let unlike = (diff.abs() > LEVEL_MATCH_DB).then_some(unlike_text.as_str());
        if let Some(u) = unlike {
            s.warnings
                .push(C::UnlikeLevels.say(format!("channel {ch}: {u}")));
        }
        let at = if unlike.is_some() {
            String::new()
        } else {
            format!(" at {at_a}")
        };
        let thd = |t: &ToneView| {
            t.thd_percent.map(|v| Val {
                v,
                bound: t.thd_upper_bound,
                lower: false,
            })
        };
        s.add(&format!("THD{at}"), thd(ta), thd(tb), Unit::Percent, unlike);
        // A prediction's THD+N is its THD and the arithmetic's floor: no bench's (left out
        // with noise and hum below).
        if !s.predicted {
            s.add(
                &format!("THD+N{at}"),
                measured(Some(ta.thdn_percent)),
                measured(Some(tb.thdn_percent)),
                Unit::Percent,
                unlike,
            );
        }
        for o in 2..=5 {
            s.add(
                &format!("H{o}{at}"),
                harmonic(&ta.harmonics, o),
                harmonic(&tb.harmonics, o),
                Unit::Dbc,
                unlike,
            );
        }
        if !s.noise_comparable() {
            return;
        }
        // dBV at the amplifier's output when both sides are calibrated, else dBFS.
        let (na, nb, nu) = match (ta.noise_vrms, tb.noise_vrms) {
            (Some(x), Some(y)) if x > 0.0 && y > 0.0 => {
                (20.0 * x.log10(), 20.0 * y.log10(), Unit::Dbv)
            }
            _ => (ta.noise_dbfs, tb.noise_dbfs, Unit::Dbfs),
        };
        s.add("noise", measured(Some(na)), measured(Some(nb)), nu, None);
        // The strongest hum line that stands above the noise, else the highest limit.
        let hum = |t: &ToneView| -> Option<Val> {
            let real = t
                .hum
                .iter()
                .filter(|h| !h.upper_bound)
                .map(|h| h.level_dbc)
                .reduce(f64::max);
            match real {
                Some(v) => Some(Val {
                    v,
                    bound: false,
                    lower: false,
                }),
                None => t
                    .hum
                    .iter()
                    .map(|h| h.level_dbc)
                    .reduce(f64::max)
                    .map(|v| Val {
                        v,
                        bound: true,
                        lower: false,
                    }),
            }
        };
        s.add("strongest hum line", hum(ta), hum(tb), Unit::Dbc, None);
    }
}

/// Responses: the -3 dB points, the largest deviation, H2 at 40 Hz, and the deviation curve.
pub(super) fn compare_response(s: &mut Sink, a: &[Run], b: &[Run]) {
    let ch = s.ch;
    if let (Some(ra), Some(rb)) = (latest::<ResponseView>(a, ch), latest::<ResponseView>(b, ch)) {
        let points = deviation_curve(ra, rb);
        if !points.is_empty() {
            s.deviation_curves.push(DeviationCurve {
                channel: ch,
                points,
            });
        }
        s.add(
            "low -3 dB point",
            measured(ra.low_3db_hz),
            measured(rb.low_3db_hz),
            Unit::Hz,
            None,
        );
        s.add(
            "high -3 dB point",
            measured(ra.high_3db_hz),
            measured(rb.high_3db_hz),
            Unit::Hz,
            None,
        );
        s.add(
            "largest deviation 20 Hz-20 kHz",
            measured(Some(ra.max_deviation_db)),
            measured(Some(rb.max_deviation_db)),
            Unit::Db,
            None,
        );
        s.add(
            "H2 at 40 Hz (sweep)",
            measured(sweep_harmonic(ra, 2, 40.0)),
            measured(sweep_harmonic(rb, 2, 40.0)),
            Unit::Dbc,
            None,
        );
    }
}

/// Noise and hum with no signal (dBV once both sides are calibrated), and S/N re 1 W.
pub(super) fn compare_noise(s: &mut Sink, a: &[Run], b: &[Run]) {
    let ch = s.ch;
    if let (Some(na), Some(nb)) = (latest::<NoiseView>(a, ch), latest::<NoiseView>(b, ch)) {
        if !s.noise_comparable() {
            return;
        }
        // In dBV at the amplifier's output when both sides are calibrated (comparable across
        // interfaces and attenuators), else in dBFS through the same interface.
        let level = |dbfs_a: f64, dbfs_b: f64, va: Option<f64>, vb: Option<f64>| match (va, vb) {
            (Some(x), Some(y)) if x > 0.0 && y > 0.0 => {
                (20.0 * x.log10(), 20.0 * y.log10(), Unit::Dbv)
            }
            _ => (dbfs_a, dbfs_b, Unit::Dbfs),
        };
        let flat = level(na.noise_dbfs, nb.noise_dbfs, na.noise_vrms, nb.noise_vrms);
        let weighted = level(
            na.noise_a_dbfs,
            nb.noise_a_dbfs,
            na.noise_a_vrms,
            nb.noise_a_vrms,
        );
        let all = level(
            na.hum_and_noise_dbfs,
            nb.hum_and_noise_dbfs,
            na.hum_and_noise_vrms,
            nb.hum_and_noise_vrms,
        );
        for (fig, x, y, unit) in [
            (
                "noise with no signal (flat)",
                Some(flat.0),
                Some(flat.1),
                flat.2,
            ),
            (
                "noise with no signal (A-weighted)",
                Some(weighted.0),
                Some(weighted.1),
                weighted.2,
            ),
            (
                "hum and noise with no signal",
                Some(all.0),
                Some(all.1),
                all.2,
            ),
            (
                "S/N re 1 W (A-weighted)",
                na.snr_a_re_1w_db,
                nb.snr_a_re_1w_db,
                Unit::Db,
            ),
        ] {
            s.add(fig, measured(x), measured(y), unit, None);
        }
    }
}

/// Intermodulation, when both sides used the same pair.
pub(super) fn compare_imd(s: &mut Sink, a: &[Run], b: &[Run]) {
    let ch = s.ch;
    if let (Some(ia), Some(ib)) = (latest::<ImdView>(a, ch), latest::<ImdView>(b, ch)) {
        let same_pair =
            (ia.low_hz - ib.low_hz).abs() < 1.0 && (ia.high_hz - ib.high_hz).abs() < 1.0;
        if same_pair {
            let pair = format!(" ({:.0} + {:.0} Hz)", ia.low_hz, ia.high_hz);
            s.add(
                &format!("IMD{pair}"),
                measured(ia.imd_percent),
                measured(ib.imd_percent),
                Unit::Percent,
                None,
            );
            s.add(
                &format!("d2{pair}"),
                measured(ia.dd2_percent),
                measured(ib.dd2_percent),
                Unit::Percent,
                None,
            );
            s.add(
                &format!("d3{pair}"),
                measured(ia.dd3_percent),
                measured(ib.dd3_percent),
                Unit::Percent,
                None,
            );
        } else {
            s.skipped.push(C::NotCompared.say(format!(
                "channel {ch}: the IMD runs used different pairs ({:.0} + {:.0} Hz and {:.0} + {:.0} Hz): not compared",
                ia.low_hz, ia.high_hz, ib.low_hz, ib.high_hz
            )));
        }
    }
}

/// Output impedance and damping factor.
pub(super) fn compare_zout(s: &mut Sink, a: &[Run], b: &[Run]) {
    let ch = s.ch;
    if let (Some(za), Some(zb)) = (latest::<ZoutView>(a, ch), latest::<ZoutView>(b, ch)) {
        // An output transformer's impedance rises with frequency (its leakage inductance), so
        // two frequencies' figures are not a before and after.
        if (za.frequency_hz / zb.frequency_hz - 1.0).abs() > 0.01 {
            s.skipped.push(C::NotCompared.say(format!(
                "channel {ch}: output impedance measured at {} on one side and {} on the other: not compared (measure both at the same frequency)",
                fmt(za.frequency_hz, Unit::Hz),
                fmt(zb.frequency_hz, Unit::Hz)
            )));
            return;
        }
        s.add(
            "output impedance",
            measured(Some(za.zout_ohms)),
            measured(Some(zb.zout_ohms)),
            Unit::Ohms,
            None,
        );
        s.add(
            "damping factor",
            measured(Some(za.damping_factor)),
            measured(Some(zb.damping_factor)),
            Unit::Ratio,
            None,
        );
    }
}

/// A swept harmonic's level at the point nearest `f`.
pub(super) fn sweep_harmonic(r: &ResponseView, order: usize, f: f64) -> Option<f64> {
    r.harmonics
        .iter()
        .find(|h| h.order == order)?
        .points
        .iter()
        .min_by(|x, y| {
            (x.frequency_hz / f)
                .ln()
                .abs()
                .total_cmp(&(y.frequency_hz / f).ln().abs())
        })
        .filter(|p| (p.frequency_hz / f).ln().abs() < 0.05)
        .map(|p| p.level_dbc)
}

/// Square-wave responses at the same frequencies and from the same kind of source (a recorded
/// square and a predicted one have different edges): rise time, overshoot, settling, tilt.
pub(super) fn compare_square(s: &mut Sink, a: &[Run], b: &[Run]) {
    use crate::analysis::square::SquareResult;
    let ch = s.ch;
    let (Some(qa), Some(qb)) = (latest::<SquareResult>(a, ch), latest::<SquareResult>(b, ch))
    else {
        return;
    };
    if qa.source != qb.source {
        s.skipped.push(C::NotCompared.say(format!(
            "channel {ch}: one square run was recorded and the other predicted from a sweep (their edges differ): not compared"
        )));
        return;
    }
    for x in &qa.squares {
        let Some(y) = qb
            .squares
            .iter()
            .find(|y| (y.frequency_hz / x.frequency_hz - 1.0).abs() < 0.01)
        else {
            continue;
        };
        let at = number::show(x.frequency_hz, Unit::Hz);
        s.add(
            &format!("rise time, {at} square"),
            measured(x.rise_time_us),
            measured(y.rise_time_us),
            Unit::Us,
            None,
        );
        s.add(
            &format!("overshoot, {at} square"),
            measured(Some(x.overshoot_percent)),
            measured(Some(y.overshoot_percent)),
            Unit::Percent,
            None,
        );
        s.add(
            &format!("settling, {at} square"),
            measured(x.settling_us),
            measured(y.settling_us),
            Unit::Us,
            None,
        );
        s.add(
            &format!("tilt, {at} square"),
            measured(Some(x.tilt_percent)),
            measured(Some(y.tilt_percent)),
            Unit::Percent,
            None,
        );
    }
}

/// Channel separation with the same channel driven: each other channel's separation at 1 kHz and
/// its worst over 20 Hz-20 kHz (more is better). Where the crosstalk at 1 kHz sank under the
/// channel's own floor the side is a lower bound (at least), and the change is read one way only.
pub(super) fn compare_separation(s: &mut Sink, a: &[Run], b: &[Run]) {
    use crate::analysis::separation::{ChannelSeparation, SeparationResult};
    let ch = s.ch;
    let (Some(sa), Some(sb)) = (
        latest::<SeparationResult>(a, ch),
        latest::<SeparationResult>(b, ch),
    ) else {
        return;
    };
    let at_1k = |c: &ChannelSeparation| match c.at_1khz_db {
        Some(v) => measured(Some(v)),
        None => super::at_least(c.at_least_db),
    };
    for x in &sa.channels {
        let Some(y) = sb.channels.iter().find(|y| y.channel == x.channel) else {
            continue;
        };
        s.add(
            &format!("separation at 1 kHz, ch{} from ch{ch}", x.channel),
            at_1k(x),
            at_1k(y),
            Unit::Db,
            None,
        );
        s.add(
            &format!(
                "separation, worst 20 Hz-20 kHz, ch{} from ch{ch}",
                x.channel
            ),
            measured(x.worst_db),
            measured(y.worst_db),
            Unit::Db,
            None,
        );
    }
}
