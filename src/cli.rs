//! The command line: parse arguments, call a job, pick a renderer, map errors to exit codes.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand, ValueEnum};

use crate::check::check_with_goal;
use crate::compare::{Edit, Side, apply, compare};
use crate::error::{Error, ExitStatus};
use crate::goal::Goal;
use crate::layout::{Convention, Layout};
use crate::planning::{PlanningValues, check_probability};
use crate::render;
use crate::render::Format;

/// The output format, as the command line spells it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum FormatArg {
    Text,
    Json,
    Markdown,
    Csv,
}

impl From<FormatArg> for Format {
    fn from(f: FormatArg) -> Self {
        match f {
            FormatArg::Text => Format::Text,
            FormatArg::Json => Format::Json,
            FormatArg::Markdown => Format::Markdown,
            FormatArg::Csv => Format::Csv,
        }
    }
}

/// How the search looks for the best layout, as the command line spells it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum MethodArg {
    Enumerate,
    Optimize,
}

impl From<MethodArg> for crate::search::Method {
    fn from(m: MethodArg) -> Self {
        match m {
            MethodArg::Enumerate => crate::search::Method::Enumerate,
            MethodArg::Optimize => crate::search::Method::Optimize,
        }
    }
}

#[derive(Debug, Parser)]
#[command(
    name = "emsplan",
    version,
    about = "Plan experiments with crossed and nested, fixed and random factors: expected mean squares, error terms, power and cost.",
    after_help = limits_and_exit_codes()
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Check a layout: df, expected mean squares, error term, verdict and power of every
    /// term, and the layout's cost.
    #[command(after_help = layout_limits())]
    Check {
        /// The layout file (TOML).
        layout: PathBuf,
        /// Convention for mixed interactions; `both` shows the two side by side.
        #[arg(long, value_enum)]
        convention: Option<ConventionArg>,
        #[command(flatten)]
        planning: PlanningArgs,
        #[arg(long, value_enum, default_value = "text")]
        format: FormatArg,
    },
    /// Simulate a layout at its planning values: dummy data, and a Monte Carlo check of
    /// the expected mean squares, error rates and power of the planned tests.
    #[command(after_help = layout_limits())]
    Simulate {
        /// The layout file (TOML), with an [sd] table (the planning standard deviations).
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
        /// Grand mean of the dummy data set.
        #[arg(long, default_value_t = 0.0, allow_negative_numbers = true)]
        mean: f64,
        /// Number nested levels across nests (bench1..bench6) instead of within each nest.
        #[arg(long)]
        unique_labels: bool,
        /// Level of every test (overrides `alpha` in the file; default 0.05).
        #[arg(long)]
        alpha: Option<f64>,
        #[arg(long, value_enum, default_value = "text")]
        format: FormatArg,
    },
    /// Analyze the data, balanced or not (missing cells, lost observations, NA): the ANOVA
    /// with each term over its planned error term, variance components by the method of
    /// moments, and the means of the fixed terms.
    #[command(after_help = layout_limits())]
    Analyze {
        /// The layout file (TOML) the experiment was run to.
        layout: PathBuf,
        /// The data (CSV, long format): a column of level labels per factor and a response.
        data: PathBuf,
        /// The response column (default: the only column that is not a factor, or `response`).
        #[arg(long)]
        response: Option<String>,
        #[arg(long, value_enum, default_value = "text")]
        format: FormatArg,
    },
    /// Search for the cheapest balanced layout whose must-test terms are testable, with
    /// enough denominator df and power, within the budget (a layout file with a [search]
    /// table).
    #[command(after_help = layout_limits())]
    Search {
        /// The problem file (TOML).
        problem: PathBuf,
        /// Candidates in the ranked table.
        #[arg(long, default_value_t = 10)]
        top: usize,
        /// Stop before enumerating a space of more candidates than this (with `optimize`:
        /// before any enumeration it falls back on).
        #[arg(long, default_value_t = crate::search::DEFAULT_MAX_CANDIDATES)]
        max_candidates: u64,
        /// `enumerate` lists every candidate (ranking, frontier, rejections);
        /// `optimize` finds the best of each structure by integer programming.
        #[arg(long, value_enum, default_value = "enumerate")]
        method: MethodArg,
        /// Level of every test (overrides `alpha` in the file; default 0.05).
        #[arg(long)]
        alpha: Option<f64>,
        /// Power target of every must-test term (overrides `target_power`); minimum
        /// detectable effects are solved for it.
        #[arg(long)]
        power: Option<f64>,
        #[arg(long, value_enum, default_value = "text")]
        format: FormatArg,
    },
    /// Compare two layouts side by side: a second file, or the base with changes.
    #[command(after_help = layout_limits())]
    Compare {
        /// The base layout file.
        base: PathBuf,
        /// Another layout file to compare with (instead of, or before, the changes).
        other: Option<PathBuf>,
        /// Change one thing of the base, e.g. bench.levels=3, replicates=4,
        /// bench.within=light,cultivar, bench.kind=fixed, alpha=0.01, sd.bench=2.0
        /// (prior.bench, the old name, still works).
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
        format: FormatArg,
    },
    /// Write a report that justifies the design: self-contained HTML, or Markdown.
    #[command(after_help = layout_limits())]
    Report {
        /// The layout or problem file (TOML).
        layout: PathBuf,
        /// Write the report to this file (default: standard output). With --markdown the
        /// figures are written beside it as NAME-*.svg.
        #[arg(short = 'o', long = "output")]
        output: Option<PathBuf>,
        /// Markdown instead of HTML, for a supplement.
        #[arg(long)]
        markdown: bool,
        /// Add a Monte Carlo confirmation of every test with this many simulated data sets.
        #[arg(long)]
        runs: Option<u64>,
        /// Seed of the Monte Carlo run.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        #[command(flatten)]
        planning: PlanningArgs,
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
    print_notes(&spec);
    let mut plan = PlanningValues::from_spec(&spec, &text, &layout).map_err(|e| e.in_file(path))?;
    args.apply(&mut plan)?;
    let goal = Goal::from_spec(&spec, &text, &layout).map_err(|e| e.in_file(path))?;
    Ok(Side { layout, plan, goal })
}

