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
    /// Search for the cheapest layout whose must-test terms are testable, with enough
    /// denominator df and power, within the budget (a layout file with a [search] table).
    Search {
        /// The problem file (TOML).
        problem: PathBuf,
        /// Candidates in the ranked table.
        #[arg(long, default_value_t = 10)]
        top: usize,
        /// Stop before enumerating a space larger than this.
        #[arg(long, default_value_t = crate::search::DEFAULT_MAX_CANDIDATES)]
        max_candidates: u64,
        /// `enumerate` lists every candidate (ranking, frontier, rejections);
        /// `optimize` finds the best of each structure by integer programming.
        #[arg(long, value_enum, default_value = "enumerate")]
        method: crate::search::Method,
        /// Level of every test (overrides `alpha` in the file; default 0.05).
        #[arg(long)]
        alpha: Option<f64>,
        /// Power target of every must-test term (overrides `target_power`); minimum
        /// detectable effects are solved for it.
        #[arg(long)]
        power: Option<f64>,
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
        Command::Search {
            problem,
            top,
            max_candidates,
            method,
            alpha,
            power,
            format,
        } => {
            use crate::search::{Options, Problem, Search};
            if top == 0 {
                return Err(Error::Usage("--top must be at least 1".into()));
            }
            let p = Problem::from_file(&problem, alpha, power)?;
            let search = Search::new(p).map_err(|e| e.in_file(&problem))?;
            let space = search.space();
            eprintln!(
                "emsplan: {} holds {space} candidates in {} structure{}",
                problem.display(),
                search.screens.len(),
                if search.screens.len() == 1 { "" } else { "s" }
            );
            let options = Options {
                top,
                max_candidates,
                method,
                ..Options::default()
            };
            let bar = Bar::new(space.min(u64::MAX as u128) as u64);
            let report = search
                .run(&options, &bar)
                .map_err(|e| e.in_file(&problem))?;
            bar.finish();
            Ok(render::search::render(&report, format))
        }
    }
}

/// A progress bar on stderr, shown only when stderr is a terminal and the search has
/// run for more than half a second.
struct Bar {
    start: std::time::Instant,
    total: u64,
    done: std::sync::atomic::AtomicU64,
    tty: bool,
    bar: std::sync::OnceLock<indicatif::ProgressBar>,
}

impl Bar {
    fn new(total: u64) -> Bar {
        use std::io::IsTerminal;
        Bar {
            start: std::time::Instant::now(),
            total,
            done: Default::default(),
            tty: std::io::stderr().is_terminal(),
            bar: std::sync::OnceLock::new(),
        }
    }

    fn finish(&self) {
        if let Some(b) = self.bar.get() {
            b.finish_and_clear();
        }
    }
}

impl crate::search::Progress for Bar {
    fn advance(&self, n: u64) {
        use std::sync::atomic::Ordering;
        let done = self.done.fetch_add(n, Ordering::Relaxed) + n;
        if !self.tty || self.start.elapsed() < std::time::Duration::from_millis(500) {
            return;
        }
        let bar = self.bar.get_or_init(|| {
            let b = indicatif::ProgressBar::with_draw_target(
                Some(self.total),
                indicatif::ProgressDrawTarget::stderr(),
            );
            if let Ok(style) = indicatif::ProgressStyle::with_template(
                "{bar:40} {pos}/{len} candidates ({eta} left)",
            ) {
                b.set_style(style);
            }
            b
        });
        bar.set_position(done);
    }
}
