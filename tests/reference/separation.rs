//! Channel separation against closed form: channel 2 carries -60 dB of channel 1 through a
//! first-order high-pass (capacitive coupling, the usual crosstalk path), so its separation is
//! 60 dB - 20 log10 |H(f)|, H the filter's exact response (the digital filter's, evaluated in
//! closed form from its coefficients).

use super::common::{noise, run, tmpdir};
use ampnote::analysis::separation::SeparationResult;
use ampnote::analysis::sweep::interpolate_log;
use ampnote::capture::Capture;
use ampnote::signal::wav::{write_wav, WavFormat};
use realfft::num_complex::Complex64;
use std::f64::consts::PI;

const FS: f64 = 48_000.0;

/// First-order high-pass at `fc` by the bilinear transform: coefficients (b0, a1) of
/// y[n] = b0 (x[n] - x[n-1]) - a1 y[n-1].
fn highpass(fc: f64) -> (f64, f64) {
    let k = (PI * fc / FS).tan();
    (1.0 / (1.0 + k), (k - 1.0) / (k + 1.0))
}

fn response_db(fc: f64, f: f64) -> f64 {
    let (b0, a1) = highpass(fc);
    let z1 = Complex64::from_polar(1.0, -2.0 * PI * f / FS);
    let h = b0 * (Complex64::new(1.0, 0.0) - z1) / (Complex64::new(1.0, 0.0) + a1 * z1);
    20.0 * h.norm().log10()
}

fn filtered(x: &[f64], fc: f64) -> Vec<f64> {
    let (b0, a1) = highpass(fc);
    let (mut px, mut py) = (0.0, 0.0);
    x.iter()
        .map(|&v| {
            let y = b0 * (v - px) - a1 * py;
            px = v;
            py = y;
            y
        })
        .collect()
}

/// `ampnote separation FILE --stimulus SWEEP --driven N [extra...]`: exit code, stdout, stderr.
fn separation(
    file: &std::path::Path,
    sweep: &std::path::Path,
    driven: &str,
    extra: &[&str],
) -> (i32, String, String) {
    let mut args = vec![
        "separation",
        file.to_str().unwrap(),
        "--stimulus",
        sweep.to_str().unwrap(),
        "--driven",
        driven,
    ];
    args.extend_from_slice(extra);
    run(&args)
}

