//! The channel-match check: two channels of one label against tolerances.

use super::*;

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
    pub warnings: Vec<Warning>,
}

/// The largest difference between two response curves over 20 Hz - 20 kHz, in magnitude (dB)
/// or in phase (degrees, wrapped), matching points by frequency.
pub(super) fn curve_difference(a: &ResponseView, b: &ResponseView, phase: bool) -> Option<f64> {
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
    // Staircases at the same frequency only: power at 1 % at 100 Hz against 1 kHz is no match.
    let same_f = pa.iter().find_map(|x| {
        pb.iter()
            .find(|y| (y.frequency_hz / x.frequency_hz - 1.0).abs() < 1e-3)
            .map(|y| (x, y))
    });
    if same_f.is_none() && !pa.is_empty() && !pb.is_empty() {
        warnings.push(C::NotCompared.say(format!(
            "channels {ca} and {cb}: their staircases are at different frequencies ({} and {}): power and THD at 1 W not matched (run both at one frequency)",
            fmt(pa[0].frequency_hz, Unit::Hz),
            fmt(pb[0].frequency_hz, Unit::Hz)
        )));
    }
    if let Some((x, y)) = same_f {
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
        warnings.push(C::NothingShared.say(format!(
            "`{name_a}` and `{name_b}` share no measurement to match"
        )));
    }
    MatchResult {
        schema_version: crate::report::SCHEMA_VERSION,
        a: name_a.to_string(),
        b: name_b.to_string(),
        gain_difference_db,
        response_max_deviation_db,
        pass: !checks.is_empty() && checks.iter().all(|c| c.pass),
        checks,
        warnings,
    }
}

impl MatchResult {
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
            s += &format!("  warning: {}\n", crate::notebook::printable(&w.message));
        }
        s
    }
}
