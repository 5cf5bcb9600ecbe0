//! Before/after comparison of two sets of runs, and the channel-match check.
//!
//! Both read the figures each run's result holds (tone, power, response, output impedance) and set
//! them side by side; a figure only one side measured is left out and said so.

use crate::notebook::Run;
use serde::Serialize;
use serde_json::Value;

/// One compared figure.
#[derive(Debug, Clone, Serialize)]
pub struct CompareLine {
    pub channel: usize,
    pub figure: String,
    pub a: f64,
    pub b: f64,
    pub unit: String,
    /// B relative to A, in `delta_unit` (dB for powers, levels and ratios; the unit itself for
    /// dB figures and impedances).
    pub delta: f64,
    pub delta_unit: String,
    pub sentence: String,
}

/// B's frequency response minus A's, per channel (the deviation curve).
#[derive(Debug, Clone, Serialize)]
pub struct DeviationCurve {
    pub channel: usize,
    /// `[frequency_hz, delta_db]` at the frequencies both responses share.
    pub points: Vec<[f64; 2]>,
}

/// `ampnote compare`'s result.
#[derive(Debug, Clone, Serialize)]
pub struct Comparison {
    pub schema_version: u32,
    pub a: String,
    pub b: String,
    pub lines: Vec<CompareLine>,
    pub deviation_curves: Vec<DeviationCurve>,
    pub warnings: Vec<String>,
}

/// B minus A at the frequencies both responses share (same stimulus, so the same points).
fn deviation_curve(a: &Value, b: &Value) -> Vec<[f64; 2]> {
    let pts = |v: &Value| -> Vec<(f64, f64)> {
        v.get("points")
            .and_then(Value::as_array)
            .map(|p| {
                p.iter()
                    .filter_map(|q| Some((num(q, "frequency_hz")?, num(q, "magnitude_db")?)))
                    .collect()
            })
            .unwrap_or_default()
    };
    let (pa, pb) = (pts(a), pts(b));
    pa.iter()
        .filter_map(|&(f, x)| {
            pb.iter()
                .find(|(g, _)| (g / f - 1.0).abs() < 1e-6)
                .map(|&(_, y)| [f, y - x])
        })
        .collect()
}

/// The latest run of `procedure` on `channel` among `runs`.
fn latest<'a>(runs: &'a [Run], procedure: &str, channel: usize) -> Option<&'a Value> {
    runs.iter()
        .filter(|r| r.meta.procedure == procedure && r.meta.channel == channel)
        .max_by(|x, y| x.meta.id.cmp(&y.meta.id))
        .map(|r| &r.result)
}

fn num(v: &Value, key: &str) -> Option<f64> {
    v.get(key).and_then(Value::as_f64)
}

fn harmonic_dbc(v: &Value, order: u64) -> Option<f64> {
    v.get("harmonics")?
        .as_array()?
        .iter()
        .find(|h| h.get("order").and_then(Value::as_u64) == Some(order))
        .and_then(|h| num(h, "level_dbc"))
}

fn power_at(v: &Value, thd: f64) -> Option<(f64, &'static str)> {
    let p = v
        .get("power_at_thd")?
        .as_array()?
        .iter()
        .find(|p| num(p, "thd_percent") == Some(thd))?;
    num(p, "output_w")
        .map(|w| (w, "W"))
        .or_else(|| num(p, "output_dbfs").map(|d| (d, "dBFS")))
}

/// THD at output power `w` from a staircase, interpolated log-log between the bracketing steps.
pub fn thd_at_power(v: &Value, w: f64) -> Option<f64> {
    let steps: Vec<(f64, f64)> = v
        .get("steps")?
        .as_array()?
        .iter()
        .filter(|s| s.get("excluded").and_then(Value::as_bool) != Some(true))
        .filter_map(|s| Some((num(s, "output_w")?, num(s, "thd_percent")?)))
        .collect();
    let pair = steps.windows(2).find(|p| p[0].0 <= w && p[1].0 >= w)?;
    let t = (w / pair[0].0).ln() / (pair[1].0 / pair[0].0).ln();
    Some((pair[0].1.ln() + t * (pair[1].1.ln() - pair[0].1.ln())).exp())
}

