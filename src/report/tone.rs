//! The `analyze` report: one capture, one result per channel.

use crate::analysis::tone::ToneResult;
use crate::capture::Encoding;
use serde::Serialize;
use std::fmt::Write as _;

/// A channel that could not be analysed, and why.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct ChannelError {
    pub channel: usize,
    pub error: String,
}

/// What `ampnote analyze` prints, in every format.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct AnalyzeReport {
    pub schema_version: u32,
    pub file: String,
    pub sample_rate_hz: u32,
    pub encoding: Encoding,
    pub frames: usize,
    pub channel_count: usize,
    pub truncated: bool,
    pub channels: Vec<ToneResult>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub channel_errors: Vec<ChannelError>,
}

impl AnalyzeReport {
    /// One row per channel; harmonics and hum lines as columns.
    pub fn to_csv(&self) -> String {
        let max_h = self
            .channels
            .iter()
            .map(|c| c.harmonics.len())
            .max()
            .unwrap_or(0);
        let max_hum = self.channels.iter().map(|c| c.hum.len()).max().unwrap_or(0);
        let mut head = vec![
            "channel",
            "fundamental_hz",
            "fundamental_dbfs",
            "fundamental_vrms",
            "output_w",
            "thd_percent",
            "thd_db",
            "thdn_percent",
            "thdn_db",
            "sinad_db",
            "band_low_hz",
            "band_high_hz",
            "noise_dbfs",
            "noise_weighting",
            "dc_offset",
            "crest_factor",
            "overload_samples",
            "mains_hz",
        ]
        .into_iter()
        .map(String::from)
        .collect::<Vec<_>>();
        for i in 0..max_h {
            let o = i + 2;
            head.push(format!("h{o}_dbc"));
            head.push(format!("h{o}_phase_deg"));
        }
        for i in 0..max_hum {
            head.push(format!("hum{}_dbc", i + 1));
        }
        head.push("warnings".into());
        let mut out = head.join(",") + "\n";
        let opt = |v: Option<f64>| v.map(|x| format!("{x}")).unwrap_or_default();
        for c in &self.channels {
            let mut row = vec![
                c.channel.to_string(),
                format!("{}", c.fundamental_hz),
                format!("{}", c.fundamental_dbfs),
                opt(c.fundamental_vrms),
                opt(c.output_w),
                opt(c.thd_percent),
                opt(c.thd_db),
                format!("{}", c.thdn_percent),
                format!("{}", c.thdn_db),
                format!("{}", c.sinad_db),
                format!("{}", c.band_hz[0]),
                format!("{}", c.band_hz[1]),
                format!("{}", c.noise_dbfs),
                c.noise_weighting.label().to_string(),
                format!("{}", c.dc_offset),
                format!("{}", c.crest_factor),
                c.overload_samples.to_string(),
                format!("{}", c.mains_hz),
            ];
            for i in 0..max_h {
                match c.harmonics.get(i) {
                    Some(h) => {
                        row.push(format!("{}", h.level_dbc));
                        row.push(format!("{}", h.phase_deg));
                    }
                    None => row.extend([String::new(), String::new()]),
                }
            }
            for i in 0..max_hum {
                row.push(
                    c.hum
                        .get(i)
                        .map(|h| format!("{}", h.level_dbc))
                        .unwrap_or_default(),
                );
            }
            row.push(csv_quote(
                &c.warnings
                    .iter()
                    .map(|w| w.message.as_str())
                    .collect::<Vec<_>>()
                    .join("; "),
            ));
            out += &(row.join(",") + "\n");
        }
        out
    }

    /// The readable terminal table.
    pub fn to_table(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(
            s,
            "{}: {} Hz, {} channel(s), {}, {:.3} s{}",
            self.file,
            self.sample_rate_hz,
            self.channel_count,
            self.encoding.describe(),
            self.frames as f64 / self.sample_rate_hz as f64,
            if self.truncated {
                " (truncated file)"
            } else {
                ""
            }
        );
        for c in &self.channels {
            s.push('\n');
            channel_table(&mut s, c);
        }
        s
    }
}

