//! The calibration reaches every figure: a notebook's profile applies to every run kept in it
//! (flags still override), the simulated bench's own calibration applies in every procedure, a
//! rig run can ask for watts instead of dBFS, and a re-analysis repeats each run's settings.
//! Sources: the profile's own numbers and the definitions V = V_fs 10^(dBFS/20) x attenuation,
//! P = V^2 / R (REFERENCES.md, Calibration); the divider ratio (R_top + R_bottom || R_in) /
//! (R_bottom || R_in) of calibration/example-bench.toml.

use super::common::{run, tmpdir};
use ampnote::notebook::{AnalysisSettings, Notebook};
use serde::Deserialize;

/// What these checks read of a tone result (typed, not picked by key).
#[derive(Deserialize)]
struct Tone {
    fundamental_dbfs: f64,
    fundamental_vrms: Option<f64>,
    output_w: Option<f64>,
    band_hz: [f64; 2],
    noise_weighting: String,
}

#[derive(Deserialize)]
struct AnalyzeOut {
    channels: Vec<Tone>,
}

#[derive(Deserialize)]
struct NoiseOut {
    channels: Vec<NoiseChannel>,
}

#[derive(Deserialize)]
struct NoiseChannel {
    noise_vrms: Option<f64>,
}

fn example_profile() -> String {
    concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/calibration/example-bench.toml"
    )
    .to_string()
}

