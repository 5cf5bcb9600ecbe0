//! Safety limits that cannot be switched off: every numeric setting of a rig run is checked
//! before anything is played, and no step (the first included) is played whose predicted power
//! passes the limit. Sources: the limits' own definitions (P = V^2 / R; a drive above 0 dBFS
//! does not exist; a resistive attenuator has a ratio of at least 1), and the simulated bench.

use ampnote::calibration::Calibration;
use ampnote::procedure::power::{run_staircase, StaircaseSettings};
use proptest::prelude::*;

/// Ordinary values and hostile ones: non-finite, zero, negative, tiny, huge.
fn hostile(ordinary: std::ops::Range<f64>) -> impl Strategy<Value = f64> {
    prop_oneof![
        4 => ordinary,
        1 => Just(f64::NAN),
        1 => Just(f64::INFINITY),
        1 => Just(f64::NEG_INFINITY),
        1 => Just(0.0),
        1 => Just(-1.0),
        1 => Just(1e-300),
        1 => Just(1e300),
        1 => Just(-0.0),
    ]
}

fn settings() -> impl Strategy<Value = StaircaseSettings> {
    (
        hostile(10.0..30_000.0),
        prop_oneof![
            Just(48_000u32),
            Just(96_000),
            Just(7_999),
            Just(10_000_000),
            Just(0)
        ],
        hostile(-60.0..6.0),
        hostile(0.01..8.0),
        hostile(0.1..120.0),
        hostile(0.01..50.0),
        hostile(0.0..2.0),
        hostile(0.01..2.0),
    )
        .prop_map(
            |(f, rate, from, step, stop, max_w, settle, dwell)| StaircaseSettings {
                frequency_hz: f,
                sample_rate_hz: rate,
                from_dbfs: from,
                step_db: step,
                stop_thd_percent: stop,
                max_w,
                settle_s: settle,
                dwell_s: dwell,
            },
        )
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 400, ..ProptestConfig::default() })]
    /// A setting passes only when every value is finite and inside its stated range.
    #[test]
    fn staircase_settings_pass_only_when_safe(s in settings()) {
        let ok = s.validated().is_ok();
        let safe = s.max_w.is_finite() && s.max_w > 0.0 && s.max_w <= 10_000.0
            && s.stop_thd_percent.is_finite() && s.stop_thd_percent > 0.0 && s.stop_thd_percent <= 100.0
            && s.from_dbfs.is_finite() && s.from_dbfs <= 0.0 && s.from_dbfs >= -140.0
            && (0.05..=6.0).contains(&s.step_db)
            && (0.05..=60.0).contains(&s.dwell_s) && (0.0..=60.0).contains(&s.settle_s)
            && (8_000..=384_000).contains(&s.sample_rate_hz)
            && s.frequency_hz.is_finite() && s.frequency_hz >= 10.0
            && s.frequency_hz <= 0.45 * s.sample_rate_hz as f64;
        prop_assert_eq!(ok, safe, "{:?}", s);
    }

    /// One rule set for flags and profiles: a calibration passes only with finite values in
    /// range, and never an attenuator ratio below 1.
    #[test]
    fn calibration_values_pass_only_in_range(
        vin in hostile(0.0..20.0),
        att in hostile(0.0..200.0),
        load in hostile(0.0..100.0),
        thdn in hostile(-200.0..10.0),
    ) {
        let c = Calibration {
            input_fs_vrms: Some(vin),
            attenuation: Some(att),
            load_ohms: Some(load),
            output_fs_vrms: None,
            loopback_thdn_db: Some(thdn),
            loopback_noise_dbfs: None,
        };
        let ok = c.validated().is_ok();
        let safe = (1e-3..=1e3).contains(&vin) && (1.0..=1e5).contains(&att)
            && (0.1..=1e5).contains(&load) && (-250.0..=0.0).contains(&thdn);
        prop_assert_eq!(ok, safe, "{:?}", c);
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 6, ..ProptestConfig::default() })]
    /// On the simulated bench, with random limits and starting drives: the run is refused before
    /// its first step when that step would pass the limit, and otherwise no step it plays gives
    /// more than the limit (5 % allowed for the level's own scatter; the bench compresses, so
    /// the prediction from the step below is never short).
    #[test]
    fn no_step_passes_the_power_limit(max_w in 0.2f64..12.0, from in -30.0f64..-2.0) {
        let mut rig = ampnote::rig::parse_rig("sim:stock").unwrap();
        let s = StaircaseSettings {
            frequency_hz: 1000.0,
            sample_rate_hz: 48_000,
            from_dbfs: from,
            step_db: 2.0,
            stop_thd_percent: 10.0,
            max_w,
            settle_s: 0.05,
            dwell_s: 0.15,
        };
        match run_staircase(rig.as_mut(), 1, &s, &ampnote::progress::Progress::hidden()) {
            Ok(r) => {
                for st in &r.steps {
                    let w = st.output_w.unwrap();
                    prop_assert!(w <= 1.05 * max_w, "step at {} dBFS gave {w} W, limit {max_w} W", st.drive_dbfs);
                }
            }
            Err(e) => {
                let m = e.to_string();
                prop_assert!(m.contains("first step") && m.contains("--from"), "{m}");
            }
        }
    }
}