fn channel_table(s: &mut String, c: &ToneResult) {
    let _ = writeln!(
        s,
        "Channel {}  ({:.3} s analysed, band {}-{} Hz)",
        c.channel,
        c.duration_s,
        fmt_hz(c.band_hz[0]),
        fmt_hz(c.band_hz[1])
    );
    let mut level = format!(
        "{:>12.4} Hz   {:>8.2} dBFS",
        c.fundamental_hz, c.fundamental_dbfs
    );
    if let Some(v) = c.fundamental_vrms {
        let _ = write!(level, "   {} rms", fmt_volts(v));
        if let Some(dbv) = c.fundamental_dbv {
            let _ = write!(level, " ({dbv:+.2} dBV)");
        }
    }
    if let (Some(w), Some(r)) = (c.output_w, c.load_ohms) {
        let _ = write!(level, "   {} into {} ohm", fmt_watts(w), fmt_num(r));
    }
    let _ = writeln!(s, "  Fundamental {level}");
    match (c.thd_percent, c.thd_db) {
        (Some(p), Some(db)) => {
            let bound = if c.thd_upper_bound { "<" } else { " " };
            let _ = writeln!(
                s,
                "  THD         {bound}{:>11} %   {bound}{:>7.2} dB{}",
                fmt_pct(p),
                db,
                match c.thd_highest_order {
                    Some(o) if o < 3 => "   (H2 only)".to_string(),
                    Some(o) => format!("   (H2-H{o})"),
                    None => String::new(),
                }
            );
        }
        _ => {
            let _ = writeln!(s, "  THD         not measurable (no harmonic in the band)");
        }
    }
    let _ = writeln!(
        s,
        "  THD+N       {:>12} %   {:>8.2} dB   (SINAD {:.2} dB)",
        fmt_pct(c.thdn_percent),
        c.thdn_db,
        c.sinad_db
    );
    let mut noise = format!("{:>12.2} dBFS {}", c.noise_dbfs, c.noise_weighting.label());
    if let Some(v) = c.noise_vrms {
        let _ = write!(noise, "   {} rms", fmt_volts(v));
    }
    let _ = writeln!(s, "  Noise       {noise}");
    let _ = writeln!(
        s,
        "  DC offset   {:>12.4} % FS   crest factor {:.3}   overload {} sample(s)",
        c.dc_offset * 100.0,
        c.crest_factor,
        c.overload_samples
    );
    s.push_str(&oscillation_lines(&c.oscillations, &c.oscillation_search));
    if let Some(d) = c.frequency_drift_ppm {
        let _ = writeln!(
            s,
            "  Stability   drift {:+.2} ppm, phase wander {:.4} deg rms",
            d,
            c.phase_wander_deg.unwrap_or(0.0)
        );
    }
    let _ = writeln!(
        s,
        "\n  Harmonic   Frequency        dBc          %      Phase"
    );
    for h in &c.harmonics {
        let mark = match (h.in_band, h.upper_bound) {
            (false, _) => "  (out of band)",
            (true, true) => "  (under the noise: detection limit)",
            _ => "",
        };
        // A line under the noise has a limit, not a level, and no phase.
        let (lt, phase) = if h.upper_bound {
            ("<", "        -    ".to_string())
        } else {
            (" ", format!("{:>+9.1} deg", h.phase_deg))
        };
        let _ = writeln!(
            s,
            "  H{:<8} {:>10.1} Hz {lt}{:>7.2} {lt}{:>9} {phase}{}",
            h.order,
            h.frequency_hz,
            h.level_dbc,
            fmt_pct(h.level_percent),
            mark
        );
    }
    if !c.hum.is_empty() {
        let _ = writeln!(
            s,
            "\n  Hum (mains {} Hz, {})",
            fmt_num(c.mains_hz),
            c.mains_source
        );
        for h in &c.hum {
            let mut line = format!(
                "  {:>6} Hz {:>9.2} dBc {:>9.2} dBFS",
                fmt_num(h.frequency_hz),
                h.level_dbc,
                h.level_dbfs
            );
            if let Some(v) = h.level_vrms {
                let _ = write!(line, "   {} rms", fmt_volts(v));
            }
            if h.upper_bound {
                line += "  (under the noise: detection limit)";
            }
            let _ = writeln!(s, "{line}");
        }
    }
    if !c.warnings.is_empty() {
        let _ = writeln!(s);
        for w in &c.warnings {
            let _ = writeln!(s, "  warning: {w}");
        }
    }
}

fn csv_quote(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

fn fmt_num(v: f64) -> String {
    if v.fract() == 0.0 && v.abs() < 1e9 {
        format!("{}", v as i64)
    } else {
        format!("{v:.2}")
    }
}

fn fmt_hz(v: f64) -> String {
    fmt_num(v)
}

/// The oscillation checks for a table: what was found, or where nothing was, and what the
/// rate or length kept from view.
pub fn oscillation_lines(
    found: &[crate::analysis::oscillation::Oscillation],
    search: &crate::analysis::oscillation::OscillationSearch,
) -> String {
    use crate::analysis::oscillation::OscillationKind;
    let mut s = String::new();
    for o in found {
        let what = match o.kind {
            OscillationKind::Ultrasonic => {
                format!("ultrasonic line at {:.2} kHz", o.frequency_hz / 1e3)
            }
            OscillationKind::SubAudio => format!("sub-audio line at {:.2} Hz", o.frequency_hz),
            OscillationKind::Motorboating => format!(
                "level pumping at {:.2} Hz, {:.2} % modulation",
                o.frequency_hz,
                o.modulation_percent.unwrap_or(0.0)
            ),
        };
        let _ = writeln!(s, "  Oscillation {what}, {}", o.level_text());
    }
    if found.is_empty() {
        let from = search
            .subaudio_from_hz
            .map_or("10 Hz".to_string(), |f| format!("{f:.1} Hz"));
        let to = search
            .ultrasonic_to_hz
            .map_or("the band's top".to_string(), |f| {
                format!("{:.1} kHz", f / 1e3)
            });
        let _ = writeln!(s, "  Oscillation none found from {from} to {to}");
    }
    if search.ultrasonic_to_hz.is_none_or(|f| f < 30_000.0) {
        let _ = writeln!(
            s,
            "              (ultrasonic oscillation shows only at 96 kHz or more)"
        );
    }
    if search.subaudio_from_hz.is_none() {
        let _ = writeln!(
            s,
            "              (too short to see below 10 Hz: record 5 s or more)"
        );
    }
    s
}

/// Percent with enough significant digits for small values.
pub fn fmt_pct(p: f64) -> String {
    super::number::percent(p)
}

/// Volts with a sensible unit prefix.
pub fn fmt_volts(v: f64) -> String {
    super::number::show(v, super::number::Unit::Volts)
}

/// Watts with a sensible unit prefix.
pub fn fmt_watts(w: f64) -> String {
    super::number::show(w, super::number::Unit::Watts)
}
