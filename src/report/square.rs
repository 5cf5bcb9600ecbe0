//! The `square` report.

use super::number::{show, Unit};
use super::tone::ChannelError;
use crate::analysis::square::{SquareResult, SquareSource};
use serde::Serialize;
use std::fmt::Write as _;

/// What `ampnote square` prints. The first channel's fields are repeated at the top level so a
/// single-channel result reads flat (`squares` at the top); `channels` holds every channel.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct SquareReport {
    pub schema_version: u32,
    pub file: String,
    #[serde(flatten, skip_serializing_if = "Option::is_none")]
    pub first: Option<SquareResult>,
    pub channels: Vec<SquareResult>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub channel_errors: Vec<ChannelError>,
}

impl SquareReport {
    /// One row per channel and frequency.
    pub fn to_csv(&self) -> String {
        use super::csv_num as n;
        let mut s = String::from("channel,source,frequency_hz,rise_time_us,measured_rise_time_us,stimulus_rise_time_us,overshoot_percent,ringing_hz,ringing_decay_us,settling_us,tilt_percent\n");
        for c in &self.channels {
            for q in &c.squares {
                let _ = writeln!(
                    s,
                    "{},{},{},{},{},{},{},{},{},{},{}",
                    c.channel,
                    source(c.source),
                    q.frequency_hz,
                    n(q.rise_time_us),
                    q.measured_rise_time_us,
                    q.stimulus_rise_time_us,
                    q.overshoot_percent,
                    n(q.ringing_hz),
                    n(q.ringing_decay_us),
                    n(q.settling_us),
                    q.tilt_percent
                );
            }
        }
        s
    }

    pub fn to_table(&self) -> String {
        let mut s = format!("{}\n", self.file);
        let opt = |v: Option<f64>, unit: Unit| v.map_or("-".to_string(), |v| show(v, unit));
        for c in &self.channels {
            let _ = writeln!(
                s,
                "\nChannel {} ({}):\n  {:>9} {:>10} {:>10} {:>10} {:>10} {:>10} {:>9}",
                c.channel,
                match c.source {
                    SquareSource::Recorded => "recorded square",
                    SquareSource::FromSweep => "predicted from the sweep's response",
                },
                "Square",
                "Rise",
                "Overshoot",
                "Ringing",
                "Decay",
                "Settling",
                "Tilt"
            );
            for q in &c.squares {
                let _ = writeln!(
                    s,
                    "  {:>9} {:>10} {:>10} {:>10} {:>10} {:>10} {:>9}",
                    show(q.frequency_hz, Unit::Hz),
                    rise_shown(q),
                    show(q.overshoot_percent, Unit::Percent),
                    opt(q.ringing_hz, Unit::Hz),
                    opt(q.ringing_decay_us, Unit::Us),
                    opt(q.settling_us, Unit::Us),
                    show(q.tilt_percent, Unit::Percent),
                );
            }
            let _ = writeln!(
                s,
                "  (rise: the amplifier's own, the square's edge of {} taken out in quadrature; unresolved where\n  the amplifier's edge is too fast for that edge to show: a higher rate gives a faster edge)",
                c.squares
                    .first()
                    .map_or("-".into(), |q| show(q.stimulus_rise_time_us, Unit::Us))
            );
            for w in &c.warnings {
                let _ = writeln!(s, "  warning: {w}");
            }
        }
        s
    }
}

/// The amplifier's own rise as shown, or why not: faster than the stimulus's edge shows.
pub fn rise_shown(q: &crate::analysis::square::SquareFigures) -> String {
    q.rise_time_us
        .map_or_else(|| "unresolved".to_string(), |v| show(v, Unit::Us))
}

fn source(s: SquareSource) -> &'static str {
    match s {
        SquareSource::Recorded => "recorded",
        SquareSource::FromSweep => "from-sweep",
    }
}
