//! The `imd` report.

use super::tone::ChannelError;
use crate::analysis::imd::ImdResult;
use serde::Serialize;
use std::fmt::Write as _;

/// What `ampnote imd` prints. The first channel's fields are repeated at the top level so a
/// single-channel result reads flat; `channels` holds every channel analysed.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct ImdReport {
    pub schema_version: u32,
    pub file: String,
    pub sample_rate_hz: u32,
    #[serde(flatten, skip_serializing_if = "Option::is_none")]
    pub first: Option<ImdResult>,
    pub channels: Vec<ImdResult>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub channel_errors: Vec<ChannelError>,
}

impl ImdReport {
    /// One row per channel.
    pub fn to_csv(&self) -> String {
        let mut s = String::from("channel,method,pair_source,low_hz,high_hz,measured_ratio,dm2_percent,dm3_percent,imd_percent,dd2_percent,dd3_percent\n");
        for c in &self.channels {
            let method = serde_json::to_value(c.method)
                .ok()
                .and_then(|v| v.as_str().map(str::to_string))
                .unwrap_or_default();
            let _ = writeln!(
                s,
                "{},{},{},{},{},{},{},{},{},{},{}",
                c.channel,
                method,
                super::csv_text(&c.pair_source),
                c.low_hz,
                c.high_hz,
                c.measured_ratio,
                super::csv_num(c.dm2_percent),
                super::csv_num(c.dm3_percent),
                super::csv_num(c.imd_percent),
                super::csv_num(c.dd2_percent),
                super::csv_num(c.dd3_percent)
            );
        }
        s
    }

    pub fn to_table(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(s, "{}: {} Hz", self.file, self.sample_rate_hz);
        for c in &self.channels {
            let method = match c.method {
                crate::signal::stimulus::TwoToneMethod::Modulation => "modulation method",
                crate::signal::stimulus::TwoToneMethod::DifferenceFrequency => {
                    "difference-frequency method"
                }
            };
            let _ = writeln!(
                s,
                "\nChannel {}: {method}, {:.1} Hz + {:.1} Hz at {:.2}:1 ({})",
                c.channel, c.low_hz, c.high_hz, c.measured_ratio, c.pair_source
            );
            let row = |s: &mut String, name: &str, v: Option<f64>| {
                if let Some(p) = v {
                    let _ = writeln!(
                        s,
                        "  {name:<6} {:>10} %  {:>8.2} dB",
                        super::tone::fmt_pct(p),
                        20.0 * (p / 100.0).max(1e-300).log10()
                    );
                }
            };
            row(&mut s, "d_m2", c.dm2_percent);
            row(&mut s, "d_m3", c.dm3_percent);
            row(&mut s, "total", c.imd_percent);
            row(&mut s, "d_d2", c.dd2_percent);
            row(&mut s, "d_d3", c.dd3_percent);
            let _ = writeln!(s, "\n  Line            Frequency       dBFS");
            for l in &c.lines {
                let _ = writeln!(
                    s,
                    "  {:<12} {:>10.1} Hz {:>10.2}{}",
                    l.name,
                    l.frequency_hz,
                    l.level_dbfs,
                    if l.at_noise_floor {
                        "  (noise floor)"
                    } else {
                        ""
                    }
                );
            }
            for w in &c.warnings {
                let _ = writeln!(s, "  warning: {w}");
            }
        }
        s
    }
}
