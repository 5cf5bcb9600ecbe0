//! Compare tells a change only where one can be read: tone figures at the same level, no delta
//! from a detection limit, staircases frequency by frequency. Sources: closed-form tones (a
//! fundamental with a second harmonic of known amplitude; THD = a2/a1), the definition
//! 20 lg(b/a) of a level change, and the chi-square statistics of windowed white noise.

use super::common::{analyze, sines, tmpdir};
use ampnote::calibration::Calibration;
use ampnote::notebook::{NewRun, Notebook};
use ampnote::procedure::power::{finish, PowerStep};
use ampnote::report::compare::{compare, CompareLine};
use ampnote::results::RunResult;
use std::collections::BTreeMap;

const FS: f64 = 48_000.0;

/// A 1 kHz tone at `dbfs` with H2 at `h2` of it, over white noise at -110 dBFS (so H4 and up
/// are under the noise).
fn tone(dbfs: f64, h2: f64, seed: u64) -> RunResult {
    let a = 10f64.powf(dbfs / 20.0);
    let mut x = sines(FS, 48_000, &[(1000.0, a, 0.1), (2000.0, a * h2, 0.7)]);
    let mut rng = ampnote::signal::dither::Rng::new(seed);
    let sigma = 10f64.powf(-110.0 / 20.0) / 2f64.sqrt();
    x.iter_mut().for_each(|v| *v += sigma * rng.gaussian());
    analyze(&x, FS).into()
}

/// A staircase at `f` whose THD is 0.5 % then 2 % at 1 and 4 W (and 1 % at 2 W).
fn staircase(f: f64, scale: f64) -> RunResult {
    let step = |w: f64, thd: f64| PowerStep {
        drive_dbfs: 10.0 * w.log10() - 20.0,
        output_dbfs: 10.0 * w.log10() - 20.0,
        output_vrms: Some((w * 8.0).sqrt()),
        output_dbv: None,
        output_dbu: None,
        output_w: Some(w),
        thd_percent: Some(thd),
        thd_upper_bound: false,
        thdn_percent: thd,
        h2_dbc: None,
        h3_dbc: None,
        overload_samples: 0,
        excluded: false,
        oscillations: Vec::new(),
    };
    let cal = Calibration {
        input_fs_vrms: Some(2.0),
        attenuation: Some(10.0),
        load_ohms: Some(8.0),
        ..Calibration::default()
    };
    let steps = vec![
        step(scale, 0.5),
        step(2.0 * scale, 1.0 + 1e-9),
        step(4.0 * scale, 2.0),
    ];
    finish(1, f, 96_000.0, &cal, steps, None).into()
}

fn notebook(tag: &str, runs: &[(&str, RunResult)]) -> (std::path::PathBuf, Notebook) {
    notebook_with(tag, runs, &[])
}

/// A notebook with `runs`, those whose label is in `predicted` kept as a circuit rig's.
fn notebook_with(
    tag: &str,
    runs: &[(&str, RunResult)],
    predicted: &[&str],
) -> (std::path::PathBuf, Notebook) {
    let d = tmpdir(tag);
    let nb = Notebook::init(&d.join("amp"), "amp", 1, None, None).unwrap();
    for (label, result) in runs {
        nb.save(NewRun {
            label,
            channel: 1,
            notes: "",
            settings: BTreeMap::new(),
            calibration: Calibration::default(),
            analysis: None,
            files: vec![],
            blobs: vec![],
            result: result.clone(),
            predicted: predicted.contains(label),
        })
        .unwrap();
    }
    (d, nb)
}

fn find<'a>(lines: &'a [CompareLine], prefix: &str) -> &'a CompareLine {
    lines
        .iter()
        .find(|l| l.figure.starts_with(prefix))
        .unwrap_or_else(|| panic!("no line {prefix}: {lines:#?}"))
}