fn fmt(v: f64, unit: &str) -> String {
    match unit {
        "W" if v < 0.9995 => format!("{:.0} mW", v * 1000.0),
        "W" => format!("{v:.2} W"),
        "%" => format!("{} %", super::tone::fmt_pct(v)),
        "Hz" if v >= 1000.0 => format!("{:.2} kHz", v / 1000.0),
        "Hz" => format!("{v:.1} Hz"),
        "ohm" => format!("{v:.2} ohm"),
        "" => format!("{v:.2}"),
        _ => format!("{v:.2} {unit}"),
    }
}

/// A line with its plain sentence. `ratio` figures (powers, percentages, volts) get a dB delta;
/// dB figures and the rest a plain difference.
fn line(channel: usize, figure: &str, a: f64, b: f64, unit: &str) -> CompareLine {
    let ratio_kind = matches!(unit, "W" | "%" | "V");
    let (delta, delta_unit) = match unit {
        "W" => (10.0 * (b / a).log10(), "dB".to_string()),
        "%" | "V" => (20.0 * (b / a).log10(), "dB".to_string()),
        u => (b - a, u.to_string()),
    };
    let sign = if delta >= 0.0 { "+" } else { "" };
    let d = if ratio_kind || unit.starts_with("dB") {
        format!("{sign}{delta:.2} dB")
    } else {
        format!("{sign}{}", fmt(delta, unit))
    };
    CompareLine {
        channel,
        figure: figure.to_string(),
        a,
        b,
        unit: unit.to_string(),
        delta,
        delta_unit,
        sentence: format!("{figure}: {} -> {}, {d}", fmt(a, unit), fmt(b, unit)),
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
        if let (Some(ra), Some(rb)) = (latest(a, "response", ch), latest(b, "response", ch)) {
            let points = deviation_curve(ra, rb);
            if !points.is_empty() {
                deviation_curves.push(DeviationCurve {
                    channel: ch,
                    points,
                });
            }
        }
        let mut add = |fig: &str, x: Option<f64>, y: Option<f64>, unit: &str| {
            if let (Some(x), Some(y)) = (x, y) {
                if x.is_finite()
                    && y.is_finite()
                    && (unit != "W" && unit != "%" || x > 0.0 && y > 0.0)
                {
                    lines.push(line(ch, fig, x, y, unit));
                }
            }
        };
        if let (Some(pa), Some(pb)) = (latest(a, "power", ch), latest(b, "power", ch)) {
            for t in [1.0, 3.0, 10.0] {
                match (power_at(pa, t), power_at(pb, t)) {
                    (Some((x, u)), Some((y, v))) if u == v => add(&format!("power at {t} % THD"), Some(x), Some(y), u),
                    (Some((_, u)), Some((_, v))) => skipped.push(format!(
                        "channel {ch}: power at {t} % is in {u} on one side and {v} on the other: not compared (give both sides a calibration)"
                    )),
                    _ => {}
                }
            }
            add(
                "THD at 1 W (staircase)",
                thd_at_power(pa, 1.0),
                thd_at_power(pb, 1.0),
                "%",
            );
        }
        if let (Some(ta), Some(tb)) = (latest(a, "tone", ch), latest(b, "tone", ch)) {
            let (wa, wb) = (num(ta, "output_w"), num(tb, "output_w"));
            if let (Some(x), Some(y)) = (wa, wb) {
                if (10.0 * (y / x).log10()).abs() > 0.5 {
                    warnings.push(format!(
                        "channel {ch}: the tone runs were at different powers ({} and {}); their THD figures are not like for like",
                        fmt(x, "W"),
                        fmt(y, "W")
                    ));
                }
            }
            let at = wa.map_or(String::new(), |w| format!(" at {}", fmt(w, "W")));
            add(
                &format!("THD{at}"),
                num(ta, "thd_percent"),
                num(tb, "thd_percent"),
                "%",
            );
            add(
                &format!("THD+N{at}"),
                num(ta, "thdn_percent"),
                num(tb, "thdn_percent"),
                "%",
            );
            for o in 2..=5 {
                add(
                    &format!("H{o}{at}"),
                    harmonic_dbc(ta, o),
                    harmonic_dbc(tb, o),
                    "dBc",
                );
            }
            add(
                "noise",
                num(ta, "noise_dbfs"),
                num(tb, "noise_dbfs"),
                "dBFS",
            );
            let hum = |v: &Value| -> Option<f64> {
                v.get("hum")?
                    .as_array()?
                    .iter()
                    .filter_map(|h| num(h, "level_dbc"))
                    .reduce(f64::max)
            };
            add("strongest hum line", hum(ta), hum(tb), "dBc");
        }
        if let (Some(ra), Some(rb)) = (latest(a, "response", ch), latest(b, "response", ch)) {
            add(
                "low -3 dB point",
                num(ra, "low_3db_hz"),
                num(rb, "low_3db_hz"),
                "Hz",
            );
            add(
                "high -3 dB point",
                num(ra, "high_3db_hz"),
                num(rb, "high_3db_hz"),
                "Hz",
            );
            add(
                "largest deviation 20 Hz-20 kHz",
                num(ra, "max_deviation_db"),
                num(rb, "max_deviation_db"),
                "dB",
            );
            add(
                "H2 at 40 Hz (sweep)",
                sweep_harmonic(ra, 2, 40.0),
                sweep_harmonic(rb, 2, 40.0),
                "dBc",
            );
        }
        if let (Some(na), Some(nb)) = (latest(a, "noise", ch), latest(b, "noise", ch)) {
            add(
                "noise with no signal (flat)",
                num(na, "noise_dbfs"),
                num(nb, "noise_dbfs"),
                "dBFS",
            );
            add(
                "noise with no signal (A-weighted)",
                num(na, "noise_a_dbfs"),
                num(nb, "noise_a_dbfs"),
                "dBFS",
            );
            add(
                "hum and noise with no signal",
                num(na, "hum_and_noise_dbfs"),
                num(nb, "hum_and_noise_dbfs"),
                "dBFS",
            );
            add(
                "S/N re 1 W (A-weighted)",
                num(na, "snr_a_re_1w_db"),
                num(nb, "snr_a_re_1w_db"),
                "dB",
            );
        }
        if let (Some(za), Some(zb)) = (latest(a, "zout", ch), latest(b, "zout", ch)) {
            add(
                "output impedance",
                num(za, "zout_ohms"),
                num(zb, "zout_ohms"),
                "ohm",
            );
            add(
                "damping factor",
                num(za, "damping_factor"),
                num(zb, "damping_factor"),
                "",
            );
        }
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
fn sweep_harmonic(v: &Value, order: u64, f: f64) -> Option<f64> {
    let curve = v
        .get("harmonics")?
        .as_array()?
        .iter()
        .find(|h| h.get("order").and_then(Value::as_u64) == Some(order))?;
    curve
        .get("points")?
        .as_array()?
        .iter()
        .filter_map(|p| Some((num(p, "frequency_hz")?, num(p, "level_dbc")?)))
        .min_by(|x, y| (x.0 / f).ln().abs().total_cmp(&(y.0 / f).ln().abs()))
        .filter(|p| (p.0 / f).ln().abs() < 0.05)
        .map(|p| p.1)
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
        }
    }
}

