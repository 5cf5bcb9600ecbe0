//! The circuit rig's foundation against a real ngspice (Debian's `ngspice`, run as a child
//! process; feature `circuit`, run by .ci/circuit-check.sh): an RC low-pass's `.ac` against its
//! closed form, and the failures a user's netlist can bring (an unknown part, a run that never
//! ends, no ngspice at all) each stopped with an error that says what to do.
#![cfg(feature = "circuit")]

use ampnote::error::Error;
use ampnote::rig::spice::{run, run_with};
use realfft::num_complex::Complex64;
use std::f64::consts::PI;
use std::time::Duration;

/// The circuit rig on the netlist at `path` with the default bench, working in `tag`'s folder.
fn open_rig(
    tag: &str,
    path: &std::path::Path,
) -> ampnote::error::Result<ampnote::rig::spice::rig::SpiceRig> {
    ampnote::rig::spice::rig::SpiceRig::open(
        path,
        ampnote::calibration::Calibration::default(),
        &dir(tag).join("work"),
    )
}

/// Each test's folder, with capitals in its name as a user's folders have (`/home/Ann/Amps`,
/// `mktemp -d`'s `/tmp/tmp.Xa3k`): ngspice lowercases file names given to a model, and the rig
/// must work from such a folder all the same.
fn dir(tag: &str) -> std::path::PathBuf {
    std::env::temp_dir().join(format!("Ampnote-Circuit-{tag}-{}", std::process::id()))
}

/// Closed form: 1 / (1 + j w R C), R = 2.2 kohm, C = 47 nF (fc = 1539.2 Hz), over 10 Hz-100 kHz.
#[test]
fn an_rc_low_pass_in_ngspice_reads_its_closed_form() {
    let deck =
        "RC low-pass\nV1 in 0 DC 0 AC 1\nR1 in out 2.2k\nC1 out 0 47n\n.ac dec 20 10 100k\n.end\n";
    let out = run(deck, &dir("rc"), Duration::from_secs(30)).unwrap();
    let ac = out.plot("AC").unwrap();
    let f = ac.real("frequency").unwrap();
    let v = ac.variable("v(out)").unwrap();
    assert_eq!(f.len(), 81);
    for (f, v) in f.iter().zip(v) {
        let want = Complex64::new(1.0, 0.0) / Complex64::new(1.0, 2.0 * PI * f * 2.2e3 * 47e-9);
        let db = 20.0 * (v.norm() / want.norm()).log10();
        assert!(db.abs() < 1e-6, "{f} Hz: {db} dB off");
        assert!((v.arg() - want.arg()).to_degrees().abs() < 1e-4, "{f} Hz");
    }
    assert!(out.warnings.is_empty(), "{:?}", out.warnings);
}

#[test]
fn an_unknown_part_is_refused_with_ngspices_own_words() {
    let deck = "unknown\nV1 in 0 SIN(0 1 1k)\nX1 in out nosuch\nR1 out 0 1k\n.tran 10u 1m\n.end\n";
    let err = run(deck, &dir("unknown"), Duration::from_secs(30)).unwrap_err();
    assert!(matches!(err, Error::Spice { .. }), "{err:?}");
    let text = err.to_string();
    assert!(text.contains("unknown subckt"), "{text}");
    assert_eq!(err.exit_code(), 3);
}

#[test]
fn a_run_that_never_ends_is_stopped_at_its_limit() {
    // Ten seconds of circuit at a nanosecond step: ten billion steps.
    let deck = "long\nV1 in 0 SIN(0 1 1k)\nR1 in out 1k\nC1 out 0 1u\n.tran 1n 10 0 1n\n.end\n";
    let started = std::time::Instant::now();
    let err = run(deck, &dir("long"), Duration::from_secs(2)).unwrap_err();
    assert!(matches!(err, Error::SpiceTimedOut { .. }), "{err:?}");
    assert!(started.elapsed() < Duration::from_secs(10));
}

#[test]
fn a_floating_node_comes_back_as_a_warning() {
    let deck = "floating\nV1 in 0 SIN(0 1 1k)\nC1 in out 1u\nC2 out x 1u\n.tran 10u 1m\n.end\n";
    let out = run(deck, &dir("floating"), Duration::from_secs(30)).unwrap();
    assert!(
        out.warnings.iter().any(|w| w.contains("singular matrix")),
        "{:?}",
        out.warnings
    );
}

#[test]
fn no_ngspice_says_how_to_install_it() {
    let err = run_with(
        std::path::Path::new("/nonexistent/ngspice"),
        "x\n.end\n",
        &dir("missing"),
        Duration::from_secs(5),
    )
    .unwrap_err();
    assert!(matches!(err, Error::SpiceMissing { .. }), "{err:?}");
    assert!(err.to_string().contains("apt install ngspice"), "{err}");
}

