//! The `ampnote` binary: parse, build a validated configuration, call the library, render, and
//! map the outcome to an exit code (0 success, 1 a requested check failed, 2 usage or input error).

mod cli;

use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer};
use ampnote::capture::{select_channels, Capture};
use ampnote::report::tone::{AnalyzeReport, ChannelError};
use ampnote::report::SCHEMA_VERSION;
use clap::Parser;
use cli::{AnalyzeArgs, Cli, Command};
use std::io::Write;
use std::process::ExitCode;

fn main() -> ExitCode {
    let cli = Cli::parse();
    let outcome = match cli.command {
        Command::Analyze(args) => analyze(&args),
    };
    match outcome {
        Ok(code) => code,
        Err(msg) => {
            eprintln!("error: {msg}");
            ExitCode::from(2)
        }
    }
}

fn analyze(args: &AnalyzeArgs) -> Result<ExitCode, String> {
    let config = args.tone_config()?;
    let cal = args
        .calibration
        .calibration()
        .validated()
        .map_err(|e| e.to_string())?;
    let channel = args.channel_choice()?;
    let analyzer = ToneAnalyzer::new(config).map_err(|e| e.to_string())?;
    let info = Capture::probe_wav(&args.capture).map_err(|e| e.to_string())?;
    let chosen = select_channels(info.channel_count, channel).map_err(|e| e.to_string())?;

    // One channel decoded at a time: memory stays at one channel's samples plus the analysis.
    let mut channels = Vec::new();
    let mut channel_errors = Vec::new();
    let (mut frames, mut truncated) = (0, false);
    for &ch in &chosen {
        let capture = Capture::read_wav_channels(&args.capture, args.accept_truncated, Some(&[ch]))
            .map_err(|e| e.to_string())?;
        frames = capture.frames();
        truncated = capture.truncated;
        let input = ChannelInput {
            channel: ch,
            samples: &capture.channels[0],
            sample_rate_hz: capture.sample_rate_hz as f64,
            overload_threshold: capture.encoding.overload_threshold(),
            resolution_bits: capture.encoding.resolution_bits(),
        };
        match analyzer.analyze(&input, &cal) {
            Ok(mut r) => {
                if capture.truncated {
                    r.warnings.push(
                        "the file was truncated: only the complete frames were analysed".into(),
                    );
                }
                if info.length_unknown {
                    r.warnings.push("the WAV header left the data length open (a recorder that stopped abruptly?): the samples were read to the end of the file".into());
                }
                channels.push(r)
            }
            Err(e) => channel_errors.push(ChannelError {
                channel: ch,
                error: e.to_string(),
            }),
        }
    }
    let report = AnalyzeReport {
        schema_version: SCHEMA_VERSION,
        file: args.capture.display().to_string(),
        sample_rate_hz: info.sample_rate_hz,
        encoding: info.encoding,
        frames,
        channel_count: info.channel_count,
        truncated,
        channels,
        channel_errors,
    };
    let table_mode = !args.json && args.csv.is_none();
    if !table_mode {
        for c in &report.channels {
            for w in &c.warnings {
                eprintln!("warning: channel {}: {w}", c.channel);
            }
        }
        for e in &report.channel_errors {
            eprintln!("error: {}", e.error);
        }
    }
    let text = if args.json {
        report.to_json()
    } else if let Some(path) = &args.csv {
        let csv = report.to_csv();
        if path.as_os_str() != "-" {
            write_whole(path, &csv)?;
            String::new()
        } else {
            csv
        }
    } else {
        report.to_table()
    };
    print_stdout(&text);
    Ok(if report.channel_errors.is_empty() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(2)
    })
}

/// Write a file whole or not at all: temporary name, then rename.
fn write_whole(path: &std::path::Path, text: &str) -> Result<(), String> {
    let tmp = path.with_extension("partial");
    std::fs::write(&tmp, text)
        .and_then(|_| std::fs::rename(&tmp, path))
        .map_err(|e| {
            format!(
                "cannot write {}: {e}. Check that the folder exists and has space.",
                path.display()
            )
        })
}

/// Print to stdout; a closed pipe (`| head`) is not an error.
fn print_stdout(text: &str) {
    let mut out = std::io::stdout().lock();
    let _ = out.write_all(text.as_bytes()).and_then(|_| out.flush());
}
