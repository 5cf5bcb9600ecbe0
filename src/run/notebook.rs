//! `ampnote demo`, `notebook init|log`, `compare`, `match`.

use super::Failure;
use crate::cli::{CompareArgs, MatchArgs, NotebookAction};
use ampnote::calibration::Profile;
use ampnote::notebook::{Notebook, Run};
use ampnote::report::compare::{compare as compare_runs, match_channels, MatchTolerances};
use ampnote::report::ToJson as _;
use ampnote::results::RunResult;
use std::path::Path;
use std::process::ExitCode;

pub fn demo(out: &Path, circuits: bool) -> Result<ExitCode, Failure> {
    let t0 = std::time::Instant::now();
    // A folder that already holds a demo is kept; the next free name is used instead.
    let mut folder = out.to_path_buf();
    let mut n = 2;
    while folder.join("notebook").exists() {
        folder = std::path::PathBuf::from(format!("{}-{n}", out.display()));
        n += 1;
    }
    if folder != out {
        eprintln!(
            "{} already holds a demo; writing this one to {}",
            out.display(),
            folder.display()
        );
    }
    let out = folder.as_path();
    eprintln!("ampnote demo: an invented stereo single-ended amplifier on the simulated bench");
    if circuits && ampnote::rig::spice::available() {
        eprintln!("  ngspice found: the example circuits are predicted too (several minutes; --no-circuits leaves them out)");
    }
    let outcome = ampnote::demo::run(out, circuits, |what| eprintln!("  measuring {what} ..."))?;
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
    for p in &outcome.predictions {
        s += &format!(
            "\nPredicted (ngspice, {}) against measured ({}), channel 1: the change is measured minus predicted\n",
            p.a, p.b
        );
        s += &p.to_table();
    }
    if let Some(why) = &outcome.circuits_skipped {
        s += &format!("\nExample circuits (examples/circuits/): {why}\n");
    }
    let nb = Notebook::open(&outcome.notebook)?;
    let files = ampnote::report::html::write_report(&nb, &out.join("report"))?;
    s += &format!(
        "\nReport: {}\nNext: `ampnote notebook log {}`, `ampnote compare stock \"driver reworked\" --notebook {}`\n",
        files.html.display(),
        outcome.notebook.display(),
        outcome.notebook.display()
    );
    super::print_stdout(&s);
    Ok(ExitCode::SUCCESS)
}

