//! DC operating points kept in the notebook: B+, bias, cathode and anode voltages, and with a
//! resistor the current through it (Ohm's law, I = V / R) and the power it dissipates
//! (P = V^2 / R), against the part's rating when one is given.
//!
//! These readings are taken with a meter inside the amplifier, at lethal voltages: the command
//! that records them says so every time.

use crate::error::{Error, Result};
use crate::warning::WarningCode as C;
use serde::{Deserialize, Serialize};

/// Resistors run above this share of their rating are worth a warning: common practice derates
/// resistors in a valve amplifier to about half their rating for life and stability.
pub const DERATE_SHARE: f64 = 0.5;

/// One DC reading.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DcPoint {
    pub name: String,
    /// Volts across the part (or to ground, for a node), as read.
    pub volts: f64,
    /// The resistor the voltage was read across, ohm.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ohms: Option<f64>,
    /// Through that resistor, mA (Ohm's law).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub current_ma: Option<f64>,
    /// Dissipated in it, W (V^2 / R).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub dissipation_w: Option<f64>,
    /// Its power rating, W, when given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rating_w: Option<f64>,
    /// Dissipating more than its rating.
    #[serde(default)]
    pub overstressed: bool,
}

/// A label's DC operating points.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DcResult {
    pub points: Vec<DcPoint>,
    #[serde(default)]
    pub warnings: Vec<crate::warning::Warning>,
}

/// The caution shown whenever DC points are recorded.
pub const CAUTION: &str = "DC readings inside a valve amplifier are taken at lethal voltages, also after switch-off (charged capacitors): one hand, insulated probes clipped on with the power off, the dummy load connected; follow local codes and licensed practice.";

fn bad(what: &str, text: &str, why: &str) -> Error {
    Error::InvalidSetting(format!("{what} `{text}`: {why}"))
}

/// A number with an optional SI multiplier (k, M for ohms; m for millivolts), e.g. `4.7k`.
fn number(s: &str) -> Option<f64> {
    let s = s.trim();
    let (body, mult) = match s.chars().last()? {
        'k' | 'K' => (&s[..s.len() - 1], 1e3),
        'M' => (&s[..s.len() - 1], 1e6),
        'm' => (&s[..s.len() - 1], 1e-3),
        _ => (s, 1.0),
    };
    let v: f64 = body.trim().parse().ok()?;
    (v.is_finite()).then_some(v * mult)
}

fn name_of(what: &str, text: &str, name: &str) -> Result<String> {
    let name = name.trim();
    if name.is_empty() || name.chars().count() > 40 {
        return Err(bad(
            what,
            text,
            "the name must be 1 to 40 characters, e.g. B+ or R7",
        ));
    }
    if name.chars().any(|c| c.is_control()) {
        return Err(bad(what, text, "the name holds a control character"));
    }
    Ok(name.to_string())
}

/// `NAME=VOLTS` or `NAME=VOLTS@OHMS` (e.g. `B+=365`, `R7=2.1@1k`).
pub fn parse_point(text: &str) -> Result<(String, f64, Option<f64>)> {
    let what = "--point";
    let (name, rest) = text.split_once('=').ok_or_else(|| {
        bad(
            what,
            text,
            "write NAME=VOLTS or NAME=VOLTS@OHMS, e.g. B+=365 or R7=2.1@1k",
        )
    })?;
    let name = name_of(what, text, name)?;
    let (v, r) = match rest.split_once('@') {
        Some((v, r)) => (v, Some(r)),
        None => (rest, None),
    };
    let volts = number(v).ok_or_else(|| bad(what, text, "the voltage is not a number"))?;
    if volts.abs() > 10_000.0 {
        return Err(bad(
            what,
            text,
            "a reading over 10 kV is no valve amplifier's (a typo?)",
        ));
    }
    let ohms = match r {
        None => None,
        Some(r) => {
            let ohms =
                number(r).ok_or_else(|| bad(what, text, "the resistance is not a number"))?;
            if !(ohms > 0.0 && ohms <= 1e9) {
                return Err(bad(
                    what,
                    text,
                    "the resistance must lie above 0 and up to 1 Gohm",
                ));
            }
            Some(ohms)
        }
    };
    Ok((name, volts, ohms))
}

/// `NAME=W` (e.g. `R7=2`).
pub fn parse_rating(text: &str) -> Result<(String, f64)> {
    let what = "--max-w";
    let (name, w) = text
        .split_once('=')
        .ok_or_else(|| bad(what, text, "write NAME=WATTS, e.g. R7=2"))?;
    let name = name_of(what, text, name)?;
    let w = number(w).ok_or_else(|| bad(what, text, "the rating is not a number"))?;
    if !(w > 0.0 && w <= 10_000.0) {
        return Err(bad(what, text, "a rating must lie above 0 and up to 10 kW"));
    }
    Ok((name, w))
}

/// The points with their currents and dissipations, each rating checked.
pub fn operating_points(
    points: Vec<(String, f64, Option<f64>)>,
    ratings: Vec<(String, f64)>,
) -> Result<DcResult> {
    if points.is_empty() {
        return Err(Error::InvalidSetting(
            "give at least one --point NAME=VOLTS".into(),
        ));
    }
    let mut out: Vec<DcPoint> = Vec::new();
    let mut warnings = Vec::new();
    for (name, volts, ohms) in points {
        if out.iter().any(|p| p.name == name) {
            return Err(Error::InvalidSetting(format!(
                "--point {name} is given twice; give each point once"
            )));
        }
        out.push(DcPoint {
            current_ma: ohms.map(|r| 1000.0 * volts / r),
            dissipation_w: ohms.map(|r| volts * volts / r),
            name,
            volts,
            ohms,
            rating_w: None,
            overstressed: false,
        });
    }
    for (name, w) in ratings {
        let Some(p) = out.iter_mut().find(|p| p.name == name) else {
            return Err(Error::InvalidSetting(format!(
                "--max-w {name}: no --point {name} to rate; give its voltage and resistor as --point {name}=VOLTS@OHMS"
            )));
        };
        let Some(d) = p.dissipation_w else {
            return Err(Error::InvalidSetting(format!(
                "--max-w {name}: the point has no resistor, so its dissipation is unknown; write --point {name}=VOLTS@OHMS"
            )));
        };
        p.rating_w = Some(w);
        if d > w {
            p.overstressed = true;
            warnings.push(C::OverRating.say(format!(
                "{name} dissipates {d:.3} W, over its {w} W rating: fit a part rated for it before running the amplifier again"
            )));
        } else if d > DERATE_SHARE * w {
            warnings.push(C::OverRating.say(format!(
                "{name} dissipates {d:.3} W, {:.0} % of its {w} W rating: common practice runs resistors at about half their rating",
                100.0 * d / w
            )));
        }
    }
    Ok(DcResult {
        points: out,
        warnings,
    })
}

impl DcResult {
    /// One line: each point with its current and dissipation.
    pub fn headline(&self) -> String {
        self.points
            .iter()
            .map(|p| match (p.ohms, p.current_ma, p.dissipation_w) {
                (Some(r), Some(i), Some(w)) => format!(
                    "{} {:.2} V over {} ohm: {:.2} mA, {:.3} W{}",
                    crate::notebook::printable(&p.name),
                    p.volts,
                    r,
                    i,
                    w,
                    if p.overstressed { " (OVER RATING)" } else { "" }
                ),
                _ => format!("{} {:.1} V", crate::notebook::printable(&p.name), p.volts),
            })
            .collect::<Vec<_>>()
            .join("; ")
    }
}
