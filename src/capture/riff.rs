//! The RIFF/WAVE family: WAV (with BWF's `bext` and `JUNK` chunks skipped), and RF64 / BW64 for
//! files over 4 GiB, whose sizes live in a `ds64` chunk (EBU Tech 3306, ITU-R BS.2088).
//!
//! Hand-written rather than decoded by a crate: ampnote must read its own description chunk, say
//! which header field disagrees with which, tell a truncated file from one whose recorder left the
//! length open, and decode one channel in blocks straight into the storage the analysis wants.
//! hound (which writes ampnote's files) reads neither RF64 nor a channel at a time, and
//! symphonia's WAV reader does not expose unknown chunks; symphonia decodes FLAC and AIFF (see
//! [`super::coded`]).

use super::{Encoding, SourceInfo, Store, DESCRIPTION_CHUNK, MAX_RATE_HZ, MIN_RATE_HZ};
use crate::error::{Error, Result};
use std::io::Read;
use std::path::Path;

/// Parse the RIFF/WAVE header up to the first data byte and check the format. (hound writes
/// ampnote's files; reading is done here so that the data chunk can be decoded in blocks, one
/// channel at a time, and so that container size and valid bits are both known.)
pub(super) fn read_header<R: Read>(reader: &mut R, path: &Path) -> Result<SourceInfo> {
    let p = || path.to_path_buf();
    let not_wav = |detail: &str| Error::NotWav {
        path: p(),
        detail: detail.to_string(),
    };
    let unsupported = |detail: String| Error::UnsupportedFormat { path: p(), detail };
    let mut head = [0u8; 12];
    reader
        .read_exact(&mut head)
        .map_err(|_| not_wav("the file is shorter than a WAV header"))?;
    let rf64 = matches!(&head[0..4], b"RF64" | b"BW64");
    if !(rf64 || &head[0..4] == b"RIFF") || &head[8..12] != b"WAVE" {
        return Err(not_wav("no RIFF/WAVE signature at the start"));
    }
    // RF64: the 64-bit data size from the ds64 chunk, which must come first.
    let mut ds64_data: Option<u64> = None;
    let mut fmt: Option<(u16, usize, u32, usize, u16)> = None; // tag, channels, rate, block align, valid bits
    let mut container_bits = 0u16;
    let mut description_json = None;
    let data_len = loop {
        let mut ch = [0u8; 8];
        reader
            .read_exact(&mut ch)
            .map_err(|_| not_wav("the file ends before its data chunk"))?;
        let len = u32::from_le_bytes([ch[4], ch[5], ch[6], ch[7]]) as u64;
        match &ch[0..4] {
            b"ds64" if rf64 => {
                if len < 24 {
                    return Err(not_wav(&format!(
                        "its ds64 chunk is {len} bytes, shorter than the 24 RF64 needs"
                    )));
                }
                let mut d = [0u8; 24];
                reader
                    .read_exact(&mut d)
                    .map_err(|_| not_wav("the file ends inside its ds64 chunk"))?;
                skip(reader, len - 24 + (len & 1))
                    .map_err(|_| not_wav("the file ends inside its ds64 chunk"))?;
                let at = |i: usize| u64::from_le_bytes(d[i..i + 8].try_into().expect("8 bytes"));
                ds64_data = Some(at(8));
            }
            b"fmt " => {
                if fmt.is_some() {
                    return Err(not_wav(
                        "it has two format chunks (a damaged or hand-joined file): which one holds is unknown",
                    ));
                }
                if len < 16 {
                    return Err(not_wav(&format!(
                        "its format chunk is {len} bytes, shorter than the 16 every WAV needs"
                    )));
                }
                let mut f = vec![0u8; len.min(4096) as usize];
                reader
                    .read_exact(&mut f)
                    .map_err(|_| not_wav("the file ends inside its format chunk"))?;
                skip(reader, len - f.len() as u64 + (len & 1))
                    .map_err(|_| not_wav("the file ends inside its format chunk"))?;
                let u16_at = |i: usize| u16::from_le_bytes([f[i], f[i + 1]]);
                let mut tag = u16_at(0);
                let channels = u16_at(2) as usize;
                let rate = u32::from_le_bytes([f[4], f[5], f[6], f[7]]);
                let block_align = u16_at(12) as usize;
                let mut bits = u16_at(14);
                container_bits = bits;
                if tag == 0xFFFE && f.len() < 40 {
                    return Err(not_wav(&format!(
                        "its format chunk says WAVE_FORMAT_EXTENSIBLE but is {} bytes, too short for the extension (40 needed)",
                        f.len()
                    )));
                }
                if tag == 0xFFFE {
                    // WAVE_FORMAT_EXTENSIBLE: valid bits, then the sub-format GUID whose first
                    // two bytes are the real format tag.
                    let valid = u16_at(18);
                    if valid > 0 {
                        bits = valid;
                    }
                    tag = u16_at(24);
                }
                fmt = Some((tag, channels, rate, block_align, bits));
            }
            b"data" if rf64 && len == 0xFFFF_FFFF => {
                break ds64_data.ok_or_else(|| {
                    not_wav("it is RF64 but has no ds64 chunk giving the data's size")
                })?
            }
            b"data" => break len,
            id if id == DESCRIPTION_CHUNK && len <= 1 << 20 => {
                let mut body = vec![0u8; len as usize];
                reader
                    .read_exact(&mut body)
                    .map_err(|_| not_wav("the file ends inside its description chunk"))?;
                skip(reader, len & 1)
                    .map_err(|_| not_wav("the file ends before its data chunk"))?;
                description_json = String::from_utf8(body).ok();
            }
            _ => skip(reader, len + (len & 1))
                .map_err(|_| not_wav("the file ends before its data chunk"))?,
        }
    };
    let (tag, n_ch, rate, block_align, bits) =
        fmt.ok_or_else(|| not_wav("no format chunk before the data"))?;
    if n_ch == 0 {
        return Err(unsupported("the header declares zero channels".into()));
    }
    if !(MIN_RATE_HZ..=MAX_RATE_HZ).contains(&rate) {
        return Err(Error::UnsupportedRate {
            path: p(),
            rate_hz: rate,
        });
    }
    let bps = block_align / n_ch;
    if bps == 0 || bps * n_ch != block_align {
        return Err(not_wav(&format!(
            "its block size ({block_align} bytes) does not fit {n_ch} channel(s)"
        )));
    }
    // The header's three sizes must agree: block_align = channels x bytes per sample, and the
    // bytes per sample hold the sample's bits (bits_per_sample rounded up to whole bytes).
    if container_bits == 0 || bps != (container_bits as usize).div_ceil(8) {
        return Err(not_wav(&format!(
            "its header disagrees with itself: bits_per_sample {container_bits} needs {} byte(s) per sample, but block_align {block_align} over {n_ch} channel(s) gives {bps}",
            (container_bits as usize).div_ceil(8)
        )));
    }
    if bits > container_bits {
        return Err(not_wav(&format!(
            "its header disagrees with itself: {bits} valid bits in {container_bits}-bit samples"
        )));
    }
    let encoding = match (tag, bits, bps) {
        (1, b @ (8 | 16 | 24 | 32), 1..=4) if bps * 8 >= b as usize => Encoding::Int { bits: b },
        (3, 32, 4) => Encoding::Float32,
        (3, 64, 8) => Encoding::Float64,
        (1, b, _) => {
            return Err(unsupported(format!(
                "{b}-bit integer PCM in {bps}-byte containers"
            )))
        }
        (3, b, _) => return Err(unsupported(format!("{b}-bit float"))),
        (t, _, _) => {
            return Err(unsupported(format!(
                "format tag 0x{t:04X}, not PCM or float (a compressed encoding)"
            )))
        }
    };
    // Recorders that crash or stream leave 0 or 0xFFFFFFFF here; both mean "read to the end"
    // (RF64's own 0xFFFFFFFF was replaced by the ds64 size above).
    let length_unknown = data_len == 0 || (!rf64 && data_len == 0xFFFF_FFFF);
    let frames_declared = if length_unknown {
        u64::MAX
    } else {
        data_len / block_align as u64
    };
    if frames_declared == 0 {
        return Err(Error::Empty { path: p() });
    }
    Ok(SourceInfo {
        container: if rf64 {
            super::Container::Rf64
        } else {
            super::Container::Wav
        },
        length_unknown,
        description_json,
        sample_rate_hz: rate,
        encoding,
        channel_count: n_ch,
        frames_declared,
        bytes_per_sample: bps,
    })
}

