//! Horizon domains: turns an interpreted grid into a positive-down depth in CRS length units,
//! the form the window fit and the curvature signs expect, honouring what the file declares.
//!
//! - depth: positive down, in `z_unit` (metres, international feet or US survey feet);
//! - time: two-way time in ms (seconds are converted), positive down; depth = V t / 2000 with V
//!   an average velocity in m/s (constant or a grid on the same cells) — the standard vertical
//!   time-depth conversion (common practice). Without the conversion, slope-dependent
//!   attributes mix ms and metres and are meaningless;
//! - elevation: positive up, in `z_unit`; negated so that antiforms stay positive.
//!
//! Declarations: a band's unit type (GDAL `GetUnitType`, or the unit suffix of a point list's
//! value column: `ft`, `foot`, `m`, `metre`, `ms`, `s`, ...) and a value name (`twt`, `time`,
//! `depth`, `elevation`) declare the domain and unit; a caller's flag that contradicts them is
//! refused naming both. Without a declaration the z unit defaults to the CRS's linear unit
//! (feet for a CRS in feet) and the domain to depth; the report says which default applied.
//! Velocities outside [`PLAUSIBLE_VELOCITY_M_S`] are refused as a probable unit mix-up.

use crate::error::{FlexureError, Result};
use crate::grid::{Grid, GridGeometry};
use crate::io::{read_raster, ReadOptions};
use ndarray::{Array2, Zip};
use std::path::{Path, PathBuf};

/// What the grid values measure.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Domain {
    /// Depth below a datum, positive down.
    Depth,
    /// Two-way traveltime in milliseconds, positive down.
    Time,
    /// Elevation above a datum, positive up.
    Elevation,
}

impl Domain {
    /// Lower-case name (`depth`, `time`, `elevation`).
    pub fn name(self) -> &'static str {
        match self {
            Domain::Depth => "depth",
            Domain::Time => "time",
            Domain::Elevation => "elevation",
        }
    }
}

/// Unit of depth or elevation values.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ZUnit {
    /// Metres.
    Metre,
    /// International feet (0.3048 m).
    Foot,
    /// US survey feet (1200/3937 m).
    UsFoot,
}

impl ZUnit {
    /// Metres per unit.
    pub fn metres(self) -> f64 {
        match self {
            ZUnit::Metre => 1.0,
            ZUnit::Foot => 0.3048,
            ZUnit::UsFoot => 1200.0 / 3937.0,
        }
    }

    /// Short name (`m`, `ft`, `us-ft`).
    pub fn name(self) -> &'static str {
        match self {
            ZUnit::Metre => "m",
            ZUnit::Foot => "ft",
            ZUnit::UsFoot => "us-ft",
        }
    }

    /// The length unit a text names (`m`, `metre(s)`, `meter(s)`, `ft`, `foot`, `feet`,
    /// `intl ft`, `international foot`, `usft`, `us-ft`, `ftus`, `US survey foot`),
    /// case-insensitive, ignoring spaces, `-`, `_` and `.`; `None` for anything else.
    pub fn parse(text: &str) -> Option<ZUnit> {
        match unit_key(text).as_str() {
            "m" | "metre" | "metres" | "meter" | "meters" => Some(ZUnit::Metre),
            "ft" | "foot" | "feet" | "intlft" | "internationalfoot" | "internationalfeet" => {
                Some(ZUnit::Foot)
            }
            "usft" | "ftus" | "ussurveyfoot" | "ussurveyfeet" | "surveyfoot" | "surveyfeet" => {
                Some(ZUnit::UsFoot)
            }
            _ => None,
        }
    }

    /// The unit whose length in metres is `metres_per_unit` (a CRS's linear unit), if any.
    pub fn from_metres(metres_per_unit: f64) -> Option<ZUnit> {
        [ZUnit::Metre, ZUnit::Foot, ZUnit::UsFoot]
            .into_iter()
            .find(|u| (u.metres() - metres_per_unit).abs() < 1e-9)
    }
}

