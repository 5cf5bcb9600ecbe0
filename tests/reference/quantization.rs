//! Quantization theory: an ideal N-bit quantizer with TPDF dither (2 LSB peak to peak) gives a
//! full-scale sine SNR of 6.02 N + 1.76 - 4.77 dB over the whole Nyquist band (Lipshitz,
//! Wannamaker, Vanderkooy, JAES 40(5), 1992, via REFERENCES.md; numbers from memory), and white
//! noise read in 20 Hz - 20 kHz keeps the fraction (20000 - 20) / (fs / 2) of its power.
//! The signal goes through ampnote's own dithered WAV writer and reader, so the I/O path is
//! checked too.

use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig};
use ampnote::calibration::Calibration;
use ampnote::capture::Capture;
use ampnote::signal::wav::{write_wav, WavFormat};

fn quantized_sinad(bits: u16, fs: u32) -> (f64, f64) {
    let n = fs as usize * 2;
    // Peak 1 - 2 LSB, so the dither never clips; the level correction is below 0.001 dB.
    let amp = 1.0 - 2.0 / (1u64 << (bits - 1)) as f64;
    let x = super::common::sines(fs as f64, n, &[(997.0, amp, 0.3)]);
    let dir = std::env::temp_dir().join(format!("ampnote-q{bits}-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join(format!("sine-{bits}bit.wav"));
    write_wav(&path, fs, &[x], WavFormat::Int { bits }, 11).unwrap();
    let cap = Capture::read(&path, false).unwrap();
    std::fs::remove_dir_all(&dir).ok();
    let analyzer = ToneAnalyzer::new(ToneConfig::default()).unwrap();
    let r = analyzer
        .analyze(
            &ChannelInput {
                channel: 1,
                samples: &cap.channels[0],
                sample_rate_hz: fs as f64,
                overload_threshold: cap.encoding.overload_threshold(),
                resolution_bits: bits as u32,
            },
            &Calibration::default(),
        )
        .unwrap();
    let band_gain_db = -10.0 * ((20_000.0 - 20.0) / (fs as f64 / 2.0)).log10();
    let theory = 6.02 * bits as f64 + 1.76 - 4.77 + band_gain_db + 20.0 * amp.log10();
    (r.sinad_db, theory)
}

#[test]
fn tpdf_16_bit_sine_snr_matches_theory() {
    let (measured, theory) = quantized_sinad(16, 48_000);
    assert!(
        (measured - theory).abs() < 0.5,
        "16-bit TPDF at 48 kHz: SINAD {measured:.2} dB vs theory {theory:.2} dB"
    );
}

#[test]
fn tpdf_24_bit_sine_snr_matches_theory() {
    let (measured, theory) = quantized_sinad(24, 96_000);
    assert!(
        (measured - theory).abs() < 0.5,
        "24-bit TPDF at 96 kHz: SINAD {measured:.2} dB vs theory {theory:.2} dB"
    );
}
