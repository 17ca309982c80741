//! The simulated front end as a cpal custom host: one device with as many
//! outputs as inputs, whose "hardware" thread plays the output block, routes
//! the patched output (or a simulated external generator) to one input (or,
//! for a common drive, to every input),
//! runs the front-end model's [`StreamProcessor`] and delivers the input
//! block. The clock may run faster than real time.

use super::stream::{CpalRig, RigConfig};
use super::{AudioError, CaptureReport, CaptureRequest, Rig};
use crate::model::stream::StreamProcessor;
use crate::model::Resolved;
use cpal::traits::{DeviceTrait, HostTrait, StreamTrait};
use cpal::{
    BufferSize, Data, DeviceDescription, DeviceDescriptionBuilder, DeviceId, Error, ErrorKind,
    FrameCount, HostId, InputCallbackInfo, InputStreamTimestamp, OutputCallbackInfo,
    OutputStreamTimestamp, SampleFormat, StreamConfig, StreamInstant, SupportedBufferSize,
    SupportedStreamConfig, SupportedStreamConfigRange,
};
use std::f64::consts::PI;
use std::fmt;
use std::hash::{Hash, Hasher};
use std::sync::atomic::{AtomicBool, AtomicU64, AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

type OutCb = Box<dyn FnMut(&mut Data, &OutputCallbackInfo) + Send>;
type InCb = Box<dyn FnMut(&Data, &InputCallbackInfo) + Send>;
type ErrCb = Box<dyn FnMut(Error) + Send>;

const NONE: usize = usize::MAX;

/// Faults the simulated rig can be told to make, for tests and training.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct SimFaults {
    /// When asked to patch input `.0` (from 1), patch input `.1` instead.
    pub miswire: Option<(usize, usize)>,
    /// Report one xrun during the capture with this number (from 1).
    pub xrun_in_capture: Option<u64>,
    /// Fail as a device that disappeared, during the capture with this number.
    pub fail_in_capture: Option<u64>,
    /// Let the operator confirm each patch (the bench still follows the
    /// instruction), to try the guided workflow without hardware.
    pub ask_operator: bool,
}

/// What the simulated bench is wired to; shared with the clock thread.
#[derive(Debug, Default)]
struct Bench {
    /// Output (from 0) patched to `input`.
    output: AtomicUsize,
    /// Input (from 0) receiving the patched output or generator, or NONE.
    input: AtomicUsize,
    /// Set: the output or generator is split to every input (common drive).
    all: AtomicBool,
    /// External generator: frequency and peak amplitude (f64 bits); 0 = off.
    gen_hz: AtomicU64,
    gen_amp: AtomicU64,
    /// Pending xrun reports.
    xruns: AtomicU64,
    /// Set: report the device gone.
    gone: AtomicBool,
}

#[derive(Default)]
struct Engine {
    out: Option<(OutCb, ErrCb, Arc<AtomicBool>)>,
    inp: Option<(InCb, ErrCb, Arc<AtomicBool>)>,
    running: bool,
}

/// The simulated device.
#[derive(Clone)]
pub struct SimDevice {
    ch: u16,
    rate: u32,
    period: FrameCount,
    speed: f64,
    epoch: Instant,
    processor: Arc<Mutex<StreamProcessor>>,
    bench: Arc<Bench>,
    eng: Arc<Mutex<Engine>>,
}

impl SimDevice {
    /// A device for the resolved model; `latency` frames from connector to
    /// converter output; the clock runs `speed` times real time.
    pub fn new(r: &Resolved, latency: usize, speed: f64, seed: u64) -> Self {
        let bench = Bench::default();
        bench.input.store(NONE, Ordering::Relaxed);
        Self {
            ch: r.channels.len() as u16,
            rate: r.model.front_end.sample_rate_hz,
            period: 256,
            speed,
            epoch: Instant::now(),
            processor: Arc::new(Mutex::new(StreamProcessor::new(r, latency, seed))),
            bench: Arc::new(bench),
            eng: Default::default(),
        }
    }

    fn now(&self) -> StreamInstant {
        let e = self.epoch.elapsed().mul_f64(self.speed);
        StreamInstant::new(e.as_secs(), e.subsec_nanos())
    }

    fn range(&self) -> SupportedStreamConfigRange {
        let bs = SupportedBufferSize::Range {
            min: self.period,
            max: self.period,
        };
        SupportedStreamConfigRange::new(self.ch, self.rate, self.rate, bs, SampleFormat::F32)
    }

