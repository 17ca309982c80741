//! [`CpalRig`]: a [`Rig`] over one cpal input device and one cpal output
//! device (any host: ALSA, JACK, the simulated front end).

use super::{AudioError, CaptureReport, CaptureRequest, Rig};
use crate::run::WavFormat;
use cpal::traits::{DeviceTrait, StreamTrait};
use std::io::BufWriter;
use std::sync::atomic::{AtomicBool, AtomicU64, AtomicUsize, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

/// Counters shared with the callbacks (atomics only).
#[derive(Debug, Default)]
struct Stats {
    frames_in: AtomicU64,
    overflows: AtomicU64,
    xruns: AtomicU64,
    fatal: AtomicU64,
    /// What the last fatal error was (see [`fatal_text`]).
    fatal_kind: AtomicU64,
    stimuli_done: AtomicU64,
    /// Number of the capture under way; stimuli of earlier ones are dropped.
    generation: AtomicU64,
}

/// A stimulus in flight: handed to the output callback through a ring and
/// handed back through another, so the callback never frees memory.
struct Stimulus {
    samples: Vec<f32>,
    channel: usize,
    /// Frames of silence still to play before the first sample.
    delay: usize,
    pos: usize,
    generation: u64,
}

/// How to open a [`CpalRig`].
pub struct RigConfig {
    /// Input device.
    pub input: cpal::Device,
    /// Output device (`None`: capture only, e.g. an external generator).
    pub output: Option<cpal::Device>,
    /// Inputs to capture.
    pub inputs: u16,
    /// Output channels to open.
    pub outputs: u16,
    /// Sample rate, Hz.
    pub sample_rate: u32,
    /// How much faster than real time the device clock runs (1 for real
    /// hardware; the simulated device may run faster).
    pub speed: f64,
    /// Text for [`Rig::describe`].
    pub label: String,
}

/// A rig over cpal streams with a lock-free capture ring.
pub struct CpalRig {
    input: cpal::Stream,
    output: Option<cpal::Stream>,
    ring: rtrb::Consumer<f32>,
    cmd: rtrb::Producer<Box<Stimulus>>,
    done: rtrb::Consumer<Box<Stimulus>>,
    stats: Arc<Stats>,
    inputs: usize,
    outputs: usize,
    rate: u32,
    speed: f64,
    label: String,
}

fn dev_err(what: &str, e: impl std::fmt::Display) -> AudioError {
    AudioError::Device(format!("{what}: {e}"))
}

fn error_callback(stats: Arc<Stats>) -> impl FnMut(cpal::Error) + Send + 'static {
    move |e: cpal::Error| match e.kind() {
        cpal::ErrorKind::Xrun => {
            stats.xruns.fetch_add(1, Ordering::Relaxed);
        }
        // Not fatal: the stream goes on without real-time priority.
        cpal::ErrorKind::RealtimeDenied => {}
        kind => {
            let code = match kind {
                cpal::ErrorKind::DeviceNotAvailable => 1,
                cpal::ErrorKind::StreamInvalidated => 2,
                _ => 9,
            };
            stats.fatal_kind.store(code, Ordering::Relaxed);
            stats.fatal.fetch_add(1, Ordering::Relaxed);
        }
    }
}

/// Words for a fatal error code stored by the error callback.
fn fatal_text(code: u64) -> &'static str {
    match code {
        1 => "the audio device became unavailable (unplugged, switched off, or the audio server stopped)",
        2 => "the audio stream was invalidated (the device or server changed its configuration)",
        _ => "the audio device reported an error and stopped",
    }
}

