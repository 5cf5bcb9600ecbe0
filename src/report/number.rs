//! Numbers a person reads: one formatter for tables, the report and compare's sentences.
//!
//! Rules (our own, after the usual bench practice of quoting 3 significant figures): percentages
//! and ratios carry 3 significant figures and never an exponent (a percentage too small for 7
//! decimals reads as `< 0.0000001 %`); levels in dB carry fixed decimals (2 for dB, dBFS, dBV
//! and dBu, 1 for dBc); frequencies 3 significant figures, in kHz from 1 kHz; watts, volts and
//! ohms 3 significant figures with a unit prefix where it reads better (mW, mV, uV); `-0` is
//! shown as `0`; a detection limit is `< value`.

use serde::{Deserialize, Serialize};

/// The unit a figure is measured in. Serialized as its symbol (`"%"`, `"dBFS"`, `"W"`...).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub enum Unit {
    #[serde(rename = "%")]
    Percent,
    #[serde(rename = "dB")]
    Db,
    #[serde(rename = "dBFS")]
    Dbfs,
    #[serde(rename = "dBc")]
    Dbc,
    #[serde(rename = "dBV")]
    Dbv,
    #[serde(rename = "dBu")]
    Dbu,
    #[serde(rename = "Hz")]
    Hz,
    #[serde(rename = "W")]
    Watts,
    #[serde(rename = "V")]
    Volts,
    #[serde(rename = "V DC")]
    VoltsDc,
    #[serde(rename = "mA")]
    Milliamps,
    #[serde(rename = "ohm")]
    Ohms,
    /// A plain number (a damping factor).
    #[serde(rename = "")]
    Ratio,
    #[serde(rename = "ms")]
    Ms,
    #[serde(rename = "us")]
    Us,
    #[serde(rename = "ppm")]
    Ppm,
    #[serde(rename = "deg")]
    Degrees,
}

impl Unit {
    /// The symbol written after a number.
    pub fn symbol(self) -> &'static str {
        match self {
            Unit::Percent => "%",
            Unit::Db => "dB",
            Unit::Dbfs => "dBFS",
            Unit::Dbc => "dBc",
            Unit::Dbv => "dBV",
            Unit::Dbu => "dBu",
            Unit::Hz => "Hz",
            Unit::Watts => "W",
            Unit::Volts => "V",
            Unit::VoltsDc => "V DC",
            Unit::Milliamps => "mA",
            Unit::Ohms => "ohm",
            Unit::Ratio => "",
            Unit::Ms => "ms",
            Unit::Us => "us",
            Unit::Ppm => "ppm",
            Unit::Degrees => "deg",
        }
    }

    /// Levels in decibels (their changes are differences, in dB).
    pub fn is_db(self) -> bool {
        matches!(
            self,
            Unit::Db | Unit::Dbfs | Unit::Dbc | Unit::Dbv | Unit::Dbu
        )
    }

    /// Quantities whose change reads best as a ratio in dB: powers (10 lg) and amplitudes or
    /// amplitude ratios (20 lg).
    pub fn change_in_db(self) -> Option<f64> {
        match self {
            Unit::Watts => Some(10.0),
            Unit::Percent | Unit::Volts => Some(20.0),
            _ => None,
        }
    }
}

/// `x` without a negative zero.
fn unsigned_zero(x: f64) -> f64 {
    if x == 0.0 {
        0.0
    } else {
        x
    }
}