#[test]
fn crosstalk_through_a_coupling_capacitance_reads_its_closed_form() {
    let d = tmpdir("separation");
    let sweep = d.join("sweep.wav");
    let (code, _, err) = run(&[
        "generate",
        "sweep",
        "--from",
        "10",
        "--to",
        "21000",
        "--seconds",
        "4",
        "--level",
        "-10",
        "--out",
        sweep.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{err}");
    let x = Capture::read(&sweep, false).unwrap().channels.remove(0);
    // A 100-sample latency, channel 1 at -6 dB, channel 2 the -60 dB coupled copy.
    let delay = |v: Vec<f64>| {
        let mut out = vec![0.0; 100];
        out.extend(v);
        out
    };
    let ch1: Vec<f64> = x.iter().map(|v| 0.5 * v).collect();
    let ch2: Vec<f64> = filtered(&ch1, 1000.0).iter().map(|v| 1e-3 * v).collect();
    let n = ch1.len() + 100;
    let add = |v: Vec<f64>, seed| {
        delay(v)
            .into_iter()
            .zip(noise(n, -140.0, seed))
            .map(|(a, b)| a + b)
            .collect::<Vec<f64>>()
    };
    let cap = d.join("cap.wav");
    let (c1, c2) = (add(ch1, 1), add(ch2, 2));
    write_wav(
        &cap,
        48_000,
        &[c1.clone(), c2.clone()],
        WavFormat::Float32,
        1,
    )
    .unwrap();
    // The same amplifier driven on its other channel (the crosstalk the same way round).
    let swapped = d.join("swapped.wav");
    write_wav(&swapped, 48_000, &[c2, c1], WavFormat::Float32, 1).unwrap();
    let (code, out, err) = separation(&cap, &sweep, "1", &["--json"]);
    assert_eq!(code, 0, "{err}");
    let r: SeparationResult = serde_json::from_str(&out).unwrap();
    assert_eq!(r.driven_channel, 1);
    let c = &r.channels[0];
    assert_eq!(c.channel, 2);
    let pairs: Vec<(f64, f64)> = c
        .points
        .iter()
        .map(|p| (p.frequency_hz, p.separation_db))
        .collect();
    for f in [100.0, 1000.0, 10_000.0] {
        let expected = 60.0 - response_db(1000.0, f);
        let got = interpolate_log(&pairs, f);
        assert!(
            (got - expected).abs() < 0.2,
            "{f} Hz: {got:.2} dB vs {expected:.2} dB"
        );
    }
    let at_1k = 60.0 - response_db(1000.0, 1000.0);
    assert!((c.at_1khz_db.unwrap() - at_1k).abs() < 0.2);
    // The worst is at the top of the band, where the high-pass passes most.
    assert!(c.worst_hz.unwrap() > 15_000.0, "{c:?}");
    assert!((c.worst_db.unwrap() - (60.0 - response_db(1000.0, c.worst_hz.unwrap()))).abs() < 0.2);

    // In the notebook, both ways round: match checks each against 60 dB at 1 kHz (common
    // practice), and against a stricter limit the same figure fails (exit 1).
    let nb = d.join("nb");
    let nb = nb.to_str().unwrap();
    assert_eq!(run(&["notebook", "init", nb, "--amplifier", "test"]).0, 0);
    for (file, driven) in [(&cap, "1"), (&swapped, "2")] {
        let (code, _, err) = separation(
            file,
            &sweep,
            driven,
            &["--notebook", nb, "--label", "stock"],
        );
        assert_eq!(code, 0, "{err}");
    }
    let (code, out, err) = run(&["match", "stock", "--notebook", nb]);
    assert_eq!(code, 0, "{out}{err}");
    assert_eq!(out.matches("separation at 1 kHz").count(), 2, "{out}");
    let (code, out, _) = run(&["match", "stock", "--notebook", nb, "--min-separation", "70"]);
    assert_eq!(code, 1, "{out}");

    // A rework that cuts the coupling to a third (-9.54 dB, 20 log10 3): compare reads the
    // separation 9.54 dB higher at 1 kHz and calls it better (more separation is better; common
    // practice).
    let ch1: Vec<f64> = x.iter().map(|v| 0.5 * v).collect();
    let ch2: Vec<f64> = filtered(&ch1, 1000.0)
        .iter()
        .map(|v| 1e-3 / 3.0 * v)
        .collect();
    let reworked = d.join("reworked.wav");
    write_wav(
        &reworked,
        48_000,
        &[add(ch1, 5), add(ch2, 6)],
        WavFormat::Float32,
        1,
    )
    .unwrap();
    let (code, _, err) = separation(
        &reworked,
        &sweep,
        "1",
        &["--notebook", nb, "--label", "rework"],
    );
    assert_eq!(code, 0, "{err}");
    let (code, out, err) = run(&["compare", "stock", "rework", "--notebook", nb, "--json"]);
    assert_eq!(code, 0, "{err}");
    let cmp: ampnote::report::compare::Comparison = serde_json::from_str(&out).unwrap();
    let line = cmp
        .lines
        .iter()
        .find(|l| l.figure.starts_with("separation at 1 kHz"))
        .expect("separation compared");
    assert!(
        (line.delta.unwrap() - 20.0 * 3f64.log10()).abs() < 0.2,
        "{line:?}"
    );
    assert_eq!(line.verdict(), ampnote::report::compare::Verdict::Better);

    // Named the wrong channel as driven: refused, naming the likely one.
    let (code, _, err) = separation(&cap, &sweep, "2", &[]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("--driven"), "{err}");

    // A channel with no crosstalk above its noise: a lower bound, never a made-up curve.
    let quiet = d.join("quiet.wav");
    let ch1: Vec<f64> = x.iter().map(|v| 0.5 * v).collect();
    write_wav(
        &quiet,
        48_000,
        &[add(ch1, 3), noise(n, -120.0, 4)],
        WavFormat::Float32,
        1,
    )
    .unwrap();
    let (code, out, err) = separation(&quiet, &sweep, "1", &["--json"]);
    assert_eq!(code, 0, "{err}");
    let r: SeparationResult = serde_json::from_str(&out).unwrap();
    let c = &r.channels[0];
    assert!(c.points.is_empty() && c.at_1khz_db.is_none(), "{c:?}");
    // Sweep at -16 dBFS against noise at -120 dBFS: about 100 dB at least.
    let bound = c.at_least_db.unwrap();
    assert!(bound > 90.0 && bound < 110.0, "{bound}");

    // A mono file cannot show separation.
    let (code, _, err) = separation(&sweep, &sweep, "1", &[]);
    assert_eq!(code, 2);
    assert!(err.contains("one channel"), "{err}");
}