impl CpalRig {
    /// Build both streams (paused), with a capture ring touched once
    /// before streaming so the callback never faults a page in.
    pub fn open(cfg: RigConfig) -> Result<Self, AudioError> {
        let stats = Arc::new(Stats::default());
        let ch = cfg.inputs as usize;
        // Four seconds of device time, or half a second of wall time when
        // the (simulated) device clock runs faster than real time.
        let seconds = (0.5 * cfg.speed).max(4.0);
        let cap = ((seconds * f64::from(cfg.sample_rate)) as usize * ch).max(1 << 16);
        let (mut prod, mut ring) = rtrb::RingBuffer::<f32>::new(cap);
        // Pre-fault the ring: write and read it once in full.
        prod.write_chunk_uninit(cap)
            .map_err(|e| dev_err("ring", e))?
            .fill_from_iter(std::iter::repeat(0.0));
        ring.read_chunk(cap)
            .map_err(|e| dev_err("ring", e))?
            .commit_all();
        let in_cfg = cpal::StreamConfig {
            channels: cfg.inputs,
            sample_rate: cfg.sample_rate,
            buffer_size: cpal::BufferSize::Default,
        };
        let s = stats.clone();
        let input = cfg
            .input
            .build_input_stream::<f32, _, _>(
                in_cfg,
                move |data: &[f32], _: &cpal::InputCallbackInfo| {
                    s.frames_in
                        .fetch_add((data.len() / ch) as u64, Ordering::Relaxed);
                    if prod.push_entire_slice(data).is_err() {
                        s.overflows.fetch_add(1, Ordering::Relaxed);
                    }
                },
                error_callback(stats.clone()),
                Some(Duration::from_secs(5)),
            )
            .map_err(|e| dev_err("opening the input stream", e))?;
        let (cmd, mut cmd_rx) = rtrb::RingBuffer::<Box<Stimulus>>::new(4);
        let (mut done_tx, done) = rtrb::RingBuffer::<Box<Stimulus>>::new(4);
        let output = match &cfg.output {
            None => None,
            Some(dev) => {
                let och = cfg.outputs as usize;
                let out_cfg = cpal::StreamConfig {
                    channels: cfg.outputs,
                    sample_rate: cfg.sample_rate,
                    buffer_size: cpal::BufferSize::Default,
                };
                let s = stats.clone();
                let mut current: Option<Box<Stimulus>> = None;
                let stream = dev
                    .build_output_stream::<f32, _, _>(
                        out_cfg,
                        move |data: &mut [f32], _: &cpal::OutputCallbackInfo| {
                            data.fill(0.0);
                            // Hand back whatever an aborted capture left behind.
                            let generation = s.generation.load(Ordering::Relaxed);
                            loop {
                                if current.is_none() {
                                    current = cmd_rx.pop().ok();
                                }
                                match current.take() {
                                    Some(b) if b.generation != generation => {
                                        let _ = done_tx.push(b);
                                    }
                                    other => {
                                        current = other;
                                        break;
                                    }
                                }
                            }
                            let Some(st) = current.as_mut() else { return };
                            for frame in data.chunks_exact_mut(och) {
                                if st.delay > 0 {
                                    st.delay -= 1;
                                    continue;
                                }
                                if st.pos >= st.samples.len() {
                                    break;
                                }
                                frame[st.channel] = st.samples[st.pos];
                                st.pos += 1;
                            }
                            if st.pos >= st.samples.len() {
                                if let Some(b) = current.take() {
                                    // The ring has room: one stimulus is in flight at a time.
                                    let _ = done_tx.push(b);
                                }
                                s.stimuli_done.fetch_add(1, Ordering::Relaxed);
                            }
                        },
                        error_callback(stats.clone()),
                        Some(Duration::from_secs(5)),
                    )
                    .map_err(|e| dev_err("opening the output stream", e))?;
                Some(stream)
            }
        };
        Ok(Self {
            input,
            output,
            ring,
            cmd,
            done,
            stats,
            inputs: ch,
            outputs: if cfg.output.is_some() {
                cfg.outputs as usize
            } else {
                0
            },
            rate: cfg.sample_rate,
            speed: cfg.speed,
            label: cfg.label,
        })
    }

    fn start(&self) -> Result<(), AudioError> {
        self.input
            .play()
            .map_err(|e| dev_err("starting the input", e))?;
        if let Some(o) = &self.output {
            o.play().map_err(|e| dev_err("starting the output", e))?;
        }
        Ok(())
    }

    fn stop(&mut self) {
        let _ = self.input.pause();
        if let Some(o) = &self.output {
            let _ = o.pause();
        }
        while self.done.pop().is_ok() {}
    }

    fn drain(&mut self) {
        let n = self.ring.slots();
        if let Ok(c) = self.ring.read_chunk(n) {
            c.commit_all();
        }
    }

    fn counters(&self) -> [u64; 6] {
        counters(&self.stats)
    }