    fn check(&self, c: &StreamConfig, f: SampleFormat) -> Result<(), Error> {
        let bs_ok = match c.buffer_size {
            BufferSize::Default => true,
            BufferSize::Fixed(n) => n == self.period,
        };
        if c.channels == self.ch && c.sample_rate == self.rate && bs_ok && f == SampleFormat::F32 {
            Ok(())
        } else {
            Err(Error::with_message(
                ErrorKind::UnsupportedConfig,
                format!(
                    "the simulated front end runs {} channels of f32 at {} Hz",
                    self.ch, self.rate
                ),
            ))
        }
    }

    fn attach(
        &self,
        input: bool,
        put: impl FnOnce(&mut Engine, Arc<AtomicBool>),
    ) -> Result<SimStream, Error> {
        let on = Arc::new(AtomicBool::new(false));
        {
            let mut e = self.eng.lock().expect("engine lock");
            if (input && e.inp.is_some()) || (!input && e.out.is_some()) {
                return Err(Error::new(ErrorKind::DeviceBusy));
            }
            put(&mut e, on.clone());
            if !e.running {
                e.running = true;
                let d = self.clone();
                std::thread::spawn(move || d.clock());
            }
        }
        Ok(SimStream {
            dev: self.clone(),
            on,
            input,
        })
    }

    /// The device's own hardware thread.
    fn clock(self) {
        let ch = self.ch as usize;
        let n = self.period as usize * ch;
        let (mut tx, mut at, mut rx) = (vec![0.0f32; n], vec![0.0f32; n], vec![0.0f32; n]);
        let dt = Duration::from_secs_f64(f64::from(self.period) / f64::from(self.rate));
        let tick = dt.div_f64(self.speed);
        let mut next = Instant::now();
        let mut gen_phase = 0.0f64;
        loop {
            next += tick;
            let now = Instant::now();
            if next > now {
                std::thread::sleep(next - now);
            } else if now - next > Duration::from_secs(2) {
                // Starved for long: give up on the lost time (the frames
                // check of the capture will notice). Shorter delays are
                // caught up in a burst, as a device with deep buffers would.
                next = now;
            }
            let mut e = self.eng.lock().expect("engine lock");
            if e.out.is_none() && e.inp.is_none() {
                e.running = false;
                return;
            }
            let in_on = e
                .inp
                .as_ref()
                .is_some_and(|(_, _, on)| on.load(Ordering::Relaxed));
            if !in_on {
                // Idle between captures: wake rarely, and restart the clock
                // when streaming resumes.
                drop(e);
                std::thread::sleep(Duration::from_millis(2));
                next = Instant::now();
                continue;
            }
            let t = self.now();
            tx.fill(0.0);
            if let Some((cb, _, on)) = e.out.as_mut() {
                if on.load(Ordering::Relaxed) {
                    // SAFETY: `tx` holds `n` f32 samples and outlives the call.
                    let mut d =
                        unsafe { Data::from_parts(tx.as_mut_ptr().cast(), n, SampleFormat::F32) };
                    cb(
                        &mut d,
                        &OutputCallbackInfo::new(OutputStreamTimestamp {
                            callback: t,
                            playback: t + dt,
                        }),
                    );
                }
            }
            at.fill(0.0);
            let b = &self.bench;
            let (o, i) = (
                b.output.load(Ordering::Relaxed),
                b.input.load(Ordering::Relaxed),
            );
            // One input, or every input through an ideal splitter.
            let all = b.all.load(Ordering::Relaxed);
            let fed = if all {
                0..ch
            } else if i != NONE {
                i..i + 1
            } else {
                0..0
            };
            if o < ch {
                for (fo, fi) in tx.chunks_exact(ch).zip(at.chunks_exact_mut(ch)) {
                    fi[fed.clone()].fill(fo[o]);
                }
            }
            let gen_hz = f64::from_bits(b.gen_hz.load(Ordering::Relaxed));
            if !fed.is_empty() && gen_hz > 0.0 {
                let amp = f64::from_bits(b.gen_amp.load(Ordering::Relaxed));
                let w = 2.0 * PI * gen_hz / f64::from(self.rate);
                for fi in at.chunks_exact_mut(ch) {
                    let v = (amp * gen_phase.cos()) as f32;
                    fi[fed.clone()].iter_mut().for_each(|x| *x += v);
                    gen_phase = (gen_phase + w) % (2.0 * PI);
                }
            }
            self.processor
                .lock()
                .expect("processor lock")
                .process(&at, &mut rx);
            if let Some((cb, err, _)) = e.inp.as_mut() {
                if b.xruns.load(Ordering::Relaxed) > 0 {
                    b.xruns.fetch_sub(1, Ordering::Relaxed);
                    err(ErrorKind::Xrun.into());
                }
                if b.gone.swap(false, Ordering::Relaxed) {
                    err(Error::with_message(
                        ErrorKind::DeviceNotAvailable,
                        "simulated front end unplugged",
                    ));
                }
                // SAFETY: `rx` holds `n` f32 samples and outlives the call.
                let d = unsafe { Data::from_parts(rx.as_mut_ptr().cast(), n, SampleFormat::F32) };
                let capture = t.checked_sub(dt).unwrap_or(StreamInstant::ZERO);
                cb(
                    &d,
                    &InputCallbackInfo::new(InputStreamTimestamp {
                        callback: t,
                        capture,
                    }),
                );
            }
        }
    }
}

