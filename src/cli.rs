//! The command line: parse arguments, call a job, pick a renderer, map errors to exit codes.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand, ValueEnum};

use crate::check::check_with_goal;
use crate::compare::{Edit, Side, apply, compare};
use crate::error::Error;
use crate::goal::Goal;
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
    /// Compare two layouts side by side: a second file, or the base with changes.
    Compare {
        /// The base layout file.
        base: PathBuf,
        /// Another layout file to compare with (instead of, or before, the changes).
        other: Option<PathBuf>,
        /// Change one thing of the base, e.g. bench.levels=3, replicates=4,
        /// bench.within=light,cultivar, bench.kind=fixed, alpha=0.01, prior.bench=2.0.
        #[arg(long = "set", value_name = "KEY=VALUE")]
        set: Vec<String>,
        /// Leave out a layer; the factors nested in it move up to its nests.
        #[arg(long = "drop", value_name = "FACTOR")]
        drop: Vec<String>,
        /// Remove one unit or observation from some cells only (e.g. "light=2,chamber=3").
        #[arg(long = "remove", value_name = "CELL")]
        remove: Vec<String>,
        #[arg(long, value_enum)]
        convention: Option<ConventionOne>,
        #[command(flatten)]
        planning: PlanningArgs,
        #[arg(long, value_enum, default_value = "text")]
        format: Format,
    },
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum ConventionOne {
    Restricted,
    Unrestricted,
}

impl From<ConventionOne> for Convention {
    fn from(c: ConventionOne) -> Self {
        match c {
            ConventionOne::Restricted => Convention::Restricted,
            ConventionOne::Unrestricted => Convention::Unrestricted,
        }
    }
}

/// Reads a layout file with its planning values and goal.
pub fn load_side(path: &std::path::Path, args: &PlanningArgs) -> Result<Side, Error> {
    let (layout, spec, text) = Layout::from_file(path)?;
    let mut plan = PlanningValues::from_spec(&spec, &text, &layout).map_err(|e| e.in_file(path))?;
    args.apply(&mut plan)?;
    let goal = Goal::from_spec(&spec, &text, &layout).map_err(|e| e.in_file(path))?;
    Ok(Side { layout, plan, goal })
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
            let path = layout;
            let Side { layout, plan, goal } = load_side(&path, &planning)?;
            let own = layout.structure.convention;
            // Errors of the check itself (a convention an unbalanced layout does not
            // have) name the file.
            let check_with_goal = |l: &Layout, c: Convention, p: &PlanningValues, g: &Goal| {
                check_with_goal(l, c, p, g).map_err(|e| e.in_file(&path))
            };
            match convention {
                Some(ConventionArg::Both) => {
                    let r = check_with_goal(&layout, Convention::Restricted, &plan, &goal)?;
                    let u = check_with_goal(&layout, Convention::Unrestricted, &plan, &goal)?;
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
                    Ok(render::check::render(
                        &check_with_goal(&layout, c, &plan, &goal)?,
                        format,
                    ))
                }
            }
        }
        Command::Compare {
            base,
            other,
            set,
            drop,
            remove,
            convention,
            planning,
            format,
        } => {
            let base_side = load_side(&base, &planning)?;
            let mut changes = Vec::new();
            let mut side = match &other {
                Some(path) => {
                    changes.push(format!("{} instead of {}", path.display(), base.display()));
                    load_side(path, &planning)?
                }
                None => base_side.clone(),
            };
            if other.is_none() && set.is_empty() && drop.is_empty() && remove.is_empty() {
                return Err(Error::Usage(
                    "compare needs something to compare with: a second file, or --set / --drop changes".into(),
                ));
            }
            let mut edits: Vec<Edit> = Vec::new();
            for s in &set {
                edits.push(Edit::parse_set(s)?);
            }
            edits.extend(drop.iter().cloned().map(Edit::Drop));
            edits.extend(remove.iter().cloned().map(Edit::Remove));
            let mut notes = Vec::new();
            for e in &edits {
                let (next, more) = apply(&side, e)?;
                side = next;
                notes.extend(more);
                changes.push(e.describe());
            }
            let comparison = compare(
                &base_side,
                &side,
                changes,
                notes,
                convention.map(Convention::from),
            )?;
            Ok(render::compare::render(&comparison, format))
        }
    }
}
