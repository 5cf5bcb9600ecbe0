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
use crate::warning::{Warning, WarningCode as C};
use serde::Serialize;

mod channels;
mod figures;
pub use channels::*;
use figures::*;

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
    ("separation", Some(Better::Higher)),
    ("rise time", Some(Better::Lower)),
    ("overshoot", Some(Better::Lower)),
    ("settling", Some(Better::Lower)),
    ("tilt", Some(Better::Lower)),
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
    /// The side's value is a lower bound (the figure is at least this: a separation whose
    /// crosstalk sank under the floor).
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub a_lower_bound: bool,
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub b_lower_bound: bool,
    pub unit: Unit,
    /// B relative to A, in `delta_unit` (dB for powers, levels and ratios; the unit itself for
    /// dB figures and impedances); `null` when a side is a bound or the runs are not like for
    /// like (the sentence says why).
    pub delta: Option<f64>,
    pub delta_unit: Unit,
    /// When a bound on one side still tells the direction (from a value to under a detection
    /// limit below it; from a value to a lower bound above it; and the reverse), the change is
    /// at least this, signed, in `delta_unit`; `null` otherwise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub at_least_change: Option<f64>,
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
        let Some(dir) = self.better else {
            return Verdict::Unknown;
        };
        let Some(d) = self.delta else {
            // A bound on one side can still tell the direction (see `at_least_change`).
            return match (self.at_least_change.map(|c| c > 0.0), dir) {
                (None, _) => Verdict::Unknown,
                (Some(true), Better::Higher) | (Some(false), Better::Lower) => Verdict::Better,
                _ => Verdict::Worse,
            };
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
    pub warnings: Vec<Warning>,
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

/// A value, and whether it is only an upper bound (a detection limit) or a lower bound.
#[derive(Debug, Clone, Copy)]
struct Val {
    v: f64,
    bound: bool,
    lower: bool,
}

fn measured(v: Option<f64>) -> Option<Val> {
    v.map(|v| Val {
        v,
        bound: false,
        lower: false,
    })
}

/// At least `v`.
fn at_least(v: Option<f64>) -> Option<Val> {
    v.map(|v| Val {
        v,
        bound: false,
        lower: true,
    })
}

fn harmonic(lines: &[Harmonic], order: usize) -> Option<Val> {
    lines
        .iter()
        .find(|h| h.order == order && h.in_band)
        .map(|h| Val {
            v: h.level_dbc,
            bound: h.upper_bound,
            lower: false,
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
        } else if x.lower {
            number::lower_bound(x.v, unit)
        } else {
            fmt(x.v, unit)
        }
    };
    let (d, delta_unit) = change(a.v, b.v, unit);
    let magnitude = fmt(d.abs(), delta_unit);
    // (delta, the change known one way only, the words).
    let (delta, at_least, tail) = match (a.bound, b.bound, unlike) {
        (_, _, Some(why)) => (None, None, format!("not compared: {why}")),
        // Lower bounds (at least): the change is known one way only.
        _ if a.lower || b.lower => match (a.lower, b.lower) {
            (false, true) if d > 0.0 => (
                None,
                Some(d),
                format!("now under the floor: up by at least {magnitude}"),
            ),
            (true, false) if d < 0.0 => (
                None,
                Some(d),
                format!("was under the floor: down by at least {magnitude}"),
            ),
            (true, true) => (
                None,
                None,
                "both under the floor: no change can be read".to_string(),
            ),
            _ => (
                None,
                None,
                "one side is under the floor: no change can be read".to_string(),
            ),
        },
        (false, false, None) => (Some(d), None, number::change(d, delta_unit)),
        (true, true, None) => (
            None,
            None,
            "both under the noise: no change can be read".to_string(),
        ),
        (false, true, None) if d < 0.0 => (
            None,
            Some(d),
            format!("now under the noise: down by at least {magnitude}"),
        ),
        (true, false, None) if d > 0.0 => (
            None,
            Some(d),
            format!("now above the noise: up by at least {magnitude}"),
        ),
        _ => (
            None,
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
        a_lower_bound: a.lower,
        b_lower_bound: b.lower,
        unit,
        delta,
        delta_unit,
        at_least_change: at_least,
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
    skipped: &'a mut Vec<Warning>,
    warnings: &'a mut Vec<Warning>,
    deviation_curves: &'a mut Vec<DeviationCurve>,
    /// Either side holds a circuit rig's prediction: it has no noise or hum of its own (a
    /// simulator adds none unless the netlist has sources for them), so those figures are not set
    /// against a measurement.
    predicted: bool,
    /// Whether this channel has said so already.
    noise_refused: bool,
}

impl Sink<'_> {
    /// Whether noise and hum figures may be compared; says once per channel why not.
    fn noise_comparable(&mut self) -> bool {
        if self.predicted && !self.noise_refused {
            self.noise_refused = true;
            self.skipped.push(C::NotCompared.say(format!(
                "channel {}: noise, hum and THD+N not compared: a circuit rig's prediction has no noise or hum of its own (only what the netlist's sources put there)",
                self.ch
            )));
        }
        !self.predicted
    }
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
        warnings.push(C::UnlikeLoads.say(format!(
            "the two sides were measured into different loads ({la:?} and {lb:?} ohm): power and distortion at a given power are comparable, the amplifier's behaviour into each load may differ"
        )));
    }
    let calibrated = |runs: &[Run]| runs.iter().any(|r| r.meta.calibration.has_volts());
    if calibrated(a) != calibrated(b) {
        warnings.push(C::UnlikeCalibration.say("one side is calibrated and the other is not: volts and watts cannot be set against dBFS; figures in dBFS are compared only where both sides have them"));
    }
    let same_cal = |x: &Run, y: &Run| {
        let (p, q) = (x.meta.calibration, y.meta.calibration);
        p.input_fs_vrms == q.input_fs_vrms && p.attenuation == q.attenuation
    };
    if let (Some(x), Some(y)) = (a.first(), b.first()) {
        if calibrated(a) && calibrated(b) && !same_cal(x, y) {
            warnings.push(C::UnlikeCalibration.say("the two sides used different calibrations: dBFS figures (noise in dBFS, drive) are not like for like; volts and watts are"));
        }
    }
    let mut channels: Vec<usize> = a.iter().map(|r| r.meta.channel).collect();
    channels.sort();
    channels.dedup();
    let mut skipped: Vec<Warning> = Vec::new();
    let mut deviation_curves = Vec::new();
    let predicted = a.iter().chain(b).any(|r| r.meta.predicted);
    for ch in channels {
        let mut s = Sink {
            ch,
            name_a,
            lines: &mut lines,
            skipped: &mut skipped,
            warnings: &mut warnings,
            deviation_curves: &mut deviation_curves,
            predicted,
            noise_refused: false,
        };
        compare_dc(&mut s, a, b);
        compare_power(&mut s, a, b);
        compare_tone(&mut s, a, b);
        compare_response(&mut s, a, b);
        compare_noise(&mut s, a, b);
        compare_imd(&mut s, a, b);
        compare_zout(&mut s, a, b);
        compare_square(&mut s, a, b);
        compare_separation(&mut s, a, b);
    }
    warnings.extend(skipped);
    if lines.is_empty() {
        warnings.push(C::NothingShared.say(format!("`{name_a}` and `{name_b}` share no measurement on a common channel; nothing to compare")));
    }
    Comparison {
        schema_version: crate::report::SCHEMA_VERSION,
        a: name_a.to_string(),
        b: name_b.to_string(),
        lines,
        deviation_curves,
        warnings,
    }
}

impl Comparison {
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
            s += &format!("  warning: {}\n", p(&w.message));
        }
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A bound on one side tells the direction only for runs that are like for like: H3 from
    /// -100 dBc to under a -110 dBc detection limit is down by at least 10 dB (lower is better:
    /// better), the same between runs at unlike levels is not compared (no verdict); a
    /// separation from 73 dB to at least 80 dB is up by at least 7 dB (better).
    #[test]
    fn a_one_way_change_gets_a_verdict_only_when_compared() {
        let value = |v| Val {
            v,
            bound: false,
            lower: false,
        };
        let limit = Val {
            v: -110.0,
            bound: true,
            lower: false,
        };
        let l = line(1, "H3 at 1.00 W", value(-100.0), limit, Unit::Dbc, None);
        assert_eq!((l.delta, l.at_least_change), (None, Some(-10.0)));
        assert_eq!(l.verdict(), Verdict::Better);
        let l = line(
            1,
            "H3 at 1.00 W",
            value(-100.0),
            limit,
            Unit::Dbc,
            Some("levels differ"),
        );
        assert_eq!(l.at_least_change, None);
        assert_eq!(l.verdict(), Verdict::Unknown);
        let at_least = Val {
            v: 80.0,
            bound: false,
            lower: true,
        };
        let l = line(
            1,
            "separation at 1 kHz, ch2 from ch1",
            value(73.0),
            at_least,
            Unit::Db,
            None,
        );
        assert_eq!(l.at_least_change, Some(7.0));
        assert_eq!(l.verdict(), Verdict::Better);
    }
}