/// A unit text lower-cased without spaces, `-`, `_` and `.`, for matching.
fn unit_key(text: &str) -> String {
    text.chars()
        .filter(|c| !matches!(c, ' ' | '-' | '_' | '.'))
        .flat_map(char::to_lowercase)
        .collect()
}

/// What a unit text declares about values.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DeclaredUnit {
    /// A length (depth or elevation).
    Length(ZUnit),
    /// Milliseconds.
    Milliseconds,
    /// Seconds (converted to ms on reading).
    Seconds,
}

impl DeclaredUnit {
    /// Short name (`m`, `ft`, `us-ft`, `ms`, `s`).
    pub fn name(self) -> &'static str {
        match self {
            DeclaredUnit::Length(u) => u.name(),
            DeclaredUnit::Milliseconds => "ms",
            DeclaredUnit::Seconds => "s",
        }
    }

    /// Parses a unit text: a length unit (see [`ZUnit::parse`]) or `ms`, `msec`,
    /// `millisecond(s)`, `s`, `sec`, `second(s)` (case-insensitive, ignoring spaces, `-`, `_`
    /// and `.`); `None` for an empty or unknown text.
    pub fn parse(text: &str) -> Option<DeclaredUnit> {
        if let Some(u) = ZUnit::parse(text) {
            return Some(DeclaredUnit::Length(u));
        }
        match unit_key(text).as_str() {
            "ms" | "msec" | "millisecond" | "milliseconds" => Some(DeclaredUnit::Milliseconds),
            "s" | "sec" | "second" | "seconds" => Some(DeclaredUnit::Seconds),
            _ => None,
        }
    }
}

/// The domain a value name declares (`twt`, `time` -> time; `depth`, `tvdss` -> depth;
/// `elevation`, `elev` -> elevation), case-insensitive; `None` for any other name.
pub fn domain_from_name(name: &str) -> Option<Domain> {
    match name.trim().to_lowercase().as_str() {
        "twt" | "time" | "two-way time" | "twt ms" => Some(Domain::Time),
        "depth" | "tvdss" => Some(Domain::Depth),
        "elevation" | "elev" => Some(Domain::Elevation),
        _ => None,
    }
}

/// Unit of velocities.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum VelocityUnit {
    /// Metres per second.
    MetrePerSecond,
    /// International feet per second.
    FootPerSecond,
}

impl VelocityUnit {
    /// Metres per second per unit.
    pub fn metres_per_second(self) -> f64 {
        match self {
            VelocityUnit::MetrePerSecond => 1.0,
            VelocityUnit::FootPerSecond => 0.3048,
        }
    }

    /// Short name (`m/s`, `ft/s`).
    pub fn name(self) -> &'static str {
        match self {
            VelocityUnit::MetrePerSecond => "m/s",
            VelocityUnit::FootPerSecond => "ft/s",
        }
    }

    /// Parses a declared unit text (`m/s`, `m s-1`, `ft/s`, `ft s-1`, ...).
    pub fn parse(text: &str) -> Option<VelocityUnit> {
        let t: String = text
            .to_lowercase()
            .chars()
            .filter(|c| !c.is_whitespace())
            .collect();
        match t.as_str() {
            "m/s" | "ms-1" | "m/sec" | "mps" => Some(VelocityUnit::MetrePerSecond),
            "ft/s" | "fts-1" | "ft/sec" | "fps" | "feet/s" => Some(VelocityUnit::FootPerSecond),
            _ => None,
        }
    }
}

/// Plausible range of average velocities of sedimentary sections, m/s: from about water
/// velocity (1480 m/s) to fast carbonates and evaporites (common practice, rounded outwards).
pub const PLAUSIBLE_VELOCITY_M_S: (f64, f64) = (1400.0, 7000.0);

/// Where the average velocity of a time grid comes from.
#[derive(Clone, Debug, PartialEq)]
pub enum VelocitySource {
    /// None given.
    None,
    /// One value, in the job's velocity unit.
    Constant(f64),
    /// A grid of values on the horizon's cells, read from the named file.
    Grid(PathBuf),
}