pub fn notebook(action: &NotebookAction) -> Result<ExitCode, Failure> {
    match action {
        NotebookAction::Init {
            dir,
            amplifier,
            channels,
            load_ohms,
            profile,
        } => {
            let prof = match profile {
                Some(p) => Some(Profile::load(p)?),
                None => None,
            };
            let nb = Notebook::init(dir, amplifier, *channels, *load_ohms, prof)?;
            eprintln!(
                "notebook for `{}` created in {}",
                nb.info.amplifier,
                nb.dir.display()
            );
            Ok(ExitCode::SUCCESS)
        }
        NotebookAction::Reanalyze { dir, runs } => reanalyze(dir, runs),
        NotebookAction::Dc {
            dir,
            label,
            points,
            ratings,
            channel,
            note,
        } => dc(dir, label, points, ratings, *channel, note),
        NotebookAction::Log { dir, json } => {
            let nb = Notebook::open(dir)?;
            let scan = nb.scan()?;
            if *json {
                #[derive(serde::Serialize)]
                struct LogRun<'a> {
                    meta: &'a ampnote::notebook::RunMeta,
                    headline: String,
                }
                #[derive(serde::Serialize)]
                struct Log<'a> {
                    schema_version: u32,
                    amplifier: &'a str,
                    runs: Vec<LogRun<'a>>,
                    incomplete: Vec<LogRun<'a>>,
                    damaged: &'a [ampnote::notebook::Damaged],
                    leftovers: usize,
                }
                fn row(r: &Run) -> LogRun<'_> {
                    LogRun {
                        meta: &r.meta,
                        headline: r.result.headline(),
                    }
                }
                let log = Log {
                    schema_version: ampnote::report::SCHEMA_VERSION,
                    amplifier: &nb.info.amplifier,
                    runs: scan.runs.iter().map(row).collect(),
                    incomplete: scan.incomplete.iter().map(row).collect(),
                    damaged: &scan.damaged,
                    leftovers: scan.leftovers,
                };
                super::print_stdout(
                    &(serde_json::to_string_pretty(&log).expect("serializes") + "\n"),
                );
            } else {
                let p = ampnote::notebook::printable;
                let mut s = format!(
                    "{}: {} ({} channel(s))\n",
                    nb.dir.display(),
                    p(&nb.info.amplifier),
                    nb.info.channels
                );
                if scan.runs.is_empty() {
                    s += "  no runs yet: save one with --notebook DIR --label LABEL on a measuring command, or run `ampnote demo`\n";
                }
                let line = |r: &Run| {
                    format!(
                        "  {:<36} {}  {:<18} ch{}  {:<9} {}\n",
                        p(&r.meta.id),
                        r.meta.time,
                        p(&r.meta.label),
                        r.meta.channel,
                        r.meta.procedure,
                        r.result.headline()
                    )
                };
                for r in &scan.runs {
                    s += &line(r);
                }
                if !scan.incomplete.is_empty() {
                    s += &format!(
                        "\n  incomplete measurements (a write was interrupted; not compared): {}\n",
                        scan.incomplete.len()
                    );
                    for r in &scan.incomplete {
                        s += &line(r);
                    }
                }
                if !scan.damaged.is_empty() {
                    s += "\n  damaged run folders (not read; repair or remove them):\n";
                    for d in &scan.damaged {
                        s += &format!(
                            "  {} {} {}\n",
                            p(&d.dir.display().to_string()),
                            p(&d.file),
                            p(&d.reason)
                        );
                    }
                }
                if scan.leftovers > 0 {
                    s += &format!(
                        "\n  {} unfinished write(s) left temporary folders behind; the next write removes them\n",
                        scan.leftovers
                    );
                }
                super::print_stdout(&s);
            }
            Ok(ExitCode::SUCCESS)
        }
    }
}

/// Runs made on the spot from a capture file (every channel, analysed as its stimulus says).
fn runs_from_file(
    path: &Path,
    stimulus: Option<&Path>,
    label: &str,
    cal: &ampnote::calibration::Calibration,
) -> Result<Vec<Run>, Failure> {
    use ampnote::capture::Capture;
    use ampnote::signal::stimulus::Description;
    let stim = match stimulus {
        Some(p) => Some(Capture::read(p, false)?),
        None => None,
    };
    let desc = match &stim {
        Some(s) => Some(Description::of_capture(s).map_err(|why| {
            format!(
                "{} is not one of ampnote's stimuli: {why}; give the file `ampnote generate` wrote",
                stimulus.map_or(String::new(), |p| p.display().to_string())
            )
        })?),
        None => None,
    };
    let info = Capture::probe(path)?;
    let mut out = Vec::new();
    for ch in 1..=info.channel_count {
        let cap = Capture::read_channels(path, false, Some(&[ch]))?;
        let result = analyze_capture(&cap, ch, stim.as_ref().zip(desc.as_ref()), cal, None)?;
        out.push(Run {
            dir: path.to_path_buf(),
            meta: ampnote::notebook::RunMeta {
                id: format!("{}:{ch}", path.display()),
                label: label.to_string(),
                channel: ch,
                procedure: result.procedure(),
                time: ampnote::notebook::now_utc(),
                notes: String::new(),
                settings: Default::default(),
                calibration: *cal,
                analysis: None,
                measurement: None,
                files: vec![],
                predicted: false,
            },
            result,
        });
    }
    Ok(out)
}

