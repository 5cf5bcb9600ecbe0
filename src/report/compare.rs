//! Before/after comparison of two sets of runs, and the channel-match check.
//!
//! Both read the figures each run's result holds (tone, power, response, output impedance), as
//! typed results ([`crate::results::RunResult`]), and set them side by side; a figure only one side measured is
//! left out and said so. A comparison is only as honest as its two sides are alike: tone figures
//! are set against each other only at the same output level (within 0.5 dB), a figure that is a
//! detection limit on either side is shown as `< limit` and gives no delta, and staircases are
//! compared frequency by frequency.

use super::number::{self, Unit};
use crate::analysis::imd::ImdResult as ImdView;
use crate::analysis::noise::NoiseResult as NoiseView;
use crate::analysis::sweep::ResponseResult as ResponseView;
use crate::analysis::tone::{Harmonic, ToneResult as ToneView};
use crate::notebook::Run;
use crate::procedure::power::PowerResult as PowerView;
use crate::procedure::zout::ZoutResult as ZoutView;
use crate::results::Kept;
use serde::Serialize;

/// Which way a figure is better.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Better {
    Higher,
    Lower,
}

/// The comparable figures, by the start of their name, and which way each is better (common
/// practice: more power and separation, less distortion, noise, hum and output impedance, a
/// wider band). Checked in order (`H2 at 40 Hz (sweep)` before `H2`, `THD+N` before `THD`). DC
/// points and the largest deviation have no better side.
pub const FIGURES: &[(&str, Option<Better>)] = &[
    ("DC ", None),
    ("power at", Some(Better::Higher)),
    ("THD+N", Some(Better::Lower)),
    ("THD", Some(Better::Lower)),
    ("H2 at 40 Hz (sweep)", Some(Better::Lower)),
    ("H", Some(Better::Lower)),
    ("noise", Some(Better::Lower)),
    ("hum and noise", Some(Better::Lower)),
    ("strongest hum line", Some(Better::Lower)),
    ("S/N", Some(Better::Higher)),
    ("low -3 dB point", Some(Better::Lower)),
    ("high -3 dB point", Some(Better::Higher)),
    ("largest deviation", None),
    ("IMD", Some(Better::Lower)),
    ("d2", Some(Better::Lower)),
    ("d3", Some(Better::Lower)),
    ("output impedance", Some(Better::Lower)),
    ("damping factor", Some(Better::Higher)),
];

/// Which way `figure` is better (see [`FIGURES`]).
pub fn better(figure: &str) -> Option<Better> {
    FIGURES
        .iter()
        .find(|(start, _)| figure.starts_with(start))
        .and_then(|(_, b)| *b)
}

/// What a change means for the amplifier.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    Better,
    Worse,
    /// Within what the measurement resolves (0.1 dB, or 2 % of a frequency or impedance; our
    /// choice: about how well a bench reading repeats).
    Same,
    /// No delta (a bound, runs not like for like), or a figure with no better side.
    Unknown,
}

/// One compared figure.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct CompareLine {
    pub channel: usize,
    pub figure: String,
    pub a: f64,
    pub b: f64,
    /// The side's value is a detection limit (the figure is at most this): no delta is given.
    pub a_upper_bound: bool,
    pub b_upper_bound: bool,
    pub unit: Unit,
    /// B relative to A, in `delta_unit` (dB for powers, levels and ratios; the unit itself for
    /// dB figures and impedances); `null` when a side is a bound or the runs are not like for
    /// like (the sentence says why).
    pub delta: Option<f64>,
    pub delta_unit: Unit,
    /// Which way the figure is better, when it has a better side.
    #[serde(default)]
    pub better: Option<Better>,
    /// The change in words: `+6.86 dB`, or why none can be read.
    #[serde(default)]
    pub change: String,
    pub sentence: String,
}

