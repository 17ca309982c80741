//! `septum devices`: the audio hosts and devices this machine offers.

use anyhow::Result;
use cpal::traits::{DeviceTrait, HostTrait};

/// List audio hosts and devices with channel counts, sample formats and rates.
#[derive(Debug, clap::Args)]
pub struct Args {}

pub fn run(_args: Args) -> Result<u8> {
    let mut found = 0;
    for id in cpal::available_hosts() {
        let Ok(host) = cpal::host_from_id(id) else {
            println!("host {}: unavailable", id.name());
            continue;
        };
        println!("host {}", id.name());
        let Ok(devices) = host.devices() else {
            println!("  (cannot list devices)");
            continue;
        };
        for dev in devices {
            found += 1;
            let name = dev
                .description()
                .map(|d| d.name().to_string())
                .unwrap_or_else(|_| "(unnamed)".into());
            println!("  device {name}");
            if let Ok(configs) = dev.supported_input_configs() {
                for c in configs {
                    println!(
                        "    input  {:>3} ch  {:?}  {}-{} Hz",
                        c.channels(),
                        c.sample_format(),
                        c.min_sample_rate(),
                        c.max_sample_rate()
                    );
                }
            }
            if let Ok(configs) = dev.supported_output_configs() {
                for c in configs {
                    println!(
                        "    output {:>3} ch  {:?}  {}-{} Hz",
                        c.channels(),
                        c.sample_format(),
                        c.min_sample_rate(),
                        c.max_sample_rate()
                    );
                }
            }
        }
    }
    if found == 0 {
        println!("no audio devices found.");
        println!("On a machine without sound hardware, start a JACK server (for example");
        println!(
            "`jackd --no-realtime -d dummy -r 48000`) or use `septum demo` and `septum simulate`."
        );
    }
    Ok(super::exit::OK)
}