impl PartialEq for SimDevice {
    fn eq(&self, o: &Self) -> bool {
        Arc::ptr_eq(&self.eng, &o.eng)
    }
}
impl Eq for SimDevice {}
impl Hash for SimDevice {
    fn hash<H: Hasher>(&self, h: &mut H) {
        (Arc::as_ptr(&self.eng) as usize).hash(h)
    }
}
impl fmt::Debug for SimDevice {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "SimDevice({} ch)", self.ch)
    }
}
impl fmt::Display for SimDevice {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("simulated front end")
    }
}

/// A stream of the simulated device.
pub struct SimStream {
    dev: SimDevice,
    on: Arc<AtomicBool>,
    input: bool,
}

impl StreamTrait for SimStream {
    fn play(&self) -> Result<(), Error> {
        self.on.store(true, Ordering::Relaxed);
        Ok(())
    }
    fn pause(&self) -> Result<(), Error> {
        self.on.store(false, Ordering::Relaxed);
        Ok(())
    }
    fn buffer_size(&self) -> Result<FrameCount, Error> {
        Ok(self.dev.period)
    }
    fn now(&self) -> StreamInstant {
        self.dev.now()
    }
}

impl Drop for SimStream {
    fn drop(&mut self) {
        if let Ok(mut e) = self.dev.eng.lock() {
            if self.input {
                e.inp = None
            } else {
                e.out = None
            }
        }
    }
}

impl DeviceTrait for SimDevice {
    type SupportedInputConfigs = std::iter::Once<SupportedStreamConfigRange>;
    type SupportedOutputConfigs = std::iter::Once<SupportedStreamConfigRange>;
    type Stream = SimStream;
    fn description(&self) -> Result<DeviceDescription, Error> {
        Ok(DeviceDescriptionBuilder::new("simulated front end").build())
    }
    fn id(&self) -> Result<DeviceId, Error> {
        Ok(DeviceId::new(HostId::Custom, "septum-sim"))
    }
    fn supported_input_configs(&self) -> Result<Self::SupportedInputConfigs, Error> {
        Ok(std::iter::once(self.range()))
    }
    fn supported_output_configs(&self) -> Result<Self::SupportedOutputConfigs, Error> {
        Ok(std::iter::once(self.range()))
    }
    fn default_input_config(&self) -> Result<SupportedStreamConfig, Error> {
        Ok(self.range().with_max_sample_rate())
    }
    fn default_output_config(&self) -> Result<SupportedStreamConfig, Error> {
        Ok(self.range().with_max_sample_rate())
    }
    fn build_input_stream_raw<D, E>(
        &self,
        config: StreamConfig,
        fmt: SampleFormat,
        data: D,
        err: E,
        _timeout: Option<Duration>,
    ) -> Result<Self::Stream, Error>
    where
        D: FnMut(&Data, &InputCallbackInfo) + Send + 'static,
        E: FnMut(Error) + Send + 'static,
    {
        self.check(&config, fmt)?;
        self.attach(true, |e, on| {
            e.inp = Some((Box::new(data), Box::new(err), on))
        })
    }
    fn build_output_stream_raw<D, E>(
        &self,
        config: StreamConfig,
        fmt: SampleFormat,
        data: D,
        err: E,
        _timeout: Option<Duration>,
    ) -> Result<Self::Stream, Error>
    where
        D: FnMut(&mut Data, &OutputCallbackInfo) + Send + 'static,
        E: FnMut(Error) + Send + 'static,
    {
        self.check(&config, fmt)?;
        self.attach(false, |e, on| {
            e.out = Some((Box::new(data), Box::new(err), on))
        })
    }
}

/// The custom host holding the one simulated device.
pub struct SimHost(pub SimDevice);

impl HostTrait for SimHost {
    type Devices = std::iter::Once<SimDevice>;
    type Device = SimDevice;
    fn is_available() -> bool {
        true
    }
    fn devices(&self) -> Result<Self::Devices, Error> {
        Ok(std::iter::once(self.0.clone()))
    }
    fn default_input_device(&self) -> Option<SimDevice> {
        Some(self.0.clone())
    }
    fn default_output_device(&self) -> Option<SimDevice> {
        Some(self.0.clone())
    }
}