/// A horizon to read and convert: the file, the domain and units the caller states (`None`:
/// take the file's declaration or the default) and the velocity of a time horizon.
#[derive(Clone, Debug, PartialEq)]
pub struct HorizonSource {
    /// Horizon grid (raster or point list).
    pub path: PathBuf,
    /// What the values measure; from the file's declaration, else depth, when `None`.
    pub domain: Option<Domain>,
    /// Unit of the values (a length, or ms or s, which means time); from the file, else
    /// the CRS unit, when `None`. A unit the file declares otherwise is refused.
    pub z_unit: Option<DeclaredUnit>,
    /// Whether values increase upward (`Some(true)`: negative depths or times, as some
    /// packages export them) or downward; `None`: downward for depth and time, upward for
    /// elevation. Depth and time grids whose values are mostly negative are refused unless
    /// this is given.
    pub positive_up: Option<bool>,
    /// Velocity of a time horizon.
    pub velocity: VelocitySource,
    /// Unit of the velocity; from the velocity grid's declaration, else m/s, when `None`.
    pub velocity_unit: Option<VelocityUnit>,
}

/// A horizon read and converted to positive-down depth.
#[derive(Clone, Debug)]
pub struct Horizon {
    /// Where the grid lies (the values as read are converted to `depth` in place and not
    /// kept beside it).
    pub geometry: GridGeometry,
    /// Share of the input's cells that are null, as read.
    pub input_null_share: f64,
    /// Positive-down depth in CRS length units (NaN nulls).
    pub depth: Array2<f64>,
    /// What the values measure.
    pub domain: Domain,
    /// Unit of the stored lengths (depth and elevation horizons).
    pub z_unit: Option<ZUnit>,
    /// The velocity used, in words (`none`, `3200 m/s`, `grid FILE (m/s)`).
    pub velocity: String,
    /// How the domain and units were decided, and anything the readers noticed.
    pub notes: Vec<String>,
}

impl HorizonSource {
    /// A depth-or-declared horizon with no velocity.
    pub fn new(path: impl Into<PathBuf>) -> Self {
        Self {
            path: path.into(),
            domain: None,
            z_unit: None,
            positive_up: None,
            velocity: VelocitySource::None,
            velocity_unit: None,
        }
    }

    /// The files read (horizon and velocity grid).
    pub fn inputs(&self) -> Vec<&Path> {
        let mut inputs = vec![self.path.as_path()];
        if let VelocitySource::Grid(p) = &self.velocity {
            inputs.push(p);
        }
        inputs
    }

    /// Reads the horizon (and velocity grid) and converts it to positive-down depth.
    pub fn load(&self, read: &ReadOptions) -> Result<Horizon> {
        let raster = read_raster(&self.path, read)?;
        let mut notes = raster.notes.clone();
        let name = raster.info.names.first().cloned().unwrap_or_default();
        let (mut grid, unit_text) = raster.into_single(&self.path)?;
        let declared = self.with_unit_flag(self.declaration(
            DeclaredUnit::parse(&unit_text),
            &unit_text,
            &name,
        )?)?;
        let domain = self.decide_domain(&declared, &mut notes)?;
        if declared.unit == Some(DeclaredUnit::Seconds) {
            grid.values.mapv_inplace(|t| t * 1000.0);
            notes.push(format!(
                "{}: times in seconds ({}), converted to ms",
                self.path.display(),
                declared.what()
            ));
        }
        self.orient(&mut grid, domain, &mut notes)?;
        let z_unit = (domain != Domain::Time)
            .then(|| self.decide_z_unit(&declared, &grid, &mut notes))
            .transpose()?;
        check_magnitude(&grid, &self.path, domain, &mut notes)?;
        let (velocity, velocity_text) = self.read_velocity(domain, read, &mut notes)?;
        let (geometry, input_null_share) = (grid.geometry.clone(), grid.null_share());
        let depth = positive_down_depth(
            grid,
            &self.path,
            domain,
            z_unit.unwrap_or(ZUnit::Metre),
            &velocity,
        )?;
        Ok(Horizon {
            geometry,
            input_null_share,
            depth,
            domain,
            z_unit,
            velocity: velocity_text,
            notes,
        })
    }

