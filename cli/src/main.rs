//! `flexure`: the command line of the flexure engine. Parses arguments, fills the engine's job
//! options, runs the job and prints its report; errors are one line on stderr with exit code 1.

mod job_file;
mod run;

use clap::{Parser, Subcommand, ValueEnum};
use flexure_cli::demo::{write_demo_data, DEMO_JOB_FILE};
use flexure_engine::draw::colour::Clip;
use flexure_engine::error::FlexureError;
use flexure_engine::io::points::ColumnRole;
use flexure_engine::io::segy::SegyHeaderBytes;
use flexure_engine::io::{Compression, ReadOptions, TiffOptions};
use flexure_engine::jobs::{
    parse_memory, parse_numbers, read_well_list, AnisotropyJob, AzimuthReference, CurvatureJob,
    GridJob, Named, PlanJob, Progress, RenderJob, Silent, StagesJob, VectorAxis, WeightSource,
    WellBindings, WindowStudyJob, HTI_CAUTION, WELL_CAUTION,
};
use flexure_engine::jobs::{
    SectorTimesJob, TimeUnit, DEFAULT_HALF_WINDOW_MS, DEFAULT_MAX_SHIFT_MS, DEFAULT_TRACE_TOLERANCE,
};
use flexure_engine::surface::curvature::attribute_by_id;
use flexure_engine::surface::horizon::{
    DeclaredUnit, Domain, HorizonSource, VelocitySource, VelocityUnit, ZUnit,
};
use indicatif::{ProgressBar, ProgressStyle};
use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::process::ExitCode;

const CAUTION: &str =
    "Caution: these maps inform interpretation; they do not replace a geomechanical study. \
Drilling and completion decisions belong to licensed professionals under local regulations.";

#[derive(Parser)]
#[command(name = "flexure", version, about = "Curvature and azimuthal anisotropy from interpreted horizon and sector grids", after_help = CAUTION)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Fit local quadrics at each window and write the curvature attributes as GeoTIFFs.
    Curvature(CurvatureArgs),
    /// Fit t = A + a1 cos 2phi + a2 sin 2phi in every bin of azimuth-sector time grids and
    /// write anisotropy.tif and map vectors (GeoPackage, GeoJSON).
    #[command(after_help = anisotropy_help())]
    Anisotropy(AnisotropyArgs),
    /// Draw one attribute band as a georeferenced RGBA GeoTIFF (and a PNG quicklook), optionally
    /// shaded by the horizon and overlaid with anisotropy vectors.
    #[command(after_help = CAUTION)]
    Render(RenderArgs),
    /// Measure noise against detail over several windows on one horizon, choose a window per
    /// cell and recommend one window (window_study.json, .csv, a chart, a panel of maps and,
    /// with --adaptive, the adaptive map).
    WindowStudy(WindowStudyArgs),
    /// Per-stage corridor statistics of anisotropy (and curvature) along wells: stages.csv,
    /// corridor polygons, rose diagrams and a sheet per well.
    #[command(after_help = WELL_CAUTION)]
    Stages(StagesArgs),
    /// Score candidate lateral azimuths from a pad against the local fast azimuth.
    #[command(after_help = WELL_CAUTION)]
    Plan(PlanArgs),
    /// Write a point list (or any raster) as the float64 GeoTIFF flexure reads it: the exact
    /// bin lattice, nulls, value names and units, to check in a GIS and reuse.
    Grid(GridArgs),
    /// Measure each azimuth-sector SEG-Y volume's time shift along a guide horizon (optionally
    /// also a base horizon, for the interval between them) by cross-correlation with the
    /// mean sector trace: sector_times.tif (ms), sector_quality.tif, reference_time.tif, ready
    /// for `flexure anisotropy`.
    #[command(after_help = CAUTION)]
    SectorTimes(SectorTimesArgs),
    /// Run a job file: every step of a project (curvature, window study, sector times,
    /// anisotropy, stages, plan, maps) as one all-or-nothing run, with manifest.json and
    /// report.html beside the outputs.
    #[command(after_help = RUN_HELP)]
    Run(RunArgs),
    /// Run the shipped demo job (demo_horizons/tessary_demo.toml) through `flexure run`.
    Demo {
        /// Folder for the results.
        #[arg(short = 'o', long, default_value = "demo_output")]
        out: PathBuf,
        /// Folder holding the demo horizons and the demo job file.
        #[arg(long, default_value = "demo_horizons")]
        data: PathBuf,
        /// Print nothing but errors.
        #[arg(short, long)]
        quiet: bool,
    },
    /// Regenerate the demo horizons from their analytic definition (deterministic).
    DemoData {
        /// Folder to write them into.
        #[arg(long, default_value = "demo_horizons")]
        out: PathBuf,
    },
}

const RUN_HELP: &str = "A job file is TOML: `output = \"FOLDER\"`, an optional `title`, and one \
table per step, named after its command ([[curvature]], [[window_study]], [[sector_times]], \
[[anisotropy]], [[stages]], [[plan]], [[render]], [[grid]]), whose keys are the command's \
options with _ for - (min_snr = 3.0), positional inputs by name (input, sectors, volumes), lists \
as arrays and switches as true/false. Inputs are relative to the job file's folder; out and png \
to the output folder; {output}/PATH names an earlier step's output. Steps run in the order \
above. Outputs appear together when every step succeeded, with manifest.json (inputs and \
outputs with SHA-256, options as resolved, notes, timings) and report.html; a failed run \
leaves the output folder as it was.";

/// Options of `flexure run`.
#[derive(clap::Args)]
struct RunArgs {
    /// The job file (TOML).
    job: PathBuf,
    /// Output folder, instead of the job file's `output`.
    #[arg(short = 'o', long)]
    out: Option<PathBuf>,
    /// Check the job file (keys, values, inputs) and print each step's command line, without
    /// computing anything.
    #[arg(long)]
    check: bool,
    /// Print nothing but errors.
    #[arg(short, long)]
    quiet: bool,
}

#[derive(Clone, Copy, ValueEnum)]
enum ReferenceArg {
    /// Azimuths are from grid north of the grids' CRS.
    Grid,
    /// Azimuths are from true north (converted with --convergence, or the CRS's convergence
    /// at the grid centre).
    True,
}