#[derive(Debug, Clone, Serialize)]
pub struct MatchCheck {
    pub name: String,
    pub value: f64,
    pub tolerance: f64,
    pub unit: String,
    pub pass: bool,
}

/// `ampnote match`'s result.
#[derive(Debug, Clone, Serialize)]
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

/// The largest difference between two response curves over 20 Hz - 20 kHz, for `key`
/// (`magnitude_db` or `phase_deg`, wrapped), matching points by frequency.
fn curve_difference(a: &Value, b: &Value, key: &str) -> Option<f64> {
    let pts = |v: &Value| -> Option<Vec<(f64, f64)>> {
        Some(
            v.get("points")?
                .as_array()?
                .iter()
                .filter_map(|p| Some((num(p, "frequency_hz")?, num(p, key)?)))
                .filter(|p| p.0 >= 20.0 && p.0 <= 20_000.0)
                .collect(),
        )
    };
    let (pa, pb) = (pts(a)?, pts(b)?);
    let mut worst: Option<f64> = None;
    for (f, x) in &pa {
        if let Some((_, y)) = pb.iter().find(|(g, _)| (g / f - 1.0).abs() < 1e-6) {
            let d = if key == "phase_deg" {
                crate::analysis::tone::wrap_degrees(y - x).abs()
            } else {
                (y - x).abs()
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
    let mut check = |name: &str, value: Option<f64>, tolerance: f64, unit: &str| -> Option<f64> {
        let v = value?;
        checks.push(MatchCheck {
            name: name.to_string(),
            value: v,
            tolerance,
            unit: unit.to_string(),
            pass: v.abs() <= tolerance,
        });
        Some(v)
    };
    let (ta, tb) = (latest(a, "tone", ca), latest(b, "tone", cb));
    let (ra, rb) = (latest(a, "response", ca), latest(b, "response", cb));
    // Gain: from the sweeps (the same drive on both channels by construction); tone runs only
    // when they were driven alike (a tone set to 1 W on each channel hides the difference).
    let drive = |v: &Value| num(v, "fundamental_dbfs").zip(num(v, "drive_dbfs"));
    let gain = match (ra, rb, ta, tb) {
        (Some(x), Some(y), _, _) => num(y, "reference_gain_db")
            .zip(num(x, "reference_gain_db"))
            .map(|(p, q)| p - q),
        (_, _, Some(x), Some(y)) => match (drive(x), drive(y)) {
            (Some((lx, dx)), Some((ly, dy))) => Some((ly - dy) - (lx - dx)),
            _ => num(y, "fundamental_dbfs")
                .zip(num(x, "fundamental_dbfs"))
                .map(|(p, q)| p - q),
        },
        _ => None,
    };
    let gain_difference_db = check("gain difference", gain, tol.gain_db, "dB");
    let response_max_deviation_db = match (ra, rb) {
        (Some(x), Some(y)) => check(
            "largest response deviation 20 Hz-20 kHz",
            curve_difference(x, y, "magnitude_db"),
            tol.response_db,
            "dB",
        ),
        _ => None,
    };
    if let (Some(x), Some(y)) = (ra, rb) {
        check(
            "largest phase difference 20 Hz-20 kHz",
            curve_difference(x, y, "phase_deg"),
            tol.phase_deg,
            "deg",
        );
    }
    let (pa, pb) = (latest(a, "power", ca), latest(b, "power", cb));
    if let (Some(x), Some(y)) = (pa, pb) {
        let thd = thd_at_power(x, 1.0)
            .zip(thd_at_power(y, 1.0))
            .map(|(p, q)| 20.0 * (q / p).log10());
        check("THD difference at 1 W", thd, tol.thd_db, "dB");
        let p1 = power_at(x, 1.0)
            .zip(power_at(y, 1.0))
            .map(|((p, u), (q, _))| {
                if u == "W" {
                    10.0 * (q / p).log10()
                } else {
                    q - p
                }
            });
        check("power at 1 % THD difference", p1, tol.power_db, "dB");
    }
    if let (Some(x), Some(y)) = (ta, tb) {
        check(
            "noise difference",
            num(y, "noise_dbfs")
                .zip(num(x, "noise_dbfs"))
                .map(|(p, q)| p - q),
            tol.noise_db,
            "dB",
        );
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
        let mut s = format!("{} -> {}\n", self.a, self.b);
        let mut last = 0;
        for l in &self.lines {
            if l.channel != last {
                s += &format!("\nChannel {}\n", l.channel);
                last = l.channel;
            }
            s += &format!("  {}\n", l.sentence);
        }
        for w in &self.warnings {
            s += &format!("  warning: {w}\n");
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
            self.a,
            self.b,
            if self.pass { "MATCHED" } else { "NOT MATCHED" }
        );
        for c in &self.checks {
            s += &format!(
                "  {:<42} {:>8.2} {:<4} (within {} {})  {}\n",
                c.name,
                c.value,
                c.unit,
                c.tolerance,
                c.unit,
                if c.pass { "pass" } else { "FAIL" }
            );
        }
        for w in &self.warnings {
            s += &format!("  warning: {w}\n");
        }
        s
    }
}