/// Runs named by a label, `LABEL:CH`, or a run id.
fn pick(nb: &Notebook, name: &str) -> Result<Vec<Run>, Failure> {
    let runs = nb.runs()?;
    if let Some(r) = runs.iter().find(|r| r.meta.id == name) {
        return Ok(vec![r.clone()]);
    }
    let (label, ch) = match name.rsplit_once(':') {
        Some((l, c)) if c.parse::<usize>().is_ok() => (l, c.parse::<usize>().ok()),
        _ => (name, None),
    };
    Ok(nb.select(label, ch)?)
}

pub fn compare(args: &CompareArgs) -> Result<ExitCode, Failure> {
    let (a, b) = match &args.notebook {
        Some(dir) => {
            let nb = Notebook::open(dir)?;
            (pick(&nb, &args.a)?, pick(&nb, &args.b)?)
        }
        None => {
            let cal = args.calibration.calibration()?;
            let st = args.stimulus.as_deref();
            (
                runs_from_file(Path::new(&args.a), st, &args.a, &cal)?,
                runs_from_file(Path::new(&args.b), st, &args.b, &cal)?,
            )
        }
    };
    let c = compare_runs(&args.a, &a, &args.b, &b);
    for w in c.warnings.iter().filter(|_| args.json) {
        eprintln!("warning: {w}");
    }
    super::print_stdout(&if args.json { c.to_json() } else { c.to_table() });
    Ok(ExitCode::SUCCESS)
}

