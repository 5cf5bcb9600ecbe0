//! The live rig's capture checks (markers, latency, lost frames, holes, drift), on captures built
//! by hand from the played signal. Every expectation is closed-form: a capture delayed by D
//! samples has a latency of D; one resampled by a clock faster by e has its markers e x distance
//! further apart; frames removed or inserted change that distance by exactly their number.

use ampnote::rig::framing::{assess, frame, locate, slip_tolerance, Verdict};
use std::f64::consts::PI;

const RATE: u32 = 48_000;

fn tone(freq: f64, amp: f64, secs: f64) -> Vec<f64> {
    let n = (secs * RATE as f64) as usize;
    (0..n)
        .map(|i| amp * (2.0 * PI * freq * i as f64 / RATE as f64).sin())
        .collect()
}

/// `x` delayed by `d` whole samples, with `tail` samples of silence after, plus a little noise
/// (deterministic, about -110 dBFS RMS) so exact-zero runs only come from the rig.
fn delayed(x: &[f64], d: usize, tail: usize) -> Vec<f64> {
    let mut y = vec![0.0; d];
    y.extend_from_slice(x);
    y.extend(std::iter::repeat_n(0.0, tail));
    let mut s: u64 = 0x9E37_79B9_7F4A_7C15;
    for v in y.iter_mut() {
        s ^= s << 13;
        s ^= s >> 7;
        s ^= s << 17;
        *v += ((s >> 11) as f64 / (1u64 << 53) as f64 - 0.5) * 1e-5;
    }
    y
}

/// Catmull-Rom interpolation of `x` at fractional index `t`.
fn at(x: &[f64], t: f64) -> f64 {
    let i = t.floor() as isize;
    let f = t - i as f64;
    let g = |k: isize| {
        if k < 0 || k as usize >= x.len() {
            0.0
        } else {
            x[k as usize]
        }
    };
    let (p0, p1, p2, p3) = (g(i - 1), g(i), g(i + 1), g(i + 2));
    p1 + 0.5
        * f
        * (p2 - p0 + f * (2.0 * p0 - 5.0 * p1 + 4.0 * p2 - p3 + f * (3.0 * (p1 - p2) + p3 - p0)))
}

#[test]
fn latency_gain_and_polarity_of_a_clean_capture() {
    // Closed form: a capture delayed by 1234 samples at half the level, inverted.
    let f = frame(&tone(997.0, 0.3, 1.0), RATE);
    let cap: Vec<f64> = delayed(&f.signal, 1234, 4800)
        .iter()
        .map(|v| -0.5 * v)
        .collect();
    let l = locate(&cap, &f, RATE).expect("markers found");
    assert!((l.latency_samples - 1234.0).abs() < 0.05, "{l:?}");
    assert!((l.gain + 0.5).abs() < 0.005, "{l:?}");
    assert!(l.slip_samples.abs() < 0.05, "{l:?}");
    match assess(&cap, &f, RATE, 0) {
        Verdict::Whole { aligned, .. } => {
            // The aligned part is the stimulus, inverted and halved.
            let stim = &f.signal[f.stimulus_start..f.stimulus_start + f.stimulus_len];
            let err = aligned
                .iter()
                .zip(stim)
                .map(|(a, s)| (a + 0.5 * s).abs())
                .fold(0.0, f64::max);
            assert!(err < 1e-4, "max error {err}");
        }
        Verdict::Broken(why) => panic!("a clean capture was rejected: {why}"),
    }
}

#[test]
fn fractional_latency_to_a_tenth_of_a_sample() {
    // Closed form: the signal sampled 0.37 samples late.
    let f = frame(&tone(1000.0, 0.2, 0.5), RATE);
    let d = 500.37;
    let n = f.signal.len() + 2000;
    let cap: Vec<f64> = (0..n).map(|k| at(&f.signal, k as f64 - d)).collect();
    let l = locate(&cap, &f, RATE).expect("markers found");
    assert!((l.latency_samples - d).abs() < 0.1, "{l:?}");
}

