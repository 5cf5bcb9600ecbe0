//! `ampnote demo`, `notebook init|log`, `compare`, `match`.

use crate::cli::{CompareArgs, MatchArgs, NotebookAction};
use ampnote::calibration::Profile;
use ampnote::notebook::{Notebook, Run};
use ampnote::report::compare::{compare as compare_runs, match_channels, MatchTolerances};
use std::path::Path;
use std::process::ExitCode;

fn e(err: ampnote::Error) -> String {
    err.to_string()
}

pub fn demo(out: &Path) -> Result<ExitCode, String> {
    let t0 = std::time::Instant::now();
    eprintln!("ampnote demo: an invented stereo single-ended amplifier on the simulated bench");
    let outcome = ampnote::demo::run(out, |what| eprintln!("  measuring {what} ...")).map_err(e)?;
    let mut s = String::new();
    s += &format!(
        "\n{} runs kept in {} ({:.1} s)\n\nBefore and after the driver rework\n",
        outcome.runs,
        outcome.notebook.display(),
        t0.elapsed().as_secs_f64()
    );
    s += &outcome.comparison.to_table();
    for m in &outcome.matches {
        s += "\n";
        s += &m.to_table();
    }
    let nb = Notebook::open(&outcome.notebook).map_err(e)?;
    let files = ampnote::report::html::write_report(&nb, &out.join("report")).map_err(e)?;
    s += &format!(
        "\nReport: {}\nNext: `ampnote notebook log {}`, `ampnote compare stock \"driver reworked\" --notebook {}`\n",
        files.html.display(),
        outcome.notebook.display(),
        outcome.notebook.display()
    );
    super::print_stdout(&s);
    Ok(ExitCode::SUCCESS)
}

pub fn notebook(action: &NotebookAction) -> Result<ExitCode, String> {
    match action {
        NotebookAction::Init {
            dir,
            amplifier,
            channels,
            load_ohms,
            profile,
        } => {
            let prof = match profile {
                Some(p) => Some(Profile::load(p).map_err(e)?),
                None => None,
            };
            let nb = Notebook::init(dir, amplifier, *channels, *load_ohms, prof).map_err(e)?;
            eprintln!(
                "notebook for `{}` created in {}",
                nb.info.amplifier,
                nb.dir.display()
            );
            Ok(ExitCode::SUCCESS)
        }
        NotebookAction::Reanalyze { dir, runs } => reanalyze(dir, runs),
        NotebookAction::Log { dir, json } => {
            let nb = Notebook::open(dir).map_err(e)?;
            let runs = nb.runs().map_err(e)?;
            if *json {
                let list: Vec<serde_json::Value> = runs
                    .iter()
                    .map(|r| serde_json::json!({"meta": r.meta, "headline": headline(r)}))
                    .collect();
                let v = serde_json::json!({
                    "schema_version": ampnote::report::SCHEMA_VERSION,
                    "amplifier": nb.info.amplifier,
                    "runs": list,
                });
                super::print_stdout(
                    &(serde_json::to_string_pretty(&v).expect("serializes") + "\n"),
                );
            } else {
                let mut s = format!(
                    "{}: {} ({} channel(s))\n",
                    nb.dir.display(),
                    nb.info.amplifier,
                    nb.info.channels
                );
                if runs.is_empty() {
                    s += "  no runs yet: save one with --notebook DIR --label LABEL on a measuring command, or run `ampnote demo`\n";
                }
                for r in &runs {
                    s += &format!(
                        "  {:<36} {}  {:<18} ch{}  {:<9} {}\n",
                        r.meta.id,
                        r.meta.time,
                        r.meta.label,
                        r.meta.channel,
                        r.meta.procedure,
                        headline(r)
                    );
                }
                super::print_stdout(&s);
            }
            Ok(ExitCode::SUCCESS)
        }
    }
}

