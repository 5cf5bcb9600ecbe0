//! Finding the host, the devices and a stream configuration, and saying what failed.

use super::*;

pub(super) fn rig_error(text: impl Into<String>) -> Error {
    Error::Device {
        detail: text.into(),
        retryable: false,
    }
}

/// A fault that running again may clear: a stalled stream, a gap, a busy device.
pub(super) fn transient(text: impl Into<String>) -> Error {
    Error::Device {
        detail: text.into(),
        retryable: true,
    }
}

/// The host by name (`alsa`, `jack`, ...), or the system's default.
pub fn host_by_name(name: Option<&str>) -> Result<cpal::Host> {
    let available = cpal::available_hosts();
    let names = || {
        available
            .iter()
            .map(|h| h.name().to_lowercase())
            .collect::<Vec<_>>()
            .join(", ")
    };
    let Some(name) = name else {
        return Ok(cpal::default_host());
    };
    let id = cpal::ALL_HOSTS
        .iter()
        .find(|h| h.name().eq_ignore_ascii_case(name))
        .copied()
        .ok_or_else(|| {
            // A name the build does not know is a typo in the flag (usage), not a device fault.
            Error::InvalidSetting(format!(
                "no audio host called `{name}` in this build; available here: {}",
                names()
            ))
        })?;
    cpal::host_from_id(id).map_err(|e| {
        rig_error(format!(
            "the audio host `{name}` is not running ({e}); available here: {}. For JACK, start the server first (jackd or your session manager).",
            names()
        ))
    })
}

pub(super) fn device_label(d: &cpal::Device) -> String {
    let id = d.id().map(|i| i.to_string()).unwrap_or_default();
    let desc = d.description().map(|x| x.to_string()).unwrap_or_default();
    if desc.is_empty() || desc == id {
        id
    } else {
        format!("{id} ({desc})")
    }
}

/// The device by name (its id, or part of its description, any case) or the default one.
pub(super) fn pick_device(
    host: &cpal::Host,
    name: Option<&str>,
    output: bool,
) -> Result<cpal::Device> {
    let dir = if output { "output" } else { "input" };
    let Some(name) = name else {
        let d = if output {
            host.default_output_device()
        } else {
            host.default_input_device()
        };
        return d.ok_or_else(|| {
            rig_error(format!(
                "the {} host has no default {dir} device: is an interface connected? `ampnote devices` lists what there is",
                host.id().name()
            ))
        });
    };
    let devices: Vec<cpal::Device> = host
        .devices()
        .map_err(|e| rig_error(format!("cannot list devices: {e}")))?
        .filter(|d| {
            if output {
                d.supports_output()
            } else {
                d.supports_input()
            }
        })
        .collect();
    let wanted = name.to_lowercase();
    let exact = devices.iter().find(|d| {
        d.id()
            .map(|i| i.to_string().to_lowercase() == wanted)
            .unwrap_or(false)
    });
    let found = exact.or_else(|| {
        devices
            .iter()
            .find(|d| device_label(d).to_lowercase().contains(&wanted))
    });
    found.cloned().ok_or_else(|| {
        let list: Vec<String> = devices.iter().map(device_label).collect();
        rig_error(format!(
            "no {dir} device matches `{name}`; {dir} devices on the {} host: {}",
            host.id().name(),
            if list.is_empty() {
                "none".to_string()
            } else {
                list.join("; ")
            }
        ))
    })
}

/// A stream configuration with at least `channels` channels at `rate`, preferring 32-bit float,
/// then 32- and 16-bit integer.
pub(super) fn pick_config(
    dev: &cpal::Device,
    output: bool,
    channels: usize,
    rate: u32,
    buffer: Option<u32>,
) -> Result<(StreamConfig, SampleFormat)> {
    let ranges: Vec<cpal::SupportedStreamConfigRange> = if output {
        dev.supported_output_configs().map(|x| x.collect())
    } else {
        dev.supported_input_configs().map(|x| x.collect())
    }
    .map_err(|e| {
        rig_error(format!(
            "{}: cannot read its configurations: {e}",
            device_label(dev)
        ))
    })?;
    let dir = if output { "output" } else { "input" };
    let rank = |f: SampleFormat| match f {
        SampleFormat::F32 => 0,
        SampleFormat::I32 => 1,
        SampleFormat::I16 => 2,
        _ => 9,
    };
    let best = ranges
        .iter()
        .filter(|r| {
            r.channels() as usize >= channels
                && r.contains_rate(rate)
                && rank(r.sample_format()) < 9
        })
        .min_by_key(|r| (rank(r.sample_format()), r.channels()));
    let Some(r) = best else {
        let rates: Vec<String> = ranges
            .iter()
            .map(|r| {
                if r.min_sample_rate() == r.max_sample_rate() {
                    format!(
                        "{} Hz x{} {}",
                        r.min_sample_rate(),
                        r.channels(),
                        r.sample_format()
                    )
                } else {
                    format!(
                        "{}-{} Hz x{} {}",
                        r.min_sample_rate(),
                        r.max_sample_rate(),
                        r.channels(),
                        r.sample_format()
                    )
                }
            })
            .collect();
        return Err(rig_error(format!(
            "the {dir} device {} refuses {rate} Hz with {channels} channel(s) in a format ampnote uses (f32, i32, i16); it offers: {}. Pick one of its rates with --rate, or other channels.",
            device_label(dev),
            if rates.is_empty() { "nothing".into() } else { rates.join(", ") }
        )));
    };
    Ok((
        StreamConfig {
            channels: r.channels(),
            sample_rate: rate,
            buffer_size: buffer.map_or(cpal::BufferSize::Default, cpal::BufferSize::Fixed),
        },
        r.sample_format(),
    ))
}

pub(super) fn open_error(dev: &cpal::Device, dir: &str, e: cpal::Error) -> Error {
    let hint = match e.kind() {
        cpal::ErrorKind::DeviceBusy => {
            "another program holds it: close it, or pick the sound server's host (--host)"
        }
        cpal::ErrorKind::DeviceNotAvailable => "it is gone: reconnect it, then `ampnote devices`",
        cpal::ErrorKind::UnsupportedConfig => {
            "it refuses this rate or channel count: `ampnote devices` lists what it takes"
        }
        cpal::ErrorKind::PermissionDenied => "no permission: add the user to the `audio` group",
        _ => "`ampnote devices` lists the devices and what they take",
    };
    rig_error(format!(
        "cannot open the {dir} stream of {}: {e}; {hint}",
        device_label(dev)
    ))
}
