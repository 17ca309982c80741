//! Multichannel WAV captures: read whole captures (interleaved as stored, or
//! deinterleaved; full scale ±1.0) and write them in any of the run format's
//! sample formats.

use super::RunError;
use crate::dsp::frames::{deinterleave, Frames};
use std::io::{Read, Seek, Write};
use std::path::Path;

/// Sample formats a run folder may hold.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum WavFormat {
    /// 16-bit integer PCM.
    Int16,
    /// 24-bit integer PCM.
    Int24,
    /// 32-bit integer PCM.
    Int32,
    /// 32-bit IEEE float.
    Float32,
}

impl WavFormat {
    fn spec(self, channels: u16, sample_rate: u32) -> hound::WavSpec {
        let (bits_per_sample, sample_format) = match self {
            WavFormat::Int16 => (16, hound::SampleFormat::Int),
            WavFormat::Int24 => (24, hound::SampleFormat::Int),
            WavFormat::Int32 => (32, hound::SampleFormat::Int),
            WavFormat::Float32 => (32, hound::SampleFormat::Float),
        };
        hound::WavSpec {
            channels,
            sample_rate,
            bits_per_sample,
            sample_format,
        }
    }
}

/// One capture, deinterleaved.
#[derive(Debug, Clone, PartialEq)]
pub struct Capture {
    /// Sample rate in Hz.
    pub sample_rate_hz: u32,
    /// One vector per channel, full scale ±1.0.
    pub channels: Vec<Vec<f32>>,
}

impl Capture {
    /// Frames (samples per channel).
    pub fn frames(&self) -> usize {
        self.channels.first().map_or(0, Vec::len)
    }
}

/// One capture as the file stores it: interleaved frames.
#[derive(Debug, Clone, PartialEq)]
pub struct FrameCapture {
    /// Sample rate in Hz.
    pub sample_rate_hz: u32,
    /// Samples per frame.
    pub channels: usize,
    /// Sample `c` of frame `n` at `data[n·channels + c]`, full scale ±1.0.
    pub data: Vec<f32>,
    /// Per channel, the largest absolute sample.
    pub peaks: Vec<f32>,
    /// One channel (from 0) copied out while reading, when asked for (see
    /// [`read_frames_reusing`]): cheaper than a strided pass afterwards.
    pub picked: Option<(usize, Vec<f32>)>,
}

impl FrameCapture {
    /// A view of the frames.
    pub fn frames(&self) -> Frames<'_> {
        Frames::new(&self.data, self.channels)
    }

    /// The same capture, one vector per channel.
    pub fn deinterleave(&self) -> Capture {
        Capture {
            sample_rate_hz: self.sample_rate_hz,
            channels: deinterleave(self.frames()),
        }
    }
}

/// Read a capture from `path`, checking it against the manifest's channel
/// count and sample rate. Every problem is reported with the file's path.
pub fn read_capture(
    path: &Path,
    channels: usize,
    sample_rate_hz: u32,
) -> Result<Capture, RunError> {
    Ok(read_frames(path, channels, sample_rate_hz)?.deinterleave())
}

/// [`read_capture`], keeping the frames interleaved as stored.
pub fn read_frames(
    path: &Path,
    channels: usize,
    sample_rate_hz: u32,
) -> Result<FrameCapture, RunError> {
    read_frames_reusing(path, channels, sample_rate_hz, Vec::new(), None)
}

/// [`read_frames`] into `buffer`'s allocation (say, the `data` of the
/// previous capture), which spares allocating and clearing it again; with
/// `pick`, channel `pick` (from 0) is also copied out into
/// [`FrameCapture::picked`] while the data passes by.
pub fn read_frames_reusing(
    path: &Path,
    channels: usize,
    sample_rate_hz: u32,
    buffer: Vec<f32>,
    pick: Option<usize>,
) -> Result<FrameCapture, RunError> {
    let file = std::fs::File::open(path).map_err(|e| RunError::io(path, e))?;
    read_frames_inner(
        std::io::BufReader::new(file),
        path,
        channels,
        sample_rate_hz,
        buffer,
        pick.filter(|c| *c < channels),
    )
}

/// Like [`read_capture`] over any reader; `path` names it in messages.
pub fn read_capture_from<R: Read>(
    reader: R,
    path: &Path,
    channels: usize,
    sample_rate_hz: u32,
) -> Result<Capture, RunError> {
    Ok(read_frames_inner(reader, path, channels, sample_rate_hz, Vec::new(), None)?.deinterleave())
}

