//! The command line: parse arguments, call a job, pick a renderer, map errors to exit codes.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand, ValueEnum};

use crate::check::check;
use crate::error::Error;
use crate::layout::{Convention, Layout};
use crate::planning::{PlanningValues, check_probability};
use crate::render::{self, Format};

#[derive(Debug, Parser)]
#[command(
    name = "emsplan",
    version,
    about = "Plan experiments with crossed and nested, fixed and random factors: expected mean squares, error terms, power and cost."
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Check a layout: df, expected mean squares, error term and verdict of every term.
    Check {
        /// The layout file (TOML).
        layout: PathBuf,
        /// Convention for mixed interactions; `both` shows the two side by side.
        #[arg(long, value_enum)]
        convention: Option<ConventionArg>,
        #[command(flatten)]
        planning: PlanningArgs,
        #[arg(long, value_enum, default_value = "text")]
        format: Format,
    },
}

/// Overrides of the file's test level and target power.
#[derive(Debug, Clone, Copy, clap::Args)]
pub struct PlanningArgs {
    /// Level of every test (overrides `alpha` in the file; default 0.05).
    #[arg(long)]
    pub alpha: Option<f64>,
    /// Power the minimum detectable effects are solved for (default 0.8).
    #[arg(long)]
    pub power: Option<f64>,
}

impl PlanningArgs {
    pub fn apply(&self, plan: &mut PlanningValues) -> Result<(), Error> {
        if let Some(a) = self.alpha {
            plan.alpha = check_probability(a, "--alpha").map_err(Error::Usage)?;
        }
        if let Some(p) = self.power {
            plan.power = check_probability(p, "--power").map_err(Error::Usage)?;
        }
        Ok(())
    }
}

/// Reads a layout file with its planning values, command-line overrides applied.
pub fn load(
    path: &std::path::Path,
    args: &PlanningArgs,
) -> Result<(Layout, PlanningValues), Error> {
    let (layout, spec, text) = Layout::from_file(path)?;
    let mut plan = PlanningValues::from_spec(&spec, &text, &layout).map_err(|e| e.in_file(path))?;
    args.apply(&mut plan)?;
    Ok((layout, plan))
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum ConventionArg {
    Restricted,
    Unrestricted,
    Both,
}

pub fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(out) => {
            print!("{out}");
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("emsplan: {e}");
            match e {
                Error::Usage(_) => ExitCode::from(2),
                _ => ExitCode::from(1),
            }
        }
    }
}

/// Runs a parsed command and returns what goes to stdout.
pub fn run(cli: Cli) -> Result<String, Error> {
    match cli.command {
        Command::Check {
            layout,
            convention,
            planning,
            format,
        } => {
            let (layout, plan) = load(&layout, &planning)?;
            let own = layout.structure.convention;
            match convention {
                Some(ConventionArg::Both) => {
                    let r = check(&layout, Convention::Restricted, &plan)?;
                    let u = check(&layout, Convention::Unrestricted, &plan)?;
                    Ok(render::check::render_both(
                        &render::check::BothReport::new(r, u),
                        format,
                    ))
                }
                other => {
                    let c = match other {
                        Some(ConventionArg::Restricted) => Convention::Restricted,
                        Some(ConventionArg::Unrestricted) => Convention::Unrestricted,
                        _ => own,
                    };
                    Ok(render::check::render(&check(&layout, c, &plan)?, format))
                }
            }
        }
    }
}