/// The run's one-line figure.
fn headline(r: &Run) -> String {
    let v = &r.result;
    let f = |k: &str| v.get(k).and_then(|x| x.as_f64());
    match r.meta.procedure.as_str() {
        "tone" => format!(
            "THD {:.3} %, THD+N {:.3} % at {}",
            f("thd_percent").unwrap_or(f64::NAN),
            f("thdn_percent").unwrap_or(f64::NAN),
            f("output_w").map_or_else(
                || format!("{:.1} dBFS", f("fundamental_dbfs").unwrap_or(f64::NAN)),
                |w| format!("{w:.2} W")
            )
        ),
        "power" => v
            .get("power_at_thd")
            .and_then(|p| p.as_array())
            .and_then(|p| p.first())
            .and_then(|p| p.get("output_w").and_then(|w| w.as_f64()))
            .map_or("power: 1 % not reached".into(), |w| {
                format!("{w:.2} W at 1 % THD")
            }),
        "response" => {
            let hz =
                |k: &str| f(k).map_or("beyond the sweep".to_string(), |v| format!("{v:.1} Hz"));
            format!("-3 dB at {} and {}", hz("low_3db_hz"), hz("high_3db_hz"))
        }
        "zout" => format!(
            "{:.2} ohm, damping factor {:.1}",
            f("zout_ohms").unwrap_or(f64::NAN),
            f("damping_factor").unwrap_or(f64::NAN)
        ),
        other => other.to_string(),
    }
}

/// Runs named by a label, `LABEL:CH`, or a run id.
fn pick(nb: &Notebook, name: &str) -> Result<Vec<Run>, String> {
    let runs = nb.runs().map_err(e)?;
    if let Some(r) = runs.iter().find(|r| r.meta.id == name) {
        return Ok(vec![r.clone()]);
    }
    let (label, ch) = match name.rsplit_once(':') {
        Some((l, c)) if c.parse::<usize>().is_ok() => (l, c.parse::<usize>().ok()),
        _ => (name, None),
    };
    nb.select(label, ch).map_err(e)
}

pub fn compare(args: &CompareArgs) -> Result<ExitCode, String> {
    let nb = Notebook::open(&args.notebook).map_err(e)?;
    let (a, b) = (pick(&nb, &args.a)?, pick(&nb, &args.b)?);
    let c = compare_runs(&args.a, &a, &args.b, &b);
    for w in c.warnings.iter().filter(|_| args.json) {
        eprintln!("warning: {w}");
    }
    super::print_stdout(&if args.json { c.to_json() } else { c.to_table() });
    Ok(ExitCode::SUCCESS)
}

