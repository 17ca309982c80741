//! Audio I/O: the small trait the measuring code talks to ([`Rig`]: "play
//! this stimulus on that output and capture these inputs for this long"),
//! its implementation over any pair of cpal devices ([`stream::CpalRig`]),
//! the simulated front end as a cpal custom host ([`sim`]) and JACK port
//! handling ([`jack`]).
//!
//! The audio callbacks only copy: the input callback pushes each block into
//! a preallocated lock-free ring and counts what it could not push; the
//! output callback plays a stimulus handed over through another ring. An
//! ordinary thread drains the input ring into the WAV file. Any xrun, ring
//! overflow or shortfall of frames against the time elapsed fails the
//! capture.

pub mod jack;
pub mod sim;
pub mod stream;

use crate::run::WavFormat;
use std::path::PathBuf;
use std::sync::atomic::AtomicBool;
use thiserror::Error;

/// Errors of the audio layer.
#[derive(Debug, Error)]
pub enum AudioError {
    /// A device or host could not be opened or configured.
    #[error("audio device: {0}")]
    Device(String),
    /// The capture lost frames or the device stalled; the capture is void.
    #[error("capture lost data: {0}")]
    Lost(String),
    /// The operator interrupted the capture.
    #[error("interrupted")]
    Interrupted,
    /// The capture file could not be written.
    #[error("{path}: {message}")]
    File {
        /// The capture file.
        path: PathBuf,
        /// What went wrong.
        message: String,
    },
}

/// One capture to make.
#[derive(Debug, Clone)]
pub struct CaptureRequest<'a> {
    /// Mono stimulus (full scale 1.0) to play, or `None` (idle capture, or
    /// an external generator).
    pub stimulus: Option<&'a [f32]>,
    /// Output channel that plays it, from 0.
    pub output: usize,
    /// Frames of silence the output plays (on its own clock) before the stimulus.
    pub pre_roll: usize,
    /// Frames to capture in all.
    pub frames: usize,
    /// The WAV file to write.
    pub wav: PathBuf,
    /// Its sample format.
    pub format: WavFormat,
    /// Samples at or beyond this magnitude count as clipped.
    pub clip_level: f32,
}

/// What a capture delivered.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CaptureReport {
    /// Frames written.
    pub frames: usize,
    /// Largest magnitude per input.
    pub peak: Vec<f32>,
    /// Clipped samples per input.
    pub clipped: Vec<usize>,
    /// Wall-clock duration, seconds.
    pub elapsed_s: f64,
}

/// A front end wired to the computer: the only face of audio hardware the
/// measuring code sees.
pub trait Rig {
    /// One line naming the host and devices.
    fn describe(&self) -> String;
    /// Sample rate of inputs and outputs, Hz.
    fn sample_rate(&self) -> u32;
    /// Inputs captured.
    fn inputs(&self) -> usize;
    /// Outputs available for the stimulus.
    fn outputs(&self) -> usize;
    /// Play the stimulus (if any) and capture every input into a WAV file.
    /// Fails, leaving no usable file, when any block was lost.
    fn capture(
        &mut self,
        req: &CaptureRequest,
        cancel: &AtomicBool,
    ) -> Result<CaptureReport, AudioError>;
    /// A rig that patches itself (the simulated one) connects the stimulus
    /// output to `input` (from 0), or disconnects it (`None`), and returns
    /// true. Real rigs return false: a person or a switch command patches.
    fn self_patch(&mut self, _output: usize, _input: Option<usize>) -> bool {
        false
    }
    /// A rig that simulates an external generator sets it to a tone of
    /// `freq_hz` at `level_dbfs` into `input` (from 0) and returns true.
    fn self_generator(&mut self, _input: Option<usize>, _freq_hz: f64, _level_dbfs: f64) -> bool {
        false
    }
    /// A rig that patches itself splits the stimulus output (`Some`), or
    /// the simulated generator's tone of `(freq_hz, level_dbfs)` (`None`
    /// output), to every input at once and returns true (common drive).
    fn self_split(&mut self, _output: Option<usize>, _tone: (f64, f64)) -> bool {
        false
    }
}
