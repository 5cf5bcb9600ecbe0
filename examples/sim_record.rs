//! Plays a stimulus file through the simulated bench and writes the recording (a helper for
//! trying the offline procedures without hardware).
//!
//! Run: `cargo run --release --example sim_record -- STIMULUS.wav OUT.wav [MODEL] [CHANNEL] [DELAY_SAMPLES]`

use ampnote::capture::Capture;
use ampnote::rig::model::Model;
use ampnote::rig::sim::simulate;
use ampnote::signal::wav::{write_wav, WavFormat};
use std::path::Path;

fn main() {
    let a: Vec<String> = std::env::args().collect();
    let stim = Capture::read(Path::new(&a[1]), false).expect("stimulus");
    let model = Model::load(a.get(3).map_or("stock", |s| s.as_str())).expect("model");
    let ch = a.get(4).map_or(1, |s| s.parse().expect("channel"));
    let delay: usize = a.get(5).map_or(0, |s| s.parse().expect("delay"));
    let amp = if ch == 1 { model.left } else { model.right };
    let mut y = vec![0.0; delay];
    y.extend(simulate(
        &model.bench,
        &amp,
        model.bench.load_ohms,
        &stim.channels[0],
        stim.sample_rate_hz as f64,
        7,
    ));
    write_wav(
        Path::new(&a[2]),
        stim.sample_rate_hz,
        &[y],
        WavFormat::Int { bits: 24 },
        3,
    )
    .expect("write");
}