/// Tells on stderr what the reader should know about how a file was read.
fn print_notes(spec: &crate::spec::Spec) {
    for note in &spec.notes {
        eprintln!("emsplan: {note}");
    }
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

/// The engine's limits, at the end of the help of every command that reads a layout.
fn layout_limits() -> String {
    format!(
        "Limits: at most {} factors; level counts of at least 1 (2 for a fixed factor) whose product with the replicates fits in 64 bits; a layout with removed cells, or unbalanced data, at most {} observations and {} cells, both counted in the full layout; simulate and report --runs at most {}; search stops before more than --max-candidates candidates (default {}). See docs/layout-file.md.",
        crate::layout::MAX_FACTORS,
        crate::unbalanced::removal::MAX_OBSERVATIONS,
        crate::unbalanced::removal::MAX_CELLS,
        crate::simulate::MAX_RUNS,
        crate::search::DEFAULT_MAX_CANDIDATES,
    )
}

/// The end of `emsplan --help`: the limits and the exit codes.
fn limits_and_exit_codes() -> String {
    format!(
        "{}\n\nExit status: 0 success; 1 bad input (a file or value to fix); 2 usage (the command line could not be parsed); 3 the output could not be written.",
        layout_limits()
    )
}

/// Runs the command line and exits 0 (success), 1 (bad input), 2 (usage: the argument
/// parser's errors) or 3 (the output could not be written); see `ExitStatus`.
pub fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            // --help and --version are not errors; they print to stdout.
            let status = if e.use_stderr() {
                ExitStatus::Usage
            } else {
                ExitStatus::Success
            };
            let _ = e.print();
            return ExitCode::from(status.code());
        }
    };
    let status = match run(cli).and_then(|out| write_stdout(&out)) {
        Ok(()) => ExitStatus::Success,
        Err(e) => {
            eprintln!("emsplan: {e}");
            e.exit_status()
        }
    };
    ExitCode::from(status.code())
}