impl CompareLine {
    /// Better, worse or the same, following the figure's direction.
    pub fn verdict(&self) -> Verdict {
        let (Some(d), Some(dir)) = (self.delta, self.better) else {
            return Verdict::Unknown;
        };
        let same = if self.delta_unit == Unit::Db {
            d.abs() < 0.1
        } else {
            d.abs() < 0.02 * self.a.abs()
        };
        match (same, d > 0.0, dir) {
            (true, _, _) => Verdict::Same,
            (false, true, Better::Higher) | (false, false, Better::Lower) => Verdict::Better,
            _ => Verdict::Worse,
        }
    }
}

/// B's frequency response minus A's, per channel (the deviation curve).
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct DeviationCurve {
    pub channel: usize,
    /// `[frequency_hz, delta_db]` at the frequencies both responses share.
    pub points: Vec<[f64; 2]>,
}

/// `ampnote compare`'s result.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct Comparison {
    pub schema_version: u32,
    pub a: String,
    pub b: String,
    pub lines: Vec<CompareLine>,
    pub deviation_curves: Vec<DeviationCurve>,
    pub warnings: Vec<String>,
}

/// Tone runs whose output levels differ by more than this (0.5 dB) are not like for like:
/// distortion depends on level (common practice: THD is quoted at a stated power).
pub const LEVEL_MATCH_DB: f64 = 0.5;

/// B minus A at the frequencies both responses share (same stimulus, so the same points).
fn deviation_curve(a: &ResponseView, b: &ResponseView) -> Vec<[f64; 2]> {
    a.points
        .iter()
        .filter_map(|p| {
            b.points
                .iter()
                .find(|q| (q.frequency_hz / p.frequency_hz - 1.0).abs() < 1e-6)
                .map(|q| [p.frequency_hz, q.magnitude_db - p.magnitude_db])
        })
        .collect()
}

/// The latest run on `channel` among `runs` that holds a `T`.
fn latest<T: Kept>(runs: &[Run], channel: usize) -> Option<&T> {
    runs.iter()
        .filter(|r| r.meta.channel == channel)
        .filter_map(|r| T::of(&r.result).map(|t| (r, t)))
        .max_by(|x, y| x.0.meta.id.cmp(&y.0.meta.id))
        .map(|(_, t)| t)
}

/// The latest staircase per test frequency on `channel`, in frequency order.
fn power_runs(runs: &[Run], channel: usize) -> Vec<&PowerView> {
    let mut sorted: Vec<&Run> = runs.iter().filter(|r| r.meta.channel == channel).collect();
    sorted.sort_by(|x, y| x.meta.id.cmp(&y.meta.id));
    let mut out: Vec<&PowerView> = Vec::new();
    for p in sorted.into_iter().filter_map(|r| PowerView::of(&r.result)) {
        match out
            .iter_mut()
            .find(|q| (q.frequency_hz / p.frequency_hz - 1.0).abs() < 1e-3)
        {
            Some(q) => *q = p,
            None => out.push(p),
        }
    }
    out.sort_by(|x, y| x.frequency_hz.total_cmp(&y.frequency_hz));
    out
}

/// A value, and whether it is only an upper bound (a detection limit).
#[derive(Debug, Clone, Copy)]
struct Val {
    v: f64,
    bound: bool,
}

fn measured(v: Option<f64>) -> Option<Val> {
    v.map(|v| Val { v, bound: false })
}

fn harmonic(lines: &[Harmonic], order: usize) -> Option<Val> {
    lines
        .iter()
        .find(|h| h.order == order && h.in_band)
        .map(|h| Val {
            v: h.level_dbc,
            bound: h.upper_bound,
        })
}

fn power_at(p: &PowerView, thd: f64) -> Option<(f64, Unit)> {
    let at = p.power_at_thd.iter().find(|q| q.thd_percent == thd)?;
    Some(
        at.output_w
            .map(|w| (w, Unit::Watts))
            .unwrap_or((at.output_dbfs, Unit::Dbfs)),
    )
}