#[test]
fn captures_of_one_path_keep_one_grid_whichever_way_their_latency_rounds() {
    // Closed form: two captures of one path, 500.45 and 500.55 samples late (the amplifier's
    // delay moved by a tenth of a sample between them, as a load change can move it). Cut by
    // rounding they land a whole sample apart and a 1 kHz tone's phase between them reads
    // 0.1 - 1 = -0.9 samples (-6.75 degrees at 48 kHz); cut on the first one's grid it reads
    // the true 0.1 sample (0.75 degrees): the phase the amplifier itself added is kept, and
    // nothing else is.
    use ampnote::rig::framing::assess_near;
    let f = frame(&tone(1000.0, 0.2, 0.5), RATE);
    let n = f.signal.len() + 2000;
    let take = |d: f64| -> Vec<f64> { (0..n).map(|k| at(&f.signal, k as f64 - d)).collect() };
    let (a, b) = (take(500.45), take(500.55));
    let whole = |v: Verdict| match v {
        Verdict::Whole { aligned, located } => (aligned, located),
        Verdict::Broken(why) => panic!("rejected: {why}"),
    };
    let (ya, la) = whole(assess(&a, &f, RATE, 0));
    assert!((la.residual - 0.45).abs() < 0.1, "{la:?}");
    let phase = |y: &[f64]| {
        let (mut re, mut im) = (0.0, 0.0);
        for (i, v) in y.iter().enumerate().take(20_000).skip(1_000) {
            let w = 2.0 * PI * 1000.0 * i as f64 / RATE as f64;
            re += v * w.cos();
            im -= v * w.sin();
        }
        im.atan2(re).to_degrees()
    };
    let lag = |y: &[f64]| {
        let d = phase(&ya) - phase(y);
        (d + 540.0).rem_euclid(360.0) - 180.0
    };
    let (yb_rounded, _) = whole(assess(&b, &f, RATE, 0));
    let (yb, lb) = whole(assess_near(&b, &f, RATE, 0, la.residual));
    let one_sample = 360.0 * 1000.0 / RATE as f64;
    assert!(
        (lag(&yb_rounded) - (0.1 - 1.0) * one_sample).abs() < 0.1,
        "rounded: {}",
        lag(&yb_rounded)
    );
    assert!(
        (lag(&yb) - 0.1 * one_sample).abs() < 0.1,
        "on one grid: {}",
        lag(&yb)
    );
    assert!((lb.residual - 0.55).abs() < 0.1, "{lb:?}");
}

#[test]
fn lost_frames_are_counted_exactly() {
    // Closed form: 256 frames cut out of the stimulus shorten the marker distance by 256.
    let f = frame(&tone(997.0, 0.3, 2.0), RATE);
    let mut cap = delayed(&f.signal, 700, 4800);
    let cut = 700 + f.stimulus_start + 40_000;
    cap.drain(cut..cut + 256);
    let l = locate(&cap, &f, RATE).expect("markers found");
    assert!((l.slip_samples + 256.0).abs() < 0.1, "{l:?}");
    match assess(&cap, &f, RATE, 0) {
        Verdict::Broken(why) => assert!(why.contains("256 frames were lost"), "{why}"),
        Verdict::Whole { .. } => panic!("a capture with lost frames passed"),
    }
}

#[test]
fn inserted_silence_is_caught() {
    // Closed form: 512 frames of silence slipped in lengthen the distance by 512.
    let f = frame(&tone(997.0, 0.3, 2.0), RATE);
    let mut cap = delayed(&f.signal, 300, 4800);
    let at_ = 300 + f.stimulus_start + 20_000;
    cap.splice(at_..at_, std::iter::repeat_n(0.0, 512));
    match assess(&cap, &f, RATE, 0) {
        Verdict::Broken(why) => assert!(why.contains("512 frames were inserted"), "{why}"),
        Verdict::Whole { .. } => panic!("a capture with inserted frames passed"),
    }
}

#[test]
fn a_buffer_of_zeros_in_place_of_data_is_a_hole() {
    // The length is kept, so only the hole check can see it: 1024 samples zeroed mid-stimulus.
    let f = frame(&tone(997.0, 0.3, 2.0), RATE);
    let mut cap = delayed(&f.signal, 300, 4800);
    let at_ = 300 + f.stimulus_start + 30_000;
    cap[at_..at_ + 1024].iter_mut().for_each(|v| *v = 0.0);
    match assess(&cap, &f, RATE, 0) {
        Verdict::Broken(why) => assert!(why.contains("hole"), "{why}"),
        Verdict::Whole { .. } => panic!("a capture with a hole passed"),
    }
    // And a reported xrun alone rejects an otherwise perfect capture.
    let clean = delayed(&f.signal, 300, 4800);
    assert!(matches!(assess(&clean, &f, RATE, 1), Verdict::Broken(_)));
}

