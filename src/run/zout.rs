//! `ampnote zout`: the two-load method on two captures, or on a rig.

use super::Failure;
use crate::cli::ZoutArgs;
use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, ResponseResult, SweepParams};
use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig, ToneResult};
use ampnote::calibration::Calibration;
use ampnote::capture::{select_channels, Capture};
use ampnote::error::Error;
use ampnote::procedure::zout::{
    check_distinct, check_loads, from_levels, from_tones, two_load, zout_sigma, ZoutPoint,
    ZoutResult,
};
use ampnote::report::power::ZoutReport;
use ampnote::report::SCHEMA_VERSION;
use ampnote::signal::stimulus::{self, Common};
use std::process::ExitCode;

/// The steady-tone analysis of one load's capture.
fn tone_level(
    samples: &[f64],
    fs: f64,
    overload: f64,
    bits: u32,
    hint: Option<f64>,
) -> Result<ToneResult, Failure> {
    let a = ToneAnalyzer::new(ToneConfig {
        fundamental_hint_hz: hint,
        ..ToneConfig::default()
    })?;
    a.analyze(
        &ChannelInput {
            channel: 1,
            samples,
            sample_rate_hz: fs,
            overload_threshold: overload,
            resolution_bits: bits,
        },
        &Calibration::default(),
    )
    .map_err(Failure::from)
}

/// Z across the band from two responses to the same sweep. The difference of the two curves
/// must stand out of its own point-to-point scatter (a real output impedance changes smoothly
/// with frequency; noise changes from one point to the next).
fn from_responses(
    channel: usize,
    a: &ResponseResult,
    ra: f64,
    b: &ResponseResult,
    rb: f64,
) -> Result<ZoutResult, Failure> {
    check_loads(ra, rb)?;
    let lin = |r: &ResponseResult, db: f64| 10f64.powf((r.reference_gain_db + db) / 20.0);
    let diff: Vec<f64> = a
        .points
        .iter()
        .zip(&b.points)
        .map(|(pa, pb)| {
            (b.reference_gain_db + pb.magnitude_db) - (a.reference_gain_db + pa.magnitude_db)
        })
        .collect();
    // Robust scatter of one difference: the median absolute step between neighbours, scaled to
    // a standard deviation (1.4826 for normal data) and divided by sqrt 2 (a step holds two).
    let mut steps: Vec<f64> = diff.windows(2).map(|w| (w[1] - w[0]).abs()).collect();
    steps.sort_by(f64::total_cmp);
    let sigma = steps.get(steps.len() / 2).copied().unwrap_or(0.0) * 1.4826 / 2f64.sqrt();
    check_distinct(channel, a.reference_gain_db, b.reference_gain_db, sigma)?;
    let mut res = from_levels(channel, a.reference_hz, lin(a, 0.0), ra, lin(b, 0.0), rb)?;
    res.zout_sigma_ohms = Some(zout_sigma(lin(a, 0.0), ra, lin(b, 0.0), rb, sigma));
    let nominal = res.nominal_load_ohms;
    res.points = a
        .points
        .iter()
        .zip(&b.points)
        .filter_map(|(pa, pb)| {
            let z = two_load(lin(a, pa.magnitude_db), ra, lin(b, pb.magnitude_db), rb).ok()?;
            Some(ZoutPoint {
                frequency_hz: pa.frequency_hz,
                zout_ohms: z,
                damping_factor: nominal / z,
            })
        })
        .collect();
    Ok(res)
}

