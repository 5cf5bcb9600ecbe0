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
    let tmp = path.with_extension("wav.partial");
    {
        let mut w = hound::WavWriter::create(&tmp, spec).map_err(werr)?;
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
    std::fs::rename(&tmp, path).map_err(|source| Error::Write {
        path: path.to_path_buf(),
        source,
    })
}