/// Writes the results to stdout. A reader that stops early (a closed pipe, as with
/// `| head`) is not a failure; any other write error is.
fn write_stdout(out: &str) -> Result<(), Error> {
    use std::io::Write;
    let mut stdout = std::io::stdout().lock();
    match stdout
        .write_all(out.as_bytes())
        .and_then(|()| stdout.flush())
    {
        Err(e) if e.kind() != std::io::ErrorKind::BrokenPipe => Err(Error::Write {
            path: "standard output".into(),
            source: e,
        }),
        _ => Ok(()),
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
                Some(ConventionArg::Both) => Ok(render::check::render_both(
                    &crate::check::check_both(&layout, &plan, &goal)
                        .map_err(|e| e.in_file(&path))?,
                    format.into(),
                    text_width(),
                )),
                other => {
                    let c = match other {
                        Some(ConventionArg::Restricted) => Convention::Restricted,
                        Some(ConventionArg::Unrestricted) => Convention::Unrestricted,
                        _ => own,
                    };
                    Ok(render::check::render(
                        &check_with_goal(&layout, c, &plan, &goal)?,
                        format.into(),
                        text_width(),
                    ))
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
            if let Some(out) = &data {
                refuse_overwriting(out, &[&layout_path], "--data")?;
            }
            let args = PlanningArgs { alpha, power: None };
            let Side { layout, plan, .. } = load_side(&layout_path, &args)?;
            let request = crate::simulate::Request {
                seed,
                runs,
                data: data.as_ref().map(|p| crate::simulate::DataRequest {
                    path: p.display().to_string(),
                    mean,
                    unique_labels,
                }),
            };
            let bar = Bar::new(runs, "data sets");
            let (report, set) = crate::simulate::simulate_with(&layout, &plan, &request, &bar)
                .map_err(|e| e.in_file(&layout_path))?;
            bar.finish();
            if let (Some(path), Some(set)) = (&data, &set) {
                write_file(path, &render::simulate::data_csv(set))?;
            }
            Ok(render::simulate::render(
                &report,
                format.into(),
                text_width(),
            ))
        }
        Command::Analyze {
            layout: layout_path,
            data,
            response,
            format,
        } => {
            let args = PlanningArgs {
                alpha: None,
                power: None,
            };
            let Side { layout, plan, .. } = load_side(&layout_path, &args)?;

            let size = std::fs::metadata(&data).map_or(0, |m| m.len());
            let bar = Bar::new(size, "bytes read");
            let observations =
                crate::analyze::read_data_with(&data, &layout, response.as_deref(), &bar)?;
            bar.finish();
            let report = crate::analyze::analyze(&layout, &observations, plan.alpha)?;
            Ok(render::analyze::render(
                &report,
                format.into(),
                text_width(),
            ))
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
            let (base, spec, text) = Layout::from_file(&problem)?;
            print_notes(&spec);
            let in_file = |e: Error| e.in_file(&problem);
            let mut plan = PlanningValues::from_spec(&spec, &text, &base).map_err(in_file)?;
            PlanningArgs { alpha, power }.apply(&mut plan)?;
            let p = Problem::from_spec(&spec, &text, base, plan, power).map_err(in_file)?;
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
                method: method.into(),
                ..Options::default()
            };
            let bar = Bar::new(space.min(u64::MAX as u128) as u64, "candidates");
            let report = search
                .run(&options, &bar)
                .map_err(|e| e.in_file(&problem))?;
            bar.finish();
            Ok(render::search::render(&report, format.into(), text_width()))
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
                let edit = Edit::parse_set(s)?;
                if let Some(note) = edit.old_name_note() {
                    eprintln!("emsplan: {note}");
                }
                edits.push(edit);
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
            Ok(render::compare::render(
                &comparison,
                format.into(),
                text_width(),
            ))
        }
        Command::Report {
            layout,
            output,
            markdown,
            runs,
            seed,
            planning,
        } => {
            if let Some(out) = &output {
                refuse_overwriting(out, &[&layout], "-o")?;
            }
            let (base, spec, text) = Layout::from_file(&layout)?;
            print_notes(&spec);
            let in_file = |e: Error| e.in_file(&layout);
            let mut plan = PlanningValues::from_spec(&spec, &text, &base).map_err(in_file)?;
            planning.apply(&mut plan)?;
            let goal = Goal::from_spec(&spec, &text, &base).map_err(in_file)?;
            let problem = match spec.search {
                None => None,
                Some(_) => Some(
                    crate::search::Problem::from_spec(
                        &spec,
                        &text,
                        base.clone(),
                        plan.clone(),
                        planning.power,
                    )
                    .map_err(in_file)?,
                ),
            };
            let monte_carlo = match runs {
                None => None,
                Some(runs) if runs == 0 || runs > crate::simulate::MAX_RUNS => {
                    return Err(Error::Usage(format!(
                        "--runs {runs}: ask for between 1 and {} data sets",
                        crate::simulate::MAX_RUNS
                    )));
                }
                Some(runs) => Some(crate::simulate::Request {
                    seed,
                    runs,
                    data: None,
                }),
            };
            let report =
                crate::report::compose(&base, &plan, &goal, command_line(), problem, monte_carlo)
                    .map_err(in_file)?;
            write_report(&report, output.as_deref(), markdown)
        }
    }
}

