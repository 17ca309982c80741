//! Command-line front: argument structs (their doc comments are the help
//! text), one module per command, exit codes, terminal output.

mod analyze;
mod check;
mod demo;
mod devices;
mod measure;
mod progress;
mod report;
mod simulate;
mod summary;
mod verdict_tables;

use clap::{Parser, Subcommand};
use std::process::ExitCode;

/// Exit codes automation can rely on.
pub mod exit {
    /// The command did what was asked.
    pub const OK: u8 = 0;
    /// Bad input, a missing file, an I/O or device problem.
    pub const ERROR: u8 = 1;
    /// The command line itself was wrong (clap's usage errors).
    pub const USAGE: u8 = 2;
    /// A verdict was asked for and something failed its limit or claim.
    pub const FAIL: u8 = 3;
    /// A verdict was asked for; nothing failed, but something could not be
    /// decided within the measurement's uncertainty.
    pub const INCONCLUSIVE: u8 = 4;

    /// The exit code of a verdict.
    pub fn for_outcome(o: septum::verdict::Outcome) -> u8 {
        match o {
            septum::verdict::Outcome::Pass => OK,
            septum::verdict::Outcome::Fail => FAIL,
            septum::verdict::Outcome::Inconclusive => INCONCLUSIVE,
        }
    }
}

/// Channel-isolation and leakage measurement for multichannel sound cards
/// and data-acquisition front ends.
///
/// From captures in which a test tone drove one input at a time while the
/// others were terminated, septum computes the separation (crosstalk with
/// the sign flipped) for every pair, each channel's noise floor and the
/// leakage matrix per test frequency.
#[derive(Debug, Parser)]
#[command(name = "septum", version, propagate_version = true)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    Analyze(analyze::Args),
    Check(check::Args),
    Report(report::Args),
    Simulate(simulate::Args),
    Demo(demo::Args),
    Devices(devices::Args),
    Measure(measure::Args),
}

/// Run the command line and return the process exit code.
pub fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return ExitCode::from(if e.use_stderr() {
                exit::USAGE
            } else {
                exit::OK
            });
        }
    };
    let result = match cli.command {
        Command::Analyze(a) => analyze::run(a),
        Command::Check(a) => check::run(a),
        Command::Report(a) => report::run(a),
        Command::Simulate(a) => simulate::run(a),
        Command::Demo(a) => demo::run(a),
        Command::Devices(a) => devices::run(a),
        Command::Measure(a) => measure::run(a),
    };
    match result {
        Ok(code) => ExitCode::from(code),
        Err(e) => {
            eprintln!("septum: error: {}", one_line(&e));
            ExitCode::from(exit::ERROR)
        }
    }
}

/// An error and its causes on one line.
fn one_line(e: &anyhow::Error) -> String {
    let mut parts: Vec<String> = Vec::new();
    for cause in e.chain() {
        let s = cause.to_string();
        if !parts.iter().any(|p| p.contains(&s)) {
            parts.push(s);
        }
    }
    parts.join(": ").replace('\n', " ")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_every_command() {
        Cli::try_parse_from(["septum", "analyze", "run", "--out", "res", "--force"]).unwrap();
        Cli::try_parse_from(["septum", "simulate", "--out", "run", "--model", "m.toml"]).unwrap();
        Cli::try_parse_from(["septum", "demo"]).unwrap();
        Cli::try_parse_from(["septum", "devices"]).unwrap();
        Cli::try_parse_from(["septum", "check", "res", "--limits", "l.toml"]).unwrap();
        Cli::try_parse_from(["septum", "report", "res", "--out", "r.html"]).unwrap();
        Cli::try_parse_from([
            "septum", "analyze", "run", "--out", "res", "--report", "r.html",
        ])
        .unwrap();
        Cli::try_parse_from([
            "septum",
            "check",
            "res",
            "--baseline",
            "old",
            "--tolerance-db",
            "2",
            "--channels",
            "1-4",
            "--frequencies",
            "1000,4000",
        ])
        .unwrap();
        // A verdict needs something to judge against; options need --baseline.
        assert!(Cli::try_parse_from(["septum", "check", "res"]).is_err());
        assert!(Cli::try_parse_from([
            "septum",
            "check",
            "res",
            "--limits",
            "l",
            "--tolerance-db",
            "2"
        ])
        .is_err());
        assert!(Cli::try_parse_from([
            "septum",
            "check",
            "res",
            "--baseline",
            "o",
            "--tolerance-db",
            "-1"
        ])
        .is_err());
        Cli::try_parse_from([
            "septum",
            "measure",
            "--procedure",
            "p.toml",
            "--out",
            "run",
            "--host",
            "jack",
            "--jack-output-ports",
            "a:in",
            "--jack-input-ports",
            "b:out_1,b:out_2",
            "--switch-command",
            "true",
            "--resume",
        ])
        .unwrap();
        Cli::try_parse_from([
            "septum",
            "measure",
            "--procedure",
            "p",
            "--out",
            "r",
            "--simulated",
        ])
        .unwrap();
        Cli::try_parse_from([
            "septum",
            "measure",
            "--procedure",
            "p",
            "--out",
            "r",
            "--simulated=m.toml",
        ])
        .unwrap();
        assert!(Cli::try_parse_from(["septum", "measure", "--out", "r"]).is_err());
        assert!(Cli::try_parse_from(["septum", "analyze", "run"]).is_err());
    }
}