/// The test amplifier of these cases: gain 10 (a VCVS), then a second-order network (1 ohm,
/// 30 uH, 1 uF) into the rig's 8 ohm load; `.subckt amp in out` as the convention asks.
const RLC: &str = "* test amplifier\n.subckt amp in out\nE1 a 0 in 0 10\nR1 a b 1\nL1 b out 30u\nC1 out 0 1u\n.ends\n";

fn netlist(tag: &str, text: &str) -> std::path::PathBuf {
    let d = dir(tag);
    std::fs::create_dir_all(&d).unwrap();
    let p = d.join("amp.cir");
    std::fs::write(&p, text).unwrap();
    p
}

/// A half-second tone at `freq` and `level_dbfs` (no lead, fade or tail) through the netlist
/// `text` on the circuit rig, analysed: the rig (for its notes) and the tone result.
fn tone_through(
    tag: &str,
    text: &str,
    freq: f64,
    level_dbfs: f64,
) -> (
    ampnote::rig::spice::rig::SpiceRig,
    ampnote::analysis::tone::ToneResult,
) {
    tone_through_file(tag, &netlist(tag, text), freq, level_dbfs, 0.5)
}

/// A tone of `seconds` at `freq` and `level_dbfs` (no lead, fade or tail) through the netlist at
/// `path` on the circuit rig, analysed.
fn tone_through_file(
    tag: &str,
    path: &std::path::Path,
    freq: f64,
    level_dbfs: f64,
    seconds: f64,
) -> (
    ampnote::rig::spice::rig::SpiceRig,
    ampnote::analysis::tone::ToneResult,
) {
    use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig};
    use ampnote::rig::Rig;
    let mut rig = open_rig(tag, path).unwrap();
    let tone = ampnote::signal::stimulus::tone(
        &ampnote::signal::stimulus::Common {
            lead_s: 0.0,
            tail_s: 0.0,
            fade_s: 0.0,
            ..ampnote::signal::stimulus::Common::mono(48_000, level_dbfs)
        },
        freq,
        seconds,
    )
    .unwrap();
    let y = rig.play_and_record(1, &tone.signal, 48_000).unwrap();
    let r = ToneAnalyzer::new(ToneConfig::default())
        .unwrap()
        .analyze(
            &ChannelInput {
                channel: 1,
                samples: &y,
                sample_rate_hz: 48_000.0,
                overload_threshold: rig.overload_threshold(),
                resolution_bits: rig.resolution_bits(),
            },
            &rig.calibration(),
        )
        .unwrap();
    (rig, r)
}

/// The circuit rig's sweep response (`seconds` from `start_hz` to 21 kHz at 48 kHz,
/// `level_dbfs`) through the netlist at `path`, set against ngspice's own `.ac` of the same
/// circuit and 8 ohm load: the
/// worst difference of the magnitude relative to 1 kHz from 20 Hz to 20 kHz, and the absolute
/// gain at 1 kHz through the default bench (2 V rms full scale both ways, 20 dB attenuator)
/// against the `.ac` gain less 20 dB.
fn sweep_against_ac(
    tag: &str,
    path: &std::path::Path,
    level_dbfs: f64,
    (start_hz, seconds): (f64, f64),
) -> (f64, f64) {
    use ampnote::analysis::sweep::{
        interpolate_log, ResponseAnalyzer, ResponseConfig, SweepParams,
    };
    use ampnote::rig::Rig;
    let mut rig = open_rig(tag, path).unwrap();
    let s = ampnote::signal::stimulus::sweep(
        &ampnote::signal::stimulus::Common {
            lead_s: 0.05,
            tail_s: 0.3,
            ..ampnote::signal::stimulus::Common::mono(48_000, level_dbfs)
        },
        start_hz,
        21_000.0,
        seconds,
    )
    .unwrap();
    let y = rig.play_and_record(1, &s.signal, 48_000).unwrap();
    let r = ResponseAnalyzer::new(ResponseConfig::default())
        .unwrap()
        .analyze(
            1,
            &s.signal,
            SweepParams::from_description(&s.description).unwrap(),
            &y,
            48_000.0,
            1.0,
        )
        .unwrap();
    // ngspice's own small-signal answer for the same circuit and load.
    let deck = format!(
        "ac of the test amplifier\n.include \"{}\"\nV1 in 0 DC 0 AC 1\nX1 in out amp\nRL out 0 8\n.ac dec 100 10 24k\n.end\n",
        path.display()
    );
    let ac = run(&deck, &dir(&format!("{tag}-ac")), Duration::from_secs(60)).unwrap();
    let plot = ac.plot("AC").unwrap();
    let f = plot.real("frequency").unwrap();
    let db: Vec<(f64, f64)> = f
        .iter()
        .zip(plot.variable("v(out)").unwrap())
        .map(|(f, v)| (*f, 20.0 * v.norm().log10()))
        .collect();
    let at_1k = interpolate_log(&db, 1000.0);
    let (mut worst, mut at): (f64, f64) = (0.0, 0.0);
    for p in r
        .points
        .iter()
        .filter(|p| (20.0..=20_000.0).contains(&p.frequency_hz))
    {
        let off = (p.magnitude_db - (interpolate_log(&db, p.frequency_hz) - at_1k)).abs();
        if off > worst {
            (worst, at) = (off, p.frequency_hz);
        }
    }
    // Through the bench: out of a 2 V full scale, down 20 dB, into a 2 V full scale.
    let gain = r.reference_gain_db - (at_1k - 20.0);
    eprintln!(
        "{tag}: worst {worst:.4} dB relative (at {at:.0} Hz), gain {gain:+.4} dB against ngspice's .ac"
    );
    (worst, gain)
}