pub fn run(args: &ZoutArgs) -> Result<ExitCode, Failure> {
    super::check_save(&args.save)?;
    let [ra, rb] = args.loads[..] else {
        return Err(format!(
            "--loads takes exactly two resistances (the rated load and about twice it), got {}",
            args.loads.len()
        )
        .into());
    };
    let mut results = Vec::new();
    let source;
    let cal = args.calibration.resolve(&args.save)?;
    if let Some(mut rig) = args.rig.open(cal)? {
        let rate = args.rate;
        source = rig.describe();
        let chosen = select_channels(rig.channels(), args.channel.get())?;
        let c = Common {
            sample_rate_hz: rate,
            level_dbfs: args.level,
            channels: 1,
            signal_channels: vec![1],
            lead_s: 0.1,
            tail_s: 0.5,
            fade_s: if args.sweep { 0.0 } else { 0.01 },
        };
        let stim = if args.sweep {
            // As `generate sweep` does: 0.45 x the rate, at most 40 kHz.
            stimulus::sweep(&c, 10.0, (0.45 * rate as f64).min(40_000.0), 3.0)?
        } else {
            stimulus::tone(&c, args.freq, 1.5)?
        };
        if args.watts.is_some() && args.sweep {
            return Err(
                "--watts sets a tone's drive; drop it with --sweep (or use --level)".into(),
            );
        }
        for &ch in &chosen {
            // With --watts: this channel's drive for that power into the first load.
            let scaled: Option<Vec<f64>> = match args.watts {
                Some(w) => {
                    rig.set_load(ra)?;
                    let found = ampnote::procedure::drive::drive_for_power(
                        rig.as_mut(),
                        ch,
                        args.freq,
                        rate,
                        w,
                    )?;
                    Some(ampnote::procedure::drive::rescaled(
                        &stim.signal,
                        args.level,
                        found.drive_dbfs,
                    ))
                }
                None => None,
            };
            let signal = scaled.as_deref().unwrap_or(&stim.signal);
            let mut caps = Vec::new();
            for r in [ra, rb] {
                rig.set_load(r)?;
                caps.push(rig.play_and_record(ch, signal, rate)?);
            }
            let mut res = if args.sweep {
                let sp = SweepParams::from_description(&stim.description).expect("a sweep");
                let an = ResponseAnalyzer::new(ResponseConfig::default())?;
                let thr = rig.overload_threshold();
                let a = an.analyze(ch, &stim.signal, sp, &caps[0], rate as f64, thr)?;
                let b = an.analyze(ch, &stim.signal, sp, &caps[1], rate as f64, thr)?;
                from_responses(ch, &a, ra, &b, rb)?
            } else {
                let level = |cap: &[f64], hint: f64| {
                    tone_level(
                        cap,
                        rate as f64,
                        rig.overload_threshold(),
                        rig.resolution_bits(),
                        Some(hint),
                    )
                };
                let a = level(&caps[0], args.freq)?;
                let b = level(&caps[1], args.freq)?;
                from_tones(ch, &a, ra, &b, rb)?
            };
            res.warnings.extend(rig.take_notes(ch));
            results.push(res);
        }
        rig.set_load(ra)?;
    } else {
        let [a_path, b_path] = &args.captures[..] else {
            return Err(
                "give two captures (into the first load, then the second) or --rig sim".into(),
            );
        };
        source = format!(
            "{} ({ra} ohm) and {} ({rb} ohm)",
            a_path.display(),
            b_path.display()
        );
        let info = Capture::probe(a_path)?;
        let chosen = select_channels(info.channel_count, args.channel.get())?;
        let sweep = match &args.stimulus {
            Some(p) => {
                let (stim, desc) = super::read_stimulus(p, "sweep")?;
                let sp = SweepParams::from_description(&desc).expect("a sweep");
                let x = stim
                    .channel(desc.signal_channels[0])
                    .map(|x| x.to_vec())
                    .unwrap_or_default();
                Some((x, sp))
            }
            None => None,
        };
        for &ch in &chosen {
            let ca = Capture::read_channels(a_path, false, Some(&[ch]))?;
            let cb = Capture::read_channels(b_path, false, Some(&[ch]))?;
            if ca.sample_rate_hz != cb.sample_rate_hz {
                return Err(
                    "the two captures have different sample rates; record both the same way".into(),
                );
            }
            if ca.channels[0] == cb.channels[0] {
                return Err(Error::WrongKind {
                    channel: ch,
                    found: "the two captures hold the same samples: one recording given twice"
                        .into(),
                    next: "Give the capture into the first load, then the one into the second."
                        .into(),
                }
                .into());
            }
            let fs = ca.sample_rate_hz as f64;
            let res = match &sweep {
                Some((x, sp)) => {
                    let an = ResponseAnalyzer::new(ResponseConfig::default())?;
                    let a = an.analyze(
                        ch,
                        x,
                        *sp,
                        &ca.channels[0],
                        fs,
                        ca.encoding.overload_threshold(),
                    )?;
                    let b = an.analyze(
                        ch,
                        x,
                        *sp,
                        &cb.channels[0],
                        fs,
                        cb.encoding.overload_threshold(),
                    )?;
                    from_responses(ch, &a, ra, &b, rb)?
                }
                None => {
                    let a = tone_level(
                        &ca.channels[0],
                        fs,
                        ca.encoding.overload_threshold(),
                        ca.encoding.resolution_bits(),
                        None,
                    )?;
                    let b = tone_level(
                        &cb.channels[0],
                        fs,
                        cb.encoding.overload_threshold(),
                        cb.encoding.resolution_bits(),
                        None,
                    )?;
                    from_tones(ch, &a, ra, &b, rb)?
                }
            };
            results.push(res);
        }
    }
    let mut keeper = super::Keeper::new(&args.save);
    for r in &results {
        let files: Vec<(&str, &std::path::Path)> = match &args.captures[..] {
            [a, b] => vec![
                ("capture.wav", a.as_path()),
                ("capture-load-b.wav", b.as_path()),
            ],
            _ => Vec::new(),
        };
        keeper.add(r.channel, cal, None, files, r);
    }
    let report = ZoutReport {
        schema_version: SCHEMA_VERSION,
        source,
        first: results.first().cloned(),
        results,
    };
    super::print_then_keep(super::Format::of(args.json, &args.csv), &report, keeper)
}