/// The reader behind [`read_frames_reusing`] and [`read_capture_from`].
fn read_frames_inner<R: Read>(
    reader: R,
    path: &Path,
    channels: usize,
    sample_rate_hz: u32,
    buffer: Vec<f32>,
    pick: Option<usize>,
) -> Result<FrameCapture, RunError> {
    let bad = |message: String| RunError::Wav {
        path: path.to_path_buf(),
        message,
    };
    let wav =
        hound::WavReader::new(reader).map_err(|e| bad(format!("not a readable WAV file: {e}")))?;
    let spec = wav.spec();
    if usize::from(spec.channels) != channels {
        return Err(bad(format!(
            "has {} channels but run.json lists {channels}",
            spec.channels
        )));
    }
    if spec.sample_rate != sample_rate_hz {
        return Err(bad(format!(
            "sample rate is {} Hz but run.json says {sample_rate_hz} Hz",
            spec.sample_rate
        )));
    }
    let total = wav.len() as usize;
    if total == 0 {
        return Err(bad("holds no samples (empty capture)".into()));
    }
    if !total.is_multiple_of(channels) {
        return Err(bad(format!(
            "data holds {total} samples, not a whole number of {channels}-channel frames"
        )));
    }
    let frames = total / channels;
    let format = match (spec.sample_format, spec.bits_per_sample) {
        (hound::SampleFormat::Float, 32) => SampleCoding::F32,
        (hound::SampleFormat::Int, 16) => SampleCoding::I16,
        (hound::SampleFormat::Int, 24) => SampleCoding::I24,
        (hound::SampleFormat::Int, 32) => SampleCoding::I32,
        (fmt, bits) => {
            return Err(bad(format!(
            "sample format {bits}-bit {fmt:?} is not one of 16/24/32-bit integer or 32-bit float"
        )))
        }
    };
    // hound has read the header and stands at the first sample: read the
    // data in blocks and decode them straight into the frames.
    let block_align = usize::from(spec.bits_per_sample / 8) * channels;
    if usize::from(spec.bits_per_sample / 8) * 8 != usize::from(spec.bits_per_sample) {
        return Err(bad("sample size is not a whole number of bytes".into()));
    }
    let mut data = wav.into_inner();
    // Every element is overwritten below (or the read fails), so a reused
    // buffer is only cut to length or extended.
    let mut out = buffer;
    if out.len() >= frames * channels {
        out.truncate(frames * channels);
    } else {
        out.resize(frames * channels, 0.0);
    }
    // Per channel, the largest |sample| as bits (sign cleared): for finite
    // floats the order of the bits is the order of the values, and infinity
    // or NaN sort above every finite value.
    let mut largest = vec![0u32; channels];
    let mut picked = Vec::with_capacity(if pick.is_some() { frames } else { 0 });
    let frames_per_block = (1 << 20) / block_align.max(1) + 1;
    let mut buf = match format {
        SampleCoding::F32 => Vec::new(),
        _ => vec![0u8; frames_per_block * block_align],
    };
    let mut done = 0usize;
    while done < frames {
        let n = frames_per_block.min(frames - done);
        let dst = &mut out[done * channels..(done + n) * channels];
        // 32-bit floats are read straight into the frames; other formats
        // through a byte buffer.
        let bytes = match format {
            SampleCoding::F32 => bytemuck::cast_slice_mut::<f32, u8>(dst),
            _ => &mut buf[..n * block_align],
        };
        if let Err((e, got)) = read_full(&mut data, bytes) {
            return Err(bad(format!(
                "truncated or unreadable after frame {} of {frames} ({e})",
                done + got / block_align
            )));
        }
        format.decode(&buf[..buf.len().min(n * block_align)], dst);
        for row in dst.chunks_exact(channels) {
            for (m, v) in largest.iter_mut().zip(row) {
                *m = (*m).max(v.to_bits() & 0x7fff_ffff);
            }
        }
        if let Some(c) = pick {
            picked.extend(dst.chunks_exact(channels).map(|row| row[c]));
        }
        if largest.iter().any(|m| *m >= NON_FINITE) {
            let i = dst.iter().position(|v| !v.is_finite()).unwrap_or_default();
            return Err(bad(format!(
                "non-finite sample ({}) at frame {} channel {}",
                dst[i],
                done + i / channels,
                i % channels + 1
            )));
        }
        done += n;
    }
    Ok(FrameCapture {
        sample_rate_hz,
        channels,
        data: out,
        peaks: largest.into_iter().map(f32::from_bits).collect(),
        picked: pick.map(|c| (c, picked)),
    })
}

/// Bits of a float (sign cleared) at or above which it is infinite or NaN.
const NON_FINITE: u32 = 0x7f80_0000;

/// How the samples of a WAV file are stored.
#[derive(Debug, Clone, Copy)]
enum SampleCoding {
    F32,
    I16,
    I24,
    I32,
}

impl SampleCoding {
    /// Decode the interleaved samples in `bytes` into `out`. 32-bit floats
    /// are already in place (read into `out` as little-endian bytes), so
    /// `bytes` is empty for them.
    fn decode(self, bytes: &[u8], out: &mut [f32]) {
        match self {
            SampleCoding::F32 => {
                if cfg!(target_endian = "big") {
                    for v in out.iter_mut() {
                        *v = f32::from_bits(u32::from_le(v.to_bits()));
                    }
                }
            }
            SampleCoding::I16 => {
                for (o, b) in out.iter_mut().zip(bytes.chunks_exact(2)) {
                    *o = f32::from(i16::from_le_bytes([b[0], b[1]])) / 32_768.0;
                }
            }
            SampleCoding::I24 => {
                for (o, b) in out.iter_mut().zip(bytes.chunks_exact(3)) {
                    let v = i32::from_le_bytes([0, b[0], b[1], b[2]]) >> 8;
                    *o = v as f32 / 8_388_608.0;
                }
            }
            SampleCoding::I32 => {
                for (o, b) in out.iter_mut().zip(bytes.chunks_exact(4)) {
                    let v = i32::from_le_bytes([b[0], b[1], b[2], b[3]]);
                    *o = (f64::from(v) / 2_147_483_648.0) as f32;
                }
            }
        }
    }
}