    /// Stream the capture: a writer thread drains the ring into the WAV
    /// file while this thread hands the stimulus to the output after the
    /// pre-roll and watches for lost blocks, device errors and interrupts.
    fn stream_to_wav(
        &mut self,
        req: &CaptureRequest,
        cancel: &AtomicBool,
        sink: &mut WavSink,
    ) -> Result<(), AudioError> {
        let ch = self.inputs;
        let start = self.counters();
        let t0 = Instant::now();
        let budget = Duration::from_secs_f64(
            2.0 + 3.0 * req.frames as f64 / f64::from(self.rate) / self.speed,
        );
        let consumed = AtomicUsize::new(0);
        let stop = AtomicBool::new(false);
        let (ring, stats) = (&mut self.ring, &self.stats);
        let frames = req.frames;
        std::thread::scope(|scope| {
            let writer = scope.spawn(|| -> Result<(), AudioError> {
                let mut done = 0usize;
                while done < frames && !stop.load(Ordering::Relaxed) {
                    let take = (ring.slots().min((frames - done) * ch) / ch) * ch;
                    if take == 0 {
                        std::thread::sleep(Duration::from_micros(500));
                        continue;
                    }
                    let chunk = ring.read_chunk(take).expect("slots were counted");
                    let (a, b) = chunk.as_slices();
                    sink.write(a, b)?;
                    chunk.commit_all();
                    done += take / ch;
                    consumed.store(done, Ordering::Relaxed);
                }
                Ok(())
            });
            let watch = loop {
                let now = counters(stats);
                if let Err(e) = lost(&start, &now) {
                    break Err(e);
                }
                if writer.is_finished() {
                    break Ok(());
                }
                if cancel.load(Ordering::Relaxed) {
                    break Err(AudioError::Interrupted);
                }
                let got = consumed.load(Ordering::Relaxed);
                if t0.elapsed() > budget {
                    break Err(AudioError::Lost(format!(
                        "the device delivered {got} of {frames} frames in {:.1} s",
                        t0.elapsed().as_secs_f64()
                    )));
                }
                std::thread::sleep(Duration::from_millis(1));
            };
            stop.store(true, Ordering::Relaxed);
            let written = writer.join().expect("the writer thread does not panic");
            watch.and(written)
        })?;
        let elapsed = t0.elapsed().as_secs_f64();
        let end = self.counters();
        lost(&start, &end)?;
        let received = end[0] - start[0];
        let expected = elapsed * f64::from(self.rate) * self.speed;
        // Gross losses only (a stalled device): single lost blocks show up as
        // xruns or ring overflows. Allow 10 % and a quarter second.
        if (received as f64) < 0.9 * expected - 0.25 * f64::from(self.rate) * self.speed {
            return Err(AudioError::Lost(format!(
                "received {received} frames in {elapsed:.2} s where the clock implies about {expected:.0}"
            )));
        }
        if req.stimulus.is_some() && end[4] == start[4] {
            return Err(AudioError::Lost(
                "the stimulus did not finish playing within the capture".into(),
            ));
        }
        Ok(())
    }
}

fn counters(s: &Stats) -> [u64; 6] {
    [
        s.frames_in.load(Ordering::Relaxed),
        s.overflows.load(Ordering::Relaxed),
        s.xruns.load(Ordering::Relaxed),
        s.fatal.load(Ordering::Relaxed),
        s.stimuli_done.load(Ordering::Relaxed),
        s.fatal_kind.load(Ordering::Relaxed),
    ]
}

/// Compare counters taken before and during a capture.
fn lost(start: &[u64; 6], now: &[u64; 6]) -> Result<(), AudioError> {
    if now[3] > start[3] {
        return Err(AudioError::Device(fatal_text(now[5]).into()));
    }
    if now[1] > start[1] {
        return Err(AudioError::Lost(format!(
            "{} block(s) did not fit the capture ring",
            now[1] - start[1]
        )));
    }
    if now[2] > start[2] {
        return Err(AudioError::Lost(format!(
            "{} xrun(s) reported by the audio host",
            now[2] - start[2]
        )));
    }
    Ok(())
}

/// The WAV file being written, with peak and clipping tallies.
struct WavSink {
    writer: Option<hound::WavWriter<BufWriter<std::fs::File>>>,
    path: std::path::PathBuf,
    format: WavFormat,
    channels: usize,
    col: usize,
    peak: Vec<f32>,
    clipped: Vec<usize>,
    clip: f32,
    frames: usize,
}