#[test]
fn tone_figures_are_compared_only_at_the_same_level() {
    // H2 at 1 % then 0.5 %: THD -6.02 dB (20 lg 0.5), when both runs sit within 0.5 dB.
    let (d, nb) = notebook(
        "cmp-level",
        &[
            ("a", tone(-24.0, 0.01, 1)),
            ("b", tone(-24.2, 0.005, 2)),
            ("c", tone(-22.7, 0.005, 3)),
        ],
    );
    let sel = |l: &str| nb.select(l, None).unwrap();
    let c = compare("a", &sel("a"), "b", &sel("b"));
    let thd = find(&c.lines, "THD at");
    let d_thd = thd.delta.expect("like for like");
    assert!((d_thd - 20.0 * 0.5f64.log10()).abs() < 0.01, "{thd:?}");
    // Less distortion is better (common practice): the report marks the change so.
    assert_eq!(thd.verdict(), ampnote::report::compare::Verdict::Better);
    assert!(c
        .warnings
        .iter()
        .all(|w| w.code != ampnote::warning::WarningCode::UnlikeLevels));
    // 1.3 dB apart: the figures are shown with both levels, no delta, and a warning.
    let c = compare("a", &sel("a"), "c", &sel("c"));
    let thd = find(&c.lines, "THD");
    assert!(thd.delta.is_none(), "{thd:?}");
    assert!(
        thd.sentence.contains("-24.0 dBFS") && thd.sentence.contains("-22.7 dBFS"),
        "{}",
        thd.sentence
    );
    assert!(c.warnings.iter().any(|w| {
        w.code == ampnote::warning::WarningCode::UnlikeLevels
            && w.message.contains("different levels")
    }));
    std::fs::remove_dir_all(&d).ok();
}

/// A prediction has no noise or hum of its own (a simulator adds none unless the netlist has
/// sources for them, common practice with circuit simulators): set against a measurement, its
/// THD and harmonics are compared (the closed-form H2 change, 20 lg(0.5)), its noise, hum and
/// THD+N are not, and a warning says why.
#[test]
fn a_prediction_is_compared_without_noise_or_hum() {
    let (d, nb) = notebook_with(
        "cmp-predicted",
        &[
            ("stock", tone(-24.0, 0.01, 1)),
            ("stock, predicted", tone(-24.0, 0.005, 2)),
        ],
        &["stock, predicted"],
    );
    let sel = |l: &str| nb.select(l, None).unwrap();
    assert!(sel("stock, predicted")[0].meta.predicted);
    assert!(!sel("stock")[0].meta.predicted);
    let c = compare(
        "stock, predicted",
        &sel("stock, predicted"),
        "stock",
        &sel("stock"),
    );
    let h2 = find(&c.lines, "H2");
    assert!(
        (h2.delta.unwrap() + 20.0 * 0.5f64.log10()).abs() < 0.05,
        "{h2:?}"
    );
    for gone in ["noise", "strongest hum line", "THD+N"] {
        assert!(
            c.lines.iter().all(|l| !l.figure.starts_with(gone)),
            "{gone}: {:#?}",
            c.lines
        );
    }
    assert!(c.warnings.iter().any(|w| {
        w.code == ampnote::warning::WarningCode::NotCompared && w.message.contains("noise, hum")
    }));
    // Two measurements: the same figures are compared.
    let (d2, nb2) = notebook(
        "cmp-measured",
        &[("a", tone(-24.0, 0.01, 1)), ("b", tone(-24.0, 0.005, 2))],
    );
    let c = compare(
        "a",
        &nb2.select("a", None).unwrap(),
        "b",
        &nb2.select("b", None).unwrap(),
    );
    find(&c.lines, "THD+N");
    find(&c.lines, "noise");
    std::fs::remove_dir_all(&d).ok();
    std::fs::remove_dir_all(&d2).ok();
}