/// THD at output power `w` from a staircase, interpolated log-log between the bracketing steps
/// (only steps with a measured THD, not a bound).
pub fn thd_at_power(p: &PowerView, w: f64) -> Option<f64> {
    let steps: Vec<(f64, f64)> = p
        .steps
        .iter()
        .filter(|s| !s.excluded && !s.thd_upper_bound)
        .filter_map(|s| Some((s.output_w?, s.thd_percent?)))
        .collect();
    let pair = steps.windows(2).find(|p| p[0].0 <= w && p[1].0 >= w)?;
    let t = (w / pair[0].0).ln() / (pair[1].0 / pair[0].0).ln();
    Some((pair[0].1.ln() + t * (pair[1].1.ln() - pair[0].1.ln())).exp())
}

fn fmt(v: f64, unit: Unit) -> String {
    number::show(v, unit)
}

/// B relative to A, and the unit of the change: dB for ratio figures (powers, percentages,
/// volts: 10 or 20 lg of the ratio) and for levels in dB (a difference), a plain difference in
/// the figure's unit for the rest.
fn change(a: f64, b: f64, unit: Unit) -> (f64, Unit) {
    match unit.change_in_db() {
        Some(k) => (k * (b / a).log10(), Unit::Db),
        None if unit.is_db() => (b - a, Unit::Db),
        None => (b - a, unit),
    }
}

/// A line with its plain sentence. `unlike` (the reason, with both sides' levels) keeps a delta
/// from being given for runs that are not like for like.
fn line(
    channel: usize,
    figure: &str,
    a: Val,
    b: Val,
    unit: Unit,
    unlike: Option<&str>,
) -> CompareLine {
    let shown = |x: Val| {
        if x.bound {
            number::bound(x.v, unit)
        } else {
            fmt(x.v, unit)
        }
    };
    let (d, delta_unit) = change(a.v, b.v, unit);
    let magnitude = fmt(d.abs(), delta_unit);
    let (delta, tail) = match (a.bound, b.bound, unlike) {
        (_, _, Some(why)) => (None, format!("not compared: {why}")),
        (false, false, None) => (Some(d), number::change(d, delta_unit)),
        (true, true, None) => (
            None,
            "both under the noise: no change can be read".to_string(),
        ),
        (false, true, None) if d < 0.0 => (
            None,
            format!("now under the noise: down by at least {magnitude}"),
        ),
        (true, false, None) if d > 0.0 => (
            None,
            format!("now above the noise: up by at least {magnitude}"),
        ),
        _ => (
            None,
            "one side is under the noise: no change can be read".to_string(),
        ),
    };
    CompareLine {
        channel,
        figure: figure.to_string(),
        a: a.v,
        b: b.v,
        a_upper_bound: a.bound,
        b_upper_bound: b.bound,
        unit,
        delta,
        delta_unit,
        better: better(figure),
        sentence: format!("{figure}: {} -> {}, {tail}", shown(a), shown(b)),
        change: tail,
    }
}

/// How two tone runs' output levels compare: their difference in dB (volts when both are
/// calibrated, else dBFS through the same interface), and each side's level as text.
fn tone_levels(a: &ToneView, b: &ToneView) -> (f64, String, String) {
    match (a.fundamental_vrms, b.fundamental_vrms) {
        (Some(x), Some(y)) => {
            let said = |t: &ToneView, v: f64| match t.output_w {
                Some(w) => fmt(w, Unit::Watts),
                None => format!("{v:.3} V"),
            };
            (20.0 * (y / x).log10(), said(a, x), said(b, y))
        }
        _ => (
            b.fundamental_dbfs - a.fundamental_dbfs,
            format!("{:.1} dBFS", a.fundamental_dbfs),
            format!("{:.1} dBFS", b.fundamental_dbfs),
        ),
    }
}

/// Where the per-procedure comparisons of one channel write.
struct Sink<'a> {
    ch: usize,
    name_a: &'a str,
    lines: &'a mut Vec<CompareLine>,
    skipped: &'a mut Vec<String>,
    warnings: &'a mut Vec<String>,
    deviation_curves: &'a mut Vec<DeviationCurve>,
}

