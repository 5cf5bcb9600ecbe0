//! End-to-end checks of the live rig through PulseAudio's null sink, with cpal's native
//! PulseAudio client (feature `pulseaudio`): what is played to the sink comes back on its
//! monitor, the default input. The same checks as through JACK (`live_common`).
//!
//! Needs a running PulseAudio server with a null sink at 48 kHz: `.ci/live-check.sh` starts one
//! (`pulseaudio -n --daemonize=no --exit-idle-time=-1 -L module-native-protocol-unix
//! -L "module-null-sink sink_name=loop rate=48000 format=float32le"`, XDG_RUNTIME_DIR set) and
//! runs `cargo test --features pulseaudio --test live_pulse -- --test-threads=1`.

mod live_common;
use live_common::PULSE;

#[test]
fn tone_through_the_null_sink() {
    live_common::check_tone(PULSE);
}

#[test]
fn sweep_through_the_null_sink_is_flat() {
    live_common::check_sweep(PULSE);
}

#[test]
fn staircase_through_the_null_sink() {
    live_common::check_staircase(PULSE);
}

#[test]
fn twenty_runs_without_a_dropout() {
    live_common::check_twenty_runs(PULSE);
}

#[test]
fn a_capture_with_lost_frames_is_kept_as_partial_and_retried_once() {
    live_common::check_retry(PULSE);
}

#[test]
fn separation_of_two_wires_is_a_word_length_bound() {
    live_common::check_separation(PULSE);
}

#[test]
fn square_through_the_null_sink_is_the_stimulus() {
    live_common::check_square(PULSE);
}