/// The test amplifier's sweep against ngspice's `.ac`: within 0.02 dB relative, 0.01 dB absolute.
#[test]
fn the_circuit_rigs_sweep_reads_ngspices_own_ac() {
    let (worst, gain) = sweep_against_ac("sweep", &netlist("sweep", RLC), -20.0, (10.0, 1.0));
    assert!(worst < 0.02, "worst {worst} dB against ngspice's .ac");
    assert!(gain.abs() < 0.01, "gain {gain} dB off ngspice's .ac");
}

/// The example amplifier (examples/circuits/stock.cir: two triodes, coupling and bypass
/// capacitors, an output transformer) swept for 2 s from 5 Hz (a 1 s sweep from 10 Hz resolves
/// the low end's phase too coarsely: 0.018 dB off at 20 Hz, against 0.006 dB) at -30 dBFS (about 40 mW, where it is all but
/// linear) against ngspice's `.ac` at its operating point: within 0.02 dB relative to 1 kHz from
/// 20 Hz to 20 kHz; the absolute gain within 0.05 dB (what is left is the stages' own
/// compression at that level, which a small-signal analysis cannot have).
#[test]
fn the_example_amplifiers_response_reads_ngspices_own_ac() {
    let (worst, gain) = sweep_against_ac("stock-sweep", &example("stock.cir"), -30.0, (5.0, 2.0));
    assert!(worst < 0.02, "worst {worst} dB against ngspice's .ac");
    assert!(gain.abs() < 0.05, "gain {gain} dB off ngspice's .ac");
}

/// An example circuit's path (examples/circuits/).
fn example(name: &str) -> std::path::PathBuf {
    std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("examples/circuits")
        .join(name)
}

/// ngspice's own transient of the netlist at `path` driven by a 1 kHz SIN source at
/// `level_dbfs` of a 2 V rms full scale into 8 ohm, from its operating point, with steps of at
/// most `step` and tighter tolerances than the rig's: the Fourier amplitudes of orders
/// 1..=`orders` of the source and of the output over exactly the whole periods from `from` to
/// `to` seconds. The sum is the trapezoidal rule over ngspice's own time points (the value at
/// `from` read between its neighbours): a many-period DFT that needs no resampling.
fn sin_reference(
    tag: &str,
    path: &std::path::Path,
    level_dbfs: f64,
    (from, to, step): (f64, f64, f64),
    orders: usize,
) -> (Vec<f64>, Vec<f64>) {
    let amplitude = 2.0 * 10f64.powf(level_dbfs / 20.0) * std::f64::consts::SQRT_2;
    let deck = format!(
        "many-period reference\n.options abstol=1e-10 reltol=1e-4\n.include \"{}\"\nV1 in 0 SIN(0 {amplitude:e} 1000)\nX1 in out amp\nRL out 0 8\n.save v(in) v(out)\n.tran {step:e} {to:e} {:e} {step:e}\n.end\n",
        path.display(),
        from - 0.001
    );
    let out = run(&deck, &dir(tag), Duration::from_secs(600)).unwrap();
    let tran = out.plot("Transient").unwrap();
    let clip = |t: &[f64], v: &[f64]| -> (Vec<f64>, Vec<f64>) {
        let i = t.iter().position(|&x| x > from).unwrap();
        assert!(i > 0 && (t.last().unwrap() - to).abs() < 1e-12);
        let at = v[i - 1] + (v[i] - v[i - 1]) * (from - t[i - 1]) / (t[i] - t[i - 1]);
        (
            std::iter::once(from)
                .chain(t[i..].iter().copied())
                .collect(),
            std::iter::once(at).chain(v[i..].iter().copied()).collect(),
        )
    };
    let time = tran.real("time").unwrap();
    let (t, vin) = clip(&time, &tran.real("v(in)").unwrap());
    let (_, vout) = clip(&time, &tran.real("v(out)").unwrap());
    let amplitudes = |v: &[f64]| -> Vec<f64> {
        (1..=orders)
            .map(|order| {
                let w = 2.0 * PI * 1000.0 * order as f64;
                let f = |i: usize| Complex64::new(0.0, -w * (t[i] - from)).exp() * v[i];
                let sum: Complex64 = (1..t.len())
                    .map(|i| (f(i) + f(i - 1)) * (t[i] - t[i - 1]) / 2.0)
                    .sum();
                sum.norm() * 2.0 / (to - from)
            })
            .collect()
    };
    (amplitudes(&vin), amplitudes(&vout))
}

