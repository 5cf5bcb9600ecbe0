//! ampnote's checks against outside references, in one test binary (one link, one run).
//! Each module names its source beside every check.

mod bad_input;
mod bench_calibration;
mod closed_form;
mod command_line;
mod common;
mod dc_points;
mod formats;
mod framing;
mod honest_compare;
mod imd;
mod long_captures;
mod messy;
mod notebook;
mod numpy_fixtures;
mod oscillation;
mod power;
mod properties;
mod quantization;
mod safety;
mod separation;
mod spice_raw;
mod square;
mod stimuli;
mod store;
mod sweep_response;
mod targets;
mod untrusted;
mod wav_reading;
mod weighting;
mod window;
mod wrong_kind;