    /// What the file declares: the unit of its values (`unit_text` parsed) and the domain
    /// their name gives; refuses a name and a unit that disagree.
    fn declaration(
        &self,
        unit: Option<DeclaredUnit>,
        unit_text: &str,
        name: &str,
    ) -> Result<Declaration> {
        let unit_is_time = unit.map(|u| !matches!(u, DeclaredUnit::Length(_)));
        let from_name = domain_from_name(name);
        if let (Some(is_time), Some(d)) = (unit_is_time, from_name) {
            if is_time != (d == Domain::Time) {
                return Err(FlexureError::input(
                    &self.path,
                    format!(
                        "its values are named '{name}' ({}) but their unit is '{unit_text}': fix the name, the unit in the file or --z-unit",
                        d.name()
                    ),
                ));
            }
        }
        Ok(Declaration {
            unit,
            unit_text: unit_text.to_string(),
            domain: from_name.or(unit_is_time.and_then(|t| t.then_some(Domain::Time))),
            name: name.to_string(),
        })
    }

    /// The file's declaration with `--z-unit` applied: it fills in a missing unit and must
    /// agree with a declared one.
    fn with_unit_flag(&self, file: Declaration) -> Result<Declaration> {
        let in_file = |d: Declaration| Declaration {
            unit_text: format!("{} in the file", d.unit_text),
            ..d
        };
        match (self.z_unit, file.unit) {
            (None, _) => Ok(file),
            (Some(flag), Some(declared)) if flag != declared => {
                Err(self.contradiction(&format!("--z-unit {}", flag.name()), &in_file(file).what()))
            }
            (Some(_), Some(_)) => Ok(file),
            (Some(flag), None) => self.declaration(
                Some(flag),
                &format!("{} from --z-unit", flag.name()),
                &file.name,
            ),
        }
    }

    /// Makes the grid's values increase downward: negates depth or time values that increase
    /// upward (`positive_up`), and refuses depth or time grids whose values are mostly
    /// negative when the direction was not given (a silent sign flip of every curvature).
    fn orient(&self, grid: &mut Grid, domain: Domain, notes: &mut Vec<String>) -> Result<()> {
        let median = finite_median(&grid.values);
        match (domain, self.positive_up) {
            (Domain::Elevation, Some(false)) => Err(self.contradiction(
                "--z-positive down",
                "elevation (heights increase upward)",
            )),
            (Domain::Elevation, _) | (_, Some(false)) => Ok(()),
            (_, Some(true)) => {
                grid.values.mapv_inplace(|v| -v);
                notes.push(format!(
                    "{}: values increase upward (--z-positive up): negated to positive-down {}",
                    self.path.display(),
                    domain.name()
                ));
                Ok(())
            }
            (_, None) if median < 0.0 => Err(FlexureError::input(
                &self.path,
                format!(
                    "its {} values are mostly negative (median {median}), but {} is read positive down: if they increase upward (negative depths or times, as some packages export them) give --z-positive up; for heights above a datum give --domain elevation",
                    domain.name(),
                    domain.name()
                ),
            )),
            (_, None) => Ok(()),
        }
    }

    fn decide_domain(&self, declared: &Declaration, notes: &mut Vec<String>) -> Result<Domain> {
        let length_declared = matches!(declared.unit, Some(DeclaredUnit::Length(_)));
        match (self.domain, declared.domain) {
            (Some(flag), Some(file)) if flag != file => {
                Err(self.contradiction(&format!("--domain {}", flag.name()), &declared.what()))
            }
            (Some(Domain::Time), None) if length_declared => {
                Err(self.contradiction("--domain time", &declared.what()))
            }
            (Some(flag), _) => Ok(flag),
            (None, Some(file)) => {
                notes.push(format!(
                    "{}: domain {} from the file ({})",
                    self.path.display(),
                    file.name(),
                    declared.what()
                ));
                Ok(file)
            }
            (None, None) if length_declared => {
                notes.push(format!(
                    "{}: {}, a length: read as depth (give --domain elevation for heights)",
                    self.path.display(),
                    declared.what()
                ));
                Ok(Domain::Depth)
            }
            (None, None) => {
                notes.push(format!(
                    "{}: the file declares no domain: read as depth (give --domain to change)",
                    self.path.display()
                ));
                Ok(Domain::Depth)
            }
        }
    }

