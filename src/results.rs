//! Every kind of result a run keeps, as one typed value.
//!
//! A run's `result.json` holds the procedure's own result struct as it always has (no wrapper),
//! and its `run.json` names the procedure; [`RunResult::from_stored`] puts the two together and
//! reads the result with serde into the matching variant. Fields added after the first schema
//! carry `#[serde(default)]` on their structs, so runs written by older versions read back; a
//! result that still does not read is reported as damaged with serde's reason, never dropped in
//! silence.

use crate::analysis::blocks::TrendResult;
use crate::analysis::imd::ImdResult;
use crate::analysis::noise::NoiseResult;
use crate::analysis::separation::SeparationResult;
use crate::analysis::square::SquareResult;
use crate::analysis::sweep::ResponseResult;
use crate::analysis::tone::ToneResult;
use crate::procedure::dc::DcResult;
use crate::procedure::power::PowerResult;
use crate::procedure::zout::ZoutResult;
use serde::{Deserialize, Serialize};
use std::fmt;

/// What a run measured. The names are kept in `run.json` (`"procedure": "tone"`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Procedure {
    /// One steady tone (`analyze`).
    Tone,
    /// A level staircase (`power`).
    Power,
    /// A swept sine (`response`).
    Response,
    /// Two tones (`imd`).
    Imd,
    /// Output impedance from two loads (`zout`).
    Zout,
    /// Noise and hum with no signal (`noise`).
    Noise,
    /// Channel separation (`separation`).
    Separation,
    /// Figures per block over a long capture (`trend`).
    Trend,
    /// DC operating points typed in (`notebook dc`).
    Dc,
    /// Square-wave response (`square`).
    Square,
}

impl Procedure {
    /// The name kept in `run.json` and shown in the log.
    pub fn name(self) -> &'static str {
        match self {
            Procedure::Tone => "tone",
            Procedure::Power => "power",
            Procedure::Response => "response",
            Procedure::Imd => "imd",
            Procedure::Zout => "zout",
            Procedure::Noise => "noise",
            Procedure::Separation => "separation",
            Procedure::Trend => "trend",
            Procedure::Dc => "dc",
            Procedure::Square => "square",
        }
    }

    /// Whether `notebook reanalyze` can analyse the run again from its kept files.
    pub fn reanalysable(self) -> bool {
        matches!(
            self,
            Procedure::Tone | Procedure::Power | Procedure::Response
        )
    }
}

impl fmt::Display for Procedure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        // `pad`, so a width (`{:<9}` in the log) lines the column up.
        f.pad(self.name())
    }
}

/// One run's result, whichever procedure made it. Serialized untagged (the procedure is in
/// `run.json`), so `result.json` is the procedure's own struct.
#[derive(Debug, Clone, Serialize)]
#[serde(untagged)]
pub enum RunResult {
    Tone(ToneResult),
    Power(PowerResult),
    Response(ResponseResult),
    Imd(ImdResult),
    Zout(ZoutResult),
    Noise(NoiseResult),
    Separation(SeparationResult),
    Trend(TrendResult),
    Dc(DcResult),
    Square(SquareResult),
}

impl RunResult {
    /// The procedure that made it.
    pub fn procedure(&self) -> Procedure {
        match self {
            RunResult::Tone(_) => Procedure::Tone,
            RunResult::Power(_) => Procedure::Power,
            RunResult::Response(_) => Procedure::Response,
            RunResult::Imd(_) => Procedure::Imd,
            RunResult::Zout(_) => Procedure::Zout,
            RunResult::Noise(_) => Procedure::Noise,
            RunResult::Separation(_) => Procedure::Separation,
            RunResult::Trend(_) => Procedure::Trend,
            RunResult::Dc(_) => Procedure::Dc,
            RunResult::Square(_) => Procedure::Square,
        }
    }

    /// Read a stored `result.json` as the result of `procedure`.
    pub fn from_stored(
        procedure: Procedure,
        value: serde_json::Value,
    ) -> Result<RunResult, serde_json::Error> {
        use serde_json::from_value as read;
        Ok(match procedure {
            Procedure::Tone => RunResult::Tone(read(value)?),
            Procedure::Power => RunResult::Power(read(value)?),
            Procedure::Response => RunResult::Response(read(value)?),
            Procedure::Imd => RunResult::Imd(read(value)?),
            Procedure::Zout => RunResult::Zout(read(value)?),
            Procedure::Noise => RunResult::Noise(read(value)?),
            Procedure::Separation => RunResult::Separation(read(value)?),
            Procedure::Trend => RunResult::Trend(read(value)?),
            Procedure::Dc => RunResult::Dc(read(value)?),
            Procedure::Square => RunResult::Square(read(value)?),
        })
    }

