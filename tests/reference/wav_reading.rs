//! WAV reading against the RIFF/WAVE layout (Microsoft's Multimedia Programming Interface and Data
//! Specifications 1.0, 1991, and the WAVEFORMATEXTENSIBLE rules; from memory): chunks in any order
//! before `data`, odd-length chunks padded to even, extensible headers whose sub-format GUID carries
//! the real format tag and whose valid bits may be fewer than the container, and recorders that
//! leave the data length at 0 or 0xFFFFFFFF.

use ampnote::capture::{Capture, Encoding};
use std::path::Path;

fn chunk(id: &[u8; 4], body: &[u8]) -> Vec<u8> {
    let mut v = id.to_vec();
    v.extend_from_slice(&(body.len() as u32).to_le_bytes());
    v.extend_from_slice(body);
    if body.len() % 2 == 1 {
        v.push(0);
    }
    v
}

fn riff(chunks: &[Vec<u8>]) -> Vec<u8> {
    let body: Vec<u8> = chunks.concat();
    let mut v = b"RIFF".to_vec();
    v.extend_from_slice(&(body.len() as u32 + 4).to_le_bytes());
    v.extend_from_slice(b"WAVE");
    v.extend_from_slice(&body);
    v
}

fn fmt_extensible(
    channels: u16,
    rate: u32,
    container_bits: u16,
    valid_bits: u16,
    tag: u16,
) -> Vec<u8> {
    let block = channels * container_bits / 8;
    let mut f = Vec::new();
    f.extend_from_slice(&0xFFFEu16.to_le_bytes());
    f.extend_from_slice(&channels.to_le_bytes());
    f.extend_from_slice(&rate.to_le_bytes());
    f.extend_from_slice(&(rate * block as u32).to_le_bytes());
    f.extend_from_slice(&block.to_le_bytes());
    f.extend_from_slice(&container_bits.to_le_bytes());
    f.extend_from_slice(&22u16.to_le_bytes()); // cbSize
    f.extend_from_slice(&valid_bits.to_le_bytes());
    f.extend_from_slice(&3u32.to_le_bytes()); // channel mask: front left + right
    f.extend_from_slice(&tag.to_le_bytes()); // sub-format GUID starts with the format tag
    f.extend_from_slice(&[
        0x00, 0x00, 0x00, 0x00, 0x10, 0x00, 0x80, 0x00, 0x00, 0xAA, 0x00, 0x38, 0x9B, 0x71,
    ]);
    chunk(b"fmt ", &f)
}

fn read(bytes: &[u8]) -> ampnote::Result<Capture> {
    Capture::from_reader(std::io::Cursor::new(bytes), Path::new("test.wav"), false)
}

#[test]
fn extensible_24_in_32_with_odd_chunk_before_data() {
    // Two frames, stereo: left-justified 24-bit values in 32-bit containers.
    let vals: [i32; 4] = [0x40_0000, -0x80_0000, 0x7F_FFFF, -1];
    let mut data = Vec::new();
    for v in vals {
        data.extend_from_slice(&(v << 8).to_le_bytes());
    }
    let bytes = riff(&[
        fmt_extensible(2, 96_000, 32, 24, 1),
        chunk(b"LIST", b"INFOxyz"),
        chunk(b"data", &data),
    ]);
    let c = read(&bytes).expect("extensible 24-in-32 reads");
    assert_eq!(c.encoding, Encoding::Int { bits: 24 });
    assert_eq!(c.sample_rate_hz, 96_000);
    assert_eq!(c.channels[0], vec![0.5, 8_388_607.0 / 8_388_608.0]);
    assert_eq!(c.channels[1], vec![-1.0, -1.0 / 8_388_608.0]);
}

#[test]
fn extensible_float_and_unknown_length() {
    let mut data = Vec::new();
    for v in [0.25f32, -0.5, 0.75, 1.0] {
        data.extend_from_slice(&v.to_le_bytes());
    }
    let mut bytes = riff(&[fmt_extensible(2, 48_000, 32, 32, 3), chunk(b"data", &data)]);
    // A recorder that never came back to write the length.
    let at = bytes.len() - data.len() - 4;
    bytes[at..at + 4].copy_from_slice(&0xFFFF_FFFFu32.to_le_bytes());
    let c = read(&bytes).expect("float with open length reads to the end");
    assert_eq!(c.encoding, Encoding::Float32);
    assert_eq!(c.channels[0], vec![0.25, 0.75]);
    assert_eq!(c.channels[1], vec![-0.5, 1.0]);
    assert!(!c.truncated);
}

