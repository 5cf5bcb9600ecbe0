//! Writing WAV files, whole or not at all: samples go to a temporary file beside the target,
//! which is renamed into place only once it is complete.

use super::dither::{quantize_tpdf, Rng};
use crate::error::{Error, Result};
use std::path::Path;

/// How to store samples.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum WavFormat {
    /// Integer PCM with TPDF dither (16 or 24 bits).
    Int { bits: u16 },
    /// 32-bit float, no dither needed.
    Float32,
}

/// Write `channels` (equal lengths, full scale 1.0) at `rate_hz`. `seed` fixes the dither.
pub fn write_wav(
    path: &Path,
    rate_hz: u32,
    channels: &[Vec<f64>],
    format: WavFormat,
    seed: u64,
) -> Result<()> {
    write_wav_described(path, rate_hz, channels, format, seed, None)
}

/// As [`write_wav`], with a description (JSON) stored in an extra RIFF chunk before the data
/// ([`crate::capture::DESCRIPTION_CHUNK`]) that [`crate::capture::Capture`] reads back.
pub fn write_wav_described(
    path: &Path,
    rate_hz: u32,
    channels: &[Vec<f64>],
    format: WavFormat,
    seed: u64,
    description: Option<&str>,
) -> Result<()> {
    let werr = |e: hound::Error| Error::Write {
        path: path.to_path_buf(),
        source: match e {
            hound::Error::IoError(io) => io,
            other => std::io::Error::other(other.to_string()),
        },
    };
    if channels.is_empty() || channels.iter().any(|c| c.len() != channels[0].len()) {
        return Err(Error::InvalidSetting(
            "channels to write must be non-empty and of equal length".into(),
        ));
    }
    let (bits, sample_format) = match format {
        WavFormat::Int { bits } => (bits, hound::SampleFormat::Int),
        WavFormat::Float32 => (32, hound::SampleFormat::Float),
    };
    let spec = hound::WavSpec {
        channels: channels.len() as u16,
        sample_rate: rate_hz,
        bits_per_sample: bits,
        sample_format,
    };
    let mut bytes = std::io::Cursor::new(Vec::new());
    {
        let mut w = hound::WavWriter::new(&mut bytes, spec).map_err(werr)?;
        let mut rng = Rng::new(seed);
        for i in 0..channels[0].len() {
            for ch in channels {
                match format {
                    WavFormat::Int { bits } => w
                        .write_sample(quantize_tpdf(ch[i], bits, &mut rng))
                        .map_err(werr)?,
                    WavFormat::Float32 => w.write_sample(ch[i] as f32).map_err(werr)?,
                }
            }
        }
        w.finalize().map_err(werr)?;
    }
    let mut bytes = bytes.into_inner();
    if let Some(text) = description {
        insert_chunk_before_data(
            &mut bytes,
            crate::capture::DESCRIPTION_CHUNK,
            text.as_bytes(),
        );
    }
    crate::files::write_whole(path, &bytes)
}

/// Insert a RIFF chunk just before the `data` chunk of a complete WAV image and fix the RIFF size.
fn insert_chunk_before_data(bytes: &mut Vec<u8>, id: &[u8; 4], body: &[u8]) {
    let mut pos = 12;
    while pos + 8 <= bytes.len() && &bytes[pos..pos + 4] != b"data" {
        let len = u32::from_le_bytes([
            bytes[pos + 4],
            bytes[pos + 5],
            bytes[pos + 6],
            bytes[pos + 7],
        ]) as usize;
        pos += 8 + len + (len & 1);
    }
    let mut chunk = id.to_vec();
    chunk.extend_from_slice(&(body.len() as u32).to_le_bytes());
    chunk.extend_from_slice(body);
    if body.len() % 2 == 1 {
        chunk.push(b' ');
    }
    bytes.splice(pos..pos, chunk.iter().copied());
    let riff = (bytes.len() - 8) as u32;
    bytes[4..8].copy_from_slice(&riff.to_le_bytes());
}