#[test]
fn a_notebook_s_profile_applies_to_its_runs() {
    let d = tmpdir("nbprofile");
    let nb_dir = d.join("amp").display().to_string();
    let tone = d.join("tone.wav").display().to_string();
    let (code, _, err) = run(&[
        "notebook",
        "init",
        &nb_dir,
        "--amplifier",
        "test amp",
        "--profile",
        &example_profile(),
    ]);
    assert_eq!(code, 0, "{err}");
    let (code, _, err) = run(&[
        "generate", "tone", "--freq", "1000", "--level", "-20", "--out", &tone,
    ]);
    assert_eq!(code, 0, "{err}");
    let analyse = |extra: &[&str]| -> Tone {
        let mut args = vec![
            "analyze",
            &tone,
            "--notebook",
            &nb_dir,
            "--label",
            "x",
            "--json",
        ];
        args.extend_from_slice(extra);
        let (code, out, err) = run(&args);
        assert_eq!(code, 0, "{err}");
        serde_json::from_str::<AnalyzeOut>(&out)
            .unwrap()
            .channels
            .remove(0)
    };
    // example-bench.toml: 2.10 V full scale, a 9k over 1k || 10k divider:
    // (9000 + 909.09) / 909.09 = 10.9, 8 ohm.
    let ratio =
        (9000.0 + 1.0 / (1.0 / 1000.0 + 1.0 / 10_000.0)) / (1.0 / (1.0 / 1000.0 + 1.0 / 10_000.0));
    let r = analyse(&[]);
    let v = 2.10 * 10f64.powf(r.fundamental_dbfs / 20.0) * ratio;
    let got = r
        .fundamental_vrms
        .expect("volts from the notebook's profile");
    assert!((got / v - 1.0).abs() < 1e-6, "{got} V vs {v} V");
    assert!((r.output_w.unwrap() - v * v / 8.0).abs() < 1e-6 * v * v);
    // A flag still overrides the notebook's value.
    let r = analyse(&["--load-ohms", "4"]);
    assert!((r.output_w.unwrap() - v * v / 4.0).abs() < 1e-6 * v * v);
    // The runs keep the calibration they were computed with.
    let nb = Notebook::open(std::path::Path::new(&nb_dir)).unwrap();
    let loads: Vec<Option<f64>> = nb
        .runs()
        .unwrap()
        .iter()
        .map(|r| r.meta.calibration.load_ohms)
        .collect();
    assert_eq!(loads, vec![Some(8.0), Some(4.0)]);
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn the_simulated_bench_calibrates_every_procedure_and_finds_the_drive_for_watts() {
    let d = tmpdir("simcal");
    let caps = d.join("caps").display().to_string();
    let rig = [
        "--rig",
        "sim",
        "--channel",
        "1",
        "--captures-dir",
        &caps,
        "--json",
    ];
    let with = |cmd: &str, extra: &[&str]| -> String {
        let mut args = vec![cmd];
        args.extend_from_slice(&rig);
        args.extend_from_slice(extra);
        let (code, out, err) = run(&args);
        assert_eq!(code, 0, "{cmd}: {err}");
        out
    };
    let t: AnalyzeOut = serde_json::from_str(&with("analyze", &[])).unwrap();
    let cal = ampnote::rig::model::Model::load("stock")
        .unwrap()
        .calibration();
    let r = &t.channels[0];
    let v = cal.vrms_from_dbfs(r.fundamental_dbfs).unwrap();
    assert!((r.fundamental_vrms.unwrap() / v - 1.0).abs() < 1e-9);
    assert!(r.output_w.is_some(), "the bench's load gives watts");
    let n: NoiseOut = serde_json::from_str(&with("noise", &[])).unwrap();
    assert!(
        n.channels[0].noise_vrms.is_some(),
        "noise in volts on the bench"
    );
    // One watt asked: P = V^2 / R within the drive search's 0.2 dB.
    let t: AnalyzeOut = serde_json::from_str(&with("analyze", &["--watts", "1"])).unwrap();
    let w = t.channels[0].output_w.unwrap();
    assert!((10.0 * w.log10()).abs() < 0.2, "{w} W for 1 W");
    // Out of reach, and on a capture file: refused with the reason.
    let (code, _, err) = run(&[
        "analyze",
        "--rig",
        "sim",
        "--channel",
        "1",
        "--captures-dir",
        &caps,
        "--watts",
        "5000",
    ]);
    assert_eq!(code, 2);
    assert!(
        err.contains("attenuation") || err.contains("cannot be reached"),
        "{err}"
    );
    let (code, _, err) = run(&["analyze", "x.wav", "--watts", "1"]);
    assert_eq!(code, 2);
    assert!(err.contains("--watts"), "{err}");
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn reanalysis_repeats_each_run_s_settings() {
    let d = tmpdir("reanalyse");
    let nb_dir = d.join("amp").display().to_string();
    let tone = d.join("tone.wav").display().to_string();
    assert_eq!(
        run(&["notebook", "init", &nb_dir, "--amplifier", "amp"]).0,
        0
    );
    assert_eq!(
        run(&["generate", "tone", "--freq", "1000", "--out", &tone]).0,
        0
    );
    let (code, _, err) = run(&[
        "analyze",
        &tone,
        "--notebook",
        &nb_dir,
        "--label",
        "x",
        "--band",
        "20:10000",
        "--weighting",
        "a",
    ]);
    assert_eq!(code, 0, "{err}");
    let (code, _, err) = run(&["notebook", "reanalyze", &nb_dir]);
    assert_eq!(code, 0, "{err}");
    let nb = Notebook::open(std::path::Path::new(&nb_dir)).unwrap();
    let runs = nb.runs().unwrap();
    assert!(matches!(
        runs[0].meta.analysis,
        Some(AnalysisSettings::Tone(ref c)) if c.band_high_hz == Some(10_000.0)
    ));
    let newest = std::fs::read_dir(&runs[0].dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .find(|p| {
            p.file_name()
                .unwrap()
                .to_string_lossy()
                .starts_with("result-")
        })
        .expect("a new result beside the old");
    let again: Tone = serde_json::from_str(&std::fs::read_to_string(newest).unwrap()).unwrap();
    assert_eq!(again.band_hz, [20.0, 10_000.0]);
    assert_eq!(again.noise_weighting, "a");
    std::fs::remove_dir_all(&d).ok();
}
