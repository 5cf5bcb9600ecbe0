//! The `response` report: one sweep capture against its stimulus, one result per channel.

use super::tone::ChannelError;
use crate::analysis::sweep::{HarmonicPoint, ResponseResult};
use serde::Serialize;
use std::fmt::Write as _;

/// What `ampnote response` prints. The first channel's fields are repeated at the top level so a
/// single-channel result reads flat; `channels` holds every channel analysed.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct ResponseReport {
    pub schema_version: u32,
    pub file: String,
    pub stimulus: String,
    pub sample_rate_hz: u32,
    pub sweep_start_hz: f64,
    pub sweep_stop_hz: f64,
    pub sweep_duration_s: f64,
    #[serde(flatten, skip_serializing_if = "Option::is_none")]
    pub first: Option<ResponseResult>,
    /// Absolute voltage gain of the first channel at the reference, when both interface full
    /// scales are known.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub absolute_gain_db: Option<f64>,
    pub channels: Vec<ResponseResult>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub channel_errors: Vec<ChannelError>,
}

/// ISO 266 one-third-octave centres shown in the table.
const THIRD_OCTAVES: [f64; 31] = [
    20.0, 25.0, 31.5, 40.0, 50.0, 63.0, 80.0, 100.0, 125.0, 160.0, 200.0, 250.0, 315.0, 400.0,
    500.0, 630.0, 800.0, 1000.0, 1250.0, 1600.0, 2000.0, 2500.0, 3150.0, 4000.0, 5000.0, 6300.0,
    8000.0, 10000.0, 12500.0, 16000.0, 20000.0,
];

impl ResponseReport {
    /// Every point of every channel: response, harmonics and THD at the same excitation frequency.
    pub fn to_csv(&self) -> String {
        let max_order = self
            .channels
            .iter()
            .flat_map(|c| c.harmonics.iter().map(|h| h.order))
            .max()
            .unwrap_or(1);
        let mut out = String::from("channel,frequency_hz,magnitude_db,phase_deg");
        for o in 2..=max_order {
            let _ = write!(out, ",h{o}_dbc");
        }
        out += ",thd_dbc\n";
        for c in &self.channels {
            for p in &c.points {
                let _ = write!(
                    out,
                    "{},{},{},{}",
                    c.channel, p.frequency_hz, p.magnitude_db, p.phase_deg
                );
                for o in 2..=max_order {
                    let v =
                        c.harmonics.iter().find(|h| h.order == o).and_then(|h| {
                            h.points.iter().find(|q| q.frequency_hz == p.frequency_hz)
                        });
                    let _ = write!(
                        out,
                        ",{}",
                        v.map(|q| q.level_dbc.to_string()).unwrap_or_default()
                    );
                }
                let thd = c.thd.iter().find(|q| q.frequency_hz == p.frequency_hz);
                let _ = writeln!(
                    out,
                    ",{}",
                    thd.map(|q| q.level_dbc.to_string()).unwrap_or_default()
                );
            }
        }
        out
    }

    pub fn to_table(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(
            s,
            "{} against {}: {} Hz, sweep {:.0}-{:.0} Hz over {:.2} s",
            self.file,
            self.stimulus,
            self.sample_rate_hz,
            self.sweep_start_hz,
            self.sweep_stop_hz,
            self.sweep_duration_s
        );
        for c in &self.channels {
            let _ = writeln!(
                s,
                "\nChannel {}: latency {:.3} ms, {}, gain at {:.0} Hz {:+.2} dB (capture dBFS over stimulus dBFS)",
                c.channel, c.latency_ms, c.polarity, c.reference_hz, c.reference_gain_db
            );
            if let (Some(g), true) = (self.absolute_gain_db, c.channel == self.channels[0].channel)
            {
                let _ = writeln!(s, "  Amplifier voltage gain {g:+.2} dB");
            }
            let hz = |v: Option<f64>| v.map_or("beyond the sweep".to_string(), fmt_hz);
            let _ = writeln!(
                s,
                "  -1 dB points  {}  and  {}",
                hz(c.low_1db_hz),
                hz(c.high_1db_hz)
            );
            let _ = writeln!(
                s,
                "  -3 dB points  {}  and  {}",
                hz(c.low_3db_hz),
                hz(c.high_3db_hz)
            );
            let _ = writeln!(
                s,
                "  Largest deviation over {}-{}: {:+.2} dB at {}",
                fmt_hz(c.deviation_band_hz[0]),
                fmt_hz(c.deviation_band_hz[1]),
                c.max_deviation_db,
                fmt_hz(c.max_deviation_hz)
            );
            if let Some(n) = c.smoothing_octave_fraction {
                let _ = writeln!(s, "  Magnitude smoothed over 1/{n} octave");
            }
            let orders: Vec<usize> = c
                .harmonics
                .iter()
                .map(|h| h.order)
                .filter(|&o| o <= 3)
                .collect();
            let mut head = String::from("\n  Frequency    Magnitude       Phase");
            for o in &orders {
                let _ = write!(head, "     H{o} dBc");
            }
            head += "    THD dBc";
            let _ = writeln!(s, "{head}");
            for f in THIRD_OCTAVES {
                let Some(p) = nearest(&c.points, f) else {
                    continue;
                };
                let mut line = format!(
                    "  {:>9} {:>+9.2} dB{} {:>+8.1} deg",
                    fmt_hz(f),
                    p.magnitude_db,
                    if p.limited_by.is_some() { "!" } else { " " },
                    p.phase_deg
                );
                for o in &orders {
                    let h =
                        c.harmonics.iter().find(|h| h.order == *o).and_then(|h| {
                            h.points.iter().find(|q| q.frequency_hz == p.frequency_hz)
                        });
                    let _ = write!(line, " {:>11}", h.map_or("- ".into(), dbc));
                }
                let t = c.thd.iter().find(|q| q.frequency_hz == p.frequency_hz);
                let _ = write!(line, " {:>10}", t.map_or("- ".into(), dbc));
                let _ = writeln!(s, "{line}");
            }
            if c.points.iter().any(|p| p.limited_by.is_some()) {
                let _ = writeln!(
                    s,
                    "  ! within {} dB of the capture's own hum or noise there: partly that floor, not the response",
                    crate::analysis::sweep::HUM_MARGIN_DB
                );
            }
            let marked = |q: &[HarmonicPoint]| q.iter().any(|q| q.hum_limited);
            if c.harmonics.iter().any(|h| marked(&h.points)) || marked(&c.thd) {
                let _ = writeln!(
                    s,
                    "  * within {} dB of what the hum in the capture's silence reads there: the hum may be what it reads",
                    crate::analysis::sweep::HUM_MARGIN_DB
                );
            }
            for w in &c.warnings {
                let _ = writeln!(s, "  warning: {w}");
            }
        }
        s
    }
}

/// A harmonic's level for the table, `*` after it when hum may be what it reads.
fn dbc(q: &HarmonicPoint) -> String {
    format!(
        "{:.1}{}",
        q.level_dbc,
        if q.hum_limited { "*" } else { " " }
    )
}

/// The point closest to `f` (in log frequency) if one lies within 3 % of it.
fn nearest(
    points: &[crate::analysis::sweep::ResponsePoint],
    f: f64,
) -> Option<&crate::analysis::sweep::ResponsePoint> {
    super::nearest(points, f, |p| p.frequency_hz)
}

fn fmt_hz(f: f64) -> String {
    if f >= 1000.0 {
        format!("{:.2} kHz", f / 1000.0)
    } else {
        format!("{f:.1} Hz")
    }
}