    fn decide_z_unit(
        &self,
        declared: &Declaration,
        grid: &Grid,
        notes: &mut Vec<String>,
    ) -> Result<ZUnit> {
        match declared.unit {
            Some(DeclaredUnit::Length(u)) => Ok(u),
            Some(_) => Err(self.contradiction("a depth or elevation domain", &declared.what())),
            None => {
                let crs_unit = ZUnit::from_metres(grid.geometry.metres_per_unit);
                let unit = crs_unit.unwrap_or(ZUnit::Metre);
                notes.push(format!(
                    "{}: the file declares no z unit: {} assumed ({}; give --z-unit to change)",
                    self.path.display(),
                    unit.name(),
                    if crs_unit.is_some() {
                        "the CRS's linear unit"
                    } else {
                        "default"
                    }
                ));
                Ok(unit)
            }
        }
    }

    fn contradiction(&self, flag: &str, file: &str) -> FlexureError {
        FlexureError::input(
            &self.path,
            format!("{flag} contradicts what is declared ({file}): drop the option or correct the declaration"),
        )
    }

    /// The velocity in m/s and its description; refuses implausible values.
    fn read_velocity(
        &self,
        domain: Domain,
        read: &ReadOptions,
        notes: &mut Vec<String>,
    ) -> Result<(Velocity, String)> {
        if domain != Domain::Time {
            if self.velocity != VelocitySource::None {
                notes.push(format!(
                    "{}: a velocity was given but the horizon is {}: not used",
                    self.path.display(),
                    domain.name()
                ));
            }
            return Ok((Velocity::None, "none".into()));
        }
        match &self.velocity {
            VelocitySource::None => Ok((Velocity::None, "none".into())),
            VelocitySource::Constant(v) => {
                let unit = self.velocity_unit.unwrap_or(VelocityUnit::MetrePerSecond);
                let m_s = v * unit.metres_per_second();
                check_velocity(m_s, *v, unit, None)?;
                Ok((Velocity::Constant(m_s), format!("{v} {}", unit.name())))
            }
            VelocitySource::Grid(path) => {
                let raster = read_raster(path, read)?;
                notes.extend(raster.notes.iter().cloned());
                let (mut vgrid, unit_text) = raster.into_single(path)?;
                let unit = self.velocity_grid_unit(path, &unit_text)?;
                let median = finite_median(&vgrid.values);
                check_velocity(median * unit.metres_per_second(), median, unit, Some(path))?;
                let (lo, hi) = PLAUSIBLE_VELOCITY_M_S;
                vgrid.values.mapv_inplace(|v| v * unit.metres_per_second());
                let outside = vgrid
                    .values
                    .iter()
                    .filter(|v| v.is_finite() && !(lo..=hi).contains(*v))
                    .count();
                if outside > 0 {
                    notes.push(format!(
                        "{}: {outside} cell(s) hold velocities outside {lo}..{hi} m/s (common practice range for average velocities); used as given",
                        path.display()
                    ));
                }
                let text = format!("grid {} ({})", path.display(), unit.name());
                Ok((Velocity::Grid(vgrid, path.clone()), text))
            }
        }
    }

    fn velocity_grid_unit(&self, path: &Path, unit_text: &str) -> Result<VelocityUnit> {
        let declared = VelocityUnit::parse(unit_text);
        match (self.velocity_unit, declared) {
            (Some(flag), Some(file)) if flag != file => Err(FlexureError::input(
                path,
                format!(
                    "--velocity-unit {} contradicts the file, which declares {}: drop the option or correct the file's declaration",
                    flag.name(),
                    file.name()
                ),
            )),
            (Some(u), _) | (None, Some(u)) => Ok(u),
            (None, None) => Ok(VelocityUnit::MetrePerSecond),
        }
    }
}

