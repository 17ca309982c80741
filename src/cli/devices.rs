//! `septum devices`: the audio hosts and devices this machine offers.

use anyhow::Result;
use cpal::traits::{DeviceTrait, HostTrait};
use std::collections::BTreeSet;

/// List audio hosts and devices with channel counts, sample formats and
/// rates, and the ports of a running JACK server.
#[derive(Debug, clap::Args)]
pub struct Args {}

/// One direction's capabilities, condensed.
#[derive(Default)]
struct Caps {
    channels: BTreeSet<u16>,
    formats: BTreeSet<String>,
    rates: Option<(u32, u32)>,
}

impl Caps {
    fn add(&mut self, c: &cpal::SupportedStreamConfigRange) {
        self.channels.insert(c.channels());
        self.formats.insert(format!("{}", c.sample_format()));
        let (lo, hi) = (c.min_sample_rate(), c.max_sample_rate());
        self.rates = Some(self.rates.map_or((lo, hi), |(a, b)| (a.min(lo), b.max(hi))));
    }

    fn line(&self) -> Option<String> {
        let (lo, hi) = self.rates?;
        let mut ch: Vec<String> = Vec::new();
        let mut run: Option<(u16, u16)> = None;
        for &c in self.channels.iter().chain(std::iter::once(&u16::MAX)) {
            run = match run {
                Some((a, b)) if c == b + 1 => Some((a, c)),
                Some((a, b)) => {
                    ch.push(if a == b {
                        a.to_string()
                    } else {
                        format!("{a} to {b}")
                    });
                    Some((c, c))
                }
                None => Some((c, c)),
            };
        }
        let fmts: Vec<&str> = self.formats.iter().map(String::as_str).collect();
        Some(format!(
            "{} ch; {}; {lo} to {hi} Hz",
            ch.join(", "),
            fmts.join(", ")
        ))
    }
}

pub fn run(_args: Args) -> Result<u8> {
    let mut found = 0;
    let mut jack_empty = false;
    for id in cpal::available_hosts() {
        let Ok(host) = cpal::host_from_id(id) else {
            println!("host {}: not available", id.name());
            continue;
        };
        let devices: Vec<cpal::Device> = host.devices().map(|d| d.collect()).unwrap_or_default();
        println!("host {}: {} device(s)", id.name(), devices.len());
        jack_empty |= id == cpal::HostId::Jack && devices.is_empty();
        for dev in devices {
            found += 1;
            let name = dev
                .description()
                .map(|d| d.name().to_string())
                .unwrap_or_else(|_| "(unnamed)".into());
            let id = dev.id().map(|i| i.to_string()).unwrap_or_default();
            println!("  {name}  [{id}]");
            let mut caps = Caps::default();
            dev.supported_input_configs()
                .into_iter()
                .flatten()
                .for_each(|c| caps.add(&c));
            if let Some(l) = caps.line() {
                println!("    inputs:  {l}");
            }
            let mut caps = Caps::default();
            dev.supported_output_configs()
                .into_iter()
                .flatten()
                .for_each(|c| caps.add(&c));
            if let Some(l) = caps.line() {
                println!("    outputs: {l}");
            }
        }
    }
    if !jack_empty {
        if let Ok(ports) =
            septum::audio::jack::Connector::list(&format!("septum{}_list", std::process::id()))
        {
            println!("JACK ports (for --jack-output-ports and --jack-input-ports):");
            for p in ports {
                println!("  {p}");
            }
        }
    }
    if found == 0 || jack_empty {
        if found == 0 {
            println!("no audio devices found.");
        }
        println!(
            "No JACK server answered. Without sound hardware, start a JACK server (for example"
        );
        println!("`jackd --no-realtime -n bench -d dummy -r 48000 -C 8 -P 8` and");
        println!(
            "`export JACK_DEFAULT_SERVER=bench`), or use `septum demo` and `septum simulate`."
        );
    }
    Ok(super::exit::OK)
}
