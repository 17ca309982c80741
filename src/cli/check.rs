//! `septum check`: judge a results folder against limits, claims and/or a
//! baseline; print the verdict tables, write verdict.json and verdict.csv,
//! exit 0 (pass), 3 (fail) or 4 (inconclusive).

use super::verdict_tables;
use anyhow::{Context, Result};
use septum::run::ResultsFolder;
use septum::verdict::{self, baseline::Selection, export};
use std::path::{Path, PathBuf};

/// Judge a results folder against pass limits, a data sheet's claims and/or
/// an earlier results folder of the same front end.
///
/// Exit code: 0 when everything passes, 3 when something fails, 4 when
/// nothing fails but something cannot be decided within the measurement's
/// uncertainty, 1 on bad input, 2 on a wrong command line.
#[derive(Debug, clap::Args)]
#[command(group(
    clap::ArgGroup::new("against")
        .required(true)
        .multiple(true)
        .args(["limits", "claims", "baseline"])
))]
pub struct Args {
    /// The results folder (pairs.csv, channels.csv, summary.json).
    pub results_dir: PathBuf,
    #[command(flatten)]
    pub against: Against,
    /// Print verdict.json on standard output instead of the tables.
    #[arg(long)]
    pub json: bool,
    /// Folder for verdict.json and verdict.csv (default: the results folder).
    #[arg(long, conflicts_with = "no_write")]
    pub out: Option<PathBuf>,
    /// Write no files; only print and set the exit code.
    #[arg(long)]
    pub no_write: bool,
    /// Print nothing but errors (the exit code still tells the verdict).
    #[arg(long, short)]
    pub quiet: bool,
}

/// What to judge against; shared with `analyze` and `report`.
#[derive(Debug, Clone, clap::Args)]
pub struct Against {
    /// Pass limits (TOML, septum.limits/1; a procedure file's [limits] table also works).
    #[arg(long, value_name = "FILE")]
    pub limits: Option<PathBuf>,
    /// A data sheet's claims (TOML, septum.claims/1).
    #[arg(long, value_name = "FILE")]
    pub claims: Option<PathBuf>,
    /// An earlier results folder of the same front end to compare with.
    #[arg(long, value_name = "DIR")]
    pub baseline: Option<PathBuf>,
    /// Loss beyond which a pair or channel counts as worse than the baseline, dB.
    #[arg(long, default_value_t = 3.0, value_parser = non_negative, requires = "baseline")]
    pub tolerance_db: f64,
    /// Compare only these channels with the baseline: "1-4,7".
    #[arg(long, value_parser = parse_channels, requires = "baseline")]
    pub channels: Option<ChannelList>,
    /// Compare only these test frequencies with the baseline, Hz: "1000,4000"
    /// (each matches the test frequency in its third-octave band).
    #[arg(long, value_delimiter = ',', requires = "baseline")]
    pub frequencies: Option<Vec<f64>>,
}

impl Against {
    /// Anything to judge against?
    pub fn any(&self) -> bool {
        self.limits.is_some() || self.claims.is_some() || self.baseline.is_some()
    }

    /// Read every input file (before anything is written).
    pub fn load(&self) -> Result<verdict::Inputs> {
        let selection = Selection {
            channels: self.channels.clone().map(|c| c.0),
            frequencies_hz: self.frequencies.clone(),
        };
        Ok(verdict::load_inputs(
            self.limits.as_deref(),
            self.claims.as_deref(),
            self.baseline
                .as_deref()
                .map(|d| (d, self.tolerance_db, selection)),
        )?)
    }
}

/// Channel numbers from "1-4,7".
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelList(pub Vec<u32>);

fn parse_channels(s: &str) -> Result<ChannelList, String> {
    let mut out = Vec::new();
    for part in s.split(',').map(str::trim).filter(|p| !p.is_empty()) {
        let num = |t: &str| -> Result<u32, String> {
            match t.trim().parse::<u32>() {
                Ok(v) if v >= 1 => Ok(v),
                _ => Err(format!("\"{t}\" is not a channel number (1, 2, …)")),
            }
        };
        match part.split_once('-') {
            Some((a, b)) => {
                let (a, b) = (num(a)?, num(b)?);
                if a > b {
                    return Err(format!("range \"{part}\" runs backwards"));
                }
                out.extend(a..=b);
            }
            None => out.push(num(part)?),
        }
    }
    if out.is_empty() {
        return Err("no channel given".into());
    }
    Ok(ChannelList(out))
}

fn non_negative(s: &str) -> Result<f64, String> {
    match s.parse::<f64>() {
        Ok(v) if v.is_finite() && v >= 0.0 => Ok(v),
        _ => Err(format!("\"{s}\" is not a number of 0 or more")),
    }
}

/// Judge `results`, print unless quiet, write into `out` unless `None`.
pub fn judge(
    results: &ResultsFolder,
    inputs: &verdict::Inputs,
    out: Option<&Path>,
    json: bool,
    quiet: bool,
) -> Result<u8> {
    let v = verdict::evaluate(results, inputs)?;
    if let Some(dir) = out {
        export::write(&v, dir)
            .with_context(|| format!("writing the verdict into {}", dir.display()))?;
    }
    if json {
        println!(
            "{}",
            serde_json::to_string_pretty(&export::document(&v)).expect("verdict serialises")
        );
    } else if !quiet {
        verdict_tables::print(&v, results);
        if let Some(dir) = out {
            println!(
                "verdict files: {} and {}",
                dir.join(export::VERDICT_JSON).display(),
                dir.join(export::VERDICT_CSV).display()
            );
        }
    }
    Ok(super::exit::for_outcome(v.outcome))
}

pub fn run(args: Args) -> Result<u8> {
    let results = ResultsFolder::load(&args.results_dir)?;
    let inputs = args.against.load()?;
    let out = if args.no_write {
        None
    } else {
        Some(args.out.clone().unwrap_or_else(|| args.results_dir.clone()))
    };
    if let Some(dir) = &out {
        std::fs::create_dir_all(dir).with_context(|| format!("{}", dir.display()))?;
    }
    judge(&results, &inputs, out.as_deref(), args.json, args.quiet)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn channel_lists() {
        assert_eq!(parse_channels("1-4,7").unwrap().0, vec![1, 2, 3, 4, 7]);
        assert!(parse_channels("0").is_err());
        assert!(parse_channels("4-1").is_err());
        assert!(parse_channels("a").is_err());
    }
}