/// The example amplifier's harmonics at about 1 W (a 1 kHz tone, -16 dBFS) through the circuit
/// rig against a many-period DFT of ngspice's own transient of the same circuit and load (100
/// periods after 0.4 s of settling, steps of at most 1 us): H2..H5 within 0.05 dB. The same
/// sum on the pure SIN source checks the DFT itself (its H2..H5 below -120 dBc).
#[test]
fn the_example_amplifiers_harmonics_read_a_many_period_dft() {
    let path = example("stock.cir");
    let level = -16.0;
    let (_, r) = tone_through_file("stock-tone", &path, 1000.0, level, 0.6);
    let (vin, vout) = sin_reference("stock-dft", &path, level, (0.4, 0.5, 1e-6), 5);
    let amplitude = 2.0 * 10f64.powf(level / 20.0) * std::f64::consts::SQRT_2;
    assert!((vin[0] / amplitude - 1.0).abs() < 1e-6, "{} V", vin[0]);
    for order in 2..=5 {
        let floor = 20.0 * (vin[order - 1] / vin[0]).log10();
        assert!(
            floor < -120.0,
            "the DFT's own floor at H{order}: {floor} dBc"
        );
    }
    // About 1 W into 8 ohm: the level asked for.
    let watts = (vout[0] / std::f64::consts::SQRT_2).powi(2) / 8.0;
    assert!((0.5..2.0).contains(&watts), "{watts} W");
    for order in 2..=5 {
        let want = 20.0 * (vout[order - 1] / vout[0]).log10();
        let got = r.harmonics.iter().find(|h| h.order == order).unwrap();
        eprintln!("H{order}: rig {} dBc, DFT {want} dBc", got.level_dbc);
        assert!(!got.upper_bound, "H{order}: {got:?}");
        assert!(
            (got.level_dbc - want).abs() < 0.05,
            "H{order} {} dBc against the DFT's {want}",
            got.level_dbc
        );
    }
}

/// The example amplifier's power at 1 % THD from the rig's staircase (1 kHz, 2 dB steps from
/// -22 dBFS, refined to 0.4 dB across the target, 0.15 s settling and 0.2 s read per step)
/// against a stepped reference: ngspice's own transient at drives 1 dB apart around the
/// crossing (SIN source, the same settling, 200 periods, steps of at most 2 us), THD from the
/// DFT's H2..H20 (the rig's 20 kHz band), the 1 % point interpolated on log THD against log
/// power between the two steps either side (THD follows a power law there). Within 1 %.
#[test]
fn the_example_amplifiers_power_at_one_percent_reads_a_stepped_reference() {
    use ampnote::procedure::power::{run_staircase, StaircaseSettings};
    let path = example("stock.cir");
    let mut rig = open_rig("stock-power", &path).unwrap();
    let p = run_staircase(
        &mut rig,
        1,
        &StaircaseSettings {
            frequency_hz: 1000.0,
            sample_rate_hz: 48_000,
            from_dbfs: -22.0,
            step_db: 2.0,
            stop_thd_percent: 1.5,
            max_w: 20.0,
            settle_s: 0.15,
            dwell_s: 0.2,
        },
        &ampnote::progress::Progress::hidden(),
    )
    .unwrap();
    let got = p
        .power_at_thd
        .iter()
        .find(|x| x.thd_percent == 1.0)
        .and_then(|x| x.output_w)
        .expect("the 1 % point");
    // The reference, stepped: (drive, THD %, watts) at -20, -19, -18 and -17 dBFS.
    let steps: Vec<(f64, f64, f64)> = std::thread::scope(|scope| {
        let jobs: Vec<_> = [-20.0, -19.0, -18.0, -17.0]
            .into_iter()
            .map(|d: f64| {
                let path = &path;
                scope.spawn(move || {
                    let tag = format!("stock-step{}", -d as i32);
                    let (_, h) = sin_reference(&tag, path, d, (0.15, 0.35, 2e-6), 20);
                    let thd = h[1..].iter().map(|a| a * a).sum::<f64>().sqrt() / h[0] * 100.0;
                    (d, thd, (h[0] / std::f64::consts::SQRT_2).powi(2) / 8.0)
                })
            })
            .collect();
        jobs.into_iter().map(|j| j.join().unwrap()).collect()
    });
    let pair = steps
        .windows(2)
        .find(|w| w[0].1 < 1.0 && w[1].1 >= 1.0)
        .unwrap_or_else(|| panic!("1 % not between the reference's steps: {steps:?}"));
    let (a, b) = (pair[0], pair[1]);
    let x = (1f64.ln() - a.1.ln()) / (b.1.ln() - a.1.ln());
    let want = (a.2.ln() + x * (b.2.ln() - a.2.ln())).exp();
    eprintln!("power at 1 %: rig {got} W, stepped reference {want} W ({steps:?})");
    assert!((got / want - 1.0).abs() < 0.01, "{got} W against {want} W");
}