/// The width text output is laid out to: `COLUMNS` when it holds a positive whole
/// number, else the terminal's width when stdout is a terminal, else 100 columns.
fn text_width() -> render::Width {
    use std::io::IsTerminal;
    let columns = std::env::var("COLUMNS")
        .ok()
        .and_then(|c| c.trim().parse::<usize>().ok())
        .filter(|&c| c > 0)
        .or_else(|| {
            let out = std::io::stdout();
            if !out.is_terminal() {
                return None;
            }
            terminal_size::terminal_size_of(&out).map(|(w, _)| usize::from(w.0))
        });
    columns.map_or(render::Width::DEFAULT, render::Width::new)
}

/// The command line as typed, for the report's reproduction note.
fn command_line() -> String {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let quoted: Vec<String> = args
        .iter()
        .map(|a| {
            if a.chars()
                .all(|c| c.is_alphanumeric() || "-_./=,:".contains(c))
            {
                a.clone()
            } else {
                format!("'{}'", a.replace('\'', "'\\''"))
            }
        })
        .collect();
    format!("emsplan {}", quoted.join(" "))
}

/// Writes the report where asked; returns what goes to stdout.
fn write_report(
    report: &crate::report::Report,
    output: Option<&std::path::Path>,
    markdown: bool,
) -> Result<String, Error> {
    let write = write_file;
    match (output, markdown) {
        (None, false) => Ok(render::report::html(report)),
        (None, true) => {
            eprintln!(
                "emsplan: figures are not written without -o FILE; the Markdown links to them"
            );
            Ok(render::report::markdown(report, "report-").0)
        }
        (Some(path), false) => {
            write(path, &render::report::html(report))?;
            eprintln!("emsplan: wrote {}", path.display());
            Ok(String::new())
        }
        (Some(path), true) => {
            let stem = path
                .file_stem()
                .map(|s| s.to_string_lossy().into_owned())
                .unwrap_or_else(|| "report".into());
            let (text, figures) = render::report::markdown(report, &format!("{stem}-"));
            write(path, &text)?;
            let dir = path.parent().unwrap_or_else(|| std::path::Path::new(""));
            remove_old_figures(dir, &stem, &figures)?;
            for (name, svg) in figures {
                write(&dir.join(name), &svg)?;
            }
            eprintln!("emsplan: wrote {} and its figures", path.display());
            Ok(String::new())
        }
    }
}

