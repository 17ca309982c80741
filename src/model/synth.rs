//! Synthesising a run folder from a resolved model: one drive capture per
//! (test frequency, aggressor) and an idle capture, written as the run format
//! prescribes, plus the model and its expected figures under `model/`.

use super::truth::{
    expected_channels, expected_common, expected_coupling, expected_drive, expected_pairs, gain,
};
use super::Resolved;
use crate::dsp::level::{dbfs_to_amplitude, dbfs_to_rms};
use crate::run::{
    manifest::CommonDriveEntry, write_capture, CaptureEntry, ChannelEntry, Drive, Manifest,
    RunError, RUN_FORMAT,
};
use rand::{Rng, SeedableRng};
use rand_distr::StandardNormal;
use rayon::prelude::*;
use serde_json::{json, Map, Value};
use std::f64::consts::PI;
use std::path::Path;

/// One sinusoid: peak amplitude, frequency (Hz), phase (rad).
#[derive(Debug, Clone, Copy)]
struct Tone {
    amp: f64,
    freq: f64,
    phase: f64,
}

/// Timing of a drive capture in samples.
struct Timing {
    latency: usize,
    ramp: usize,
    steady: usize,
    tail: usize,
}

impl Timing {
    fn total(&self) -> usize {
        self.latency + 2 * self.ramp + self.steady + self.tail
    }

    /// Raised-cosine envelope.
    fn envelope(&self, n: usize) -> f64 {
        let Some(k) = n.checked_sub(self.latency) else {
            return 0.0;
        };
        let up = |i: usize| 0.5 * (1.0 - (PI * i as f64 / self.ramp as f64).cos());
        if k < self.ramp {
            up(k)
        } else if k < self.ramp + self.steady {
            1.0
        } else if k < 2 * self.ramp + self.steady {
            up(2 * self.ramp + self.steady - k)
        } else {
            0.0
        }
    }
}

/// The file name of a drive capture.
fn drive_file(index: usize, aggressor: u32, freq: f64) -> String {
    format!(
        "captures/{index:03}-drive-ch{aggressor}-{}Hz.wav",
        format_freq(freq)
    )
}