/// Closed form: a square-law stage y = x + k x^2 (a behavioural source, k = 0.02 per volt)
/// driven with a sine of amplitude A gives a second harmonic of k A / 2 relative to the
/// fundamental; read through the circuit rig and the tone analysis within 0.05 dB, and no third.
#[test]
fn a_square_law_stage_gives_its_closed_form_second_harmonic() {
    use ampnote::rig::Rig;
    let text =
        "* square law\n.subckt amp in out\nB1 out 0 V = V(in) + 0.02 * V(in) * V(in)\n.ends\n";
    // -6 dBFS RMS of a 2 V rms full scale: 1 V rms, A = sqrt(2) V at the amplifier's input.
    let (mut rig, r) = tone_through("h2", text, 1000.0, -6.0);
    let a = 10f64.powf(-6.0 / 20.0) * 2.0 * std::f64::consts::SQRT_2;
    let want = 20.0 * (0.02 * a / 2.0).log10();
    let h2 = r.harmonics.iter().find(|h| h.order == 2).unwrap();
    assert!(
        (h2.level_dbc - want).abs() < 0.05,
        "H2 {} dBc against {want}",
        h2.level_dbc
    );
    let h3 = r.harmonics.iter().find(|h| h.order == 3).unwrap();
    assert!(h3.level_dbc < -100.0, "{h3:?}");
    // Said with the result: a prediction, with no noise or hum of its own.
    let notes = rig.take_notes(1);
    assert!(
        notes
            .iter()
            .any(|n| n.message.starts_with("predicted by ngspice")),
        "{notes:?}"
    );
}

/// A netlist without the convention's subcircuit is refused before ngspice runs.
#[test]
fn a_netlist_without_the_amp_subcircuit_is_refused() {
    let path = netlist("nosub", "* bare\nR1 in out 1k\n");
    let err = open_rig("nosub", &path).err().expect("refused");
    assert!(err.to_string().contains(".subckt amp IN OUT"), "{err}");
}

/// `--set-part` against closed form: an RC low-pass (1 kohm, 100 nF, fc = 1591.5 Hz) with C1
/// changed to 220 nF for the run (fc = 723.4 Hz) reads its -3 dB point within 0.5 %, the netlist
/// file untouched; the change is in the rig's description (kept with the run).
#[test]
fn a_part_changed_for_one_run_moves_the_corner_to_its_closed_form() {
    use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
    use ampnote::rig::Rig;
    let text = "* RC\n.subckt amp in out\nE1 a 0 in 0 1\nR1 a out 1k\nC1 out 0 100n\n.ends\n";
    let path = netlist("part", text);
    let change: ampnote::rig::spice::rig::PartChange = "C1=220n".parse().unwrap();
    let mut rig = ampnote::rig::spice::rig::SpiceRig::open_with(
        &path,
        &[change],
        ampnote::calibration::Calibration::default(),
        &dir("part").join("work"),
    )
    .unwrap();
    // A load far above the network's impedance: the corner is the RC's own.
    rig.set_load(1e9).unwrap();
    assert!(rig.describe().contains("C1=220n"), "{}", rig.describe());
    let s = ampnote::signal::stimulus::sweep(
        &ampnote::signal::stimulus::Common {
            lead_s: 0.05,
            tail_s: 0.3,
            ..ampnote::signal::stimulus::Common::mono(48_000, -20.0)
        },
        10.0,
        21_000.0,
        1.0,
    )
    .unwrap();
    let y = rig.play_and_record(1, &s.signal, 48_000).unwrap();
    let r = ResponseAnalyzer::new(ResponseConfig {
        reference_hz: 20.0,
        ..ResponseConfig::default()
    })
    .unwrap()
    .analyze(
        1,
        &s.signal,
        SweepParams::from_description(&s.description).unwrap(),
        &y,
        48_000.0,
        1.0,
    )
    .unwrap();
    let fc = 1.0 / (2.0 * PI * 1e3 * 220e-9);
    // Relative to 20 Hz, where the RC is down only 0.0033 dB: the -3 dB point is fc's.
    let f3 = r.high_3db_hz.expect("a -3 dB point");
    assert!((f3 / fc - 1.0).abs() < 0.005, "{f3} Hz against {fc} Hz");
    assert_eq!(
        std::fs::read_to_string(&path).unwrap(),
        text,
        "the file is untouched"
    );
}