#[derive(Clone, Copy, ValueEnum)]
enum AxisArg {
    /// Along the fast azimuth.
    Fast,
    /// Along the slow azimuth.
    Slow,
}

const ANISOTROPY_OUTPUTS: &str = "Sector times are in ms (two-way times picked per sector, or \
residual time shifts). Outputs: DIR/anisotropy.tif with bands magnitude, magnitude_unbiased, \
azimuth_slow, azimuth_fast, isotropic, r2, residual_rms, magnitude_stderr, azimuth_stderr, \
n_sectors, anisotropy_percent (100 x 2B / T, T the isotropic two-way time of the horizon or \
interval: the fitted A for absolute times, the reference time for time shifts; azimuths in \
degrees from grid north), DIR/anisotropy_vectors.gpkg (grid CRS) and \
DIR/anisotropy_vectors.geojson (RFC 7946, WGS84).";

/// Help epilogue of the anisotropy command: outputs, the HTI reading and its cautions.
fn anisotropy_help() -> String {
    format!("{ANISOTROPY_OUTPUTS}\n\n{HTI_CAUTION}\n\n{CAUTION}")
}

#[derive(clap::Args)]
struct AnisotropyArgs {
    /// Sector time grids in ms: one single-band grid per sector, or one raster with a band per
    /// sector (e.g. sector_times.tif from sector-times).
    #[arg(required_unless_present = "base", conflicts_with = "base")]
    sectors: Vec<PathBuf>,
    /// The top horizon's sector-time raster: fit the interval times base minus top, sector by
    /// sector (needs --base).
    #[arg(long, requires = "base")]
    top: Option<PathBuf>,
    /// The base horizon's sector-time raster (with --top).
    #[arg(long, requires = "top")]
    base: Option<PathBuf>,
    /// Sector-centre azimuths in degrees clockwise from north, one per sector, in order;
    /// default: the azimuths the bands declare (AZIMUTH_DEG metadata, from grid north).
    #[arg(long, value_delimiter = ',', allow_negative_numbers = true, value_parser = trimmed::<f64>)]
    azimuths: Vec<f64>,
    /// Output folder.
    #[arg(short = 'o', long)]
    out: PathBuf,
    /// Sector weights (e.g. fold): one number per sector, one weight grid per sector (or one
    /// raster with a band per sector), or `quality`: the correlation quality in
    /// sector_quality.tif beside the sector times, as w = c^2 / (1 - c^2).
    #[arg(long, value_delimiter = ',')]
    weights: Vec<String>,
    /// Isotropic two-way time (ms) of anisotropy_percent for sector rasters whose metadata
    /// names none (REFERENCE_TIME_FILE); by default the fitted A for absolute sector times.
    #[arg(long)]
    reference_time: Option<PathBuf>,
    /// North the azimuths are measured from.
    #[arg(long, value_enum, default_value = "grid")]
    azimuth_reference: ReferenceArg,
    /// Grid convergence in degrees (true north to grid north, clockwise positive) for
    /// true-north azimuths; computed from the CRS at the grid centre when omitted.
    #[arg(long, allow_negative_numbers = true)]
    convergence: Option<f64>,
    /// Least number of valid sectors in a bin (at least 3).
    #[arg(long, default_value_t = 4)]
    min_sectors: usize,
    /// Draw a vector on every N-th bin in both directions.
    #[arg(long, default_value_t = 1)]
    every: usize,
    /// Least magnitude / magnitude_stderr for a vector (0 keeps every fitted bin).
    #[arg(long, default_value_t = 2.0)]
    min_snr: f64,
    /// Azimuth the vectors follow.
    #[arg(long, value_enum, default_value = "fast")]
    vector: AxisArg,
    /// Vector length in metres per ms of magnitude (automatic when omitted).
    #[arg(long)]
    vector_scale: Option<f64>,
    /// Working memory (row batches and GDAL's block cache), e.g. 512M or 2G; default a
    /// quarter of the machine's memory, at most 1G.
    #[arg(long, value_parser = parse_memory)]
    memory: Option<u64>,
    #[command(flatten)]
    read: ReadArgs,
    #[command(flatten)]
    tiff: TiffArgs,
    /// Print nothing but errors.
    #[arg(short, long)]
    quiet: bool,
}

/// How input grids are read, shared by every command that reads horizons or sector grids.
#[derive(clap::Args)]
struct ReadArgs {
    /// CRS to assume when an input declares none (e.g. EPSG:32625); never overrides a declared
    /// CRS.
    #[arg(long)]
    crs: Option<String>,
    /// A value that means null in inputs (e.g. -999.25); repeat for several. NaN is always
    /// null, as is a nodata value the file declares.
    #[arg(long, allow_negative_numbers = true)]
    nodata: Vec<f64>,
    /// Columns of point-list inputs in file order, e.g. inline,xline,x,y,z (roles inline,
    /// xline, x, y, skip; any other name is a value column, one per sector for sector files);
    /// default: from the header, else x,y,z (3 columns) or inline,xline,x,y,z (5).
    #[arg(long, value_parser = columns)]
    columns: Option<Columns>,
    /// Largest distance of a point-list point from its lattice node, as a share of the
    /// smaller bin.
    #[arg(long, default_value_t = 0.05)]
    lattice_tolerance: f64,
}

/// How output GeoTIFFs are written, shared by every command that writes rasters.
#[derive(clap::Args)]
struct TiffArgs {
    /// Lossless compression of output GeoTIFFs: zstd (fast; GDAL 2.3 or later reads it),
    /// deflate (for older readers) or none.
    #[arg(long, value_parser = Compression::parse, default_value = "zstd")]
    compress: Compression,
    /// Write Cloud Optimized GeoTIFFs (with nearest-neighbour overviews).
    #[arg(long)]
    cog: bool,
}

impl TiffArgs {
    fn options(&self) -> TiffOptions {
        TiffOptions {
            compression: self.compress,
            cog: self.cog,
        }
    }
}

/// A `--columns` list (a newtype, so clap takes the whole list as one value).
#[derive(Clone)]
struct Columns(Vec<ColumnRole>);

