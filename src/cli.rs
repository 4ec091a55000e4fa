//! The command line: parse arguments, call a job, pick a renderer, map errors to exit codes.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand, ValueEnum};

use crate::check::check;
use crate::error::Error;
use crate::layout::{Convention, Layout};
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
        #[arg(long, value_enum, default_value = "text")]
        format: Format,
    },
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
            format,
        } => {
            let (layout, _spec, _text) = Layout::from_file(&layout)?;
            let own = layout.structure.convention;
            match convention {
                Some(ConventionArg::Both) => {
                    let r = check(&layout, Convention::Restricted)?;
                    let u = check(&layout, Convention::Unrestricted)?;
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
                    Ok(render::check::render(&check(&layout, c)?, format))
                }
            }
        }
    }
}