/// A hard-driven soft limiter (10 % THD and more) is no oscillator: the simulation's own
/// numerical floor must not read as a parasitic oscillation.
#[test]
fn a_hard_driven_limiter_raises_no_oscillation() {
    let text = "* limiter\n.subckt amp in out\nB1 a 0 V = 12 * tanh((10 * V(in) + 0.05 * V(in) * V(in)) / 12)\nR1 a out 1\n.ends\n";
    let (_, r) = tone_through("limiter", text, 997.0, -5.0);
    assert!(r.thd_percent.unwrap() > 5.0, "{:?}", r.thd_percent);
    assert!(r.oscillations.is_empty(), "{:?}", r.oscillations);
}

/// A tone through `text` on the circuit rig with `limit` per simulation: the error it ends in.
fn refused(tag: &str, text: &str, limit: Duration) -> Error {
    use ampnote::rig::Rig;
    let path = netlist(tag, text);
    let mut rig = open_rig(tag, &path).unwrap().with_time_limit(limit);
    let tone = ampnote::signal::stimulus::tone(
        &ampnote::signal::stimulus::Common::mono(48_000, -20.0),
        1000.0,
        0.3,
    )
    .unwrap();
    match rig.play_and_record(1, &tone.signal, 48_000) {
        Ok(y) => panic!("{tag}: read {} samples instead of refusing", y.len()),
        Err(e) => e,
    }
}

/// A netlist with no solution (a behavioural source asked for V(a) = V(a) + 1): ngspice ends its
/// operating-point search with warnings only and a node at 1e12 V; the rig refuses it, naming
/// the node, instead of reading megavolts as a tone.
/// Output impedance on the circuit rig (both loads simulated at once) against the closed form of
/// an ideal source behind R = 1.5 ohm in series with L = 100 uH: Z(f) = R + j 2 pi f L
/// (circuit theory), so |Z| = 1.5 ohm and 0 degrees at low frequencies, 1.5 + j 6.283 ohm
/// (6.460 ohm, 76.6 degrees) at 10 kHz; with a tone at 997 Hz, |Z| = |1.5 + j 0.6264| ohm.
#[test]
fn output_impedance_on_the_circuit_rig_reads_its_closed_form() {
    use ampnote::analysis::sweep::SweepParams;
    use ampnote::procedure::zout::{measure, ZoutDrive, ZoutPlan};
    use ampnote::signal::stimulus::{self, Common};
    let text = "* source behind R + L\n.subckt amp in out\nE1 a 0 in 0 5\nR1 a b 1.5\nL1 b out 100u\n.ends\n";
    let path = netlist("zout", text);
    let mut rig = open_rig("zout", &path).unwrap();
    let (r, l) = (1.5, 100e-6);
    let z = |f: f64| Complex64::new(r, 2.0 * PI * f * l);
    let tone = stimulus::tone(&Common::mono(48_000, -20.0), 997.0, 0.5).unwrap();
    let plan = ZoutPlan {
        loads: [8.0, 16.0],
        drive: ZoutDrive::Tone {
            signal: &tone.signal,
            hint_hz: Some(997.0),
        },
        sample_rate_hz: 48_000,
        watts: None,
    };
    let got = measure(&mut rig, 1, &plan).unwrap();
    let want = z(997.0).norm();
    eprintln!(
        "zout tone: {:.5} ohm, {:.3} deg against {want:.5} ohm, {:.3} deg",
        got.zout_ohms,
        got.phase_deg.unwrap_or(f64::NAN),
        z(997.0).arg().to_degrees()
    );
    assert!(
        (got.phase_deg.expect("a rig's captures share a clock") - z(997.0).arg().to_degrees())
            .abs()
            < 0.2,
        "tone phase {:?}",
        got.phase_deg
    );
    assert!(
        (got.zout_ohms / want - 1.0).abs() < 0.002,
        "tone: {} ohm against {want:.4} ohm",
        got.zout_ohms
    );
    // The rig is left on the first load.
    assert_eq!(ampnote::rig::Rig::calibration(&rig).load_ohms, Some(8.0));
    let sweep = stimulus::sweep(
        &Common {
            lead_s: 0.05,
            tail_s: 0.3,
            ..Common::mono(48_000, -20.0)
        },
        20.0,
        21_000.0,
        1.0,
    )
    .unwrap();
    let plan = ZoutPlan {
        drive: ZoutDrive::Sweep {
            signal: &sweep.signal,
            params: SweepParams::from_description(&sweep.description).unwrap(),
        },
        ..plan
    };
    let got = measure(&mut rig, 1, &plan).unwrap();
    // The headline at the sweep's reference frequency is the complex Z there too.
    let want = z(got.frequency_hz);
    eprintln!(
        "zout sweep headline at {:.1} Hz: {:.5} ohm against {:.5}",
        got.frequency_hz,
        got.zout_ohms,
        want.norm()
    );
    assert!(
        (got.zout_ohms / want.norm() - 1.0).abs() < 0.005,
        "sweep headline {} ohm against {:.4}",
        got.zout_ohms,
        want.norm()
    );
    for f in [100.0, 1000.0, 10_000.0] {
        let p = got
            .points
            .iter()
            .min_by(|a, b| {
                (a.frequency_hz / f)
                    .ln()
                    .abs()
                    .total_cmp(&(b.frequency_hz / f).ln().abs())
            })
            .unwrap();
        let want = z(p.frequency_hz);
        assert!(
            (p.zout_ohms / want.norm() - 1.0).abs() < 0.005,
            "{} Hz: {} ohm against {:.4}",
            p.frequency_hz,
            p.zout_ohms,
            want.norm()
        );
        let phase = p
            .phase_deg
            .expect("the circuit rig's captures share a clock");
        eprintln!(
            "zout sweep {:.1} Hz: {:.5} ohm, {phase:.3} deg against {:.5} ohm, {:.3} deg",
            p.frequency_hz,
            p.zout_ohms,
            want.norm(),
            want.arg().to_degrees()
        );
        assert!(
            (phase - want.arg().to_degrees()).abs() < 0.5,
            "{} Hz: {phase} degrees against {:.2}",
            p.frequency_hz,
            want.arg().to_degrees()
        );
    }
}