pub fn match_(args: &MatchArgs) -> Result<ExitCode, String> {
    let nb = Notebook::open(&args.notebook).map_err(e)?;
    let (na, nb_name) = match &args.b {
        Some(b) => (args.a.clone(), b.clone()),
        None => (format!("{}:1", args.a), format!("{}:2", args.a)),
    };
    let (a, b) = (pick(&nb, &na)?, pick(&nb, &nb_name)?);
    let tol = MatchTolerances {
        gain_db: args.gain_tolerance,
        response_db: args.response_tolerance,
        phase_deg: args.phase_tolerance,
        thd_db: args.thd_tolerance,
        power_db: args.power_tolerance,
        noise_db: args.noise_tolerance,
    };
    let m = match_channels(&na, &a, &nb_name, &b, &tol);
    super::print_stdout(&if args.json { m.to_json() } else { m.to_table() });
    Ok(if m.pass {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}

pub fn report(dir: &Path, out: Option<&Path>) -> Result<ExitCode, String> {
    let nb = Notebook::open(dir).map_err(e)?;
    let out = out.map_or_else(|| dir.join("report"), Path::to_path_buf);
    let files = ampnote::report::html::write_report(&nb, &out).map_err(e)?;
    eprintln!(
        "wrote {} and {} chart(s) beside it",
        files.html.display(),
        files.charts.len()
    );
    super::print_stdout(&format!("{}\n", files.html.display()));
    Ok(ExitCode::SUCCESS)
}

/// Analyse stored captures again (tone, response and power runs); results go beside the old.
fn reanalyze(dir: &Path, only: &[String]) -> Result<ExitCode, String> {
    use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
    use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig};
    use ampnote::capture::Capture;
    use ampnote::signal::stimulus::{Description, Kind};
    let nb = Notebook::open(dir).map_err(e)?;
    let mut done = 0;
    let mut skipped = Vec::new();
    for run in nb.runs().map_err(e)? {
        if !only.is_empty() && !only.contains(&run.meta.id) {
            continue;
        }
        let cap_path = run.dir.join("capture.wav");
        if !cap_path.exists() {
            skipped.push(format!("{} (no stored capture)", run.meta.id));
            continue;
        }
        let info = Capture::probe_wav(&cap_path).map_err(e)?;
        let ch = if run.meta.channel <= info.channel_count {
            run.meta.channel
        } else {
            1
        };
        let cap = Capture::read_wav_channels(&cap_path, true, Some(&[ch])).map_err(e)?;
        let fs = cap.sample_rate_hz as f64;
        let stim = Capture::read_wav(&run.dir.join("stimulus.wav"), false).ok();
        let desc = stim
            .as_ref()
            .and_then(|s| s.description_json.as_deref())
            .and_then(Description::from_json);
        let cal = run.meta.calibration;
        let input = ChannelInput {
            channel: run.meta.channel,
            samples: &cap.channels[0],
            sample_rate_hz: fs,
            overload_threshold: cap.encoding.overload_threshold(),
            resolution_bits: cap.encoding.resolution_bits(),
        };
        let result: Option<serde_json::Value> = match run.meta.procedure.as_str() {
            "tone" => {
                // The steady part of a stored tone: its description says where it is.
                let samples = match &desc {
                    Some(d) if matches!(d.kind, Kind::Tone { .. }) => {
                        let from = d.signal_start_sample + cap.sample_rate_hz as usize / 10;
                        let to = (d.signal_start_sample + d.signal_samples)
                            .saturating_sub(cap.sample_rate_hz as usize / 50);
                        &cap.channels[0][from.min(to)..to.min(cap.channels[0].len())]
                    }
                    _ => &cap.channels[0][..],
                };
                let a = ToneAnalyzer::new(ToneConfig::default()).map_err(e)?;
                let r = a
                    .analyze(&ChannelInput { samples, ..input }, &cal)
                    .map_err(e)?;
                Some(serde_json::to_value(r).expect("serializes"))
            }
            "response" => match (&stim, &desc) {
                (Some(s), Some(d)) => {
                    let sp = SweepParams::from_description(d)
                        .ok_or("the stored stimulus is not a sweep")?;
                    let x = s
                        .channel(d.signal_channels[0])
                        .ok_or("the stored stimulus lacks its signal channel")?;
                    let an = ResponseAnalyzer::new(ResponseConfig::default()).map_err(e)?;
                    let r = an
                        .analyze(
                            run.meta.channel,
                            x,
                            sp,
                            &cap.channels[0],
                            fs,
                            input.overload_threshold,
                        )
                        .map_err(e)?;
                    Some(serde_json::to_value(r).expect("serializes"))
                }
                _ => None,
            },
            "power" => match (&stim, &desc) {
                (Some(s), Some(d)) => {
                    let Kind::Steps {
                        frequency_hz,
                        steps,
                        ..
                    } = &d.kind
                    else {
                        return Err(format!(
                            "{}: the stored stimulus is not a staircase",
                            run.meta.id
                        ));
                    };
                    let x = s
                        .channel(d.signal_channels[0])
                        .ok_or("the stored stimulus lacks its signal channel")?;
                    let lag = ampnote::procedure::align::find_envelope_lag(
                        &cap.channels[0],
                        x,
                        (fs / 100.0) as usize,
                        steps[0].start_sample,
                        (2.0 * fs) as usize,
                    )
                    .map_or(0, |l| l.0);
                    let r = ampnote::procedure::power::power_from_capture(
                        run.meta.channel,
                        &cap.channels[0],
                        fs,
                        input.overload_threshold,
                        input.resolution_bits,
                        *frequency_hz,
                        steps,
                        lag,
                        &cal,
                    )
                    .map_err(e)?;
                    Some(serde_json::to_value(r).expect("serializes"))
                }
                _ => None,
            },
            _ => None,
        };
        match result {
            Some(v) => {
                let path = nb.add_result(&run, &v).map_err(e)?;
                eprintln!("{}: new result {}", run.meta.id, path.display());
                done += 1;
            }
            None => skipped.push(format!(
                "{} ({} runs are not re-analysed from files)",
                run.meta.id, run.meta.procedure
            )),
        }
    }
    for s in &skipped {
        eprintln!("skipped {s}");
    }
    super::print_stdout(&format!("{done} run(s) re-analysed\n"));
    Ok(ExitCode::SUCCESS)
}
