//! The stimuli as written by `ampnote generate`, checked against their closed forms, and the
//! `response` and `imd` commands' handling of bad captures.

use super::common::{run, tmpdir};
use ampnote::capture::Capture;
use ampnote::signal::stimulus::{Description, Kind};
use std::path::Path;

fn ok(args: &[&str]) -> String {
    let (code, out, err) = run(args);
    assert_eq!(code, 0, "{args:?}: {err}");
    out
}

fn description(path: &Path) -> (Capture, Description) {
    let cap = Capture::read(path, false).unwrap();
    let d = Description::from_json(cap.description_json.as_deref().expect("description chunk"))
        .unwrap();
    (cap, d)
}

/// `ampnote generate ARGS -o D/NAME`; the file's path.
fn generate(d: &Path, name: &str, args: &[&str]) -> String {
    let path = p(d, name);
    let mut all = vec!["generate"];
    all.extend_from_slice(args);
    all.extend(["-o", &path]);
    ok(&all);
    path
}

/// A 2 s sweep over the audio band, 20 Hz to 20 kHz at 48 kHz, as D/sweep.wav.
fn audio_band_sweep(d: &Path) -> String {
    generate(
        d,
        "sweep.wav",
        &[
            "sweep",
            "--rate",
            "48000",
            "--seconds",
            "2",
            "--from",
            "20",
            "--to",
            "20000",
        ],
    )
}

fn p(d: &Path, name: &str) -> String {
    d.join(name).to_string_lossy().into_owned()
}