fn columns(spec: &str) -> Result<Columns, String> {
    ColumnRole::parse_list(spec)
        .map(Columns)
        .map_err(|e| e.to_string())
}

impl ReadArgs {
    fn options(&self) -> ReadOptions {
        ReadOptions {
            crs: self.crs.clone(),
            nodata: self.nodata.clone(),
            columns: self.columns.clone().map(|c| c.0),
            lattice_tolerance: self.lattice_tolerance,
            ..ReadOptions::default()
        }
    }
}

impl AnisotropyArgs {
    fn job(&self) -> Result<AnisotropyJob, FlexureError> {
        let inputs = match &self.base {
            Some(base) => vec![base.clone()],
            None => self.sectors.clone(),
        };
        let mut job = AnisotropyJob::new(inputs, self.azimuths.clone(), &self.out);
        job.top = self.top.clone();
        job.reference_time = self.reference_time.clone();
        job.reference = reference(self.azimuth_reference, self.convergence)?;
        job.weights = weight_source(&self.weights);
        job.min_sectors = self.min_sectors;
        job.every = self.every;
        job.min_snr = self.min_snr;
        job.axis = axis(self.vector);
        job.vector_scale = self.vector_scale;
        job.memory = self.memory;
        job.read = self.read.options();
        job.tiff = self.tiff.options();
        Ok(job)
    }
}

/// Numbers are per-sector weights; `quality` the correlation quality beside the sector times;
/// anything else names weight grids.
fn weight_source(items: &[String]) -> WeightSource {
    if items.is_empty() {
        return WeightSource::Equal;
    }
    if let [item] = items {
        if item.trim() == "quality" {
            return WeightSource::Quality;
        }
    }
    let numbers: Option<Vec<f64>> = items.iter().map(|s| s.trim().parse().ok()).collect();
    match numbers {
        Some(w) => WeightSource::PerSector(w),
        None => WeightSource::Grids(items.iter().map(PathBuf::from).collect()),
    }
}

/// Parses one item of a comma-separated list, spaces around it allowed ("3, 5, 9").
fn trimmed<T: std::str::FromStr>(item: &str) -> Result<T, String>
where
    T::Err: std::fmt::Display,
{
    item.trim()
        .parse()
        .map_err(|e| format!("`{}`: {e}", item.trim()))
}

/// Parses "X,Y".
fn point(s: &str) -> Result<(f64, f64), String> {
    parse_numbers(s, 2).map(|p| (p[0], p[1]))
}

/// Corridor options shared by `stages` and `plan`.
#[derive(clap::Args)]
struct CorridorArgs {
    /// Curvature raster, or a folder of curvature outputs with --window.
    #[arg(long)]
    curvature: Option<PathBuf>,
    /// Window choosing the curvature file in a folder.
    #[arg(long)]
    window: Option<usize>,
    /// Corridor half width each side of the well, metres.
    #[arg(long, default_value_t = 150.0)]
    half_width: f64,
    /// Fewest fitted anisotropy bins in a corridor before its row is flagged.
    #[arg(long, default_value_t = 10)]
    min_bins: usize,
}

#[derive(clap::Args)]
struct StagesArgs {
    /// anisotropy.tif, or the folder holding it.
    #[arg(long)]
    anisotropy: PathBuf,
    /// Well table, NAME=FILE or FILE (named after the file's stem): a deviation survey
    /// (md,inc,azi) or a path (md,x,y[,tvd|tvdss]); repeat for several wells.
    #[arg(long, value_parser = named_path, required_unless_present = "wells")]
    well: Vec<Named<PathBuf>>,
    /// Well list (TOML, or CSV with the same columns): name, well_file, stage_file,
    /// wellhead_x, wellhead_y, kb, tie_in_md, tie_in_x, tie_in_y, tie_in_tvd.
    #[arg(long)]
    wells: Option<PathBuf>,
    /// Stage table (stage,md_top,md_base) as NAME=FILE, or bare, one per --well in order.
    #[arg(long, value_parser = named_path)]
    stages: Vec<Named<PathBuf>>,
    /// Wellhead NAME=X,Y of a survey starting at md 0 (CRS units); a bare X,Y only with one
    /// well.
    #[arg(long, value_parser = named_point, allow_negative_numbers = true)]
    wellhead: Vec<Named<(f64, f64)>>,
    /// Elevation of the measured-depth reference (KB) above the horizons' depth datum, in the
    /// well's md unit, as NAME=VALUE; a bare VALUE is for every well not named. TVD below
    /// datum = TVD below KB - KB.
    #[arg(long, value_parser = named_number, allow_negative_numbers = true)]
    kb: Vec<Named<f64>>,
    /// Tie-in NAME=X,Y,TVD of a survey starting below md 0: position (CRS units) and TVD below
    /// KB (md unit) of its first station; bare X,Y,TVD only with one well.
    #[arg(long, value_parser = named_triple, allow_negative_numbers = true)]
    tie_in: Vec<Named<(f64, f64, f64)>>,
    #[command(flatten)]
    corridor: CorridorArgs,
    /// Unit of measured depths (and TVD and KB) in tables whose headers declare none; a
    /// header unit it contradicts is refused. Without either: metres, said in the report.
    #[arg(long, value_enum)]
    md_unit: Option<LengthUnitArg>,
    /// North of survey azimuths.
    #[arg(long, value_enum, default_value = "grid")]
    azimuth_reference: ReferenceArg,
    /// Grid convergence in degrees for true-north surveys (computed from the CRS if omitted).
    #[arg(long, allow_negative_numbers = true)]
    convergence: Option<f64>,
    /// Horizon to report each stage's stand-off from (TVD minus horizon depth, positive
    /// below it); any grid in the anisotropy's CRS.
    #[arg(long)]
    horizon: Option<PathBuf>,
    /// Completion table, one row per stage: well, stage and any numeric columns (pressures,
    /// rates, proppant, ...; names and units as you write them), tested against the stage
    /// metrics along the wells.
    #[arg(long)]
    completions: Option<PathBuf>,
    /// Production table, one row per well: well and any numeric columns, tested against the
    /// wells' mean stage metrics.
    #[arg(long)]
    production: Option<PathBuf>,
    /// Divide production values by each well's completed length (its stages' total length).
    #[arg(long, requires = "production")]
    per_length: bool,
    #[command(flatten)]
    domain: DomainArgs,
    #[command(flatten)]
    read: ReadArgs,
    /// Output folder.
    #[arg(short = 'o', long)]
    out: PathBuf,
    /// Print nothing but errors.
    #[arg(short, long)]
    quiet: bool,
}