    /// The one-line figure `notebook log` shows beside the run.
    pub fn headline(&self) -> String {
        match self {
            RunResult::Tone(t) => {
                let thd = t.thd_percent.map_or("THD not measurable".to_string(), |v| {
                    format!("THD {}{v:.3} %", if t.thd_upper_bound { "< " } else { "" })
                });
                let at = match (t.output_w, t.load_ohms) {
                    (Some(w), Some(r)) => format!("{w:.2} W into {r} ohm"),
                    _ => format!("{:.1} dBFS", t.fundamental_dbfs),
                };
                format!("{thd}, THD+N {:.3} % at {at}", t.thdn_percent)
            }
            RunResult::Power(p) => {
                let at = p.power_at_thd.iter().find(|q| q.thd_percent == 1.0);
                match at {
                    Some(q) => match q.output_w {
                        Some(w) => format!(
                            "{w:.2} W{} at 1 % THD ({:.0} Hz)",
                            p.load_ohms
                                .map_or(String::new(), |r| format!(" into {r} ohm")),
                            p.frequency_hz
                        ),
                        None => format!(
                            "{:.1} dBFS at 1 % THD ({:.0} Hz)",
                            q.output_dbfs, p.frequency_hz
                        ),
                    },
                    None => format!("power: 1 % not reached ({:.0} Hz)", p.frequency_hz),
                }
            }
            RunResult::Response(v) => {
                let hz = |x: Option<f64>| {
                    x.map_or("beyond the sweep".to_string(), |v| {
                        crate::report::number::show(v, crate::report::number::Unit::Hz)
                    })
                };
                format!("-3 dB at {} and {}", hz(v.low_3db_hz), hz(v.high_3db_hz))
            }
            RunResult::Noise(n) => format!(
                "noise {:.1} dBFS ({:.1} A-weighted){}",
                n.noise_dbfs,
                n.noise_a_dbfs,
                n.snr_a_re_1w_db
                    .map_or(String::new(), |s| format!(", S/N {s:.1} dB(A) re 1 W"))
            ),
            RunResult::Zout(z) => format!(
                "{:.2} ohm, damping factor {:.1}",
                z.zout_ohms, z.damping_factor
            ),
            RunResult::Imd(i) => i.headline(),
            RunResult::Separation(s) => s
                .channels
                .iter()
                .map(|c| match (c.at_least_db, c.at_1khz_db, c.worst_db) {
                    (Some(b), _, _) => format!("ch{} > {b:.0} dB", c.channel),
                    (None, Some(k), Some(w)) => {
                        format!("ch{} {k:.1} dB at 1 kHz, worst {w:.1} dB", c.channel)
                    }
                    _ => format!("ch{} -", c.channel),
                })
                .collect::<Vec<_>>()
                .join("; "),
            RunResult::Dc(d) => d.headline(),
            RunResult::Trend(t) => t.headline(),
            RunResult::Square(q) => q
                .squares
                .iter()
                .map(|f| {
                    use crate::report::number::{show, Unit};
                    format!(
                        "{}: rise {}, overshoot {}, tilt {}",
                        show(f.frequency_hz, Unit::Hz),
                        crate::report::square::rise_shown(f),
                        show(f.overshoot_percent, Unit::Percent),
                        show(f.tilt_percent, Unit::Percent)
                    )
                })
                .collect::<Vec<_>>()
                .join("; "),
        }
    }

    /// The result's warnings (empty for results that have none).
    pub fn warnings(&self) -> &[crate::warning::Warning] {
        match self {
            RunResult::Tone(r) => &r.warnings,
            RunResult::Power(r) => &r.warnings,
            RunResult::Response(r) => &r.warnings,
            RunResult::Imd(r) => &r.warnings,
            RunResult::Zout(r) => &r.warnings,
            RunResult::Noise(r) => &r.warnings,
            RunResult::Separation(r) => &r.warnings,
            RunResult::Trend(r) => &r.warnings,
            RunResult::Dc(r) => &r.warnings,
            RunResult::Square(r) => &r.warnings,
        }
    }
}

/// A result type that a [`RunResult`] can hold: `ToneResult::of(&run.result)` is the tone
/// result when the run is a tone run.
pub trait Kept: Sized {
    fn of(r: &RunResult) -> Option<&Self>;
}

/// Each result type into its variant (owned or cloned), and picked back out of it.
macro_rules! variants {
    ($($t:ty => $v:ident),*) => {
        $(impl From<$t> for RunResult {
            fn from(r: $t) -> RunResult {
                RunResult::$v(r)
            }
        }
        impl From<&$t> for RunResult {
            fn from(r: &$t) -> RunResult {
                RunResult::$v(r.clone())
            }
        }
        impl Kept for $t {
            fn of(r: &RunResult) -> Option<&Self> {
                match r {
                    RunResult::$v(x) => Some(x),
                    _ => None,
                }
            }
        })*
    };
}

variants!(
    ToneResult => Tone,
    PowerResult => Power,
    ResponseResult => Response,
    ImdResult => Imd,
    ZoutResult => Zout,
    NoiseResult => Noise,
    SeparationResult => Separation,
    SquareResult => Square,
    TrendResult => Trend,
    DcResult => Dc
);
