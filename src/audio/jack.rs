//! JACK: open septum's own unconnected input and output clients through
//! cpal's JACK host and connect them to the ports the operator names.

use super::stream::{CpalRig, RigConfig};
use super::AudioError;
use cpal::traits::HostTrait;

type JackDevice = <cpal::platform::JackHost as HostTrait>::Device;

/// Ports to connect: septum's output 1 feeds every port in `to_outputs`
/// (the stimulus), and `from_inputs[i]` feeds septum's input `i + 1`.
#[derive(Debug, Clone, Default)]
pub struct JackPorts {
    /// Destinations of the stimulus output.
    pub stimulus_to: Vec<String>,
    /// Sources of each captured input, in input order.
    pub inputs_from: Vec<String>,
}

/// Open a rig on the JACK server named by `JACK_DEFAULT_SERVER` (or the
/// default server): clients `<prefix>_in` and `<prefix>_out`, connected as
/// `ports` says once the streams exist. `output` is the stimulus output
/// channel (from 0); that many + 1 output ports are opened.
pub fn open_rig(
    prefix: &str,
    inputs: u16,
    output: usize,
    sample_rate: u32,
    ports: &JackPorts,
) -> Result<(CpalRig, Connector), AudioError> {
    let no_server = |e: cpal::Error| {
        AudioError::Device(format!(
            "no JACK server answered ({e}); start one or pick another host"
        ))
    };
    let in_dev = JackDevice::default_input_device(prefix, false, false).map_err(no_server)?;
    let out_dev = JackDevice::default_output_device(prefix, false, false).map_err(no_server)?;
    let connector = Connector::new(prefix)?;
    let server_rate = connector.client.sample_rate();
    if server_rate != sample_rate {
        return Err(AudioError::Device(format!(
            "the JACK server runs at {server_rate} Hz, the procedure asks for {sample_rate} Hz"
        )));
    }
    let outputs = (output + 1) as u16;
    let rig = CpalRig::open(RigConfig {
        input: cpal::Device::from(in_dev),
        output: Some(cpal::Device::from(out_dev)),
        inputs,
        outputs,
        sample_rate,
        speed: 1.0,
        label: format!("JACK clients {prefix}_in ({inputs} inputs) and {prefix}_out ({outputs} outputs) at {sample_rate} Hz"),
    })?;
    connector.connect(prefix, output, ports)?;
    Ok((rig, connector))
}

/// A plain JACK client used only to make connections by name.
pub struct Connector {
    client: jack::Client,
}

impl Connector {
    fn new(prefix: &str) -> Result<Self, AudioError> {
        let (client, _) = jack::Client::new(
            &format!("{prefix}_patch"),
            jack::ClientOptions::NO_START_SERVER,
        )
        .map_err(|e| AudioError::Device(format!("no JACK server answered: {e}")))?;
        Ok(Self { client })
    }

    fn connect(&self, prefix: &str, output: usize, ports: &JackPorts) -> Result<(), AudioError> {
        let ours_out = format!("{prefix}_out:out_{output}");
        let all = self.client.ports(None, None, jack::PortFlags::empty());
        let check = |p: &str| {
            if all.iter().any(|q| q == p) {
                Ok(())
            } else {
                Err(AudioError::Device(format!(
                    "JACK port \"{p}\" does not exist (ports: {})",
                    all.join(", ")
                )))
            }
        };
        for dest in &ports.stimulus_to {
            check(dest)?;
            self.client
                .connect_ports_by_name(&ours_out, dest)
                .map_err(|e| AudioError::Device(format!("connecting {ours_out} to {dest}: {e}")))?;
        }
        for (i, src) in ports.inputs_from.iter().enumerate() {
            let ours = format!("{prefix}_in:in_{i}");
            check(src)?;
            self.client
                .connect_ports_by_name(src, &ours)
                .map_err(|e| AudioError::Device(format!("connecting {src} to {ours}: {e}")))?;
        }
        Ok(())
    }

    /// Every port the server knows, for listings.
    pub fn list(prefix: &str) -> Result<Vec<String>, AudioError> {
        Ok(Self::new(prefix)?
            .client
            .ports(None, None, jack::PortFlags::empty()))
    }
}