/// Parses NAME=FILE or FILE.
fn named_path(s: &str) -> Result<Named<PathBuf>, String> {
    Named::parse(s, |v| Ok(PathBuf::from(v)))
}

/// Parses NAME=X,Y or X,Y.
fn named_point(s: &str) -> Result<Named<(f64, f64)>, String> {
    Named::parse(s, point)
}

/// Parses NAME=VALUE or VALUE.
fn named_number(s: &str) -> Result<Named<f64>, String> {
    Named::parse(s, |v| parse_numbers(v, 1).map(|p| p[0]))
}

/// Parses NAME=X,Y,TVD or X,Y,TVD.
fn named_triple(s: &str) -> Result<Named<(f64, f64, f64)>, String> {
    Named::parse(s, |v| parse_numbers(v, 3).map(|p| (p[0], p[1], p[2])))
}

impl StagesArgs {
    fn job(&self) -> Result<StagesJob, FlexureError> {
        let listed = self
            .wells
            .as_deref()
            .map(read_well_list)
            .transpose()?
            .unwrap_or_default();
        let bindings = WellBindings {
            wells: self.well.clone(),
            stages: self.stages.clone(),
            wellheads: self.wellhead.clone(),
            kbs: self.kb.clone(),
            tie_ins: self.tie_in.clone(),
        };
        let mut job = StagesJob::new(&self.anisotropy, bindings.bind(listed)?, &self.out);
        job.curvature = self.corridor.curvature.clone();
        job.window = self.corridor.window;
        job.half_width = self.corridor.half_width;
        job.min_bins = self.corridor.min_bins;
        job.md_unit = self.md_unit.map(ZUnit::from);
        job.reference = reference(self.azimuth_reference, self.convergence)?;
        job.horizon = self.horizon.as_deref().map(|h| self.domain.source(h));
        job.read = self.read.options();
        job.completions = self.completions.clone();
        job.production = self.production.clone();
        job.per_length = self.per_length;
        Ok(job)
    }
}

#[derive(clap::Args)]
struct PlanArgs {
    /// anisotropy.tif, or the folder holding it.
    #[arg(long)]
    anisotropy: PathBuf,
    /// Pad (surface location) X,Y in the grid's CRS.
    #[arg(long, value_parser = point, allow_negative_numbers = true)]
    pad: (f64, f64),
    /// Landing point (heel) X,Y the laterals start from, when it is not under the pad.
    #[arg(long, value_parser = point, allow_negative_numbers = true, conflicts_with = "heel_offset")]
    heel: Option<(f64, f64)>,
    /// Landing point as DISTANCE,AZIMUTH from the pad (CRS units, degrees from grid north).
    #[arg(long, value_parser = point, allow_negative_numbers = true)]
    heel_offset: Option<(f64, f64)>,
    /// Bootstrap draws per candidate for its score interval.
    #[arg(long, default_value_t = flexure_engine::jobs::SCORE_DRAWS)]
    draws: usize,
    /// Lateral length, CRS units.
    #[arg(long)]
    lateral: f64,
    /// Candidate azimuth step, degrees (candidates 0 to < 360 from the heel).
    #[arg(long, default_value_t = 5.0)]
    step: f64,
    #[command(flatten)]
    corridor: CorridorArgs,
    /// Output folder.
    #[arg(short = 'o', long)]
    out: PathBuf,
    /// Print nothing but errors.
    #[arg(short, long)]
    quiet: bool,
}

impl PlanArgs {
    fn job(&self) -> PlanJob {
        let mut job = PlanJob::new(&self.anisotropy, self.pad, self.lateral, &self.out);
        job.heel = self.heel.or(self.heel_offset.map(|(distance, azimuth)| {
            let (s, c) = azimuth.to_radians().sin_cos();
            (self.pad.0 + distance * s, self.pad.1 + distance * c)
        }));
        job.draws = self.draws;
        job.curvature = self.corridor.curvature.clone();
        job.window = self.corridor.window;
        job.step = self.step;
        job.half_width = self.corridor.half_width;
        job.min_bins = self.corridor.min_bins;
        job
    }
}

fn reference(r: ReferenceArg, convergence: Option<f64>) -> Result<AzimuthReference, FlexureError> {
    match (r, convergence) {
        (ReferenceArg::Grid, None) => Ok(AzimuthReference::Grid),
        (ReferenceArg::Grid, Some(_)) => Err(FlexureError::Parameter(
            "--convergence applies only with --azimuth-reference true".into(),
        )),
        (ReferenceArg::True, convergence) => Ok(AzimuthReference::True { convergence }),
    }
}