/// `x` with `digits` significant figures, never in exponent form, at most `max_decimals`
/// decimals (a value that needs more reads as `< 10^-max_decimals`).
pub fn significant(x: f64, digits: u32, max_decimals: usize) -> String {
    if !x.is_finite() {
        return "-".to_string();
    }
    if x == 0.0 {
        return "0".to_string();
    }
    let magnitude = x.abs().log10().floor() as i32;
    let decimals = (digits as i32 - 1 - magnitude).max(0) as usize;
    if decimals > max_decimals {
        let limit = 10f64.powi(-(max_decimals as i32));
        if x.abs() < 0.5 * limit {
            return format!("< {}", format_fixed(limit, max_decimals));
        }
    }
    let decimals = decimals.min(max_decimals);
    // Rounding can carry into another digit (9.995 -> 10.00): one decimal fewer then.
    let text = format_fixed(x, decimals);
    let rounded: f64 = text.parse().unwrap_or(x);
    if decimals > 0 && rounded.abs() >= 10f64.powi(magnitude + 1) {
        format_fixed(x, decimals - 1)
    } else {
        text
    }
}

fn format_fixed(x: f64, decimals: usize) -> String {
    let s = format!("{:.*}", decimals, unsigned_zero(x));
    // "-0.00" after rounding a tiny negative.
    if s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.') {
        s[1..].to_string()
    } else {
        s
    }
}

/// A percentage: 3 significant figures, no exponent, at most 7 decimals.
pub fn percent(x: f64) -> String {
    significant(x, 3, 7)
}

/// A level in dB with the unit's fixed decimals.
pub fn decibels(x: f64, unit: Unit) -> String {
    let decimals = if unit == Unit::Dbc { 1 } else { 2 };
    format_fixed(x, decimals)
}

/// A number with its unit, as read in a table cell or a sentence: `0.251 %`, `-1.00 dBFS`,
/// `128 mW`, `1.00 kHz`, `2.50 ohm`.
pub fn show(x: f64, unit: Unit) -> String {
    if !x.is_finite() {
        return "-".to_string();
    }
    let sig3 = |v: f64| significant(v, 3, 6);
    // The value in the smaller unit unless it rounds to 1000 of them or more (0.99996 W reads
    // 1.00 W, not 1000 mW).
    let scaled = |v: f64, factor: f64, digits: u32, small: &str, large: &str| {
        let text = significant(v * factor, digits, 6);
        if text.trim_start_matches('-').parse::<f64>().unwrap_or(0.0) >= 1000.0 {
            format!("{} {large}", significant(v, digits, 6))
        } else {
            format!("{text} {small}")
        }
    };
    match unit {
        Unit::Percent => format!("{} %", percent(x)),
        u if u.is_db() => format!("{} {}", decibels(x, u), u.symbol()),
        Unit::Hz if x.abs() >= 1000.0 => format!("{} kHz", significant(x / 1000.0, 3, 3)),
        Unit::Hz => scaled(x / 1000.0, 1000.0, 3, "Hz", "kHz"),
        Unit::Watts if x.abs() < 1.0 && x != 0.0 => scaled(x, 1e3, 3, "mW", "W"),
        Unit::Watts => format!("{} W", sig3(x)),
        Unit::Volts | Unit::VoltsDc => {
            let (v, mv, uv) = if unit == Unit::VoltsDc {
                ("V DC", "mV DC", "uV DC")
            } else {
                ("V", "mV", "uV")
            };
            if x.abs() >= 1.0 || x == 0.0 {
                format!("{} {v}", sig3(x))
            } else if x.abs() >= 1e-3 {
                scaled(x, 1e3, 3, mv, v)
            } else {
                scaled(x * 1e3, 1e3, 3, uv, mv)
            }
        }
        Unit::Ratio => sig3(x),
        u => format!("{} {}", sig3(x), u.symbol()),
    }
}

/// A detection limit: the figure is at most this.
pub fn bound(x: f64, unit: Unit) -> String {
    format!("< {}", show(x, unit))
}

/// A lower bound: the figure is at least this.
pub fn lower_bound(x: f64, unit: Unit) -> String {
    format!("> {}", show(x, unit))
}

/// A change with its sign: `+1.25 dB`, `-3.0 Hz`.
pub fn change(delta: f64, unit: Unit) -> String {
    let body = show(delta, unit);
    if delta > 0.0 && !body.starts_with(['<', '>']) {
        format!("+{body}")
    } else {
        body
    }
}