impl Sink<'_> {
    /// A figure both sides have (finite, and positive where its change is a ratio in dB).
    fn add(&mut self, fig: &str, x: Option<Val>, y: Option<Val>, unit: Unit, unlike: Option<&str>) {
        if let (Some(x), Some(y)) = (x, y) {
            if x.v.is_finite()
                && y.v.is_finite()
                && (unit.change_in_db().is_none() || x.v > 0.0 && y.v > 0.0)
            {
                self.lines.push(line(self.ch, fig, x, y, unit, unlike));
            }
        }
    }
}

/// DC operating points, by name: volts as a difference, current in mA, dissipation.
fn compare_dc(s: &mut Sink, a: &[Run], b: &[Run]) {
    let ch = s.ch;
    let name_a = s.name_a;
    if let (Some(da), Some(db)) = (
        latest::<crate::procedure::dc::DcResult>(a, ch),
        latest::<crate::procedure::dc::DcResult>(b, ch),
    ) {
        for p in &da.points {
            let Some(q) = db.points.iter().find(|q| q.name == p.name) else {
                s.skipped.push(format!(
                    "channel {ch}: DC point {} only on `{name_a}`: not compared",
                    crate::notebook::printable(&p.name)
                ));
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
fn compare_power(s: &mut Sink, a: &[Run], b: &[Run]) {
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
                s.skipped.push(format!(
                    "channel {ch}: a staircase at {} only on `{name_a}`: not compared",
                    fmt(p.frequency_hz, Unit::Hz)
                ));
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
                (Some((_, u)), Some((_, v))) => s.skipped.push(format!(
                    "channel {ch}: power at {t} %{at_f} is in {} on one side and {} on the other: not compared (give both sides a calibration)",
                    u.symbol(),
                    v.symbol()
                )),
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
fn compare_tone(s: &mut Sink, a: &[Run], b: &[Run]) {
    let ch = s.ch;
    if let (Some(ta), Some(tb)) = (latest::<ToneView>(a, ch), latest::<ToneView>(b, ch)) {
        let (diff, at_a, at_b) = tone_levels(ta, tb);
        let unlike_text = format!(
            "the tone runs were at different levels ({at_a} and {at_b}, {diff:+.1} dB); distortion depends on level, so measure both at the same output (for example --watts 1)"
        );
        let unlike = (diff.abs() > LEVEL_MATCH_DB).then_some(unlike_text.as_str());
        if let Some(u) = unlike {
            s.warnings.push(format!("channel {ch}: {u}"));
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
            })
        };
        s.add(&format!("THD{at}"), thd(ta), thd(tb), Unit::Percent, unlike);
        s.add(
            &format!("THD+N{at}"),
            measured(Some(ta.thdn_percent)),
            measured(Some(tb.thdn_percent)),
            Unit::Percent,
            unlike,
        );
        for o in 2..=5 {
            s.add(
                &format!("H{o}{at}"),
                harmonic(&ta.harmonics, o),
                harmonic(&tb.harmonics, o),
                Unit::Dbc,
                unlike,
            );
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
                Some(v) => Some(Val { v, bound: false }),
                None => t
                    .hum
                    .iter()
                    .map(|h| h.level_dbc)
                    .reduce(f64::max)
                    .map(|v| Val { v, bound: true }),
            }
        };
        s.add("strongest hum line", hum(ta), hum(tb), Unit::Dbc, None);
    }
}

/// Responses: the -3 dB points, the largest deviation, H2 at 40 Hz, and the deviation curve.
fn compare_response(s: &mut Sink, a: &[Run], b: &[Run]) {
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
fn compare_noise(s: &mut Sink, a: &[Run], b: &[Run]) {
    let ch = s.ch;
    if let (Some(na), Some(nb)) = (latest::<NoiseView>(a, ch), latest::<NoiseView>(b, ch)) {
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
fn compare_imd(s: &mut Sink, a: &[Run], b: &[Run]) {
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
            s.skipped.push(format!(
                "channel {ch}: the IMD runs used different pairs ({:.0} + {:.0} Hz and {:.0} + {:.0} Hz): not compared",
                ia.low_hz, ia.high_hz, ib.low_hz, ib.high_hz
            ));
        }
    }
}

/// Output impedance and damping factor.
fn compare_zout(s: &mut Sink, a: &[Run], b: &[Run]) {
    let ch = s.ch;
    if let (Some(za), Some(zb)) = (latest::<ZoutView>(a, ch), latest::<ZoutView>(b, ch)) {
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

/// Compare two sets of runs channel by channel.
pub fn compare(name_a: &str, a: &[Run], name_b: &str, b: &[Run]) -> Comparison {
    let mut lines = Vec::new();
    let mut warnings = Vec::new();
    // Runs made with different loads or calibrations: watts and volts are still comparable
    // (each side was converted with its own calibration), dBFS figures are not.
    let loads = |runs: &[Run]| -> Vec<f64> {
        let mut l: Vec<f64> = runs
            .iter()
            .filter_map(|r| r.meta.calibration.load_ohms)
            .collect();
        l.sort_by(f64::total_cmp);
        l.dedup();
        l
    };
    let (la, lb) = (loads(a), loads(b));
    if !la.is_empty() && !lb.is_empty() && la != lb {
        warnings.push(format!(
            "the two sides were measured into different loads ({la:?} and {lb:?} ohm): power and distortion at a given power are comparable, the amplifier's behaviour into each load may differ"
        ));
    }
    let calibrated = |runs: &[Run]| runs.iter().any(|r| r.meta.calibration.has_volts());
    if calibrated(a) != calibrated(b) {
        warnings.push("one side is calibrated and the other is not: volts and watts cannot be set against dBFS; figures in dBFS are compared only where both sides have them".into());
    }
    let same_cal = |x: &Run, y: &Run| {
        let (p, q) = (x.meta.calibration, y.meta.calibration);
        p.input_fs_vrms == q.input_fs_vrms && p.attenuation == q.attenuation
    };
    if let (Some(x), Some(y)) = (a.first(), b.first()) {
        if calibrated(a) && calibrated(b) && !same_cal(x, y) {
            warnings.push("the two sides used different calibrations: dBFS figures (noise in dBFS, drive) are not like for like; volts and watts are".into());
        }
    }
    let mut channels: Vec<usize> = a.iter().map(|r| r.meta.channel).collect();
    channels.sort();
    channels.dedup();
    let mut skipped: Vec<String> = Vec::new();
    let mut deviation_curves = Vec::new();
    for ch in channels {
        let mut s = Sink {
            ch,
            name_a,
            lines: &mut lines,
            skipped: &mut skipped,
            warnings: &mut warnings,
            deviation_curves: &mut deviation_curves,
        };
        compare_dc(&mut s, a, b);
        compare_power(&mut s, a, b);
        compare_tone(&mut s, a, b);
        compare_response(&mut s, a, b);
        compare_noise(&mut s, a, b);
        compare_imd(&mut s, a, b);
        compare_zout(&mut s, a, b);
    }
    warnings.extend(skipped);
    if lines.is_empty() {
        warnings.push(format!("`{name_a}` and `{name_b}` share no measurement on a common channel; nothing to compare"));
    }
    Comparison {
        schema_version: super::SCHEMA_VERSION,
        a: name_a.to_string(),
        b: name_b.to_string(),
        lines,
        deviation_curves,
        warnings,
    }
}

/// A swept harmonic's level at the point nearest `f`.
fn sweep_harmonic(r: &ResponseView, order: usize, f: f64) -> Option<f64> {
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

/// Tolerances of the channel-match checks (common practice for the first two; the rest are our
/// own defaults, settable).
#[derive(Debug, Clone, Copy)]
pub struct MatchTolerances {
    pub gain_db: f64,
    pub response_db: f64,
    pub phase_deg: f64,
    pub thd_db: f64,
    pub power_db: f64,
    pub noise_db: f64,
    /// Least channel separation at 1 kHz, dB.
    pub separation_db: f64,
}

impl Default for MatchTolerances {
    fn default() -> Self {
        MatchTolerances {
            gain_db: 0.5,
            response_db: 0.5,
            phase_deg: 10.0,
            thd_db: 3.0,
            power_db: 1.0,
            noise_db: 3.0,
            // 60 dB at 1 kHz: common practice for a stereo power amplifier.
            separation_db: 60.0,
        }
    }
}

#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct MatchCheck {
    pub name: String,
    pub value: f64,
    pub tolerance: f64,
    pub unit: Unit,
    /// The value must reach the tolerance (a separation), not stay within it.
    #[serde(default)]
    pub minimum: bool,
    pub pass: bool,
}

impl MatchCheck {
    /// "within 0.5 dB" or "at least 60 dB".
    pub fn limit_text(&self) -> String {
        if self.minimum {
            format!("at least {}", fmt(self.tolerance, self.unit))
        } else {
            format!("within {}", fmt(self.tolerance, self.unit))
        }
    }
}

/// `ampnote match`'s result.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct MatchResult {
    pub schema_version: u32,
    pub a: String,
    pub b: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub gain_difference_db: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub response_max_deviation_db: Option<f64>,
    pub pass: bool,
    pub checks: Vec<MatchCheck>,
    pub warnings: Vec<String>,
}

/// The largest difference between two response curves over 20 Hz - 20 kHz, in magnitude (dB)
/// or in phase (degrees, wrapped), matching points by frequency.
fn curve_difference(a: &ResponseView, b: &ResponseView, phase: bool) -> Option<f64> {
    let mut worst: Option<f64> = None;
    for p in a
        .points
        .iter()
        .filter(|p| p.frequency_hz >= 20.0 && p.frequency_hz <= 20_000.0)
    {
        if let Some(q) = b
            .points
            .iter()
            .find(|q| (q.frequency_hz / p.frequency_hz - 1.0).abs() < 1e-6)
        {
            let d = if phase {
                crate::analysis::tone::wrap_degrees(q.phase_deg - p.phase_deg).abs()
            } else {
                (q.magnitude_db - p.magnitude_db).abs()
            };
            worst = Some(worst.map_or(d, |w: f64| w.max(d)));
        }
    }
    worst
}

/// Check two channels' runs against the tolerances.
pub fn match_channels(
    name_a: &str,
    a: &[Run],
    name_b: &str,
    b: &[Run],
    tol: &MatchTolerances,
) -> MatchResult {
    let ch_of = |runs: &[Run]| runs.first().map_or(1, |r| r.meta.channel);
    let (ca, cb) = (ch_of(a), ch_of(b));
    let mut checks = Vec::new();
    let mut warnings = Vec::new();
    let mut check = |name: &str, value: Option<f64>, tolerance: f64, unit: Unit| -> Option<f64> {
        let v = value?;
        checks.push(MatchCheck {
            name: name.to_string(),
            value: v,
            tolerance,
            unit,
            minimum: false,
            pass: v.abs() <= tolerance,
        });
        Some(v)
    };
    let (ta, tb) = (latest::<ToneView>(a, ca), latest::<ToneView>(b, cb));
    let (ra, rb) = (latest::<ResponseView>(a, ca), latest::<ResponseView>(b, cb));
    // Gain: from the sweeps (the same drive on both channels by construction), else from the
    // tone runs' levels.
    let gain = match (&ra, &rb, &ta, &tb) {
        (Some(x), Some(y), _, _) => Some(y.reference_gain_db - x.reference_gain_db),
        (_, _, Some(x), Some(y)) => Some(y.fundamental_dbfs - x.fundamental_dbfs),
        _ => None,
    };
    let gain_difference_db = check("gain difference", gain, tol.gain_db, Unit::Db);
    let response_max_deviation_db = match (&ra, &rb) {
        (Some(x), Some(y)) => check(
            "largest response deviation 20 Hz-20 kHz",
            curve_difference(x, y, false),
            tol.response_db,
            Unit::Db,
        ),
        _ => None,
    };
    if let (Some(x), Some(y)) = (&ra, &rb) {
        check(
            "largest phase difference 20 Hz-20 kHz",
            curve_difference(x, y, true),
            tol.phase_deg,
            Unit::Degrees,
        );
    }
    let (pa, pb) = (power_runs(a, ca), power_runs(b, cb));
    if let (Some(x), Some(y)) = (pa.first(), pb.first()) {
        let thd = thd_at_power(x, 1.0)
            .zip(thd_at_power(y, 1.0))
            .map(|(p, q)| 20.0 * (q / p).log10());
        check("THD difference at 1 W", thd, tol.thd_db, Unit::Db);
        let p1 = power_at(x, 1.0)
            .zip(power_at(y, 1.0))
            .map(|((p, u), (q, _))| {
                if u == Unit::Watts {
                    10.0 * (q / p).log10()
                } else {
                    q - p
                }
            });
        check("power at 1 % THD difference", p1, tol.power_db, Unit::Db);
    }
    if let (Some(x), Some(y)) = (&ta, &tb) {
        check(
            "noise difference",
            Some(y.noise_dbfs - x.noise_dbfs),
            tol.noise_db,
            Unit::Db,
        );
    }
    // Separation: each channel driven, the other's level below it at 1 kHz (a lower bound
    // counts when it already reaches the limit).
    for (runs, driven, other) in [(a, ca, cb), (b, cb, ca)] {
        let Some(s) = latest::<crate::analysis::separation::SeparationResult>(runs, driven) else {
            continue;
        };
        let Some(c) = s.channels.iter().find(|c| c.channel == other) else {
            continue;
        };
        let value = c.at_1khz_db.or(c.at_least_db);
        if let Some(v) = value {
            checks.push(MatchCheck {
                name: format!(
                    "separation at 1 kHz, ch{other} below ch{driven}{}",
                    if c.at_1khz_db.is_none() {
                        " (bound)"
                    } else {
                        ""
                    }
                ),
                value: v,
                tolerance: tol.separation_db,
                unit: Unit::Db,
                minimum: true,
                pass: v >= tol.separation_db,
            });
        }
    }
    if checks.is_empty() {
        warnings.push(format!(
            "`{name_a}` and `{name_b}` share no measurement to match"
        ));
    }
    MatchResult {
        schema_version: super::SCHEMA_VERSION,
        a: name_a.to_string(),
        b: name_b.to_string(),
        gain_difference_db,
        response_max_deviation_db,
        pass: !checks.is_empty() && checks.iter().all(|c| c.pass),
        checks,
        warnings,
    }
}

impl Comparison {
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("serializes") + "\n"
    }

    pub fn to_table(&self) -> String {
        let p = crate::notebook::printable;
        let mut s = format!("{} -> {}\n", p(&self.a), p(&self.b));
        let mut last = 0;
        for l in &self.lines {
            if l.channel != last {
                s += &format!("\nChannel {}\n", l.channel);
                last = l.channel;
            }
            s += &format!("  {}\n", p(&l.sentence));
        }
        for w in &self.warnings {
            s += &format!("  warning: {}\n", p(w));
        }
        s
    }
}

impl MatchResult {
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("serializes") + "\n"
    }

    pub fn to_table(&self) -> String {
        let mut s = format!(
            "{} against {}: {}\n\n",
            crate::notebook::printable(&self.a),
            crate::notebook::printable(&self.b),
            if self.pass { "MATCHED" } else { "NOT MATCHED" }
        );
        for c in &self.checks {
            s += &format!(
                "  {:<42} {:>13} ({})  {}\n",
                c.name,
                fmt(c.value, c.unit),
                c.limit_text(),
                if c.pass { "pass" } else { "FAIL" }
            );
        }
        for w in &self.warnings {
            s += &format!("  warning: {}\n", crate::notebook::printable(w));
        }
        s
    }
}