impl WavSink {
    fn create(req: &CaptureRequest, channels: usize, rate: u32) -> Result<Self, AudioError> {
        let (bits, fmt) = match req.format {
            WavFormat::Int16 => (16, hound::SampleFormat::Int),
            WavFormat::Int24 => (24, hound::SampleFormat::Int),
            WavFormat::Int32 => (32, hound::SampleFormat::Int),
            WavFormat::Float32 => (32, hound::SampleFormat::Float),
        };
        let spec = hound::WavSpec {
            channels: channels as u16,
            sample_rate: rate,
            bits_per_sample: bits,
            sample_format: fmt,
        };
        let writer = hound::WavWriter::create(&req.wav, spec).map_err(|e| AudioError::File {
            path: req.wav.clone(),
            message: e.to_string(),
        })?;
        Ok(Self {
            writer: Some(writer),
            path: req.wav.clone(),
            format: req.format,
            channels,
            col: 0,
            peak: vec![0.0; channels],
            clipped: vec![0; channels],
            clip: req.clip_level,
            frames: 0,
        })
    }

    fn fail(&self, e: impl std::fmt::Display) -> AudioError {
        AudioError::File {
            path: self.path.clone(),
            message: e.to_string(),
        }
    }

    fn write(&mut self, a: &[f32], b: &[f32]) -> Result<(), AudioError> {
        let w = self.writer.as_mut().expect("open until finished");
        for &x in a.iter().chain(b) {
            let m = x.abs();
            let c = self.col;
            if m > self.peak[c] {
                self.peak[c] = m;
            }
            if m >= self.clip {
                self.clipped[c] += 1;
            }
            let r = match self.format {
                WavFormat::Float32 => w.write_sample(x),
                f => {
                    let bits = match f {
                        WavFormat::Int16 => 16,
                        WavFormat::Int24 => 24,
                        _ => 32,
                    };
                    let scale = 2f64.powi(bits - 1);
                    let code = (f64::from(x) * scale).round().clamp(-scale, scale - 1.0);
                    w.write_sample(code as i32)
                }
            };
            r.map_err(|e| AudioError::File {
                path: self.path.clone(),
                message: e.to_string(),
            })?;
            self.col += 1;
            if self.col == self.channels {
                self.col = 0;
                self.frames += 1;
            }
        }
        Ok(())
    }

    fn finish(&mut self) -> Result<(), AudioError> {
        if let Some(w) = self.writer.take() {
            w.finalize().map_err(|e| self.fail(e))?;
        }
        Ok(())
    }
}

impl Rig for CpalRig {
    fn describe(&self) -> String {
        self.label.clone()
    }

    fn sample_rate(&self) -> u32 {
        self.rate
    }

    fn inputs(&self) -> usize {
        self.inputs
    }

    fn outputs(&self) -> usize {
        self.outputs
    }

    fn capture(
        &mut self,
        req: &CaptureRequest,
        cancel: &AtomicBool,
    ) -> Result<CaptureReport, AudioError> {
        if req.stimulus.is_some() && req.output >= self.outputs {
            return Err(AudioError::Device(format!(
                "output {} is not open ({} output channel(s))",
                req.output + 1,
                self.outputs
            )));
        }
        while self.done.pop().is_ok() {}
        // Stimuli of earlier (aborted) captures are dropped by the callback;
        // this one starts after `pre_roll` frames of the output's own clock,
        // however late this thread runs.
        let generation = self.stats.generation.fetch_add(1, Ordering::Relaxed) + 1;
        if let Some(samples) = req.stimulus {
            let st = Box::new(Stimulus {
                samples: samples.to_vec(),
                channel: req.output,
                delay: req.pre_roll,
                pos: 0,
                generation,
            });
            if self.cmd.push(st).is_err() {
                return Err(AudioError::Device(
                    "the output did not take the stimulus".into(),
                ));
            }
        }
        self.drain();
        let mut sink = WavSink::create(req, self.inputs, self.rate)?;
        let t0 = Instant::now();
        self.start()?;
        let result = self.stream_to_wav(req, cancel, &mut sink);
        self.stop();
        self.drain();
        let finished = sink.finish();
        if let Err(e) = result.and(finished) {
            let _ = std::fs::remove_file(&req.wav);
            return Err(e);
        }
        Ok(CaptureReport {
            frames: sink.frames,
            peak: sink.peak.clone(),
            clipped: sink.clipped.clone(),
            elapsed_s: t0.elapsed().as_secs_f64(),
        })
    }
}