#[derive(clap::Args)]
struct RenderArgs {
    /// Attribute raster (a curvature or anisotropy output, or any georeferenced raster).
    #[arg(long)]
    attribute: PathBuf,
    /// Band to draw, by its description (e.g. k_pos); default the first band.
    #[arg(long)]
    band: Option<String>,
    /// anisotropy.tif, or the folder holding it, for vectors (same grid, or whole superbins of it).
    #[arg(long)]
    anisotropy: Option<PathBuf>,
    /// Horizon to shade the colours with (same grid as the attribute).
    #[arg(long)]
    shade: Option<PathBuf>,
    /// The shade horizon is elevation (positive up); default depth or time (positive down).
    #[arg(long)]
    shade_positive_up: bool,
    #[command(flatten)]
    read: ReadArgs,
    #[command(flatten)]
    tiff: TiffArgs,
    /// Colour limits LO,HI in the band's unit; default robust percentiles (2nd/98th).
    #[arg(long, value_delimiter = ',', allow_negative_numbers = true, value_parser = trimmed::<f64>)]
    clip: Option<Vec<f64>>,
    /// Draw a vector on every N-th anisotropy bin; default about 45 across the map.
    #[arg(long)]
    every: Option<usize>,
    /// Azimuth the vectors follow.
    #[arg(long, value_enum, default_value = "fast")]
    vector: AxisArg,
    /// Least magnitude / magnitude_stderr for a drawn vector.
    #[arg(long, default_value_t = 2.0)]
    min_snr: f64,
    /// Vector length in metres per ms of magnitude (automatic when omitted).
    #[arg(long)]
    vector_scale: Option<f64>,
    /// RGBA GeoTIFF to write, on the attribute's grid.
    #[arg(short = 'o', long)]
    out: PathBuf,
    /// PNG quicklook with colour bar, vector scale, scale bar, north arrow and extent.
    #[arg(long)]
    png: Option<PathBuf>,
    /// Pixels per cell of the RGBA GeoTIFF (same origin and rotation, pixel size = bin / K);
    /// default about 2000 pixels on the longer side, 1 to 8.
    #[arg(long, value_name = "K")]
    pixels_per_cell: Option<usize>,
    /// Wells to draw on both outputs: a stages output folder (well_paths, stage_corridors) or
    /// a GeoPackage/GeoJSON file of well paths (lines, field `well`) or stage corridors
    /// (polygons, field `stage`). Repeatable.
    #[arg(long, value_name = "PATH")]
    wells: Vec<PathBuf>,
    /// Draw the quicklook north-up (warped for display, map-coordinate ticks); default survey
    /// orientation. The GeoTIFF always stays on the survey grid.
    #[arg(long)]
    north_up: bool,
    /// Contour the shade horizon every INTERVAL, in its stored unit (e.g. ms or m).
    #[arg(long, value_name = "INTERVAL")]
    contour_interval: Option<f64>,
    /// Vertical exaggeration of the relief shading, of the shade horizon as depth in metres
    /// (feet are converted; a time horizon needs --shade-velocity, else it is refused);
    /// default automatic (steepest 5% of slopes lit as 30 degrees).
    #[arg(long)]
    exaggeration: Option<f64>,
    /// Average velocity (m/s) converting a time shade horizon to depth for --exaggeration.
    #[arg(long, value_name = "M_PER_S")]
    shade_velocity: Option<f64>,
    /// Print nothing but errors.
    #[arg(short, long)]
    quiet: bool,
}

impl RenderArgs {
    fn job(&self) -> Result<RenderJob, FlexureError> {
        let mut job = RenderJob::new(&self.attribute, &self.out);
        job.band = self.band.clone();
        job.anisotropy = self.anisotropy.clone();
        job.shade = self.shade.clone();
        job.shade_positive_up = self.shade_positive_up;
        job.read = self.read.options();
        job.tiff = self.tiff.options();
        job.clip = match self.clip.as_deref() {
            None => Clip::Auto,
            Some([lo, hi]) => Clip::Range(*lo, *hi),
            Some(_) => {
                return Err(FlexureError::Parameter(
                    "--clip takes two values: LO,HI".into(),
                ))
            }
        };
        job.every = self.every;
        job.axis = axis(self.vector);
        job.min_snr = self.min_snr;
        job.vector_scale = self.vector_scale;
        job.png = self.png.clone();
        job.pixels_per_cell = self.pixels_per_cell;
        job.wells = self.wells.clone();
        job.north_up = self.north_up;
        job.contour_interval = self.contour_interval;
        job.exaggeration = self.exaggeration;
        job.shade_velocity = self.shade_velocity;
        Ok(job)
    }
}

fn axis(a: AxisArg) -> VectorAxis {
    match a {
        AxisArg::Fast => VectorAxis::Fast,
        AxisArg::Slow => VectorAxis::Slow,
    }
}

#[derive(Clone, Copy, ValueEnum)]
enum DomainArg {
    /// Depth, positive down.
    Depth,
    /// Two-way time in ms, positive down (needs a velocity).
    #[value(alias = "twt")]
    Time,
    /// Elevation, positive up.
    Elevation,
}

#[derive(Clone, Copy, ValueEnum)]
enum LengthUnitArg {
    /// Metres.
    M,
    /// International feet (0.3048 m).
    Ft,
    /// US survey feet (1200/3937 m).
    UsFt,
}

#[derive(Clone, Copy, ValueEnum)]
enum ValueUnitArg {
    /// Metres.
    M,
    /// International feet (0.3048 m).
    Ft,
    /// US survey feet (1200/3937 m).
    UsFt,
    /// Milliseconds of two-way time.
    Ms,
    /// Seconds of two-way time (converted to ms).
    S,
}

impl From<ValueUnitArg> for DeclaredUnit {
    fn from(u: ValueUnitArg) -> Self {
        match u {
            ValueUnitArg::M => DeclaredUnit::Length(ZUnit::Metre),
            ValueUnitArg::Ft => DeclaredUnit::Length(ZUnit::Foot),
            ValueUnitArg::UsFt => DeclaredUnit::Length(ZUnit::UsFoot),
            ValueUnitArg::Ms => DeclaredUnit::Milliseconds,
            ValueUnitArg::S => DeclaredUnit::Seconds,
        }
    }
}

#[derive(Clone, Copy, ValueEnum)]
enum DirectionArg {
    /// Values increase downward.
    Down,
    /// Values increase upward (negative depths or times).
    Up,
}

impl From<LengthUnitArg> for ZUnit {
    fn from(u: LengthUnitArg) -> Self {
        match u {
            LengthUnitArg::M => ZUnit::Metre,
            LengthUnitArg::Ft => ZUnit::Foot,
            LengthUnitArg::UsFt => ZUnit::UsFoot,
        }
    }
}

#[derive(Clone, Copy, ValueEnum)]
enum VelocityUnitArg {
    /// Metres per second.
    #[value(name = "m/s")]
    MetrePerSecond,
    /// Feet per second.
    #[value(name = "ft/s")]
    FootPerSecond,
}

