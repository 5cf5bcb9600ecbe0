//! `ampnote trend`: a long capture's figures block by block, as a table, JSON or CSV.

use super::tone::{fmt_pct, fmt_volts, ChannelError};
use crate::analysis::blocks::{Drift, TrendPoint, TrendResult};
use serde::{Deserialize, Serialize};
use std::fmt::Write;

/// What `ampnote trend --json` prints.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct TrendReport {
    pub schema_version: u32,
    pub file: String,
    pub sample_rate_hz: u32,
    pub channels: Vec<TrendResult>,
    #[serde(default)]
    pub channel_errors: Vec<ChannelError>,
}

fn opt(v: Option<f64>, decimals: usize) -> String {
    v.map_or_else(|| "-".to_string(), |x| format!("{x:.decimals$}"))
}

fn drift_line(out: &mut String, name: &str, d: &Option<Drift>, unit: &str) {
    if let Some(d) = d {
        let _ = writeln!(
            out,
            "  {name:<10} {:+7.2} {unit}  (from {:.2} to {:.2}; range {:.2} to {:.2})",
            d.change, d.first, d.last, d.min, d.max
        );
    }
}

impl TrendReport {
    /// The drift of each figure first, then one line per block (a long log is read top down).
    pub fn to_table(&self) -> String {
        let mut out = String::new();
        let _ = writeln!(out, "{}: {} Hz", self.file, self.sample_rate_hz);
        for c in &self.channels {
            let _ = writeln!(
                out,
                "\nChannel {}  ({} blocks of {} s, {:.1} to {:.1} s)",
                c.channel,
                c.points.len(),
                c.every_s,
                c.from_s,
                c.to_s
            );
            let _ = writeln!(out, "  Drift, last block against first");
            // Level in dBFS; THD and THD+N as 20 log10 of the ratio; H2, H3 in dBc; hum in dBFS.
            drift_line(&mut out, "level", &c.drift.level_db, "dB");
            drift_line(&mut out, "THD", &c.drift.thd_db, "dB");
            drift_line(&mut out, "THD+N", &c.drift.thdn_db, "dB");
            drift_line(&mut out, "H2", &c.drift.h2_dbc, "dB");
            drift_line(&mut out, "H3", &c.drift.h3_dbc, "dB");
            drift_line(&mut out, "hum line", &c.drift.hum_dbfs, "dB");
            let calibrated = c.points.iter().any(|p| p.level_vrms.is_some());
            let _ = writeln!(
                out,
                "\n  {:>8}  {:>8}  {}{:>10}  {:>10}  {:>7}  {:>7}  {:>19}  note",
                "at s",
                "dBFS",
                if calibrated { "      V rms  " } else { "" },
                "THD %",
                "THD+N %",
                "H2 dBc",
                "H3 dBc",
                "hum"
            );
            for p in &c.points {
                let hum = match (p.hum_hz, p.hum_dbfs) {
                    (Some(f), Some(l)) => format!("{f:.0} Hz {l:.1} dBFS"),
                    _ => "-".into(),
                };
                let volts = if calibrated {
                    format!("{:>11}  ", p.level_vrms.map_or("-".into(), fmt_volts))
                } else {
                    String::new()
                };
                let _ = writeln!(
                    out,
                    "  {:>8.1}  {:>8}  {volts}{:>10}  {:>10}  {:>7}  {:>7}  {:>19}  {}",
                    p.at_s,
                    opt(p.level_dbfs, 2),
                    p.thd_percent.map_or("-".into(), fmt_pct),
                    p.thdn_percent.map_or("-".into(), fmt_pct),
                    opt(p.h2_dbc, 1),
                    opt(p.h3_dbc, 1),
                    hum,
                    p.note.as_deref().unwrap_or("")
                );
            }
            for w in &c.warnings {
                let _ = writeln!(out, "  warning: {w}");
            }
        }
        for e in &self.channel_errors {
            let _ = writeln!(out, "\nChannel {}: {}", e.channel, e.error);
        }
        out
    }

    /// One row per block and channel.
    pub fn to_csv(&self) -> String {
        let mut out = format!("{}\n", TrendPoint::CSV_HEADER);
        for c in &self.channels {
            for p in &c.points {
                out.push_str(&p.csv_row(c.channel));
                out.push('\n');
            }
        }
        out
    }
}