pub fn match_(args: &MatchArgs) -> Result<ExitCode, Failure> {
    let (na, nb_name, a, b) = match &args.notebook {
        Some(dir) => {
            let nb = Notebook::open(dir)?;
            let (na, nb_name) = match &args.b {
                Some(b) => (args.a.clone(), b.clone()),
                None => (format!("{}:1", args.a), format!("{}:2", args.a)),
            };
            let (a, b) = (pick(&nb, &na)?, pick(&nb, &nb_name)?);
            (na, nb_name, a, b)
        }
        None => {
            // Capture files: two files (channel 1 of each), or one stereo file (its channels).
            let cal = ampnote::calibration::Calibration::default();
            let st = args.stimulus.as_deref();
            let all_a = runs_from_file(Path::new(&args.a), st, &args.a, &cal)?;
            match &args.b {
                Some(bp) => {
                    let b = runs_from_file(Path::new(bp), st, bp, &cal)?;
                    let first = |v: Vec<Run>| {
                        v.into_iter()
                            .filter(|r| r.meta.channel == 1)
                            .collect::<Vec<_>>()
                    };
                    (args.a.clone(), bp.clone(), first(all_a), first(b))
                }
                None => {
                    let (l, r): (Vec<Run>, Vec<Run>) =
                        all_a.into_iter().partition(|r| r.meta.channel == 1);
                    (
                        format!("{}:1", args.a),
                        format!("{}:2", args.a),
                        l,
                        r.into_iter().filter(|r| r.meta.channel == 2).collect(),
                    )
                }
            }
        }
    };
    let tol = MatchTolerances {
        gain_db: args.gain_tolerance,
        response_db: args.response_tolerance,
        phase_deg: args.phase_tolerance,
        thd_db: args.thd_tolerance,
        power_db: args.power_tolerance,
        noise_db: args.noise_tolerance,
        separation_db: args.min_separation,
    };
    for (name, v) in [
        ("--gain-tolerance", tol.gain_db),
        ("--response-tolerance", tol.response_db),
        ("--phase-tolerance", tol.phase_deg),
        ("--thd-tolerance", tol.thd_db),
        ("--power-tolerance", tol.power_db),
        ("--noise-tolerance", tol.noise_db),
        ("--min-separation", tol.separation_db),
    ] {
        if !(v.is_finite() && (0.0..=1000.0).contains(&v)) {
            return Err(format!(
                "{name} must be a number between 0 and 1000 (dB, or degrees for phase), got {v}"
            )
            .into());
        }
    }
    let m = match_channels(&na, &a, &nb_name, &b, &tol);
    super::print_stdout(&if args.json { m.to_json() } else { m.to_table() });
    Ok(if m.pass {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}

pub fn report(dir: &Path, out: Option<&Path>) -> Result<ExitCode, Failure> {
    let nb = Notebook::open(dir)?;
    let out = out.map_or_else(|| dir.join("report"), Path::to_path_buf);
    let files = ampnote::report::html::write_report(&nb, &out)?;
    eprintln!(
        "wrote {} and {} chart(s) beside it",
        files.html.display(),
        files.charts.len()
    );
    super::print_stdout(&format!("{}\n", files.html.display()));
    Ok(ExitCode::SUCCESS)
}

/// Analyse one channel of a capture the way its stimulus says: a staircase gives a power run, a
/// sweep a response run, a tone (or no stimulus) a tone run. Returns the procedure and result.
pub fn analyze_capture(
    capture: &ampnote::capture::Capture,
    channel: usize,
    stimulus: Option<(
        &ampnote::capture::Capture,
        &ampnote::signal::stimulus::Description,
    )>,
    cal: &ampnote::calibration::Calibration,
    settings: Option<&ampnote::notebook::AnalysisSettings>,
) -> Result<RunResult, Failure> {
    use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
    use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig};
    use ampnote::notebook::AnalysisSettings;
    use ampnote::signal::stimulus::Kind;
    let y = &capture.channels[0];
    let fs = capture.sample_rate_hz as f64;
    let rate = capture.sample_rate_hz as usize;
    let input = ChannelInput {
        channel,
        samples: y,
        sample_rate_hz: fs,
        overload_threshold: capture.encoding.overload_threshold(),
        resolution_bits: capture.encoding.resolution_bits(),
    };
    match stimulus {
        Some((s, d)) if matches!(d.kind, Kind::Sweep { .. }) => {
            let sp = SweepParams::from_description(d).ok_or("the stimulus is not a sweep")?;
            let x = s
                .channel(d.signal_channels[0])
                .ok_or("the stimulus lacks its signal channel")?;
            let config = match settings {
                Some(AnalysisSettings::Response(c)) => c.clone(),
                _ => ResponseConfig::default(),
            };
            let r = ResponseAnalyzer::new(config)?.analyze(
                channel,
                x,
                sp,
                y,
                fs,
                input.overload_threshold,
            )?;
            Ok(r.into())
        }
        Some((s, d)) if matches!(d.kind, Kind::Steps { .. }) => {
            let Kind::Steps {
                frequency_hz,
                steps,
                ..
            } = &d.kind
            else {
                unreachable!()
            };
            let x = s
                .channel(d.signal_channels[0])
                .ok_or("the stimulus lacks its signal channel")?;
            let lag = ampnote::procedure::align::find_envelope_lag(
                y,
                x,
                rate / 100,
                steps[0].start_sample,
                2 * rate,
            )
            .map_or(0, |l| l.0);
            let r = ampnote::procedure::power::power_from_capture(
                channel,
                y,
                fs,
                input.overload_threshold,
                input.resolution_bits,
                *frequency_hz,
                steps,
                lag,
                cal,
            )?;
            Ok(r.into())
        }
        other => {
            // A tone: its steady part when the stimulus says where it is.
            let samples = match other {
                Some((_, d)) if matches!(d.kind, Kind::Tone { .. }) => {
                    let from = d.signal_start_sample + rate / 10;
                    let to = (d.signal_start_sample + d.signal_samples).saturating_sub(rate / 50);
                    // A capture shorter than the stimulus keeps what it has (never an empty or
                    // reversed range).
                    let to = to.min(y.len());
                    &y[from.min(to)..to]
                }
                _ => &y[..],
            };
            let config = match settings {
                Some(AnalysisSettings::Tone(c)) => c.clone(),
                _ => ToneConfig::default(),
            };
            let r = ToneAnalyzer::new(config)?.analyze(&ChannelInput { samples, ..input }, cal)?;
            Ok(r.into())
        }
    }
}

/// Analyse stored captures again (tone, response and power runs); results go beside the old.
fn reanalyze(dir: &Path, only: &[String]) -> Result<ExitCode, Failure> {
    use ampnote::capture::Capture;
    use ampnote::signal::stimulus::Description;
    use rayon::prelude::*;
    let nb = Notebook::open(dir)?;
    let mut done = 0;
    let mut skipped = Vec::new();
    let mut todo = Vec::new();
    for run in nb.runs()? {
        if !only.is_empty() && !only.contains(&run.meta.id) {
            continue;
        }
        let cap_path = run.dir.join("capture.wav");
        if !cap_path.exists() || !run.meta.procedure.reanalysable() {
            skipped.push(format!(
                "{} ({} runs with a stored capture are re-analysed; this one is {})",
                run.meta.id, "tone, power and response", run.meta.procedure
            ));
            continue;
        }
        todo.push(run);
    }
    // Every run on its own core; the new results are written afterwards, in the notebook's
    // order, so the outcome is the serial one.
    let progress = ampnote::progress::Progress::new(todo.len() as u64, "runs");
    let analysed: Vec<Result<RunResult, Failure>> = todo
        .par_iter()
        .map(|run| {
            progress.message(run.meta.id.clone());
            let cap_path = run.dir.join("capture.wav");
            let info = Capture::probe(&cap_path)?;
            let ch = if run.meta.channel <= info.channel_count {
                run.meta.channel
            } else {
                1
            };
            let cap = Capture::read_channels(&cap_path, true, Some(&[ch]))?;
            let stim = Capture::read(&run.dir.join("stimulus.wav"), false).ok();
            let desc = stim.as_ref().and_then(|s| Description::of_capture(s).ok());
            let pair = stim.as_ref().zip(desc.as_ref());
            let out = analyze_capture(
                &cap,
                run.meta.channel,
                pair,
                &run.meta.calibration,
                run.meta.analysis.as_ref(),
            );
            progress.inc(1);
            out
        })
        .collect();
    progress.finish();
    for (run, outcome) in todo.iter().zip(analysed) {
        let v = outcome?;
        if v.procedure() != run.meta.procedure {
            skipped.push(format!(
                "{} (its stored stimulus no longer matches a {} run)",
                run.meta.id, run.meta.procedure
            ));
            continue;
        }
        let path = nb.add_result(run, &v)?;
        eprintln!("{}: new result {}", run.meta.id, path.display());
        done += 1;
    }
    for s in &skipped {
        eprintln!("skipped {s}");
    }
    super::print_stdout(&format!("{done} run(s) re-analysed\n"));
    Ok(ExitCode::SUCCESS)
}

/// `ampnote notebook dc`: DC operating points kept with a label.
fn dc(
    dir: &Path,
    label: &str,
    points: &[String],
    ratings: &[String],
    channel: usize,
    note: &str,
) -> Result<ExitCode, Failure> {
    use ampnote::procedure::dc;
    let nb = Notebook::open(dir)?;
    ampnote::notebook::check_label(label)?;
    if channel == 0 || channel > nb.info.channels {
        return Err(format!(
            "--channel takes 1..{} (the notebook's channels), got {channel}",
            nb.info.channels
        )
        .into());
    }
    let parsed = points
        .iter()
        .map(|p| dc::parse_point(p))
        .collect::<ampnote::Result<Vec<_>>>()?;
    let rated = ratings
        .iter()
        .map(|r| dc::parse_rating(r))
        .collect::<ampnote::Result<Vec<_>>>()?;
    let result = dc::operating_points(parsed, rated)?;
    eprintln!("{}", dc::CAUTION);
    super::print_stdout(&format!("{}\n", result.headline()));
    for w in &result.warnings {
        eprintln!("warning: {w}");
    }
    let run = nb.save(ampnote::notebook::NewRun {
        label,
        channel,
        notes: note,
        settings: std::collections::BTreeMap::new(),
        calibration: ampnote::calibration::Calibration::default(),
        analysis: None,
        files: Vec::new(),
        blobs: Vec::new(),
        result: (&result).into(),
        predicted: false,
    })?;
    eprintln!("kept as {} in {}", run.meta.id, dir.display());
    Ok(if result.points.iter().any(|p| p.overstressed) {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    })
}