/// Writes a file whole or not at all: into a temporary file in the same folder, renamed
/// over the target once complete, so a run killed while writing leaves the old file (or
/// none) under the real name, never half of the new one.
fn write_file(path: &std::path::Path, text: &str) -> Result<(), Error> {
    use std::io::Write;
    let failed = |source: std::io::Error| Error::Write {
        path: path.display().to_string(),
        source,
    };
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d,
        _ => std::path::Path::new("."),
    };
    let mut file = tempfile::NamedTempFile::new_in(dir).map_err(failed)?;
    file.write_all(text.as_bytes())
        .and_then(|()| file.as_file().sync_all())
        .map_err(failed)?;
    file.persist(path).map_err(|e| failed(e.error))?;
    Ok(())
}

/// Refuses an output path that is the same file as one of the inputs: compared by the
/// file itself (device and inode where the system has them, else the canonical path),
/// so `./a.toml`, `a.toml` and a link to it are all the same file.
fn refuse_overwriting(
    output: &std::path::Path,
    inputs: &[&std::path::Path],
    option: &str,
) -> Result<(), Error> {
    let Ok(out) = std::fs::metadata(output) else {
        return Ok(());
    };
    for input in inputs {
        let Ok(inp) = std::fs::metadata(input) else {
            continue;
        };
        if same_file(&out, &inp, output, input) {
            return Err(Error::Usage(format!(
                "{option} {}: that is the input file {}; write the output under another name",
                output.display(),
                input.display()
            )));
        }
    }
    Ok(())
}

#[cfg(unix)]
fn same_file(
    a: &std::fs::Metadata,
    b: &std::fs::Metadata,
    _: &std::path::Path,
    _: &std::path::Path,
) -> bool {
    use std::os::unix::fs::MetadataExt;
    a.dev() == b.dev() && a.ino() == b.ino()
}

#[cfg(not(unix))]
fn same_file(
    _: &std::fs::Metadata,
    _: &std::fs::Metadata,
    a: &std::path::Path,
    b: &std::path::Path,
) -> bool {
    matches!((std::fs::canonicalize(a), std::fs::canonicalize(b)), (Ok(x), Ok(y)) if x == y)
}

/// Removes the figures an earlier Markdown report of the same name left that this one
/// does not write again (`STEM-layout.svg`, `STEM-power-N.svg`), so no stale figure
/// stays beside the new report.
fn remove_old_figures(
    dir: &std::path::Path,
    stem: &str,
    figures: &[(String, String)],
) -> Result<(), Error> {
    let dir = if dir.as_os_str().is_empty() {
        std::path::Path::new(".")
    } else {
        dir
    };
    let Ok(entries) = std::fs::read_dir(dir) else {
        return Ok(());
    };
    let power = format!("{stem}-power-");
    for entry in entries.flatten() {
        let name = entry.file_name();
        let Some(name) = name.to_str() else { continue };
        let ours = name == format!("{stem}-layout.svg")
            || name
                .strip_prefix(&power)
                .and_then(|rest| rest.strip_suffix(".svg"))
                .is_some_and(|n| !n.is_empty() && n.bytes().all(|b| b.is_ascii_digit()));
        if ours && !figures.iter().any(|(f, _)| f == name) {
            std::fs::remove_file(entry.path()).map_err(|source| Error::Write {
                path: entry.path().display().to_string(),
                source,
            })?;
        }
    }
    Ok(())
}

/// A progress bar on stderr, shown only when stderr is a terminal and the search has
/// run for more than half a second.
struct Bar {
    start: std::time::Instant,
    total: u64,
    /// What is counted: "candidates", "data sets".
    unit: &'static str,
    done: std::sync::atomic::AtomicU64,
    tty: bool,
    bar: std::sync::OnceLock<indicatif::ProgressBar>,
}

impl Bar {
    fn new(total: u64, unit: &'static str) -> Bar {
        use std::io::IsTerminal;
        Bar {
            start: std::time::Instant::now(),
            total,
            unit,
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

impl crate::progress::Progress for Bar {
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
            let template = format!("{{bar:40}} {{pos}}/{{len}} {} ({{eta}} left)", self.unit);
            if let Ok(style) = indicatif::ProgressStyle::with_template(&template) {
                b.set_style(style);
            }
            b
        });
        bar.set_position(done);
    }
}
