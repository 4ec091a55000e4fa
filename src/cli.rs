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
    /// Simulate a layout at its planning values: dummy data, and a Monte Carlo check of
    /// the expected mean squares, error rates and power of the planned tests.
    Simulate {
        /// The layout file (TOML), with a [prior] table.
        layout: PathBuf,
        /// Seed of the random draws: the same seed gives the same output everywhere.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Number of simulated data sets (0: only write --data).
        #[arg(long, default_value_t = 2000)]
        runs: u64,
        /// Write one dummy data set (CSV, long format) to this file.
        #[arg(long)]
        data: Option<PathBuf>,
        /// Grand mean of the dummy data set (default 0).
        #[arg(long, default_value_t = 0.0, allow_negative_numbers = true)]
        mean: f64,
        /// Number nested levels across nests (bench1..bench6) instead of within each nest.
        #[arg(long)]
        unique_labels: bool,
        /// Level of every test (overrides `alpha` in the file; default 0.05).
        #[arg(long)]
        alpha: Option<f64>,
        #[arg(long, value_enum, default_value = "text")]
        format: Format,
    },
    /// Analyze balanced data: the ANOVA with each term over its planned error term,
    /// variance components by the method of moments, and the means of the fixed terms.
    Analyze {
        /// The layout file (TOML) the experiment was run to.
        layout: PathBuf,
        /// The data (CSV, long format): a column of level labels per factor and a response.
        data: PathBuf,
        /// The response column (default: the only column that is not a factor, or `response`).
        #[arg(long)]
        response: Option<String>,
        /// Level of the tests, for the notes (overrides `alpha` in the file; default 0.05).
        #[arg(long)]
        alpha: Option<f64>,
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
        Command::Simulate {
            layout: layout_path,
            seed,
            runs,
            data,
            mean,
            unique_labels,
            alpha,
            format,
        } => {
            if runs > crate::simulate::MAX_RUNS {
                return Err(Error::Usage(format!(
                    "--runs {runs} is more than {} data sets: ask for fewer",
                    crate::simulate::MAX_RUNS
                )));
            }
            if !mean.is_finite() {
                return Err(Error::Usage(format!(
                    "--mean {mean} is not a finite number"
                )));
            }
            let args = PlanningArgs { alpha, power: None };
            let (layout, plan) = load(&layout_path, &args)?;
            let request = crate::simulate::Request {
                seed,
                runs,
                data: data.as_ref().map(|p| crate::simulate::DataRequest {
                    path: p.display().to_string(),
                    mean,
                    unique_labels,
                }),
            };
            let (report, set) = crate::simulate::simulate(&layout, &plan, &request)
                .map_err(|e| e.in_file(&layout_path))?;
            if let (Some(path), Some(set)) = (&data, &set) {
                std::fs::write(path, render::simulate::data_csv(set)).map_err(|source| {
                    Error::Io {
                        path: path.display().to_string(),
                        source,
                    }
                })?;
            }
            Ok(render::simulate::render(&report, format))
        }
        Command::Analyze {
            layout: layout_path,
            data,
            response,
            alpha,
            format,
        } => {
            let args = PlanningArgs { alpha, power: None };
            let (layout, plan) = load(&layout_path, &args)?;
            let observations = crate::analyze::read_data(&data, &layout, response.as_deref())?;
            let report = crate::analyze::analyze(&layout, &observations, plan.alpha)?;
            Ok(render::analyze::render(&report, format))
        }
    }
}
