//! `flatbin`: the command line of the harness. Thin: parsing and printing only; the work is
//! done by library functions that the tests call directly.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Result;
use clap::{Parser, Subcommand};
use flatbin_harness::evaluate::{evaluate_awgn, numerology_of, render_text};
use flatbin_harness::evaluate_fading::{evaluate_fading, write_ber_plots};
use flatbin_harness::scenario::{Scenario, DEFAULT_SCENARIO_ORIGIN, DEFAULT_SCENARIO_TOML};

/// Es/N0 per data subcarrier of the link report the main command prints, dB.
const SURVEY_ES_N0_DB: f64 = 20.0;
/// Frames of the link report.
const SURVEY_FRAMES: usize = 100;

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
    /// Also write the BER figures (measured beside theory; AWGN, and fading when the scenario
    /// has a multipath channel) into this directory as SVG and PNG.
    #[arg(long, value_name = "DIR")]
    plots: Option<PathBuf>,
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
            let fading = evaluate_fading(&scenario, &numerology)?;
            let survey = flatbin_harness::link_survey::survey(
                &scenario,
                &numerology,
                SURVEY_ES_N0_DB,
                SURVEY_FRAMES,
            )?;
            let coded = flatbin_harness::coded_ofdm::survey(&scenario, &numerology)?;
            if args.json {
                let both = serde_json::json!({
                    "awgn": &report,
                    "fading": &fading,
                    "link_report": &survey,
                    "coded": &coded,
                });
                println!("{}", serde_json::to_string_pretty(&both)?);
            } else {
                print!("{}", render_text(&report));
                if let Some(f) = &fading {
                    print!("{}", flatbin_harness::evaluate_fading::render_text(f));
                }
                print!("{}", flatbin_harness::link_survey::render_text(&survey));
                print!("{}", flatbin_harness::coded_ofdm::render_text(&coded));
            }
            if let Some(dir) = args.plots {
                let files = write_ber_plots(&scenario, &report, fading.as_ref(), &dir)?;
                let mut list = String::from("plots written:\n");
                for f in &files {
                    list.push_str(&format!("  {}\n", f.display()));
                }
                if args.json {
                    eprint!("{list}");
                } else {
                    print!("{list}");
                }
            }
            Ok(
                if report.all_agree() && fading.as_ref().is_none_or(|f| f.all_agree()) {
                    ExitCode::SUCCESS
                } else {
                    eprintln!("error: a measured BER disagrees with theory beyond ±4σ");
                    ExitCode::from(2)
                },
            )
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