/// The horizon and window options shared by `curvature` and `window-study`.
#[derive(clap::Args)]
struct HorizonArgs {
    /// Horizon: a single-band raster GDAL reads (projected CRS), or a point list (x y z,
    /// inline xline x y z, ...; see --columns), read onto its exact lattice.
    input: PathBuf,
    /// Output folder.
    #[arg(short = 'o', long)]
    out: PathBuf,
    /// Window edge lengths in cells, odd, 3 to 101.
    #[arg(short, long, value_delimiter = ',', default_value = "3,5,9,17", value_parser = trimmed::<usize>)]
    windows: Vec<usize>,
    #[command(flatten)]
    domain: DomainArgs,
    /// Least share of valid cells in a window for a fit.
    #[arg(long, default_value_t = 0.75)]
    min_valid: f64,
    #[command(flatten)]
    read: ReadArgs,
    #[command(flatten)]
    tiff: TiffArgs,
    /// Working memory beyond the input grid (row batches and GDAL's block cache), e.g. 512M
    /// or 2G; default a quarter of the machine's memory, at most 1G.
    #[arg(long, value_parser = parse_memory)]
    memory: Option<u64>,
    /// Print nothing but errors.
    #[arg(short, long)]
    quiet: bool,
}

impl HorizonArgs {
    fn job(&self) -> CurvatureJob {
        let mut job = CurvatureJob::new(&self.input, &self.out, self.windows.clone());
        job.horizon = self.domain.source(&self.input);
        job.min_valid = self.min_valid;
        job.read = self.read.options();
        job.tiff = self.tiff.options();
        job.memory = self.memory;
        job
    }
}

/// What a horizon's values measure, their unit and the velocity of a time horizon.
#[derive(clap::Args)]
struct DomainArgs {
    /// What the grid values measure; default: what the file declares (a band unit of ms or s
    /// means time), else depth.
    #[arg(long, value_enum)]
    domain: Option<DomainArg>,
    /// Unit of the values: a length for depth or elevation, ms or s for two-way time (which
    /// it implies); default: the band's declared unit, else the CRS's linear unit. A unit the
    /// file declares otherwise is refused.
    #[arg(long, value_enum)]
    z_unit: Option<ValueUnitArg>,
    /// Direction in which the values increase; default down for depth and time, up for
    /// elevation. Depth and time grids that are mostly negative (as some packages export
    /// them) are refused until this is given.
    #[arg(long, value_enum)]
    z_positive: Option<DirectionArg>,
    /// Average velocity for a time grid (depth = V t / 2000), in --velocity-unit.
    #[arg(long, conflicts_with = "velocity_grid")]
    velocity: Option<f64>,
    /// Grid of average velocities on the horizon's cells.
    #[arg(long)]
    velocity_grid: Option<PathBuf>,
    /// Unit of the velocity; default m/s, or the velocity grid's declared unit. Values outside
    /// 1400-7000 m/s are refused as a probable unit mix-up.
    #[arg(long, value_enum)]
    velocity_unit: Option<VelocityUnitArg>,
}

impl DomainArgs {
    /// The horizon at `path` read with these options.
    fn source(&self, path: &std::path::Path) -> HorizonSource {
        HorizonSource {
            path: path.to_path_buf(),
            domain: self.domain.map(|d| match d {
                DomainArg::Depth => Domain::Depth,
                DomainArg::Time => Domain::Time,
                DomainArg::Elevation => Domain::Elevation,
            }),
            z_unit: self.z_unit.map(DeclaredUnit::from),
            positive_up: self.z_positive.map(|d| matches!(d, DirectionArg::Up)),
            velocity: match (&self.velocity, &self.velocity_grid) {
                (Some(v), _) => VelocitySource::Constant(*v),
                (None, Some(p)) => VelocitySource::Grid(p.clone()),
                (None, None) => VelocitySource::None,
            },
            velocity_unit: self.velocity_unit.map(|u| match u {
                VelocityUnitArg::MetrePerSecond => VelocityUnit::MetrePerSecond,
                VelocityUnitArg::FootPerSecond => VelocityUnit::FootPerSecond,
            }),
        }
    }
}

#[derive(clap::Args)]
struct GridArgs {
    /// Point list (x y z, inline xline x y z, sector columns, ...) or raster.
    input: PathBuf,
    /// GeoTIFF to write.
    #[arg(short = 'o', long)]
    out: PathBuf,
    #[command(flatten)]
    read: ReadArgs,
    #[command(flatten)]
    tiff: TiffArgs,
    /// Print nothing but errors.
    #[arg(short, long)]
    quiet: bool,
}

#[derive(clap::Args)]
struct CurvatureArgs {
    #[command(flatten)]
    horizon: HorizonArgs,
    /// Attributes to write (comma separated); default all. One file <input-stem>_w<NN>.tif
    /// per window.
    #[arg(long, value_delimiter = ',')]
    attributes: Vec<String>,
    /// Replace existing outputs even when they hold other bands than this run writes.
    #[arg(long)]
    overwrite: bool,
    /// Find picking busts (picks far off the surface fitted around them, at a false-alarm
    /// rate of 1e-5 a cell) and set them null before fitting; writes <input-stem>_busts.csv,
    /// .gpkg and .geojson. Off by default.
    #[arg(long)]
    despike: bool,
    /// With --despike, also write the despiked horizon as <input-stem>_despiked.tif
    /// (positive-down depth, busts null).
    #[arg(long, requires = "despike")]
    write_despiked: bool,
    /// Remove a periodic acquisition footprint found on the horizon (stripes along a grid axis)
    /// by a notch before fitting; a note says what was removed. Off by default.
    #[arg(long)]
    footprint_filter: bool,
}

impl CurvatureArgs {
    fn job(&self) -> Result<CurvatureJob, FlexureError> {
        let mut job = self.horizon.job();
        job.overwrite = self.overwrite;
        job.despike = self.despike;
        job.write_despiked = self.write_despiked;
        job.footprint_filter = self.footprint_filter;
        if !self.attributes.is_empty() {
            job.attributes = self
                .attributes
                .iter()
                .map(|id| attribute_by_id(id.trim()))
                .collect::<Result<_, _>>()
                .map_err(FlexureError::Parameter)?;
        }
        Ok(job)
    }
}