/// Fill `buf` from `r`; on a short read, the error and the bytes read.
fn read_full<R: Read>(r: &mut R, buf: &mut [u8]) -> Result<(), (std::io::Error, usize)> {
    let mut got = 0;
    while got < buf.len() {
        match r.read(&mut buf[got..]) {
            Ok(0) => {
                return Err((std::io::Error::from(std::io::ErrorKind::UnexpectedEof), got));
            }
            Ok(n) => got += n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err((e, got)),
        }
    }
    Ok(())
}

/// Write deinterleaved channels (full scale ±1.0) to `path` in `format`.
/// Integer formats round to the nearest code and clip at full scale.
///
/// # Panics
/// When the channels differ in length.
pub fn write_capture(
    path: &Path,
    channels: &[Vec<f64>],
    sample_rate_hz: u32,
    format: WavFormat,
) -> Result<(), RunError> {
    let file = std::fs::File::create(path).map_err(|e| RunError::io(path, e))?;
    write_capture_to(
        std::io::BufWriter::new(file),
        path,
        channels,
        sample_rate_hz,
        format,
    )
}

/// Like [`write_capture`] over any seekable writer.
pub fn write_capture_to<W: Write + Seek>(
    writer: W,
    path: &Path,
    channels: &[Vec<f64>],
    sample_rate_hz: u32,
    format: WavFormat,
) -> Result<(), RunError> {
    let frames = channels.first().map_or(0, Vec::len);
    assert!(
        channels.iter().all(|c| c.len() == frames),
        "channels differ in length"
    );
    let err = |e: hound::Error| RunError::Wav {
        path: path.to_path_buf(),
        message: format!("cannot write: {e}"),
    };
    let spec = format.spec(channels.len() as u16, sample_rate_hz);
    let mut wav = hound::WavWriter::new(writer, spec).map_err(err)?;
    let int_scale = f64::from(1u32 << (spec.bits_per_sample - 1).min(31));
    for n in 0..frames {
        for ch in channels {
            let v = ch[n];
            match format {
                WavFormat::Float32 => wav.write_sample(v as f32),
                _ => {
                    let code = (v * int_scale).round().clamp(-int_scale, int_scale - 1.0);
                    wav.write_sample(code as i32)
                }
            }
            .map_err(err)?;
        }
    }
    wav.finalize().map_err(err)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Cursor;

    fn round_trip(format: WavFormat) -> Capture {
        let chans = vec![vec![0.5, -0.25, 0.0, -1.0], vec![0.125, 0.999, -0.5, 0.25]];
        let mut buf = Cursor::new(Vec::new());
        write_capture_to(&mut buf, Path::new("mem.wav"), &chans, 48_000, format).unwrap();
        buf.set_position(0);
        read_capture_from(buf, Path::new("mem.wav"), 2, 48_000).unwrap()
    }

    #[test]
    fn round_trips_every_format() {
        for f in [
            WavFormat::Int16,
            WavFormat::Int24,
            WavFormat::Int32,
            WavFormat::Float32,
        ] {
            let c = round_trip(f);
            assert_eq!(c.frames(), 4);
            assert_eq!(c.channels[0], vec![0.5, -0.25, 0.0, -1.0], "{f:?}");
            assert!((c.channels[1][1] - 0.999).abs() < 1e-4, "{f:?}");
        }
    }

    #[test]
    fn names_the_problem() {
        let chans = vec![vec![0.0; 10]; 2];
        let mut buf = Cursor::new(Vec::new());
        write_capture_to(
            &mut buf,
            Path::new("x.wav"),
            &chans,
            48_000,
            WavFormat::Int16,
        )
        .unwrap();
        let bytes = buf.into_inner();
        let e = read_capture_from(Cursor::new(bytes.clone()), Path::new("x.wav"), 3, 48_000)
            .unwrap_err();
        assert!(
            e.to_string()
                .contains("has 2 channels but run.json lists 3"),
            "{e}"
        );
        let e = read_capture_from(Cursor::new(bytes.clone()), Path::new("x.wav"), 2, 44_100)
            .unwrap_err();
        assert!(e.to_string().contains("sample rate is 48000 Hz"), "{e}");
        let cut = &bytes[..bytes.len() - 7];
        let e = read_capture_from(Cursor::new(cut.to_vec()), Path::new("x.wav"), 2, 48_000)
            .unwrap_err();
        assert!(e.to_string().starts_with("x.wav: truncated"), "{e}");
    }
}
