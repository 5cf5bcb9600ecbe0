//! `ampnote devices`: every host and interface with its channels, rates and formats.

use super::*;

/// A device's configurations in a few lines: per rate range, the channel counts and formats.
pub(super) fn summarise(ranges: &[cpal::SupportedStreamConfigRange]) -> Vec<String> {
    // (rate range, fewest channels, most channels, formats)
    type Group = ((u32, u32), u16, u16, Vec<String>);
    let mut groups: Vec<Group> = Vec::new();
    for r in ranges {
        let key = (r.min_sample_rate(), r.max_sample_rate());
        let fmt = r.sample_format().to_string();
        match groups.iter_mut().find(|g| g.0 == key) {
            Some(g) => {
                g.1 = g.1.min(r.channels());
                g.2 = g.2.max(r.channels());
                if !g.3.contains(&fmt) {
                    g.3.push(fmt);
                }
            }
            None => groups.push((key, r.channels(), r.channels(), vec![fmt])),
        }
    }
    groups
        .into_iter()
        .map(|((lo, hi), cmin, cmax, fmts)| {
            let rate = if lo == hi {
                format!("{lo} Hz")
            } else if hi >= 1_000_000 {
                "any rate".to_string()
            } else {
                format!("{lo}-{hi} Hz")
            };
            let ch = if cmin == cmax {
                format!("{cmin} ch")
            } else {
                format!("{cmin}-{cmax} ch")
            };
            format!("{ch}, {rate}, {}", fmts.join("/"))
        })
        .collect()
}

/// The audio hosts this build knows, and what each offers (`ampnote devices`).
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct DeviceList {
    pub hosts: Vec<HostInfo>,
}

/// One audio host (ALSA, JACK, PulseAudio, ...).
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct HostInfo {
    pub name: String,
    /// Whether its server or library is running here.
    pub running: bool,
    /// Why it could not be opened or listed, if so.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub error: Option<String>,
    pub devices: Vec<DeviceInfo>,
}

/// One device of a host, with its channel, rate and format ranges summarised.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct DeviceInfo {
    pub name: String,
    pub default_output: bool,
    pub default_input: bool,
    /// Output configurations, each "channels, rates, format".
    pub outputs: Vec<String>,
    pub inputs: Vec<String>,
}

/// What `ampnote devices` lists.
pub fn list_devices() -> DeviceList {
    let available = cpal::available_hosts();
    let mut hosts = Vec::new();
    for id in cpal::ALL_HOSTS {
        let mut info = HostInfo {
            name: id.name().to_string(),
            running: available.contains(id),
            error: None,
            devices: Vec::new(),
        };
        if !info.running {
            hosts.push(info);
            continue;
        }
        let host = match cpal::host_from_id(*id) {
            Ok(h) => h,
            Err(e) => {
                info.error = Some(format!("cannot open: {e}"));
                hosts.push(info);
                continue;
            }
        };
        let def_out = host.default_output_device().map(|d| device_label(&d));
        let def_in = host.default_input_device().map(|d| device_label(&d));
        match host.devices() {
            Ok(devices) => {
                for d in devices {
                    let name = device_label(&d);
                    let summary =
                        |r: std::result::Result<
                            Vec<cpal::SupportedStreamConfigRange>,
                            cpal::Error,
                        >| { r.map(|r| summarise(&r)).unwrap_or_default() };
                    info.devices.push(DeviceInfo {
                        default_output: def_out.as_deref() == Some(name.as_str()),
                        default_input: def_in.as_deref() == Some(name.as_str()),
                        outputs: summary(
                            d.supported_output_configs().map(|x| x.collect::<Vec<_>>()),
                        ),
                        inputs: summary(d.supported_input_configs().map(|x| x.collect::<Vec<_>>())),
                        name,
                    });
                }
            }
            Err(e) => info.error = Some(format!("cannot list devices: {e}")),
        }
        hosts.push(info);
    }
    DeviceList { hosts }
}

impl DeviceList {
    /// The list as text: hosts, their devices (defaults marked), and each device's ranges.
    pub fn to_table(&self) -> String {
        use std::fmt::Write;
        let mut s = String::new();
        for h in &self.hosts {
            if !h.running {
                let _ = writeln!(s, "host {}: not running here", h.name);
                continue;
            }
            match &h.error {
                Some(e) if h.devices.is_empty() => {
                    let _ = writeln!(s, "host {}: {e}", h.name);
                    continue;
                }
                _ => {
                    let _ = writeln!(s, "host {}", h.name);
                }
            }
            if h.devices.is_empty() {
                let _ = writeln!(s, "  no devices (is its server running?)");
            }
            for d in &h.devices {
                let mut marks = Vec::new();
                if d.default_output {
                    marks.push("default output");
                }
                if d.default_input {
                    marks.push("default input");
                }
                let _ = writeln!(
                    s,
                    "  {}{}",
                    d.name,
                    if marks.is_empty() {
                        String::new()
                    } else {
                        format!("  [{}]", marks.join(", "))
                    }
                );
                for l in &d.outputs {
                    let _ = writeln!(s, "    out {l}");
                }
                for l in &d.inputs {
                    let _ = writeln!(s, "    in  {l}");
                }
            }
        }
        if s.is_empty() {
            s.push_str("no audio hosts in this build\n");
        }
        s
    }
}