/// What a file says about its values.
#[derive(Clone, Debug)]
struct Declaration {
    unit: Option<DeclaredUnit>,
    unit_text: String,
    domain: Option<Domain>,
    name: String,
}

impl Declaration {
    fn what(&self) -> String {
        let mut parts = Vec::new();
        if self.unit.is_some() {
            parts.push(format!("unit '{}'", self.unit_text));
        }
        if let Some(d) = domain_from_name(&self.name) {
            parts.push(format!("values named '{}' ({})", self.name, d.name()));
        }
        parts.join(" and ")
    }
}

/// Refuses an average velocity outside [`PLAUSIBLE_VELOCITY_M_S`], naming the probable unit
/// mix-up. `given` is the value in `unit`; `file` names a velocity grid (its median is
/// checked).
fn check_velocity(m_s: f64, given: f64, unit: VelocityUnit, file: Option<&Path>) -> Result<()> {
    let (lo, hi) = PLAUSIBLE_VELOCITY_M_S;
    if m_s.is_finite() && (lo..=hi).contains(&m_s) {
        return Ok(());
    }
    let what = match file {
        Some(p) => format!(
            "velocity grid {} (median {given} {})",
            p.display(),
            unit.name()
        ),
        None => format!("velocity {given} {}", unit.name()),
    };
    let hint = if !(m_s.is_finite() && m_s > 0.0) {
        "give a positive average velocity such as 3000 m/s".to_string()
    } else if unit == VelocityUnit::MetrePerSecond && (lo..=hi).contains(&(m_s * 0.3048)) {
        "it looks like ft/s: give --velocity-unit ft/s".to_string()
    } else if unit == VelocityUnit::FootPerSecond && (lo..=hi).contains(&given) {
        "it looks like m/s: give --velocity-unit m/s".to_string()
    } else if (lo..=hi).contains(&(given * 1000.0)) {
        "it looks like km/s: give the velocity in m/s (e.g. 3000) or ft/s".to_string()
    } else {
        "check the value and its unit".to_string()
    };
    Err(FlexureError::Parameter(format!(
        "{what} is outside {lo}..{hi} m/s, the usual range of average velocities in sediments (common practice): {hint}"
    )))
}

/// Refuses two-way times in ms that are all below 20 (seconds read as ms: a seabed at 20 ms
/// is 15 m of water, shallower than any target; common practice) and notes depths all below
/// 20 length units, which may be seconds too.
fn check_magnitude(
    grid: &Grid,
    path: &Path,
    domain: Domain,
    notes: &mut Vec<String>,
) -> Result<()> {
    let largest = grid
        .values
        .iter()
        .filter(|v| v.is_finite())
        .fold(0.0f64, |m, v| m.max(v.abs()));
    if !(largest > 0.0 && largest < 20.0) {
        return Ok(());
    }
    if domain == Domain::Time {
        return Err(FlexureError::input(
            path,
            format!("two-way times are all below 20 ms (largest {largest}): they look like seconds: give --z-unit s (or declare the unit 's' in the file)"),
        ));
    }
    notes.push(format!(
        "{}: {} values are all below 20 (largest {largest}): if they are two-way times in seconds, give --z-unit s",
        path.display(),
        domain.name()
    ));
    Ok(())
}

/// Median of the finite values (NaN when there are none).
fn finite_median(values: &Array2<f64>) -> f64 {
    crate::stats::FiniteSample::of(|| values.iter().copied())
        .median()
        .unwrap_or(f64::NAN)
}

/// Average velocity for time-to-depth conversion.
#[derive(Clone, Debug)]
pub enum Velocity {
    /// No velocity given.
    None,
    /// One average velocity in m/s.
    Constant(f64),
    /// A grid of average velocities in m/s on the horizon's cells, read from the named file.
    Grid(Grid, std::path::PathBuf),
}