#[test]
fn sweep_is_novaks_synchronized_sweep() {
    // Novak, Lotton, Simon (2015): L = round(f1 T / ln(f2/f1)) / f1 and
    // x(t) = sin(2 pi f1 L exp(t/L)); f1 L is an integer, so x(t) = sin(2 pi f1 L (exp(t/L) - 1)).
    let d = tmpdir("sweep");
    let f = generate(
        &d,
        "sweep.wav",
        &[
            "sweep",
            "--rate",
            "48000",
            "--bits",
            "32f",
            "--level",
            "-6",
            "--from",
            "20",
            "--to",
            "20000",
            "--seconds",
            "3",
            "--lead",
            "0.1",
            "--tail",
            "0.2",
        ],
    );
    let (cap, desc) = description(Path::new(&f));
    let Kind::Sweep {
        start_hz,
        stop_hz,
        rate_s,
        fade_in_s,
        ..
    } = desc.kind
    else {
        panic!("kind")
    };
    assert_eq!((start_hz, stop_hz), (20.0, 20_000.0));
    let f1l = start_hz * rate_s;
    assert!(
        (f1l - f1l.round()).abs() < 1e-9,
        "f1 L = {f1l} is not an integer"
    );
    assert!((rate_s - (20.0 * 3.0 / 1000f64.ln()).round() / 20.0).abs() < 1e-12);
    let x = &cap.channels[0];
    let lead = desc.signal_start_sample;
    assert!(
        x[..lead].iter().all(|&v| v == 0.0),
        "lead is digital silence"
    );
    let amp = 10f64.powf(-6.0 / 20.0);
    let fade_end = lead + (fade_in_s * 48_000.0) as usize + 1;
    for i in (fade_end..lead + desc.signal_samples - 200).step_by(997) {
        let t = (i - lead) as f64 / 48_000.0;
        let want =
            amp * (2.0 * std::f64::consts::PI * start_hz * rate_s * (t / rate_s).exp_m1()).sin();
        // float32 storage: 6e-8 relative
        assert!((x[i] - want).abs() < 1e-6, "sample {i}: {} vs {want}", x[i]);
    }
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn tone_steps_and_twotone_levels() {
    let d = tmpdir("levels");
    // A -12 dBFS tone reads -12 dBFS (0 dBFS = full-scale sine RMS, AES17).
    let tone = generate(
        &d,
        "tone.wav",
        &[
            "tone",
            "--freq",
            "1000",
            "--level",
            "-12",
            "--seconds",
            "1",
            "--lead",
            "0",
            "--tail",
            "0",
        ],
    );
    let v: ampnote::report::tone::AnalyzeReport =
        serde_json::from_str(&ok(&["analyze", &tone, "--json"])).unwrap();
    let lvl = v.channels[0].fundamental_dbfs;
    assert!((lvl + 12.0).abs() < 0.01, "tone level {lvl}");

    // The staircase: one step per dB from -30 to -20, each analysable at its level.
    let st = p(&d, "steps.wav");
    ok(&[
        "generate", "steps", "--from", "-30", "--to", "-20", "--step", "2", "--dwell", "0.5",
        "--settle", "0.1", "--bits", "32f", "-o", &st,
    ]);
    let (cap, desc) = description(Path::new(&st));
    let Kind::Steps { steps, .. } = &desc.kind else {
        panic!("kind")
    };
    assert_eq!(steps.len(), 6);
    for s in steps {
        let seg = &cap.channels[0][s.analyse_from_sample..s.analyse_to_sample];
        let rms = (seg.iter().map(|v| v * v).sum::<f64>() / seg.len() as f64).sqrt();
        let dbfs = 20.0 * (rms * 2f64.sqrt()).log10();
        assert!(
            (dbfs - s.level_dbfs).abs() < 0.05,
            "step {} dBFS reads {dbfs:.3}",
            s.level_dbfs
        );
    }

    // Two-tone at -10 dBFS: RMS of the pair equals a -10 dBFS sine's, amplitudes 4:1.
    let tt = generate(
        &d,
        "tt.wav",
        &[
            "twotone",
            "--level",
            "-10",
            "--seconds",
            "2",
            "--bits",
            "32f",
            "--lead",
            "0",
            "--tail",
            "0",
        ],
    );
    let (cap, desc) = description(Path::new(&tt));
    let x = &cap.channels[0];
    let rms = (x.iter().map(|v| v * v).sum::<f64>() / x.len() as f64).sqrt();
    assert!(
        (20.0 * (rms * 2f64.sqrt()).log10() + 10.0).abs() < 0.05,
        "two-tone RMS {rms}"
    );
    assert!(matches!(desc.kind, Kind::TwoTone { ratio, .. } if ratio == 4.0));
    let v: ampnote::report::imd::ImdReport =
        serde_json::from_str(&ok(&["imd", &tt, "--stimulus", &tt, "--json"])).unwrap();
    let c = &v.channels[0];
    assert_eq!(
        c.method,
        ampnote::signal::stimulus::TwoToneMethod::Modulation
    );
    assert!(
        c.dm2_percent.unwrap() < 1e-3,
        "a clean pair has no IMD: {c:?}"
    );
    assert_eq!(c.pair_source, "stimulus description");

    // Stereo file with the signal on channel 2 only.
    let st2 = generate(
        &d,
        "right.wav",
        &["tone", "--channels", "2", "--signal-on", "2"],
    );
    let (cap, _) = description(Path::new(&st2));
    assert!(cap.channels[0].iter().all(|&v| v == 0.0) && cap.channels[1].iter().any(|&v| v != 0.0));
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn response_command_and_its_bad_input() {
    let d = tmpdir("resp");
    let sw = audio_band_sweep(&d);
    // The stimulus played back as its own capture: flat, non-inverting, every required key.
    let v: serde_json::Value = serde_json::from_str(&ok(&[
        "response",
        &sw,
        "--stimulus",
        &sw,
        "--json",
        "--csv",
        &p(&d, "r.csv"),
    ]))
    .unwrap();
    for key in [
        "schema_version",
        "reference_hz",
        "points",
        "low_3db_hz",
        "high_3db_hz",
        "latency_ms",
        "polarity",
        "harmonics",
        "warnings",
    ] {
        assert!(v.get(key).is_some(), "response JSON lacks {key}");
    }
    let r: ampnote::report::response::ResponseReport = serde_json::from_value(v).unwrap();
    let c = &r.channels[0];
    assert_eq!(c.polarity, "non-inverting");
    assert!(c.latency_ms.abs() < 0.02);
    assert!(c.max_deviation_db.abs() < 0.01);
    let csv = std::fs::read_to_string(d.join("r.csv")).unwrap();
    assert!(
        csv.starts_with("channel,frequency_hz,magnitude_db,phase_deg,h2_dbc"),
        "{csv:.80}"
    );

    // A tone where the sweep should be.
    let tone = generate(
        &d,
        "tone.wav",
        &["tone", "--rate", "48000", "--seconds", "3"],
    );
    let (code, _, err) = run(&["response", &tone, "--stimulus", &sw]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("does not contain the sweep") || err.contains("not analysed"),
        "{err}"
    );
    // The tone as stimulus: not a sweep.
    let (code, _, err) = run(&["response", &sw, "--stimulus", &tone]);
    assert_eq!(code, 2);
    assert!(err.contains("not one of ampnote's sweep stimuli"), "{err}");
    // Different rates.
    let sw96 = generate(
        &d,
        "sweep96.wav",
        &["sweep", "--rate", "96000", "--seconds", "2"],
    );
    let (code, _, err) = run(&["response", &sw96, "--stimulus", &sw]);
    assert_eq!(code, 2);
    assert!(
        err.contains("stimulus is at 48000 Hz but the capture at 96000 Hz"),
        "{err}"
    );
    // A capture cut short.
    let cap = Capture::read(Path::new(&sw), false).unwrap();
    let short = p(&d, "short.wav");
    let n = cap.channels[0].len() / 2;
    ampnote::signal::wav::write_wav(
        Path::new(&short),
        48_000,
        &[cap.channels[0][..n].to_vec()],
        ampnote::signal::wav::WavFormat::Float32,
        1,
    )
    .unwrap();
    let (code, out, _) = run(&["response", &short, "--stimulus", &sw]);
    assert_eq!(code, 2, "{out}");
    let (_, _, err) = run(&["response", &short, "--stimulus", &sw]);
    assert!(
        err.contains("ends") && err.contains("before the sweep does"),
        "{out}{err}"
    );
    // A recorder started 0.1 s into the sweep.
    let late = p(&d, "late.wav");
    let skip = (0.3 * 48_000.0) as usize; // 0.2 s lead + 0.1 s of sweep
    ampnote::signal::wav::write_wav(
        Path::new(&late),
        48_000,
        &[cap.channels[0][skip..].to_vec()],
        ampnote::signal::wav::WavFormat::Float32,
        1,
    )
    .unwrap();
    let (code, _, err) = run(&["response", &late, "--stimulus", &sw]);
    assert_eq!(code, 2);
    assert!(err.contains("starts after the sweep began"), "{err}");
    // A recorder started during the lead silence: fine, negative latency.
    let early = p(&d, "early.wav");
    ampnote::signal::wav::write_wav(
        Path::new(&early),
        48_000,
        &[cap.channels[0][4800..].to_vec()],
        ampnote::signal::wav::WavFormat::Float32,
        1,
    )
    .unwrap();
    let v: ampnote::report::response::ResponseReport =
        serde_json::from_str(&ok(&["response", &early, "--stimulus", &sw, "--json"])).unwrap();
    let latency = v.channels[0].latency_ms;
    assert!((latency + 100.0).abs() < 0.05, "{latency}");
    // Clipped in the capture: a warning, not an error.
    let clipped = p(&d, "clipped.wav");
    let c: Vec<f64> = cap.channels[0]
        .iter()
        .map(|v| (v * 8.0).clamp(-1.0, 1.0))
        .collect();
    ampnote::signal::wav::write_wav(
        Path::new(&clipped),
        48_000,
        &[c],
        ampnote::signal::wav::WavFormat::Float32,
        1,
    )
    .unwrap();
    let v: ampnote::report::response::ResponseReport =
        serde_json::from_str(&ok(&["response", &clipped, "--stimulus", &sw, "--json"])).unwrap();
    let warnings = &v.channels[0].warnings;
    assert!(
        warnings
            .iter()
            .any(|w| w.code == ampnote::warning::WarningCode::InputOverload
                && w.message.contains("input overload")),
        "{warnings:?}"
    );
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn clock_drift_is_reported() {
    // A recorder running 100 ppm fast sees the sweep at t (1 + 1e-4): build that capture from the
    // sweep's closed form (no fade) and check the warning.
    use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
    use ampnote::signal::stimulus::{sweep, Common};
    let fs = 48_000.0;
    let c = Common {
        sample_rate_hz: 48_000,
        level_dbfs: -6.0,
        channels: 1,
        signal_channels: vec![1],
        lead_s: 0.05,
        tail_s: 0.5,
        fade_s: 1e-9,
    };
    let s = sweep(&c, 20.0, 20_000.0, 5.0).unwrap();
    let Kind::Sweep { rate_s, .. } = s.description.kind else {
        panic!()
    };
    let lead = s.description.signal_start_sample;
    let len = s.description.signal_samples;
    let amp = 10f64.powf(-6.0 / 20.0);
    let drift = 1e-4;
    let delay = 200.0; // samples of converter latency
    let y: Vec<f64> = (0..s.signal.len() + 400)
        .map(|i| {
            let t = (i as f64 - lead as f64 - delay) / fs * (1.0 + drift);
            if t < 0.0 || t >= len as f64 / fs {
                0.0
            } else {
                // 1 % of H2 from a memoryless square law (c v^2 with c A / 2 = 0.01): the
                // offset is timed from the harmonic's response, which a linear system lacks.
                let v = amp
                    * (2.0 * std::f64::consts::PI * 20.0 * rate_s * (t / rate_s).exp_m1()).sin();
                v + 0.02 / amp * v * v
            }
        })
        .collect();
    let sp = SweepParams {
        start_hz: 20.0,
        stop_hz: 20_000.0,
        rate_s,
        start_sample: lead,
        end_sample: lead + len,
        fade_in_s: 0.0,
    };
    let r = ResponseAnalyzer::new(ResponseConfig::default())
        .unwrap()
        .analyze(1, &s.signal, sp, &y, fs, 1.0)
        .unwrap();
    let ppm = r.clock_drift_ppm.expect("drift estimated");
    assert!((ppm.abs() - 100.0).abs() < 20.0, "drift {ppm} ppm");
    assert!(
        r.warnings
            .iter()
            .any(|w| w.message.contains("clocks differ")),
        "{:?}",
        r.warnings
    );
}

#[test]
fn power_from_a_recorded_staircase() {
    // The staircase played through the simulated bench, recorded with 1234 samples of latency;
    // the offline analysis must find the latency, read volts and watts from the profile, and
    // say what is missing when the recording stops early.
    use ampnote::rig::model::Model;
    use ampnote::rig::sim::simulate;
    let d = tmpdir("power");
    let st = p(&d, "steps.wav");
    ok(&[
        "generate", "steps", "--rate", "48000", "--from", "-24", "--to", "-4", "--step", "2",
        "--dwell", "0.4", "--settle", "0.1", "-o", &st,
    ]);
    let (cap, _) = description(Path::new(&st));
    let model = Model::load("stock").unwrap();
    let mut y = vec![0.0; 1234];
    y.extend(simulate(
        &model.bench,
        &model.left,
        8.0,
        &cap.channels[0],
        48_000.0,
        7,
    ));
    let rec = p(&d, "rec.wav");
    ampnote::signal::wav::write_wav(
        Path::new(&rec),
        48_000,
        &[y.clone()],
        ampnote::signal::wav::WavFormat::Int { bits: 24 },
        3,
    )
    .unwrap();
    let prof = p(&d, "bench.toml");
    std::fs::write(&prof, "[interface]\ninput_fs_vrms = 2.0\noutput_fs_vrms = 2.0\n[attenuator]\nratio = 10.0\n[load]\nohms = 8.0\n").unwrap();
    let v: serde_json::Value = serde_json::from_str(&ok(&[
        "power",
        &rec,
        "--stimulus",
        &st,
        "--profile",
        &prof,
        "--json",
    ]))
    .unwrap();
    for key in [
        "schema_version",
        "load_ohms",
        "steps",
        "power_at_thd",
        "warnings",
    ] {
        assert!(v.get(key).is_some(), "power JSON lacks {key}");
    }
    let steps = v["steps"].as_array().unwrap().clone();
    assert_eq!(steps.len(), 11);
    for key in [
        "drive_dbfs",
        "output_vrms",
        "output_w",
        "thd_percent",
        "thdn_percent",
    ] {
        assert!(steps[0].get(key).is_some(), "step lacks {key}");
    }
    // The same staircase on the rig directly gives the same 1 % point (within the 2 dB steps'
    // interpolation; the rig refines, the file does not).
    let v: ampnote::report::power::PowerReport = serde_json::from_value(v).unwrap();
    let p1_file = v.results[0].power_at_thd[0].output_w.unwrap();
    let rig: ampnote::report::power::PowerReport = serde_json::from_str(&ok(&[
        "power",
        "--rig",
        "sim:stock",
        "--channel",
        "1",
        "--json",
        "--from",
        "-24",
    ]))
    .unwrap();
    let p1_rig = rig.results[0].power_at_thd[0].output_w.unwrap();
    assert!(
        (p1_file / p1_rig - 1.0).abs() < 0.1,
        "1 % point: file {p1_file} W, rig {p1_rig} W"
    );
    // Without calibration: dBFS only, and a warning naming the flags.
    let (_, _, err) = run(&["power", &rec, "--stimulus", &st, "--json"]);
    assert!(err.contains("--input-fs-vrms"), "{err}");
    // A recording that stops early: the missing steps are named.
    let short = p(&d, "short.wav");
    ampnote::signal::wav::write_wav(
        Path::new(&short),
        48_000,
        &[y[..y.len() / 2].to_vec()],
        ampnote::signal::wav::WavFormat::Float32,
        3,
    )
    .unwrap();
    let (code, out, err) = run(&["power", &short, "--stimulus", &st, "--json"]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("missing from the capture"), "{out}");
    // Bad load and a run past the interface's input.
    let (code, _, err) = run(&["power", "--rig", "sim", "--load-ohms", "0"]);
    assert_eq!(code, 2);
    assert!(err.contains("must lie between 0.1 and 100000 ohm"), "{err}");
    let (code, _, err) = run(&["power", "--rig", "sim", "--max-w", "200"]);
    assert_eq!(code, 2);
    assert!(err.contains("raise the attenuation"), "{err}");
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn zout_on_the_simulated_bench_matches_its_model() {
    // The stage's output impedance is its plate resistance reflected through the transformer plus
    // the winding: rp / N^2 + R_w (transformer theory), measured by the two-load method.
    use ampnote::rig::model::Model;
    let m = Model::load("stock").unwrap();
    let ch = m.left;
    let rp = ch.triode.rp(ch.bias_v, ch.b_plus_v);
    let want = rp / (ch.primary_ohms / ch.nominal_load_ohms) + ch.winding_ohms;
    let v: ampnote::report::power::ZoutReport = serde_json::from_str(&ok(&[
        "zout",
        "--rig",
        "sim:stock",
        "--channel",
        "1",
        "--json",
    ]))
    .unwrap();
    let z = v.results[0].zout_ohms;
    assert!(
        (z / want - 1.0).abs() < 0.05,
        "Z {z} vs rp/N^2 + Rw = {want}"
    );
    assert!((v.results[0].damping_factor - 8.0 / z).abs() < 1e-9);
    let (code, _, err) = run(&["zout", "--rig", "sim", "--loads", "8,8"]);
    assert_eq!(code, 2);
    assert!(err.contains("must differ"), "{err}");
}

#[test]
fn calibrate_builds_a_profile_from_flags() {
    // A loopback recording of the -20 dBFS tone read by a meter as 0.2 V: output full scale
    // 0.2 x 10 = 2 V; the loopback reads -20 dBFS, so the input full scale is 2 V too.
    let d = tmpdir("cal");
    let tone = p(&d, "cal-tone.wav");
    let prof = p(&d, "bench.toml");
    let (code, _, err) = run(&[
        "calibrate",
        "--tone",
        &tone,
        "--meter-vrms",
        "0.2",
        "--loopback",
        &tone,
        "--r-top",
        "9000",
        "--r-bottom",
        "1000",
        "--input-impedance",
        "10000",
        "--load-ohms",
        "8",
        "--no-prompt",
        "-o",
        &prof,
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(
        err.contains("Never run a tube amplifier with its output unloaded"),
        "cautions shown: {err}"
    );
    let cal = ampnote::calibration::Profile::load(Path::new(&prof))
        .unwrap()
        .calibration()
        .unwrap();
    assert!((cal.output_fs_vrms.unwrap() - 2.0).abs() < 1e-9);
    assert!(
        (cal.input_fs_vrms.unwrap() - 2.0).abs() < 0.002,
        "{:?}",
        cal.input_fs_vrms
    );
    assert!((cal.attenuation.unwrap() - 10.9).abs() < 1e-9);
    assert!(cal.loopback_thdn_db.unwrap() < -100.0);
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn loopback_response_is_taken_out() {
    // The stimulus as its own (flat) capture: a flat loopback response leaves it flat; a loopback
    // that falls to -1 dB at 20 kHz is taken out, so the capture reads +1 dB there.
    let d = tmpdir("loopcorr");
    let sw = audio_band_sweep(&d);
    let prof = p(&d, "p.toml");
    std::fs::write(
        &prof,
        "[loopback]\nresponse = [[20.0, 0.0], [1000.0, 0.0], [20000.0, 0.0]]\n",
    )
    .unwrap();
    let v: ampnote::report::response::ResponseReport = serde_json::from_str(&ok(&[
        "response",
        &sw,
        "--stimulus",
        &sw,
        "--profile",
        &prof,
        "--json",
    ]))
    .unwrap();
    assert!(v.channels[0].loopback_corrected);
    assert!(v.channels[0].max_deviation_db.abs() < 0.01);
    std::fs::write(
        &prof,
        "[loopback]\nresponse = [[20.0, 0.0], [1000.0, 0.0], [20000.0, -1.0]]\n",
    )
    .unwrap();
    let v: ampnote::report::response::ResponseReport = serde_json::from_str(&ok(&[
        "response",
        &sw,
        "--stimulus",
        &sw,
        "--profile",
        &prof,
        "--json",
    ]))
    .unwrap();
    // The flat capture, corrected for a loopback that falls 1 dB at 20 kHz, rises by that much.
    let top = v.channels[0]
        .points
        .iter()
        .rev()
        .find(|p| p.frequency_hz <= 20_000.0)
        .unwrap();
    assert!((top.magnitude_db - 1.0).abs() < 0.02, "{top:?}");
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn inconsistent_descriptions_are_refused_not_followed() {
    // A hand-edited description chunk (an empty staircase, a signal channel outside the file)
    // must read as "not a stimulus", never crash an analysis.
    use ampnote::signal::stimulus::Description;
    let d = tmpdir("desc");
    let st = p(&d, "steps.wav");
    ok(&[
        "generate", "steps", "--from", "-20", "--to", "-10", "--step", "5", "--dwell", "0.3",
        "--settle", "0.1", "-o", &st,
    ]);
    let bytes = std::fs::read(&st).unwrap();
    let (cap, desc) = description(Path::new(&st));
    let mut bad = desc.clone();
    if let Kind::Steps { steps, .. } = &mut bad.kind {
        steps.clear();
    }
    assert!(!bad.is_consistent());
    let mut bad2 = desc.clone();
    bad2.signal_channels = vec![3];
    assert!(Description::from_json(&bad2.to_json()).is_none());
    // Put the emptied staircase into the file itself (same length, so the chunk size holds).
    let old = desc.to_json();
    let mut new = bad.to_json();
    while new.len() < old.len() {
        new.push(' ');
    }
    assert_eq!(
        new.len(),
        old.len(),
        "an emptied staircase is shorter, so padding fits it"
    );
    {
        let at = bytes
            .windows(old.len())
            .position(|w| w == old.as_bytes())
            .unwrap();
        let mut edited = bytes.clone();
        edited[at..at + new.len()].copy_from_slice(new.as_bytes());
        let edited_path = p(&d, "edited.wav");
        std::fs::write(&edited_path, &edited).unwrap();
        let rec = p(&d, "rec.wav");
        ampnote::signal::wav::write_wav(
            Path::new(&rec),
            48_000,
            &[cap.channels[0].clone()],
            ampnote::signal::wav::WavFormat::Float32,
            1,
        )
        .unwrap();
        let (code, _, err) = run(&["power", &rec, "--stimulus", &edited_path]);
        assert_eq!(code, 2, "{err}");
        assert!(err.contains("not one of ampnote's steps stimuli"), "{err}");
    }
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn a_capacitive_load_on_the_simulated_bench_follows_its_circuit() {
    // 2 uF across the 8 ohm load: the response changes by exactly the leakage-inductance network
    // (R + Rw + sL) / (R + Rw + s(L + Rw R C) + s^2 L R C) (circuit closed form; both curves are
    // relative to 1 kHz, so the ratio is too), within 0.1 dB from 100 Hz to 12.5 kHz; and the
    // square predicted from it rings where it did not.
    use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
    use ampnote::rig::model::Model;
    use ampnote::rig::sim::{capacitive_load, SimRig};
    use ampnote::rig::Rig;
    use ampnote::signal::stimulus::{sweep, Common};
    let c = Common {
        tail_s: 0.5,
        ..Common::mono(96_000, -20.0)
    };
    let s = sweep(&c, 10.0, 40_000.0, 3.0).unwrap();
    let sp = SweepParams::from_description(&s.description).unwrap();
    let measure = |uf: f64| {
        let mut rig = SimRig::new(Model::load("stock").unwrap())
            .with_load_capacitance(uf)
            .unwrap();
        let y = rig.play_and_record(1, &s.signal, 96_000).unwrap();
        ResponseAnalyzer::new(ResponseConfig::default())
            .unwrap()
            .analyze(1, &s.signal, sp, &y, 96_000.0, 1.0)
            .unwrap()
    };
    let (plain, loaded) = (measure(0.0), measure(2.0));
    let ch = Model::load("stock").unwrap().left;
    let at = |r: &ampnote::analysis::sweep::ResponseResult, f: f64| {
        let pairs: Vec<(f64, f64)> = r
            .points
            .iter()
            .map(|p| (p.frequency_hz, p.magnitude_db))
            .collect();
        ampnote::analysis::sweep::interpolate_log(&pairs, f)
    };
    let db = |f: f64| 20.0 * capacitive_load(&ch, 8.0, 2e-6, f).norm().log10();
    for f in [100.0, 1000.0, 5000.0, 8000.0, 10_000.0, 12_500.0] {
        let got = at(&loaded, f) - at(&plain, f);
        let want = db(f) - db(1000.0);
        assert!(
            (got - want).abs() < 0.1,
            "{f} Hz: {got:.3} dB vs {want:.3} dB"
        );
    }
    let bw = ampnote::signal::stimulus::square_bandwidth_below(40_000.0 * 0.95);
    let sq = |r| ampnote::analysis::square::from_response(r, 1000.0, bw).unwrap();
    let (q0, q2) = (sq(&plain), sq(&loaded));
    assert!(
        q2.overshoot_percent > q0.overshoot_percent + 5.0 && q2.ringing_hz.is_some(),
        "overshoot {} % -> {} %, ringing {:?}",
        q0.overshoot_percent,
        q2.overshoot_percent,
        q2.ringing_hz
    );
}
