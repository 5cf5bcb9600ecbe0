//! The `ampnote` binary: parse, build a validated configuration, call the library, render, and
//! map the outcome to an exit code (0 success, 1 a requested check failed, 2 usage or input error,
//! 3 the audio interface or rig failed, 130 stopped by Ctrl-C).

mod cli;
mod run;

use clap::Parser;
use cli::{Cli, Command};
use std::process::ExitCode;

fn main() -> ExitCode {
    let cli = Cli::parse();
    let outcome = match &cli.command {
        Command::Analyze(args) => run::analyze::run(args),
        Command::Generate { kind } => run::generate::run(kind),
        Command::Response(args) => run::response::run(args),
        Command::Imd(args) => run::imd::run(args),
        Command::Separation(args) => run::separation::run(args),
        Command::Square(args) => run::square::run(args),
        Command::Noise(args) => run::noise::run(args),
        Command::Trend(args) => run::trend::run(args),
        Command::Power(args) => run::power::run(args),
        Command::Zout(args) => run::zout::run(args),
        Command::Calibrate(args) => run::calibrate::run(args),
        Command::Devices { json } => run::devices(*json),
        Command::Watch(args) => run::watch::run(args),
        Command::Demo { out, no_circuits } => run::notebook::demo(out, !no_circuits),
        Command::Notebook { action } => run::notebook::notebook(action),
        Command::Compare(args) => run::notebook::compare(args),
        Command::Match(args) => run::notebook::match_(args),
        Command::Report { notebook, out } => run::notebook::report(notebook, out.as_deref()),
        Command::Completions { shell } => {
            use clap::CommandFactory;
            // clap_complete writes the script for the very parser the binary uses; into a buffer
            // first, so a closed pipe (`| head`) is no panic.
            let mut buf = Vec::new();
            clap_complete::generate(*shell, &mut Cli::command(), "ampnote", &mut buf);
            run::print_stdout(&String::from_utf8_lossy(&buf));
            Ok(ExitCode::SUCCESS)
        }
        Command::Man { out } => run::man(out.as_deref()),
    };
    match outcome {
        Ok(code) => code,
        Err(failure) => {
            eprintln!("error: {failure}");
            ExitCode::from(failure.code)
        }
    }
}
