//! `ampnote watch`: a steady tone out and, several times a second, what comes back: level, power,
//! THD, THD+N, H2, H3 and the strongest hum line, on one refreshed line. For trimming bias or hum
//! balance while looking at the figures. Ctrl-C stops it and leaves the terminal as it was.

use super::Failure;
use crate::cli::WatchArgs;
use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig, ToneResult};
use std::io::{IsTerminal, Write};
use std::process::ExitCode;
use std::time::{Duration, Instant};

/// CPU time this process used so far (user + system), from /proc (Linux); `None` elsewhere.
pub fn cpu_seconds() -> Option<f64> {
    let stat = std::fs::read_to_string("/proc/self/stat").ok()?;
    // Fields after the command name (which is in parentheses and may hold spaces).
    let rest = &stat[stat.rfind(')')? + 2..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    let ticks = f.get(11)?.parse::<f64>().ok()? + f.get(12)?.parse::<f64>().ok()?;
    Some(ticks / 100.0) // USER_HZ is 100 on Linux
}

/// One reading in two parts: the level (frequency, dBFS, volts, watts) and the distortion
/// (THD, THD+N, H2, H3, hum), so a narrow terminal can show them on two lines.
pub fn reading_parts(r: &ToneResult) -> (String, String) {
    let mut level = format!(
        "{:8.2} Hz  {:7.2} dBFS",
        r.fundamental_hz, r.fundamental_dbfs
    );
    if let Some(v) = r.fundamental_vrms {
        level.push_str(&format!("  {v:8.4} V rms"));
    }
    if let (Some(w), Some(load)) = (r.output_w, r.load_ohms) {
        level.push_str(&format!("  {w:8.4} W into {load} ohm"));
    }
    let mut s = String::new();
    match r.thd_percent {
        Some(t) => s.push_str(&format!(
            "  THD {}{t:7.4} %",
            if r.thd_upper_bound { "<" } else { "" }
        )),
        None => s.push_str("  THD    -    "),
    }
    s.push_str(&format!("  THD+N {:7.4} %", r.thdn_percent));
    for order in [2, 3] {
        if let Some(h) = r.harmonics.iter().find(|h| h.order == order && h.in_band) {
            s.push_str(&format!(
                "  H{order} {}{:.1} dBc",
                if h.upper_bound { "<" } else { "" },
                h.level_dbc
            ));
        }
    }
    if let Some(h) = r
        .hum
        .iter()
        .max_by(|a, b| a.level_dbc.total_cmp(&b.level_dbc))
    {
        s.push_str(&format!(
            "  hum {:.0} Hz {}{:.1} dBc",
            h.frequency_hz,
            if h.upper_bound { "<" } else { "" },
            h.level_dbc
        ));
    }
    (level, s)
}

/// Redraws one reading in place on a terminal: on one line when it fits the terminal's width,
/// else on two (level, then distortion), each cut to the width so a wrap never breaks the
/// redraw.
struct Redraw {
    two_lines_drawn: bool,
}

impl Redraw {
    fn draw(&mut self, out: &mut impl Write, level: &str, distortion: &str) -> std::io::Result<()> {
        let width = console::Term::stdout()
            .size_checked()
            .map_or(80, |(_, w)| w as usize)
            .max(20);
        let fit = |t: &str| t.chars().take(width - 1).collect::<String>();
        if self.two_lines_drawn {
            write!(out, "\x1b[1A")?;
        }
        if level.chars().count() + distortion.chars().count() < width {
            write!(out, "\r\x1b[K{level}{distortion}")?;
            if self.two_lines_drawn {
                // Clear the second line left from before, and come back up.
                write!(out, "\n\x1b[K\x1b[1A")?;
            }
            self.two_lines_drawn = false;
        } else {
            write!(
                out,
                "\r\x1b[K{}\n\x1b[K{}",
                fit(level),
                fit(distortion.trim_start())
            )?;
            self.two_lines_drawn = true;
        }
        out.flush()
    }
}

pub fn run(args: &WatchArgs) -> Result<ExitCode, Failure> {
    if !(5.0..=50.0).contains(&args.refresh) {
        return Err(format!(
            "--refresh takes 5 to 50 readings a second, got {}",
            args.refresh
        )
        .into());
    }
    if !(args.level.is_finite() && (-140.0..=0.0).contains(&args.level)) {
        return Err(format!(
            "--level is the tone's RMS in dBFS: between -140 and 0 (full scale), got {}",
            args.level
        )
        .into());
    }
    let rate = args.rate;
    ampnote::capture::check_rate(rate)?;
    let freq = args.freq.round();
    if !(freq >= 10.0 && freq < 0.45 * rate as f64) {
        return Err(format!(
            "--freq must lie between 10 Hz and 0.45 x the rate ({} Hz), got {}",
            0.45 * rate as f64,
            args.freq
        )
        .into());
    }
    let cal = args.calibration.calibration()?;
    // The log is opened before anything plays: a file already there is never overwritten.
    let mut log = match &args.log {
        Some(path) => {
            let file = std::fs::OpenOptions::new()
                .write(true)
                .create_new(true)
                .open(path)
                .map_err(|err| match err.kind() {
                    std::io::ErrorKind::AlreadyExists => format!(
                        "--log {} exists already; give a new file name (a log is never overwritten)",
                        path.display()
                    ),
                    _ => format!("cannot create the log {}: {err}", path.display()),
                })?;
            let mut w = std::io::BufWriter::new(file);
            writeln!(w, "{}", ampnote::analysis::blocks::TrendPoint::CSV_HEADER)
                .and_then(|_| w.flush())
                .map_err(|err| format!("cannot write the log {}: {err}", path.display()))?;
            Some((path.clone(), w))
        }
        None => None,
    };
    let mut log_error: Option<String> = None;
    let mut rig = args.rig.open(cal)?.ok_or(
        "give the rig to watch: --rig card (the audio interface) or --rig sim (the simulated bench)",
    )?;
    if args.channel == 0 || args.channel > rig.channels() {
        return Err(format!(
            "--channel takes 1..{}, got {}",
            rig.channels(),
            args.channel
        )
        .into());
    }
    let cal = rig.calibration();
    let level = match args.watts {
        Some(w) => {
            let found = ampnote::procedure::drive::drive_for_power(
                rig.as_mut(),
                args.channel,
                freq,
                rate,
                w,
            )?;
            eprintln!("{}", found.describe(w));
            found.drive_dbfs
        }
        None => args.level,
    };
    ampnote::rig::catch_interrupt();
    // One second of the tone: a whole number of periods at a whole-hertz frequency, so it loops
    // without a seam.
    // dBFS of a sine: 0 dBFS is the full-scale sine, so the peak is 10^(level/20).
    let amp = 10f64.powf(level / 20.0);
    let w = 2.0 * std::f64::consts::PI * freq / rate as f64;
    let table: Vec<f64> = (0..rate as usize)
        .map(|i| amp * (w * i as f64).sin())
        .collect();
    let analyzer = ToneAnalyzer::new(ToneConfig {
        fundamental_hint_hz: Some(freq),
        max_harmonic: 5,
        ..ToneConfig::default()
    })?;
    let overload = rig.overload_threshold();
    let bits = rig.resolution_bits();
    eprintln!("{}", rig.describe());
    eprintln!(
        "watching channel {}: {freq} Hz at {level:.2} dBFS, {} readings a second; Ctrl-C stops.",
        args.channel, args.refresh
    );
    eprintln!("Inside a tube amplifier are lethal voltages, also with the power off (charged capacitors): adjust with one hand, insulated tools, and keep the dummy load connected.");
    let tty = std::io::stdout().is_terminal();
    let mut redraw = Redraw {
        two_lines_drawn: false,
    };
    let window = rate as usize / 2;
    let hop = (rate as f64 / args.refresh) as usize;
    let begun = Instant::now();
    let mut start = begun;
    let mut cpu0 = None;
    let mut readings = 0u32;
    let mut last = begun;
    let limit = args.seconds.map(Duration::from_secs_f64);
    let outcome = rig.watch(args.channel, &table, rate, window, hop, &mut |x| {
        let input = ChannelInput {
            channel: args.channel,
            samples: x,
            sample_rate_hz: rate as f64,
            overload_threshold: overload,
            resolution_bits: bits,
        };
        let analysed = analyzer.analyze(&input, &cal);
        let (level_part, distortion_part) = match &analysed {
            Ok(r) => reading_parts(r),
            Err(e) => (format!("no reading: {e}"), String::new()),
        };
        if readings == 0 {
            // Rates and CPU are counted from the first reading (the pre-flight comes before).
            start = Instant::now();
            cpu0 = cpu_seconds();
        }
        if let Some((path, w)) = &mut log {
            let at_s = start.elapsed().as_secs_f64();
            let point = match &analysed {
                Ok(r) => ampnote::analysis::blocks::point_of(at_s, r),
                Err(e) => ampnote::analysis::blocks::TrendPoint::failed(at_s, e.to_string()),
            };
            if let Err(err) = writeln!(w, "{}", point.csv_row(args.channel)).and_then(|_| w.flush())
            {
                // Stop rather than watch on without keeping: what was written stays.
                log_error = Some(format!(
                    "writing the log {} failed ({err}); the readings before this one are in it",
                    path.display()
                ));
                return false;
            }
        }
        let mut out = std::io::stdout().lock();
        let _ = if args.json {
            // One JSON object per reading (JSON Lines), the trend's point with its time.
            let point = match &analysed {
                Ok(r) => ampnote::analysis::blocks::point_of(begun.elapsed().as_secs_f64(), r),
                Err(e) => ampnote::analysis::blocks::TrendPoint::failed(
                    begun.elapsed().as_secs_f64(),
                    e.to_string(),
                ),
            };
            writeln!(
                out,
                "{}",
                serde_json::to_string(&point).expect("a point serializes")
            )
            .and_then(|_| out.flush())
        } else if tty {
            redraw.draw(&mut out, &level_part, &distortion_part)
        } else {
            writeln!(out, "{level_part}{distortion_part}").and_then(|_| out.flush())
        };
        readings += 1;
        last = Instant::now();
        limit.is_none_or(|l| begun.elapsed() < l)
    });
    if tty && !args.json {
        println!();
    }
    let secs = last.duration_since(start).as_secs_f64();
    // Readings after the first, over the time since it.
    let rate_text = if readings > 1 {
        format!(" ({:.1} a second)", (readings - 1) as f64 / secs.max(1e-9))
    } else {
        String::new()
    };
    let cpu = match (cpu0, cpu_seconds()) {
        (Some(a), Some(b)) if secs > 0.0 => {
            format!(", CPU {:.1} % of one core", (b - a) / secs * 100.0)
        }
        _ => String::new(),
    };
    eprintln!(
        "{readings} readings{rate_text}{cpu}{}",
        if ampnote::rig::interrupted() {
            "; stopped by Ctrl-C, the output silenced first"
        } else {
            ""
        }
    );
    if let Some((path, _)) = &log {
        eprintln!("readings kept in {}", path.display());
    }
    outcome?;
    if let Some(err) = log_error {
        return Err(err.into());
    }
    Ok(ExitCode::SUCCESS)
}