#[test]
fn clock_drift_is_measured_not_rejected() {
    // Closed form: an input clock 40 ppm fast records the played signal at t (1 - 40e-6) per
    // sample; the markers come out 40 ppm x distance apart further, read as +40 ppm.
    let f = frame(&tone(997.0, 0.3, 3.0), RATE);
    let ppm = 40.0;
    let step = 1.0 / (1.0 + ppm * 1e-6);
    let n = ((f.signal.len() + 1000) as f64 / step) as usize;
    let cap: Vec<f64> = (0..n)
        .map(|k| at(&f.signal, k as f64 * step - 200.0))
        .collect();
    match assess(&cap, &f, RATE, 0) {
        Verdict::Whole { located, .. } => {
            assert!((located.drift_ppm - ppm).abs() < 1.0, "{located:?}");
        }
        Verdict::Broken(why) => panic!("drift within tolerance was rejected: {why}"),
    }
    // The tolerance is 2 samples + 200 ppm of the distance.
    assert!((slip_tolerance(1_000_000) - 202.0).abs() < 1e-9);
}

#[test]
fn nothing_on_the_input_is_no_signal() {
    // Closed form: noise alone (about -110 dBFS) holds no copy of the marker.
    let f = frame(&tone(997.0, 0.3, 0.5), RATE);
    let cap = delayed(&vec![0.0; f.signal.len()], 0, 4800);
    match assess(&cap, &f, RATE, 0) {
        Verdict::Broken(why) => assert!(why.contains("did not come back"), "{why}"),
        Verdict::Whole { .. } => panic!("noise passed as a capture"),
    }
}

#[test]
fn a_sweep_through_the_simulated_amplifier_is_whole() {
    // The markers survive a real (simulated) amplifier: band limits, distortion, its own gain.
    // Closed form: the simulated bench has no delay and one clock, so latency and slip are 0
    // (within its band-limiting's group delay of a few samples).
    let mut rig = ampnote::rig::parse_rig("sim:stock").expect("sim rig");
    let c = ampnote::signal::stimulus::Common::mono(RATE, -20.0);
    let s = ampnote::signal::stimulus::sweep(&c, 20.0, 20_000.0, 1.0).expect("sweep");
    let f = frame(&s.signal, RATE);
    let y = rig.play_and_record(1, &f.signal, RATE).expect("played");
    match assess(&y, &f, RATE, 0) {
        Verdict::Whole { located, .. } => {
            assert!(located.latency_samples.abs() < 3.0, "{located:?}");
            assert!(located.slip_samples.abs() < 0.2, "{located:?}");
        }
        Verdict::Broken(why) => panic!("the simulated amplifier's capture was rejected: {why}"),
    }
}

#[test]
fn preflight_names_the_input_the_chirp_arrived_on() {
    // Closed form, on captures of two inputs built by hand. The pre-flight plays only the framed
    // silence: markers on output 1 (index 0). The captures: the chirp on input 2 alone (a swapped lead), on both at
    // -6 dB (a shared signal), at -40 dB crosstalk (fine), and nowhere.
    use ampnote::rig::framing::{judge_preflight, PreflightFault};
    let f = frame(&vec![0.0; 2400], RATE);
    let quiet = delayed(&vec![0.0; f.signal.len()], 0, 4800);
    let scaled = |g: f64| -> Vec<f64> {
        delayed(&f.signal, 0, 4800)
            .iter()
            .map(|v| g * v)
            .collect::<Vec<_>>()
    };
    let judge = |a: &[f64], b: &[f64]| {
        let found = vec![
            (0usize, locate(a, &f, RATE).ok()),
            (1usize, locate(b, &f, RATE).ok()),
        ];
        judge_preflight(0, 0, &found)
    };
    assert!(matches!(
        judge(&quiet, &scaled(1.0)),
        Err(PreflightFault::Elsewhere { other: 1, .. })
    ));
    match judge(&scaled(1.0), &scaled(0.5)) {
        Err(PreflightFault::Shared { relative_db, .. }) => {
            assert!((relative_db + 6.02).abs() < 0.05, "{relative_db}")
        }
        other => panic!("a shared signal passed: {other:?}"),
    }
    let ok = judge(&scaled(1.0), &scaled(0.01)).expect("-40 dB crosstalk is fine");
    assert!((ok.gain - 1.0).abs() < 1e-3);
    assert!(matches!(
        judge(&quiet, &quiet),
        Err(PreflightFault::Nowhere { .. })
    ));
    let text = PreflightFault::Elsewhere {
        output: 0,
        expected: 0,
        other: 1,
    }
    .to_string();
    assert!(
        text.contains("came back on input 2, not on input 1"),
        "{text}"
    );
}