fn format_freq(f: f64) -> String {
    let s = format!("{f:.3}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// Synthesise one capture: `drive` is `(aggressor index, nominal Hz)`.
fn synth_capture(
    r: &Resolved,
    drive: Option<(usize, f64)>,
    common: Option<(f64, f64)>,
    seed: u64,
) -> Vec<Vec<f64>> {
    let m = &r.model;
    let fe = &m.front_end;
    let st = &m.stimulus;
    let fs = f64::from(fe.sample_rate_hz);
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    let secs = |s: f64| (s * fs).round() as usize;
    let timing = match drive.map(|d| d.1).or(common.map(|c| c.0)) {
        Some(_) => Timing {
            latency: secs(st.latency_s),
            ramp: secs(st.ramp_s),
            steady: st.record_samples as usize,
            tail: secs(st.tail_s),
        },
        None => Timing {
            latency: 0,
            ramp: 0,
            steady: st.idle_samples as usize,
            tail: 0,
        },
    };
    let mut tones = Vec::new();
    let tone = drive.map(|(_, f)| (f, st.level_dbfs)).or(common);
    if let Some((f, level)) = tone {
        let fg = f * (1.0 + st.generator_offset_ppm * 1e-6);
        let a = dbfs_to_amplitude(level);
        tones.push(Tone {
            amp: a,
            freq: fg,
            phase: rng.random::<f64>() * 2.0 * PI,
        });
        for (h, dbc) in st.harmonics_dbc.iter().enumerate() {
            let freq = fg * (h + 2) as f64;
            if freq < fs / 2.0 {
                tones.push(Tone {
                    amp: a * dbfs_to_amplitude(*dbc),
                    freq,
                    phase: rng.random::<f64>() * 2.0 * PI,
                });
            }
        }
    }
    let hum: Vec<Tone> = m
        .hum
        .levels_dbfs
        .iter()
        .enumerate()
        .map(|(k, l)| Tone {
            amp: dbfs_to_amplitude(*l),
            freq: m.hum.mains_hz * (k + 1) as f64,
            phase: rng.random::<f64>() * 2.0 * PI,
        })
        .filter(|t| t.freq < fs / 2.0)
        .collect();
    let n_ch = r.channels.len();
    // Per channel and tone: the complex gain (re, im) from the drive to this input.
    let paths: Vec<Vec<(f64, f64)>> = (0..n_ch)
        .map(|c| {
            let g = gain(r, c);
            let skew = r.channels[c].skew_us * 1e-6;
            tones
                .iter()
                .map(|t| {
                    let (re, im) = match drive {
                        Some((a, _)) if a == c => (g, 0.0),
                        Some((a, _)) => {
                            let (re, im) = r.coupling[a][c].at(t.freq);
                            (g * re, g * im)
                        }
                        None if common.is_some() => (g, 0.0),
                        None => (0.0, 0.0),
                    };
                    // A channel sampling `skew` later sees the tone advanced by 2π·f·skew.
                    let (s, k) = (2.0 * PI * t.freq * skew).sin_cos();
                    (re * k - im * s, re * s + im * k)
                })
                .collect()
        })
        .collect();
    let hum_scale: Vec<f64> = r
        .channels
        .iter()
        .map(|c| dbfs_to_amplitude(c.hum_db))
        .collect();
    let sigma: Vec<f64> = r
        .channels
        .iter()
        .map(|c| dbfs_to_rms(c.noise_dbfs))
        .collect();
    let q = 2f64.powi(1 - fe.bits as i32);
    let total = timing.total();
    let mut out: Vec<Vec<f64>> = (0..n_ch).map(|_| Vec::with_capacity(total)).collect();
    let mut tone_cs = vec![(0.0, 0.0); tones.len()];
    for n in 0..total {
        let jitter: f64 = if m.clock.jitter_rms_s > 0.0 {
            rng.sample::<f64, _>(StandardNormal) * m.clock.jitter_rms_s
        } else {
            0.0
        };
        let t = n as f64 / fs + jitter;
        let env = timing.envelope(n);
        for (cs, tone) in tone_cs.iter_mut().zip(&tones) {
            let (s, c) = (2.0 * PI * tone.freq * t + tone.phase).sin_cos();
            *cs = (c * tone.amp * env, s * tone.amp * env);
        }
        let h: f64 = hum
            .iter()
            .map(|h| h.amp * (2.0 * PI * h.freq * t + h.phase).cos())
            .sum();
        for c in 0..n_ch {
            let mut y = r.channels[c].dc_offset + h * hum_scale[c];
            for ((cosv, sinv), (re, im)) in tone_cs.iter().zip(&paths[c]) {
                y += re * cosv - im * sinv;
            }
            y += sigma[c] * rng.sample::<f64, _>(StandardNormal);
            let dither = rng.random::<f64>() - rng.random::<f64>();
            let code = (y / q + dither).round().clamp(-1.0 / q, 1.0 / q - 1.0);
            out[c].push(code * q);
        }
    }
    out
}

/// Write a whole simulated run into `dir` (which must exist and be empty).
/// `model_text` is the model file as given, kept under `model/`.
/// `progress` is called once per written capture.
pub fn write_run(
    r: &Resolved,
    model_text: &str,
    dir: &Path,
    progress: &(dyn Fn() + Sync),
) -> Result<Manifest, RunError> {
    let fe = &r.model.front_end;
    let st = &r.model.stimulus;
    let mkdir = |p: &Path| std::fs::create_dir_all(p).map_err(|e| RunError::io(p, e));
    mkdir(&dir.join("captures"))?;
    mkdir(&dir.join("model"))?;
    type Step = (String, Option<(usize, f64)>, Option<(f64, f64)>);
    let mut plan: Vec<Step> = Vec::new();
    for &f in &r.frequencies_hz {
        for a in 0..r.channels.len() {
            plan.push((
                drive_file(plan.len() + 1, a as u32 + 1, f),
                Some((a, f)),
                None,
            ));
        }
    }
    if st.idle_samples > 0 {
        plan.push((
            format!("captures/{:03}-idle.wav", plan.len() + 1),
            None,
            None,
        ));
    }
    if let Some(c) = &r.model.common_drive {
        for &f in &c.frequencies_hz {
            let file = format!(
                "captures/{:03}-common-{}Hz.wav",
                plan.len() + 1,
                format_freq(f)
            );
            plan.push((file, None, Some((f, c.level_dbfs))));
        }
    }
    plan.par_iter()
        .enumerate()
        .try_for_each(|(i, (file, drive, common))| {
            let data = synth_capture(
                r,
                *drive,
                *common,
                r.model.seed.wrapping_mul(1_000_003).wrapping_add(i as u64),
            );
            write_capture(&dir.join(file), &data, fe.sample_rate_hz, fe.wav)?;
            progress();
            Ok::<_, RunError>(())
        })?;
    let mut front_end = Map::new();
    front_end.insert("label".into(), json!(fe.label));
    if let Some(s) = &fe.serial {
        front_end.insert("serial".into(), json!(s));
    }
    if let Some(s) = &fe.notes {
        front_end.insert("notes".into(), json!(s));
    }
    let mut extra = Map::new();
    extra.insert("front_end".into(), Value::Object(front_end));
    extra.insert(
        "created".into(),
        json!(humantime::format_rfc3339_seconds(std::time::SystemTime::now()).to_string()),
    );
    extra.insert(
        "simulated".into(),
        json!({ "model": "model/model.toml", "seed": r.model.seed,
                "expected_pairs": "model/expected-pairs.csv", "expected_channels": "model/expected-channels.csv" }),
    );
    let manifest = Manifest {
        format: RUN_FORMAT.into(),
        sample_rate_hz: fe.sample_rate_hz,
        channels: r
            .channels
            .iter()
            .map(|c| ChannelEntry {
                number: c.number,
                name: Some(c.name.clone()),
                termination: Some(c.termination.clone()),
                extra: Map::new(),
            })
            .collect(),
        captures: plan
            .iter()
            .filter(|(_, _, common)| common.is_none())
            .map(|(file, drive, _)| CaptureEntry {
                file: file.clone(),
                drive: drive.map(|(a, f)| Drive {
                    channel: a as u32 + 1,
                    frequency_hz: f,
                    level_dbfs: st.level_dbfs,
                }),
                extra: Map::new(),
            })
            .collect(),
        common_drive: plan
            .iter()
            .filter_map(|(file, _, common)| {
                common.map(|(f, level)| CommonDriveEntry {
                    file: file.clone(),
                    frequency_hz: f,
                    level_dbfs: level,
                    reference_channel: r
                        .model
                        .common_drive
                        .as_ref()
                        .map_or(1, |c| c.reference_channel),
                    extra: Map::new(),
                })
            })
            .collect(),
        extra,
    };
    manifest.save(dir)?;
    write_model_files(r, model_text, &dir.join("model"))?;
    Ok(manifest)
}

fn write_model_files(r: &Resolved, model_text: &str, dir: &Path) -> Result<(), RunError> {
    write_expected_files(r, model_text, dir, &expected_pairs(r))
}

/// Write `model.toml` (the text given), `resolved.json`, `expected-pairs.csv`
/// (from `pairs`) and `expected-channels.csv` into `dir`, which must exist.
pub fn write_expected_files(
    r: &Resolved,
    model_text: &str,
    dir: &Path,
    expected: &[super::truth::ExpectedPair],
) -> Result<(), RunError> {
    let write = |name: &str, text: String| {
        let p = dir.join(name);
        std::fs::write(&p, text).map_err(|e| RunError::io(&p, e))
    };
    write("model.toml", model_text.to_string())?;
    write(
        "resolved.json",
        serde_json::to_string_pretty(r).expect("model serialises") + "\n",
    )?;
    let mut pairs = String::from(
        "frequency_hz,aggressor,victim,separation_db,victim_dbfs,floor_limited,aggressor_dbfs,detection_limit_dbfs,tone_hz\n",
    );
    for p in expected {
        pairs += &format!(
            "{},{},{},{:.6},{:.6},{},{:.6},{:.6},{:.6}\n",
            p.frequency_hz,
            p.aggressor,
            p.victim,
            p.separation_db,
            p.victim_dbfs,
            p.floor_limited,
            p.aggressor_dbfs,
            p.detection_limit_dbfs,
            p.tone_hz
        );
    }
    write("expected-pairs.csv", pairs)?;
    let mut chans = String::from(
        "channel,noise_floor_dbfs,white_floor_dbfs,usable_noise_dbfs,a_weighted_noise_dbfs\n",
    );
    for c in expected_channels(r) {
        chans += &format!(
            "{},{:.6},{:.6},{:.6},{:.6}\n",
            c.channel,
            c.noise_floor_dbfs,
            c.white_floor_dbfs,
            c.usable_noise_dbfs,
            c.a_weighted_noise_dbfs
        );
    }
    write("expected-channels.csv", chans)?;
    let mut drive = String::from(
        "frequency_hz,channel,level_dbfs,sinad_db,thd_db,enob_bits,clock_offset_ppm\n",
    );
    for d in expected_drive(r) {
        drive += &format!(
            "{},{},{:.6},{:.6},{},{:.6},{:.6}\n",
            d.frequency_hz,
            d.channel,
            d.level_dbfs,
            d.sinad_db,
            d.thd_db.map_or(String::new(), |t| format!("{t:.6}")),
            d.enob_bits,
            d.clock_offset_ppm
        );
    }
    write("expected-drive.csv", drive)?;
    let mut coupling = String::from("aggressor,victim,shared_db,rising_db_at_1khz\n");
    for c in expected_coupling(r) {
        coupling += &format!(
            "{},{},{:.6},{:.6}\n",
            c.aggressor, c.victim, c.shared_db, c.rising_db_at_1khz
        );
    }
    write("expected-coupling.csv", coupling)?;
    let mut common = String::from("frequency_hz,channel,gain_db,skew_us\n");
    for c in expected_common(r) {
        common += &format!(
            "{},{},{:.6},{:.6}\n",
            c.frequency_hz, c.channel, c.gain_db, c.skew_us
        );
    }
    write("expected-common.csv", common)
}