/// Two channels (`.subckt amp IN1 IN2 OUT1 OUT2`): each a gain-2 source behind 1 ohm into its
/// own 8 ohm load, coupled by C = 100 nF between the outputs. Driving channel 1 with channel 2's
/// input held at 0 V, channel 2's output is V1 Zp / (Zp + 1 / (j w C)) with Zp = 1 || 8 ohm
/// (circuit theory): -65.06 dB at 1 kHz and -45.06 dB at 10 kHz, leading by nearly 90 degrees.
/// The two channels come from one simulation, on one time base, as a bench records them.
#[test]
fn two_channels_give_their_crosstalk_in_closed_form() {
    use ampnote::rig::Rig;
    use ampnote::signal::stimulus::{self, Common};
    let text = "* two channels\n.subckt amp in1 in2 out1 out2\nE1 a1 0 in1 0 2\nR1 a1 out1 1\nE2 a2 0 in2 0 2\nR2 a2 out2 1\nCx out1 out2 100n\n.ends\n";
    let path = netlist("stereo", text);
    let mut rig = open_rig("stereo", &path).unwrap();
    assert_eq!(rig.channels(), 2);
    assert!(
        rig.describe().contains("two channels"),
        "{}",
        rig.describe()
    );
    let fs = 48_000.0;
    let zp = 8.0 / 9.0;
    for f in [1000.0, 10_000.0] {
        let t = stimulus::tone(&Common::mono(48_000, -20.0), f, 0.3).unwrap();
        let all = rig.play_and_record_all(1, &t.signal, 48_000).unwrap();
        assert_eq!(all.len(), 2);
        let (from, to) = (4800, all[0].len() - 2400);
        let ratio = hann_phasor(&all[1], from, to, f, fs) / hann_phasor(&all[0], from, to, f, fs);
        let xc = 1.0 / (2.0 * PI * f * 100e-9);
        let want = Complex64::new(zp, 0.0) / Complex64::new(zp, -xc);
        let (got_db, want_db) = (20.0 * ratio.norm().log10(), 20.0 * want.norm().log10());
        let (got_deg, want_deg) = (ratio.arg().to_degrees(), want.arg().to_degrees());
        eprintln!("crosstalk {f} Hz: {got_db:.3} dB {got_deg:.2} deg against {want_db:.3} dB {want_deg:.2} deg");
        assert!(
            (got_db - want_db).abs() < 0.05,
            "{f} Hz: {got_db} dB against {want_db}"
        );
        assert!(
            (got_deg - want_deg).abs() < 0.5,
            "{f} Hz: {got_deg} deg against {want_deg}"
        );
    }
    // Channel 2 driven on its own: gain 2 x 8/9 through the default bench's 20 dB attenuator.
    let t = stimulus::tone(&Common::mono(48_000, -20.0), 1000.0, 0.3).unwrap();
    let y = rig.play_and_record(2, &t.signal, 48_000).unwrap();
    let rms = |x: &[f64]| {
        (x[4800..x.len() - 2400].iter().map(|v| v * v).sum::<f64>() / (x.len() - 7200) as f64)
            .sqrt()
    };
    let gain = rms(&y) / rms(&t.signal);
    assert!(
        (gain / (2.0 * zp / 10.0) - 1.0).abs() < 1e-3,
        "channel 2 gain {gain}"
    );
    // No third channel; a one-channel netlist cannot record both.
    assert!(matches!(
        rig.play_and_record(3, &t.signal, 48_000),
        Err(Error::NoSuchChannel {
            requested: 3,
            available: 2
        })
    ));
    let mono = netlist(
        "mono",
        "* one\n.subckt amp in out\nE1 out 0 in 0 2\n.ends\n",
    );
    let mut rig = open_rig("mono", &mono).unwrap();
    let err = rig.play_and_record_all(1, &t.signal, 48_000).unwrap_err();
    assert!(matches!(err, Error::RecordsOneChannel { .. }), "{err:?}");
    assert!(err.to_string().contains("IN1 IN2 OUT1 OUT2"), "{err}");
}