#[test]
fn sixteen_bit_scaling_and_channel_selection() {
    let mut data = Vec::new();
    for v in [i16::MIN, 16_384, i16::MAX, 0, 1, -1] {
        data.extend_from_slice(&v.to_le_bytes());
    }
    let mut f = Vec::new();
    for x in [1u16, 3] {
        f.extend_from_slice(&x.to_le_bytes()); // PCM, 3 channels
    }
    f.extend_from_slice(&44_100u32.to_le_bytes());
    f.extend_from_slice(&(44_100u32 * 6).to_le_bytes());
    f.extend_from_slice(&6u16.to_le_bytes());
    f.extend_from_slice(&16u16.to_le_bytes());
    let bytes = riff(&[chunk(b"fmt ", &f), chunk(b"data", &data)]);
    let all = read(&bytes).unwrap();
    assert_eq!(all.channels[0], vec![-1.0, 0.0]);
    assert_eq!(all.channels[1], vec![0.5, 1.0 / 32_768.0]);
    assert_eq!(all.channels[2], vec![32_767.0 / 32_768.0, -1.0 / 32_768.0]);
    assert_eq!(
        Encoding::Int { bits: 16 }.overload_threshold(),
        32_767.0 / 32_768.0
    );
}

/// A plain PCM format chunk with each field given (so it can disagree with itself).
fn fmt_pcm(channels: u16, rate: u32, block_align: u16, bits: u16) -> Vec<u8> {
    let mut f = Vec::new();
    f.extend_from_slice(&1u16.to_le_bytes());
    f.extend_from_slice(&channels.to_le_bytes());
    f.extend_from_slice(&rate.to_le_bytes());
    f.extend_from_slice(&(rate * block_align as u32).to_le_bytes());
    f.extend_from_slice(&block_align.to_le_bytes());
    f.extend_from_slice(&bits.to_le_bytes());
    chunk(b"fmt ", &f)
}

#[test]
fn headers_that_disagree_with_themselves_are_refused_naming_the_field() {
    let data = chunk(b"data", &[0u8; 600]);
    let err = |bytes: Vec<u8>| read(&bytes).unwrap_err().to_string();
    // Mono 16-bit samples in 3-byte blocks: block_align and bits_per_sample disagree.
    let e = err(riff(&[fmt_pcm(1, 48_000, 3, 16), data.clone()]));
    assert!(
        e.contains("block_align") && e.contains("bits_per_sample"),
        "{e}"
    );
    // A second format chunk.
    let e = err(riff(&[
        fmt_pcm(1, 48_000, 2, 16),
        fmt_pcm(1, 48_000, 3, 24),
        data.clone(),
    ]));
    assert!(e.contains("two format chunks"), "{e}");
    // WAVE_FORMAT_EXTENSIBLE in an 18-byte chunk: too short for its extension, not "compressed".
    let mut short = fmt_pcm(1, 48_000, 2, 16);
    short[8] = 0xFE;
    short[9] = 0xFF;
    short[4] = 18;
    short.extend_from_slice(&[0, 0]);
    let e = err(riff(&[short, data.clone()]));
    assert!(e.contains("EXTENSIBLE") && e.contains("18 bytes"), "{e}");
    // A consistent header still reads.
    assert!(read(&riff(&[fmt_pcm(1, 48_000, 2, 16), data])).is_ok());
}

#[test]
fn a_signal_below_any_converter_is_not_called_dc() {
    // A 1 kHz tone scaled by 1e-38 in 32-bit float: it moves, but 760 dB under full scale.
    let x: Vec<f64> = (0..48_000)
        .map(|i| 1e-38 * (2.0 * std::f64::consts::PI * 1000.0 * i as f64 / 48_000.0).sin())
        .collect();
    let e = ampnote::analysis::tone::ToneAnalyzer::new(Default::default())
        .unwrap()
        .analyze(
            &ampnote::analysis::tone::ChannelInput {
                channel: 1,
                samples: &x,
                sample_rate_hz: 48_000.0,
                overload_threshold: 1.0,
                resolution_bits: 24,
            },
            &Default::default(),
        )
        .unwrap_err();
    assert!(matches!(e, ampnote::Error::FarTooQuiet { .. }), "{e}");
}