/// Converts `grid` to positive-down depth in its CRS length unit (NaN stays null), in place:
/// the values become the depths.
pub fn positive_down_depth(
    grid: Grid,
    source: &Path,
    domain: Domain,
    z_unit: ZUnit,
    velocity: &Velocity,
) -> Result<Array2<f64>> {
    let per_unit = 1.0 / grid.geometry.metres_per_unit;
    // Lengths already in the CRS's unit are kept exactly (z * 0.3048 / 0.3048 is not always z).
    let scale = match ZUnit::from_metres(grid.geometry.metres_per_unit) == Some(z_unit) {
        true => 1.0,
        false => z_unit.metres() * per_unit,
    };
    let Grid {
        geometry,
        mut values,
    } = grid;
    match domain {
        Domain::Depth => values.mapv_inplace(|z| z * scale),
        Domain::Elevation => values.mapv_inplace(|z| -z * scale),
        Domain::Time => time_to_depth(&mut values, &geometry, source, velocity, per_unit)?,
    }
    Ok(values)
}

fn time_to_depth(
    values: &mut Array2<f64>,
    geometry: &GridGeometry,
    source: &Path,
    velocity: &Velocity,
    per_unit: f64,
) -> Result<()> {
    let depth = |t: f64, v: f64| {
        if v.is_finite() && v > 0.0 {
            v * t / 2000.0 * per_unit
        } else {
            f64::NAN
        }
    };
    match velocity {
        Velocity::None => Err(FlexureError::input(
            source,
            "a two-way-time grid needs a velocity: give --velocity V (m/s) or --velocity-grid FILE",
        )),
        Velocity::Constant(v) => {
            if !(v.is_finite() && *v > 0.0) {
                return Err(FlexureError::Parameter(format!(
                    "velocity {v} m/s is not a positive number: give an average velocity such as 3000"
                )));
            }
            values.mapv_inplace(|t| depth(t, *v));
            Ok(())
        }
        Velocity::Grid(vgrid, vpath) => {
            if let Some(why) = vgrid.geometry.mismatch(geometry) {
                return Err(FlexureError::input(
                    vpath,
                    format!(
                        "velocity grid is not on the horizon's grid ({why}; {} vs {}): give velocities on the horizon's cells",
                        vgrid.geometry.describe(),
                        geometry.describe()
                    ),
                ));
            }
            Zip::from(values)
                .and(&vgrid.values)
                .for_each(|t, &v| *t = depth(*t, v));
            Ok(())
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::GridGeometry;

    fn grid(values: Array2<f64>, metres_per_unit: f64) -> Grid {
        let (rows, cols) = values.dim();
        Grid {
            geometry: GridGeometry {
                cols,
                rows,
                geo_transform: [0.0, 10.0, 0.0, 0.0, 0.0, -10.0],
                crs_wkt: "X".into(),
                metres_per_unit,
            },
            values,
        }
    }

    #[test]
    fn time_converts_with_average_velocity() {
        // Vertical conversion depth = V t / 2000 (common practice): 2000 ms at 3000 m/s = 3000 m,
        // which is 9842.52 ft on a grid in feet.
        let g = grid(Array2::from_elem((2, 2), 2000.0), 0.3048);
        let d = positive_down_depth(
            g.clone(),
            Path::new("t.tif"),
            Domain::Time,
            ZUnit::Metre,
            &Velocity::Constant(3000.0),
        )
        .unwrap();
        assert!((d[(0, 0)] - 3000.0 / 0.3048).abs() < 1e-9);
        let err = positive_down_depth(
            g.clone(),
            Path::new("t.tif"),
            Domain::Time,
            ZUnit::Metre,
            &Velocity::None,
        )
        .unwrap_err();
        assert!(err.to_string().contains("--velocity"));
    }

    #[test]
    fn elevation_is_negated_and_feet_converted() {
        // International foot 0.3048 m and US survey foot 1200/3937 m (NIST SP 811, from memory).
        let g = grid(Array2::from_elem((1, 1), 100.0), 1.0);
        let d = positive_down_depth(
            g.clone(),
            Path::new("e.tif"),
            Domain::Elevation,
            ZUnit::Foot,
            &Velocity::None,
        )
        .unwrap();
        assert!((d[(0, 0)] + 30.48).abs() < 1e-12);
        assert!((ZUnit::UsFoot.metres() - 0.3048006096).abs() < 1e-10);
    }

    #[test]
    fn lengths_in_the_crs_unit_keep_their_bits() {
        // Depths in feet on a foot CRS need no conversion: (z * 0.3048) / 0.3048 is one ulp off
        // for about a third of float32 values (IEEE 754 rounding), so the scale is skipped and
        // a float32 grid stays exactly float32.
        for unit in [ZUnit::Foot, ZUnit::UsFoot, ZUnit::Metre] {
            let values = Array2::from_shape_fn((5, 7), |(r, c)| {
                f64::from(7000.123_f32 + 13.37 * (r * 7 + c) as f32)
            });
            let g = grid(values.clone(), unit.metres());
            let d =
                positive_down_depth(g, Path::new("d.tif"), Domain::Depth, unit, &Velocity::None)
                    .unwrap();
            assert!(d
                .iter()
                .zip(&values)
                .all(|(a, b)| a.to_bits() == b.to_bits()));
            assert!(crate::surface::window::narrow_exactly(&d).is_some());
        }
    }

    #[test]
    fn velocity_grid_must_share_the_grid() {
        let g = grid(Array2::from_elem((2, 2), 1000.0), 1.0);
        let v = grid(Array2::from_elem((2, 3), 2500.0), 1.0);
        let err = positive_down_depth(
            g.clone(),
            Path::new("t.tif"),
            Domain::Time,
            ZUnit::Metre,
            &Velocity::Grid(v, "v.tif".into()),
        )
        .unwrap_err();
        assert!(err.to_string().starts_with("v.tif:"), "{err}");
    }

    #[test]
    fn unit_texts_declare_domains() {
        assert_eq!(
            DeclaredUnit::parse("Metre"),
            Some(DeclaredUnit::Length(ZUnit::Metre))
        );
        assert_eq!(
            DeclaredUnit::parse("ft"),
            Some(DeclaredUnit::Length(ZUnit::Foot))
        );
        assert_eq!(DeclaredUnit::parse("ms"), Some(DeclaredUnit::Milliseconds));
        assert_eq!(DeclaredUnit::parse("s"), Some(DeclaredUnit::Seconds));
        assert_eq!(DeclaredUnit::parse(""), None);
        assert_eq!(domain_from_name("TWT"), Some(Domain::Time));
        assert_eq!(domain_from_name("k_pos"), None);
        assert_eq!(
            VelocityUnit::parse("ft / s"),
            Some(VelocityUnit::FootPerSecond)
        );
    }

    #[test]
    fn implausible_velocities_name_the_probable_unit() {
        // 10000 "m/s" is 3048 m/s if it is ft/s; 3.2 is km/s; 3000 "ft/s" is 914 m/s but a
        // plausible m/s value (unit conversions, NIST SP 811, from memory).
        let msg = |v: f64, u: VelocityUnit| {
            check_velocity(v * u.metres_per_second(), v, u, None)
                .unwrap_err()
                .to_string()
        };
        assert!(msg(10000.0, VelocityUnit::MetrePerSecond).contains("ft/s"));
        assert!(msg(3.2, VelocityUnit::MetrePerSecond).contains("km/s"));
        assert!(msg(3000.0, VelocityUnit::FootPerSecond).contains("looks like m/s"));
        assert!(msg(-5.0, VelocityUnit::MetrePerSecond).contains("positive"));
        assert!(check_velocity(3000.0, 3000.0, VelocityUnit::MetrePerSecond, None).is_ok());
        assert!(check_velocity(2895.6, 9500.0, VelocityUnit::FootPerSecond, None).is_ok());
    }
}