#[derive(clap::Args)]
struct WindowStudyArgs {
    #[command(flatten)]
    horizon: HorizonArgs,
    /// Attribute to study.
    #[arg(long, default_value = "k_pos")]
    attribute: String,
    /// Also write the adaptive-window map and the chosen-window grid.
    #[arg(long)]
    adaptive: bool,
    /// The smallest structure of interest, metres across (trough to trough): the adaptive map
    /// and the recommendation take no window smaller than the largest that still resolves it
    /// (keeps 70% of a fold's crest curvature; about two thirds of its size).
    #[arg(long, value_name = "METRES", value_parser = positive_metres)]
    min_feature: Option<f64>,
    /// Remove a periodic acquisition footprint by a notch before the study (otherwise it is
    /// counted as noise); a note says what was removed. Off by default.
    #[arg(long)]
    footprint_filter: bool,
}

/// A positive length in metres.
fn positive_metres(s: &str) -> Result<f64, String> {
    match s.trim().parse::<f64>() {
        Ok(v) if v > 0.0 && v.is_finite() => Ok(v),
        _ => Err(format!(
            "'{s}' is not a positive length in metres, e.g. 300"
        )),
    }
}

impl WindowStudyArgs {
    fn job(&self) -> Result<WindowStudyJob, FlexureError> {
        let mut fit = self.horizon.job();
        fit.min_feature_m = self.min_feature;
        fit.footprint_filter = self.footprint_filter;
        Ok(WindowStudyJob {
            fit,
            attribute: attribute_by_id(self.attribute.trim()).map_err(FlexureError::Parameter)?,
            adaptive: self.adaptive,
        })
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

/// This process's command line, each argument quoted when it holds a space or a quote.
fn command_line() -> String {
    std::env::args()
        .map(|a| {
            if a.is_empty() || a.contains([' ', '\'', '"']) {
                format!("'{}'", a.replace('\'', "'\\''"))
            } else {
                a
            }
        })
        .collect::<Vec<_>>()
        .join(" ")
}

#[derive(clap::Args)]
struct SectorTimesArgs {
    /// One SEG-Y volume per azimuth sector (rev 0, 1 or 2; IBM or IEEE floats, 1-, 2- or 4-byte
    /// integers; either byte order).
    #[arg(required = true)]
    volumes: Vec<PathBuf>,
    /// Sector-centre azimuths in degrees clockwise from grid north, one per volume, in order.
    #[arg(
        long,
        value_delimiter = ',',
        required = true,
        allow_negative_numbers = true,
        value_parser = trimmed::<f64>
    )]
    azimuths: Vec<f64>,
    /// Guide horizon in two-way time (ms, or a file declaring s), picked on the full-azimuth
    /// data: a raster or a point list on the volumes' bin lattice.
    #[arg(long)]
    horizon: PathBuf,
    /// A deeper horizon (two-way time): measure there too and write the interval shifts, base
    /// minus top, so anisotropy maps the interval between the horizons.
    #[arg(long)]
    base: Option<PathBuf>,
    /// Unit of horizon times a file does not declare (a declared unit must agree); default ms.
    #[arg(long, value_enum)]
    time_unit: Option<TimeUnitArg>,
    /// Trace each sector is measured against: `mean` (the mean of the sector traces at the
    /// bin) or a SEG-Y volume such as the full-azimuth stack.
    #[arg(long, default_value = "mean")]
    reference: String,
    /// Half length of the Hann-tapered analysis window around the horizon, ms.
    #[arg(long, default_value_t = DEFAULT_HALF_WINDOW_MS)]
    window: f64,
    /// Largest shift searched, ms (sector residuals are usually below 20 ms peak to peak).
    #[arg(long, default_value_t = DEFAULT_MAX_SHIFT_MS)]
    max_shift: f64,
    /// Trace header byte (1-based) of the 4-byte inline number.
    #[arg(long, default_value_t = 189)]
    inline_byte: usize,
    /// Trace header byte of the 4-byte crossline number.
    #[arg(long, default_value_t = 193)]
    crossline_byte: usize,
    /// Trace header byte of the 4-byte x coordinate.
    #[arg(long, default_value_t = 181)]
    x_byte: usize,
    /// Trace header byte of the 4-byte y coordinate.
    #[arg(long, default_value_t = 185)]
    y_byte: usize,
    /// Trace header byte of the 2-byte coordinate scalar.
    #[arg(long, default_value_t = 71)]
    scalar_byte: usize,
    /// Largest distance of a trace from its bin lattice node, as a share of the smaller bin
    /// (coordinates stored to the metre are up to 0.71 m off).
    #[arg(long, default_value_t = DEFAULT_TRACE_TOLERANCE)]
    trace_tolerance: f64,
    /// Output folder.
    #[arg(short = 'o', long)]
    out: PathBuf,
    /// Working memory for the trace windows of a batch of rows, e.g. 512M or 2G; default a
    /// quarter of the machine's memory, at most 1G.
    #[arg(long, value_parser = parse_memory)]
    memory: Option<u64>,
    #[command(flatten)]
    read: ReadArgs,
    #[command(flatten)]
    tiff: TiffArgs,
    /// Print nothing but errors.
    #[arg(short, long)]
    quiet: bool,
}

/// Unit of horizon times.
#[derive(Clone, Copy, ValueEnum)]
enum TimeUnitArg {
    /// Milliseconds of two-way time.
    Ms,
    /// Seconds of two-way time (converted to ms).
    S,
}

impl SectorTimesArgs {
    fn job(&self) -> SectorTimesJob {
        let mut job = SectorTimesJob::new(
            self.volumes.clone(),
            self.azimuths.clone(),
            &self.horizon,
            &self.out,
        );
        job.base = self.base.clone();
        job.time_unit = self.time_unit.map(|u| match u {
            TimeUnitArg::Ms => TimeUnit::Milliseconds,
            TimeUnitArg::S => TimeUnit::Seconds,
        });
        job.reference = (self.reference != "mean").then(|| PathBuf::from(&self.reference));
        job.half_window_ms = self.window;
        job.max_shift_ms = self.max_shift;
        job.header_bytes = SegyHeaderBytes {
            inline: self.inline_byte,
            crossline: self.crossline_byte,
            x: self.x_byte,
            y: self.y_byte,
            scalar: self.scalar_byte,
        };
        job.read = self.read.options();
        job.trace_tolerance = self.trace_tolerance;
        job.memory = self.memory;
        job.tiff = self.tiff.options();
        job
    }
}