#[test]
fn output_impedance_is_compared_only_at_the_same_frequency() {
    // Closed form (voltage divider): a 2 ohm source read into 8 and 16 ohm is 2 ohm, a 2.5 ohm
    // one 2.5 ohm. At the same frequency the change is +0.5 ohm; at 1 kHz against 10 kHz it is
    // not a before and after (an output transformer's Z rises with frequency, common practice).
    use ampnote::procedure::zout::from_levels;
    let z = |src: f64, f: f64| {
        let v = |rl: f64| rl / (rl + src);
        RunResult::Zout(from_levels(1, f, v(8.0), 8.0, v(16.0), 16.0).unwrap())
    };
    let (d, nb) = notebook(
        "cmp-zout",
        &[
            ("a", z(2.0, 1000.0)),
            ("b", z(2.5, 1000.0)),
            ("c", z(2.5, 10_000.0)),
        ],
    );
    let sel = |l: &str| nb.select(l, None).unwrap();
    let c = compare("a", &sel("a"), "b", &sel("b"));
    let line = find(&c.lines, "output impedance");
    assert!((line.delta.unwrap() - 0.5).abs() < 1e-6, "{line:?}");
    let c = compare("a", &sel("a"), "c", &sel("c"));
    assert!(
        c.lines
            .iter()
            .all(|l| !l.figure.starts_with("output impedance")
                && !l.figure.starts_with("damping factor")),
        "{:#?}",
        c.lines
    );
    assert!(c.warnings.iter().any(|w| {
        w.code == ampnote::warning::WarningCode::NotCompared
            && w.message.contains("output impedance measured at")
    }));
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn channels_are_matched_on_staircases_at_one_frequency() {
    // Power at 1 % THD is 2 W on one channel and 3 W on the other (10 lg 1.5 = +1.76 dB) when
    // both staircases are at 1 kHz; a 40 Hz staircase against a 1 kHz one is no match (an output
    // transformer gives less power at low frequencies, common practice) and is left out.
    use ampnote::report::compare::{match_channels, MatchTolerances};
    let (d, nb) = notebook(
        "match-freq",
        &[
            ("left", staircase(1000.0, 1.0)),
            ("right", staircase(1000.0, 1.5)),
            ("right 40 Hz", staircase(40.0, 1.5)),
        ],
    );
    let sel = |l: &str| nb.select(l, None).unwrap();
    let tol = MatchTolerances::default();
    let m = match_channels("left", &sel("left"), "right", &sel("right"), &tol);
    let p1 = m
        .checks
        .iter()
        .find(|c| c.name == "power at 1 % THD difference")
        .expect("matched at one frequency");
    assert!((p1.value - 10.0 * 1.5f64.log10()).abs() < 1e-6, "{p1:?}");
    let m = match_channels(
        "left",
        &sel("left"),
        "right 40 Hz",
        &sel("right 40 Hz"),
        &tol,
    );
    assert!(
        m.checks
            .iter()
            .all(|c| !c.name.starts_with("power at 1 %") && !c.name.starts_with("THD difference")),
        "{:#?}",
        m.checks
    );
    assert!(m.warnings.iter().any(|w| {
        w.code == ampnote::warning::WarningCode::NotCompared
            && w.message.contains("different frequencies")
    }));
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn bounds_are_shown_as_bounds_and_give_no_delta() {
    let (d, nb) = notebook(
        "cmp-bound",
        &[("a", tone(-20.0, 0.01, 4)), ("b", tone(-20.0, 1e-7, 5))],
    );
    let sel = |l: &str| nb.select(l, None).unwrap();
    let c = compare("a", &sel("a"), "b", &sel("b"));
    // H4 is under the -110 dBFS noise on both sides: two detection limits, no change.
    let h4 = find(&c.lines, "H4");
    assert!(
        h4.a_upper_bound && h4.b_upper_bound && h4.delta.is_none(),
        "{h4:?}"
    );
    // Two detection limits: no verdict either way.
    assert_eq!(h4.verdict(), ampnote::report::compare::Verdict::Unknown);
    assert!(h4.sentence.contains("< -"), "{}", h4.sentence);
    // H2 falls from -40 dBc into the noise: a bound on the change, not a delta.
    let h2 = find(&c.lines, "H2");
    assert!(
        !h2.a_upper_bound && h2.b_upper_bound && h2.delta.is_none(),
        "{h2:?}"
    );
    assert!(h2.sentence.contains("down by at least"), "{}", h2.sentence);
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn staircases_are_compared_per_frequency() {
    // Power at 1 % THD: 2 W before at every frequency; after, 4 W at 40 Hz and 3 W at 1 kHz
    // (the staircase scaled), so +3.01 and +1.76 dB (10 lg of the ratios).
    let (d, nb) = notebook(
        "cmp-freq",
        &[
            ("a", staircase(40.0, 1.0)),
            ("a", staircase(1000.0, 1.0)),
            ("b", staircase(40.0, 2.0)),
            ("b", staircase(1000.0, 1.5)),
        ],
    );
    let sel = |l: &str| nb.select(l, None).unwrap();
    let c = compare("a", &sel("a"), "b", &sel("b"));
    let at40 = find(&c.lines, "power at 1 % THD (40.0 Hz)");
    assert!(
        (at40.delta.unwrap() - 10.0 * 2f64.log10()).abs() < 1e-6,
        "{at40:?}"
    );
    // More power at 1 % is better; the other way round it is worse.
    assert_eq!(at40.verdict(), ampnote::report::compare::Verdict::Better);
    let back = compare("b", &sel("b"), "a", &sel("a"));
    let at40 = find(&back.lines, "power at 1 % THD (40.0 Hz)");
    assert_eq!(at40.verdict(), ampnote::report::compare::Verdict::Worse);
    let at1k = find(&c.lines, "power at 1 % THD (1.00 kHz)");
    assert!(
        (at1k.delta.unwrap() - 10.0 * 1.5f64.log10()).abs() < 1e-6,
        "{at1k:?}"
    );
    std::fs::remove_dir_all(&d).ok();
}
