//! `flexure`: the command line of the flexure engine. Parses arguments, fills the engine's job
//! options, runs the job and prints its report; errors are one line on stderr with exit code 1.

use clap::{Parser, Subcommand, ValueEnum};
use flexure_engine::curvature::{attribute_by_id, ATTRIBUTES};
use flexure_engine::demo::{run_demo, write_demo_data};
use flexure_engine::error::FlexureError;
use flexure_engine::horizon::{Domain, ZUnit};
use flexure_engine::jobs::{CurvatureJob, Progress, Silent, VelocitySource};
use indicatif::{ProgressBar, ProgressStyle};
use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::process::ExitCode;

const CAUTION: &str =
    "Caution: these maps inform interpretation; they do not replace a geomechanical study. \
Drilling and completion decisions belong to licensed professionals under local regulations.";

#[derive(Parser)]
#[command(name = "flexure", version, about = "Curvature attributes from interpreted horizon grids", after_help = CAUTION)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Fit local quadrics at each window and write the curvature attributes as GeoTIFFs.
    Curvature(CurvatureArgs),
    /// Run the curvature job on the shipped demo horizons.
    Demo {
        /// Folder for the results.
        #[arg(long, default_value = "demo_output")]
        out: PathBuf,
        /// Folder holding the demo horizons.
        #[arg(long, default_value = "demo_horizons")]
        data: PathBuf,
        /// Print nothing but errors.
        #[arg(long)]
        quiet: bool,
    },
    /// Regenerate the demo horizons from their analytic definition (deterministic).
    DemoData {
        /// Folder to write them into.
        #[arg(long, default_value = "demo_horizons")]
        out: PathBuf,
    },
}

#[derive(Clone, Copy, ValueEnum)]
enum DomainArg {
    /// Depth, positive down.
    Depth,
    /// Two-way time in ms, positive down (needs a velocity).
    Time,
    /// Elevation, positive up.
    Elevation,
}

#[derive(Clone, Copy, ValueEnum)]
enum ZUnitArg {
    /// Metres.
    M,
    /// International feet.
    Ft,
}

#[derive(clap::Args)]
struct CurvatureArgs {
    /// Horizon grid (any single-band raster GDAL reads, projected CRS).
    input: PathBuf,
    /// Output folder; one file <input-stem>_w<NN>.tif per window.
    #[arg(long)]
    out: PathBuf,
    /// Window edge lengths in cells, odd, 3 to 101.
    #[arg(long, value_delimiter = ',', default_value = "3,5,9,17")]
    windows: Vec<usize>,
    /// Attributes to write (comma separated); default all.
    #[arg(long, value_delimiter = ',')]
    attributes: Vec<String>,
    /// What the grid values measure.
    #[arg(long, value_enum, default_value = "depth")]
    domain: DomainArg,
    /// Unit of depth or elevation values.
    #[arg(long, value_enum, default_value = "m")]
    z_unit: ZUnitArg,
    /// Average velocity in m/s for a time grid (depth = V t / 2000).
    #[arg(long, conflicts_with = "velocity_grid")]
    velocity: Option<f64>,
    /// Grid of average velocities in m/s on the horizon's cells.
    #[arg(long)]
    velocity_grid: Option<PathBuf>,
    /// Least share of valid cells in a window for a fit.
    #[arg(long, default_value_t = 0.75)]
    min_valid: f64,
    /// CRS to assume when the input declares none (e.g. EPSG:32625).
    #[arg(long)]
    crs: Option<String>,
    /// Print nothing but errors.
    #[arg(long)]
    quiet: bool,
}

impl CurvatureArgs {
    fn job(&self) -> Result<CurvatureJob, FlexureError> {
        let mut job = CurvatureJob::new(&self.input, &self.out, self.windows.clone());
        if !self.attributes.is_empty() {
            job.attributes = self
                .attributes
                .iter()
                .map(|id| attribute_by_id(id.trim()))
                .collect::<Result<_, _>>()
                .map_err(FlexureError::Parameter)?;
        }
        job.domain = match self.domain {
            DomainArg::Depth => Domain::Depth,
            DomainArg::Time => Domain::Time,
            DomainArg::Elevation => Domain::Elevation,
        };
        job.z_unit = match self.z_unit {
            ZUnitArg::M => ZUnit::Metre,
            ZUnitArg::Ft => ZUnit::Foot,
        };
        job.velocity = match (&self.velocity, &self.velocity_grid) {
            (Some(v), _) => VelocitySource::Constant(*v),
            (None, Some(p)) => VelocitySource::Grid(p.clone()),
            (None, None) => VelocitySource::None,
        };
        job.min_valid = self.min_valid;
        job.crs = self.crs.clone();
        Ok(job)
    }
}

/// A progress bar on stderr, shown only on a terminal.
struct Bar(ProgressBar);

impl Bar {
    fn new(quiet: bool) -> Self {
        let bar = if quiet || !std::io::stderr().is_terminal() {
            ProgressBar::hidden()
        } else {
            ProgressBar::new(0).with_style(
                ProgressStyle::with_template("{bar:40} {pos}/{len} rows {eta}")
                    .unwrap_or_else(|_| ProgressStyle::default_bar()),
            )
        };
        Self(bar)
    }
}

impl Progress for Bar {
    fn begin(&self, total: u64) {
        self.0.set_position(0);
        self.0.set_length(total);
    }
    fn advance(&self, done: u64) {
        self.0.inc(done);
    }
    fn finish(&self) {
        self.0.finish_and_clear();
    }
}

/// Prints `text` and a newline to stdout; a closed pipe (e.g. `| head`) is not an error.
fn say(text: &str) {
    let _ = writeln!(std::io::stdout().lock(), "{text}");
}

fn run(cli: Cli) -> Result<(), FlexureError> {
    match cli.command {
        Command::Curvature(args) => {
            let report = args.job()?.run(&Bar::new(args.quiet))?;
            if !args.quiet {
                say(&format!("{report}{CAUTION}"));
            }
        }
        Command::Demo { out, data, quiet } => {
            let progress: Box<dyn Progress> = if quiet {
                Box::new(Silent)
            } else {
                Box::new(Bar::new(false))
            };
            let reports = run_demo(&data, &out, progress.as_ref())?;
            if !quiet {
                let mut text: String = reports.iter().map(|r| r.to_string()).collect();
                text += &format!("Demo results are in {}\n", out.join("curvature").display());
                text += &format!(
                    "Bands of each file: {}\n",
                    ATTRIBUTES
                        .iter()
                        .map(|a| a.id)
                        .collect::<Vec<_>>()
                        .join(", ")
                );
                say(&(text + CAUTION));
            }
        }
        Command::DemoData { out } => {
            let written: Vec<String> = write_demo_data(&out)?
                .iter()
                .map(|p| format!("wrote {}", p.display()))
                .collect();
            say(&written.join("\n"));
        }
    }
    Ok(())
}

fn main() -> ExitCode {
    match run(Cli::parse()) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("flexure: error: {e}");
            ExitCode::FAILURE
        }
    }
}