/// Prints `text` and a newline to stdout; a closed pipe (e.g. `| head`) is not an error.
fn say(text: &str) {
    let _ = writeln!(std::io::stdout().lock(), "{text}");
}

/// What a command produced: its summary as printed, the notes of its readers, and whether the
/// general caution belongs after it.
struct Outcome {
    text: String,
    notes: Vec<String>,
    caution: bool,
}

impl Outcome {
    fn new(report: impl std::fmt::Display, notes: &[String], caution: bool) -> Self {
        Self {
            text: report.to_string(),
            notes: notes.to_vec(),
            caution,
        }
    }
}

/// Whether the command was asked to print nothing but errors.
fn is_quiet(command: &Command) -> bool {
    match command {
        Command::Curvature(a) => a.horizon.quiet,
        Command::WindowStudy(a) => a.horizon.quiet,
        Command::Grid(a) => a.quiet,
        Command::SectorTimes(a) => a.quiet,
        Command::Anisotropy(a) => a.quiet,
        Command::Render(a) => a.quiet,
        Command::Stages(a) => a.quiet,
        Command::Plan(a) => a.quiet,
        Command::Run(a) => a.quiet,
        Command::Demo { quiet, .. } => *quiet,
        Command::DemoData { .. } => false,
    }
}

/// Runs one command and returns what it produced (nothing printed).
fn execute(command: Command, progress: &dyn Progress) -> Result<Outcome, FlexureError> {
    Ok(match command {
        Command::Curvature(args) => {
            let r = args.job()?.run(progress)?;
            Outcome::new(&r, &r.notes, true)
        }
        Command::Grid(args) => {
            let mut job = GridJob::new(&args.input, &args.out);
            job.read = args.read.options();
            job.tiff = args.tiff.options();
            let r = job.run()?;
            Outcome::new(&r, &r.notes, false)
        }
        Command::SectorTimes(args) => {
            let r = args.job().run(progress)?;
            Outcome::new(&r, &r.notes, true)
        }
        Command::Anisotropy(args) => {
            let r = args.job()?.run()?;
            Outcome::new(&r, &r.notes, true)
        }
        Command::Render(args) => {
            let r = args.job()?.run()?;
            Outcome::new(&r, &r.notes, true)
        }
        Command::WindowStudy(args) => Outcome::new(args.job()?.run()?, &[], true),
        Command::Stages(args) => {
            let r = args.job()?.run()?;
            Outcome::new(&r, &r.notes, false)
        }
        Command::Plan(args) => Outcome::new(args.job().run()?, &[], false),
        Command::Run(args) => run::run_job(&args, progress)?,
        Command::Demo { out, data, quiet } => {
            if !data.join(DEMO_JOB_FILE).is_file() {
                return Err(FlexureError::input(
                    data.join(DEMO_JOB_FILE),
                    "demo job not found: run from the repository root or give --data DIR",
                ));
            }
            let args = RunArgs {
                job: data.join(DEMO_JOB_FILE),
                out: Some(out),
                check: false,
                quiet,
            };
            run::run_job(&args, progress)?
        }
        Command::DemoData { out } => {
            let written: Vec<String> = write_demo_data(&out)?
                .iter()
                .map(|p| format!("wrote {}", p.display()))
                .collect();
            Outcome::new(written.join("\n") + "\n", &[], false)
        }
    })
}

/// Runs the command line's command and prints its summary (and the caution once).
fn run(cli: Cli) -> Result<(), FlexureError> {
    let quiet = is_quiet(&cli.command);
    let progress: Box<dyn Progress> = if quiet {
        Box::new(Silent)
    } else {
        Box::new(Bar::new(false))
    };
    let outcome = execute(cli.command, progress.as_ref())?;
    if !quiet {
        let caution = if outcome.caution { CAUTION } else { "" };
        say(format!("{}{caution}", outcome.text).trim_end_matches('\n'));
    }
    Ok(())
}

/// The one-line message of a command-line usage error: clap's first line without its
/// `error: ` prefix, and where to look for help.
fn usage_message(e: &clap::Error) -> String {
    let text = e.to_string();
    // The message is every line before clap's usage and tip lines, joined (a list of missing
    // arguments follows its first line).
    let lines: Vec<&str> = text
        .lines()
        .map(str::trim)
        .take_while(|l| !l.starts_with("Usage:") && !l.starts_with("For more information"))
        .filter(|l| !l.is_empty() && !l.starts_with("tip:"))
        .collect();
    let message = if lines.is_empty() {
        "invalid command line".to_string()
    } else {
        lines.join(" ")
    };
    format!(
        "{} (see flexure --help)",
        message.trim_start_matches("error: ")
    )
}

/// Exit code of a command-line usage error (as clap and most Unix tools use).
const USAGE_ERROR: u8 = 2;

/// Exit code of a run ended by Ctrl-C, SIGTERM or SIGHUP (128 + SIGINT, the shell's usage).
const INTERRUPTED: i32 = 130;

fn main() -> ExitCode {
    flexure_engine::provenance::set_command_line(command_line());
    // An interrupted job leaves the output folder as it was: its temporary files go.
    let handler = ctrlc::set_handler(|| {
        let _held = flexure_engine::io::discard_uncommitted();
        eprintln!("flexure: interrupted: the job's temporary files were removed");
        // SAFETY: _exit ends the process at once, without exit handlers or destructors, so no
        // library state (GDAL's) is torn down under the threads still running.
        unsafe { libc::_exit(INTERRUPTED) }
    });
    if let Err(e) = handler {
        eprintln!("flexure: warning: cannot catch Ctrl-C ({e}); an interrupted run may leave hidden .partial files");
    }
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) if !e.use_stderr() => {
            // --help and --version: printed as clap formats them, exit 0.
            let _ = e.print();
            return ExitCode::SUCCESS;
        }
        Err(e) => {
            eprintln!("flexure: error: {}", usage_message(&e));
            return ExitCode::from(USAGE_ERROR);
        }
    };
    match run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("flexure: error: {e}");
            ExitCode::FAILURE
        }
    }
}