/// The Hann-weighted complex amplitude of `x[from..to]` at `f_hz`.
fn hann_phasor(x: &[f64], from: usize, to: usize, f_hz: f64, fs: f64) -> Complex64 {
    let n = (to - from) as f64;
    x[from..to]
        .iter()
        .enumerate()
        .map(|(i, v)| {
            let w = 0.5 - 0.5 * (2.0 * PI * i as f64 / (n - 1.0)).cos();
            v * w * Complex64::from_polar(1.0, -2.0 * PI * f_hz * (from + i) as f64 / fs)
        })
        .sum()
}

/// A netlist whose own file source names a file ngspice cannot open (here a path with a
/// capital, which ngspice lowercases): ngspice says so on one line and plays zeros; the rig
/// refuses instead of reading silence as the amplifier's output.
#[test]
fn a_file_ngspice_cannot_open_is_refused_not_read_as_silence() {
    let wave = dir("nofile").join("Wave.txt");
    std::fs::create_dir_all(dir("nofile")).unwrap();
    std::fs::write(&wave, "0 0\n1 1\n").unwrap();
    let text = format!(
        "* own file source\n.subckt amp in out\n.model w filesource (file=\"{}\" amploffset=[0] amplscale=[1] timeoffset=0 timescale=1 timerelative=false amplstep=false)\na_w %v([w]) w\nR1 w 0 1k\nE1 out 0 in 0 1\n.ends\n",
        wave.display()
    );
    let err = refused("nofile", &text, Duration::from_secs(120));
    let said = err.to_string();
    assert!(said.contains("cannot open file"), "{said}");
    assert!(said.contains("lowercase"), "{said}");
    assert_eq!(err.exit_code(), 3);
}

#[test]
fn a_netlist_that_does_not_converge_is_refused() {
    let text = "* no solution\n.subckt amp in out\nB1 a 0 V = V(a) + 1\nR1 a out 1k\nE1 b 0 in 0 1\nR2 b out 1k\n.ends\n";
    let err = refused("noconv", text, Duration::from_secs(120));
    assert!(matches!(err, Error::Spice { .. }), "{err:?}");
    let text = err.to_string();
    assert!(text.contains("node `a`"), "{text}");
    assert!(text.contains("no sensible solution"), "{text}");
    assert!(text.contains("singular matrix"), "{text}");
    assert_eq!(err.exit_code(), 3);
}

/// A plate load wired to a misspelt supply node (`bdd` for `bd`): the plate has no DC path to
/// ground, ngspice warns of a singular matrix and solves it at about 1e8 V; refused, naming
/// the plate's node.
#[test]
fn a_part_on_a_missing_node_is_refused() {
    let text = "* misspelt node\n.subckt amp in out\nVB bd 0 DC 300\nRA p bdd 10k\nG1 p 0 in 0 0.01\nE2 out 0 p 0 0.1\n.ends\n";
    let err = refused("missing", text, Duration::from_secs(120));
    let text = err.to_string();
    assert!(text.contains("node `p`"), "{text}");
    assert!(text.contains("check node"), "{text}");
}

/// An output port no part inside the subcircuit reaches is refused before ngspice runs.
#[test]
fn an_unconnected_output_port_is_refused() {
    let path = netlist(
        "unused",
        "* typo\n.subckt amp in out\nR1 in outt 1k\nR2 outt 0 1k\n.ends\n",
    );
    let err = open_rig("unused", &path).err().expect("refused");
    assert!(err.to_string().contains("output port `out`"), "{err}");
}

/// A netlist that would run for hours (a 1 GHz source charging a capacitor inside the amplifier
/// holds the time step under a nanosecond for the whole capture) is stopped at the rig's limit, saying so.
#[test]
fn a_netlist_that_hangs_is_stopped_at_the_limit() {
    let text = "* a 1 GHz source\n.subckt amp in out\nV9 x 0 SIN(0 1 1G)\nR9 x y 1\nC9 y 0 1n\nE1 out 0 in 0 1\n.ends\n";
    let started = std::time::Instant::now();
    let err = refused("hang", text, Duration::from_secs(3));
    assert!(matches!(err, Error::SpiceTimedOut { .. }), "{err:?}");
    assert!(started.elapsed() < Duration::from_secs(20));
    assert!(err.to_string().contains("3"), "{err}");
}