/// Skip `n` bytes.
fn skip<R: Read>(r: &mut R, n: u64) -> std::io::Result<()> {
    let copied = std::io::copy(&mut r.take(n), &mut std::io::sink())?;
    if copied < n {
        return Err(std::io::Error::from(std::io::ErrorKind::UnexpectedEof));
    }
    Ok(())
}

/// Decode interleaved PCM frames in 64 KiB blocks into the chosen channels (1-based numbers),
/// stopping at the declared length or the end of the file. Returns the complete frames read.
pub(super) fn decode_pcm<R: Read, T: Store>(
    reader: &mut R,
    info: &SourceInfo,
    numbers: &[usize],
    out: &mut [Vec<T>],
) -> std::io::Result<u64> {
    let bps = info.bytes_per_sample;
    let frame = bps * info.channel_count;
    let frames_per_block = ((1usize << 16) / frame).max(1);
    let mut buf = vec![0u8; frames_per_block * frame];
    let mut frames_done = 0u64;
    let offsets: Vec<usize> = numbers.iter().map(|&c| (c - 1) * bps).collect();
    loop {
        let want_frames =
            (info.frames_declared - frames_done).min(frames_per_block as u64) as usize;
        if want_frames == 0 {
            break;
        }
        let want = want_frames * frame;
        let mut got = 0;
        while got < want {
            match reader.read(&mut buf[got..want]) {
                Ok(0) => break,
                Ok(k) => got += k,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) => return Err(e),
            }
        }
        let whole = got / frame;
        let frames = buf[..whole * frame].chunks_exact(frame);
        for (o, &off) in out.iter_mut().zip(&offsets) {
            let f = frames.clone();
            match (info.encoding, bps) {
                (Encoding::Float32, _) => o.extend(f.map(|f| {
                    T::from_f64(
                        f32::from_le_bytes([f[off], f[off + 1], f[off + 2], f[off + 3]]) as f64,
                    )
                })),
                (Encoding::Float64, _) => o.extend(f.map(|f| {
                    T::from_f64(f64::from_le_bytes(
                        f[off..off + 8].try_into().expect("8 bytes"),
                    ))
                })),
                (_, 1) => o.extend(f.map(|f| T::from_f64((f[off] as f64 - 128.0) / 128.0))),
                (_, 2) => o.extend(f.map(|f| {
                    T::from_f64(i16::from_le_bytes([f[off], f[off + 1]]) as f64 / 32_768.0)
                })),
                (_, 3) => o.extend(f.map(|f| {
                    T::from_f64(
                        (i32::from_le_bytes([0, f[off], f[off + 1], f[off + 2]]) >> 8) as f64
                            / 8_388_608.0,
                    )
                })),
                // 4-byte integer containers hold their valid bits left-justified (WAVE format
                // rules), so scaling by 2^31 gives full scale for 24-in-32 as well.
                _ => o.extend(f.map(|f| {
                    T::from_f64(
                        i32::from_le_bytes([f[off], f[off + 1], f[off + 2], f[off + 3]]) as f64
                            / 2_147_483_648.0,
                    )
                })),
            }
        }
        frames_done += whole as u64;
        if got < want {
            break;
        }
    }
    Ok(frames_done)
}
