//! `flatbin`: the command line of the harness. Thin: parsing and printing only; the work is
//! done by library functions that the tests call directly.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Result;
use clap::{Parser, Subcommand};
use flatbin_harness::evaluate::{evaluate_awgn, numerology_of, render_text};
use flatbin_harness::scenario::{Scenario, DEFAULT_SCENARIO_ORIGIN, DEFAULT_SCENARIO_TOML};

/// OFDM link checks for low-power radios: runs a scenario through the flatbin core.
#[derive(Parser, Debug)]
#[command(name = "flatbin", version, about)]
struct Cli {
    #[command(subcommand)]
    command: Option<Command>,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Run a scenario (the built-in default when no file is given) and compare with theory.
    Evaluate(EvaluateArgs),
    /// Characterise a scenario's channel (the built-in default when no file is given):
    /// Doppler, coherence, delay spread against the CP, predicted ICI and ISI.
    Channel {
        /// Scenario file (TOML).
        file: Option<PathBuf>,
        /// Print JSON instead of text.
        #[arg(long)]
        json: bool,
        /// Also write the channel figures (Doppler spectrum, autocorrelation, envelope CDF,
        /// ICI against fd·T; simulated beside theory) into this directory as SVG and PNG.
        #[arg(long, value_name = "DIR")]
        plots: Option<PathBuf>,
    },
    /// Print a scenario as TOML (the built-in default when no file is given): a starting point
    /// for your own.
    Scenario {
        /// Scenario file (TOML).
        file: Option<PathBuf>,
    },
}

#[derive(clap::Args, Debug, Default)]
struct EvaluateArgs {
    /// Scenario file (TOML); the built-in default scenario when omitted.
    file: Option<PathBuf>,
    /// Print the report as JSON instead of a table.
    #[arg(long)]
    json: bool,
}

fn load(file: Option<&PathBuf>) -> Result<(Scenario, String, String)> {
    Ok(match file {
        Some(path) => {
            let (s, text) = Scenario::from_file_with_text(path)?;
            (s, text, path.display().to_string())
        }
        None => (
            Scenario::default_scenario(),
            DEFAULT_SCENARIO_TOML.to_string(),
            DEFAULT_SCENARIO_ORIGIN.to_string(),
        ),
    })
}

fn run(cli: Cli) -> Result<ExitCode> {
    match cli
        .command
        .unwrap_or(Command::Evaluate(EvaluateArgs::default()))
    {
        Command::Evaluate(args) => {
            let (scenario, text, origin) = load(args.file.as_ref())?;
            let numerology = numerology_of(&scenario, &origin, &text)?;
            let report = evaluate_awgn(&scenario, &numerology)?;
            if args.json {
                println!("{}", serde_json::to_string_pretty(&report)?);
            } else {
                print!("{}", render_text(&report));
            }
            Ok(if report.all_agree() {
                ExitCode::SUCCESS
            } else {
                eprintln!("error: a measured BER disagrees with theory beyond ±4σ");
                ExitCode::from(2)
            })
        }
        Command::Channel { file, json, plots } => {
            let (scenario, _, _) = load(file.as_ref())?;
            let summary = flatbin_harness::characterise::characterise(&scenario)?;
            if json {
                println!("{}", serde_json::to_string_pretty(&summary)?);
            } else {
                print!("{}", flatbin_harness::characterise::render_text(&summary));
            }
            if let Some(dir) = plots {
                let written = flatbin_harness::plots::write_plots(&scenario, &dir)?;
                // With --json, stdout stays pure JSON: the list goes to stderr.
                let mut list = String::from("plots written:\n");
                for f in &written.files {
                    list.push_str(&format!("  {}\n", f.display()));
                }
                for n in &written.data.notes {
                    list.push_str(&format!("  note: {n}\n"));
                }
                if json {
                    eprint!("{list}");
                } else {
                    print!("{list}");
                }
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Scenario { file } => {
            let (scenario, _, _) = load(file.as_ref())?;
            print!("{}", scenario.to_toml_string());
            Ok(ExitCode::SUCCESS)
        }
    }
}

fn main() -> ExitCode {
    match run(Cli::parse()) {
        Ok(code) => code,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::FAILURE
        }
    }
}