/// A [`Rig`] on the simulated host: a [`CpalRig`] through cpal's custom
/// host, plus the bench wiring that the simulated "operator" sets.
pub struct SimRig {
    rig: CpalRig,
    bench: Arc<Bench>,
    faults: SimFaults,
    captures: u64,
    gen_ppm: f64,
}

impl SimRig {
    /// Open the simulated front end of `r` through a cpal custom host.
    pub fn open(
        r: &Resolved,
        speed: f64,
        faults: SimFaults,
        seed: u64,
    ) -> Result<Self, AudioError> {
        let latency = (r.model.stimulus.latency_s * f64::from(r.model.front_end.sample_rate_hz))
            .round() as usize;
        let dev = SimDevice::new(r, latency, speed, seed);
        let bench = dev.bench.clone();
        let host = cpal::Host::from(cpal::platform::CustomHost::from_host(SimHost(dev)));
        let input = host
            .default_input_device()
            .ok_or_else(|| AudioError::Device("the simulated host has no device".into()))?;
        let output = host.default_output_device();
        let ch = r.channels.len() as u16;
        let rig = CpalRig::open(RigConfig {
            input,
            output,
            inputs: ch,
            outputs: ch,
            sample_rate: r.model.front_end.sample_rate_hz,
            speed,
            label: format!(
                "simulated front end \"{}\" ({ch} inputs, {ch} outputs, {} Hz, clock ×{speed})",
                r.model.front_end.label, r.model.front_end.sample_rate_hz
            ),
        })?;
        Ok(Self {
            rig,
            bench,
            faults,
            captures: 0,
            gen_ppm: r.model.stimulus.generator_offset_ppm,
        })
    }

    fn route(&self, input: Option<usize>) {
        self.bench.all.store(false, Ordering::Relaxed);
        let input = input.map(|i| match self.faults.miswire {
            Some((want, got)) if want == i + 1 => got - 1,
            _ => i,
        });
        self.bench
            .input
            .store(input.unwrap_or(NONE), Ordering::Relaxed);
    }
}

impl Rig for SimRig {
    fn describe(&self) -> String {
        self.rig.describe()
    }
    fn sample_rate(&self) -> u32 {
        self.rig.sample_rate()
    }
    fn inputs(&self) -> usize {
        self.rig.inputs()
    }
    fn outputs(&self) -> usize {
        self.rig.outputs()
    }
    fn capture(
        &mut self,
        req: &CaptureRequest,
        cancel: &AtomicBool,
    ) -> Result<CaptureReport, AudioError> {
        self.captures += 1;
        if self.faults.xrun_in_capture == Some(self.captures) {
            self.bench.xruns.store(1, Ordering::Relaxed);
        }
        if self.faults.fail_in_capture == Some(self.captures) {
            self.bench.gone.store(true, Ordering::Relaxed);
        }
        let r = self.rig.capture(req, cancel);
        self.bench.xruns.store(0, Ordering::Relaxed);
        r
    }
    fn self_patch(&mut self, output: usize, input: Option<usize>) -> bool {
        self.bench.gen_hz.store(0f64.to_bits(), Ordering::Relaxed);
        self.bench.output.store(output, Ordering::Relaxed);
        self.route(input);
        !self.faults.ask_operator
    }
    fn self_generator(&mut self, input: Option<usize>, freq_hz: f64, level_dbfs: f64) -> bool {
        self.bench.output.store(NONE, Ordering::Relaxed);
        self.bench.gen_hz.store(
            if input.is_some() {
                freq_hz * (1.0 + self.gen_ppm * 1e-6)
            } else {
                0.0
            }
            .to_bits(),
            Ordering::Relaxed,
        );
        self.bench
            .gen_amp
            .store(10f64.powf(level_dbfs / 20.0).to_bits(), Ordering::Relaxed);
        self.route(input);
        !self.faults.ask_operator
    }
    fn self_split(&mut self, output: Option<usize>, tone: (f64, f64)) -> bool {
        match output {
            Some(o) => {
                self.self_patch(o, None);
            }
            None => {
                self.self_generator(None, 0.0, tone.1);
                self.bench.gen_hz.store(
                    (tone.0 * (1.0 + self.gen_ppm * 1e-6)).to_bits(),
                    Ordering::Relaxed,
                );
            }
        }
        self.bench.all.store(true, Ordering::Relaxed);
        !self.faults.ask_operator
    }
}
