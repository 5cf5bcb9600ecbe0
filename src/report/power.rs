//! The `power` and `zout` reports.

use super::tone::{fmt_pct, fmt_volts, fmt_watts, ChannelError};
use crate::procedure::power::PowerResult;
use crate::procedure::zout::ZoutResult;
use serde::Serialize;
use std::fmt::Write as _;

/// What `ampnote power` prints: one result per channel and frequency. The first result's fields
/// are repeated at the top level so a single staircase reads flat.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct PowerReport {
    pub schema_version: u32,
    /// The capture file, or the rig's description.
    pub source: String,
    #[serde(flatten, skip_serializing_if = "Option::is_none")]
    pub first: Option<PowerResult>,
    pub results: Vec<PowerResult>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub channel_errors: Vec<ChannelError>,
}

impl PowerReport {
    /// One row per step (channel and frequency in each row).
    pub fn to_csv(&self) -> String {
        use super::csv_num as n;
        let mut s = String::from("channel,frequency_hz,drive_dbfs,output_dbfs,output_vrms,output_w,thd_percent,thd_upper_bound,thdn_percent,h2_dbc,h3_dbc,excluded\n");
        for r in &self.results {
            for st in &r.steps {
                let _ = writeln!(
                    s,
                    "{},{},{},{},{},{},{},{},{},{},{},{}",
                    r.channel,
                    r.frequency_hz,
                    st.drive_dbfs,
                    st.output_dbfs,
                    n(st.output_vrms),
                    n(st.output_w),
                    n(st.thd_percent),
                    st.thd_upper_bound,
                    st.thdn_percent,
                    n(st.h2_dbc),
                    n(st.h3_dbc),
                    st.excluded
                );
            }
        }
        s
    }

    pub fn to_table(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(s, "{}", self.source);
        for r in &self.results {
            let load = r
                .load_ohms
                .map_or(String::new(), |l| format!(" into {l} ohm"));
            let _ = writeln!(s, "\nChannel {}, {:.0} Hz{load}", r.channel, r.frequency_hz);
            for p in &r.power_at_thd {
                let level = match (p.output_w, p.output_vrms) {
                    (Some(w), Some(v)) => format!("{} ({} rms)", fmt_watts(w), fmt_volts(v)),
                    (None, Some(v)) => format!("{} rms", fmt_volts(v)),
                    _ => format!("{:.2} dBFS", p.output_dbfs),
                };
                let _ = writeln!(
                    s,
                    "  Power at {:>4} % THD: {level}   (between steps at {:.1} and {:.1} dBFS drive)",
                    p.thd_percent, p.between_drive_dbfs[0], p.between_drive_dbfs[1]
                );
            }
            if let Some(c) = r.clipping_drive_dbfs {
                let _ = writeln!(s, "  Clipping begins at the step driven at {c:.1} dBFS");
            }
            if let Some(why) = &r.stopped_because {
                let _ = writeln!(s, "  Stopped: {why}");
            }
            let _ = writeln!(
                s,
                "\n  Drive dBFS   Out dBFS     Out V      Out W        THD %      THD+N %   H2 dBc   H3 dBc"
            );
            for st in &r.steps {
                let _ = writeln!(
                    s,
                    "  {:>10.2} {:>10.2} {:>9} {:>10} {:>12} {:>12} {:>8} {:>8}{}",
                    st.drive_dbfs,
                    st.output_dbfs,
                    st.output_vrms
                        .map_or("-".into(), |v| super::number::significant(v, 3, 6)),
                    st.output_w
                        .map_or("-".into(), |w| super::number::significant(w, 3, 6)),
                    match st.thd_percent {
                        Some(t) if st.thd_upper_bound => format!("<{}", fmt_pct(t)),
                        Some(t) => fmt_pct(t),
                        None => "-".into(),
                    },
                    fmt_pct(st.thdn_percent),
                    st.h2_dbc.map_or("-".into(), |v| format!("{v:.1}")),
                    st.h3_dbc.map_or("-".into(), |v| format!("{v:.1}")),
                    if st.excluded {
                        "  (interface overload: left out)"
                    } else {
                        ""
                    }
                );
            }
            for w in &r.warnings {
                let _ = writeln!(s, "  warning: {w}");
            }
        }
        s
    }
}

/// What `ampnote zout` prints.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct ZoutReport {
    pub schema_version: u32,
    pub source: String,
    #[serde(flatten, skip_serializing_if = "Option::is_none")]
    pub first: Option<ZoutResult>,
    pub results: Vec<ZoutResult>,
}

impl ZoutReport {
    /// One row per channel.
    pub fn to_csv(&self) -> String {
        let mut s = String::from("channel,frequency_hz,zout_ohms,zout_phase_deg,zout_sigma_ohms,damping_factor,nominal_load_ohms,load_a_ohms,load_b_ohms\n");
        for r in &self.results {
            let _ = writeln!(
                s,
                "{},{},{},{},{},{},{},{},{}",
                r.channel,
                r.frequency_hz,
                r.zout_ohms,
                super::csv_num(r.phase_deg),
                super::csv_num(r.zout_sigma_ohms),
                r.damping_factor,
                r.nominal_load_ohms,
                r.load_a_ohms,
                r.load_b_ohms
            );
        }
        s
    }

    pub fn to_table(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(s, "{}", self.source);
        for r in &self.results {
            let _ = writeln!(
                s,
                "\nChannel {}: output impedance {:.3}{} ohm{} at {:.0} Hz, damping factor {:.2} (re {} ohm; loads {} and {} ohm)",
                r.channel,
                r.zout_ohms,
                r.zout_sigma_ohms.map_or(String::new(), |s| format!(" +/- {s:.3}")),
                r.phase_deg
                    .map_or(String::new(), |p| format!(", phase {p:+.1} degrees")),
                r.frequency_hz,
                r.damping_factor,
                r.nominal_load_ohms,
                r.load_a_ohms,
                r.load_b_ohms
            );
            if !r.points.is_empty() {
                let phased = r.points.iter().any(|p| p.phase_deg.is_some());
                let _ = writeln!(
                    s,
                    "  Frequency     Z out{}   Damping",
                    if phased {
                        "      Phase  Inductance"
                    } else {
                        ""
                    }
                );
                let near = |f: f64| super::nearest(&r.points, f, |p| p.frequency_hz);
                let rows = [
                    20.0, 50.0, 100.0, 200.0, 500.0, 1000.0, 2000.0, 5000.0, 10000.0, 20000.0,
                ];
                for p in rows.iter().filter_map(|&f| near(f)) {
                    let phase = match (p.phase_deg, p.inductance_uh) {
                        (Some(ph), Some(l)) => format!(" {ph:>+6.1} deg {l:>8.1} uH"),
                        (Some(ph), None) => format!(" {ph:>+6.1} deg {:>11}", "-"),
                        _ => String::new(),
                    };
                    let _ = writeln!(
                        s,
                        "  {:>7.0} Hz {:>7.3}{phase} {:>9.2}",
                        p.frequency_hz, p.zout_ohms, p.damping_factor
                    );
                }
            }
            for w in &r.warnings {
                let _ = writeln!(s, "  warning: {w}");
            }
        }
        s
    }
}
