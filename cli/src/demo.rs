//! The demo scenario: the invented Tessary Basin, with two interpreted horizons built from
//! analytic surfaces ([`flexure_engine::synthetic`]) so their true curvature is known exactly.
//! It lives in the command line's crate, beside `flexure demo` and `flexure demo-data`, and
//! uses only the engine's public API.
//!
//! Everything here is invented: the basin, horizon names and structures. Coordinates are in
//! WGS 84 / UTM zone 25N (EPSG:32625) and placed over open ocean so no real place is depicted.
//! - `orrimund_shale_top_depth.tif`: depth in metres, north-up 25 m bins; a dome, an anticline
//!   and a syncline on a regional dip, cut by a fault with a null gap, a patch of missing picks,
//!   0.4 m of white picking noise, a mild acquisition footprint (0.2 m stripes with a 4-bin
//!   period across the columns) and 40 picking busts of 5 to 8 m.
//! - `kelvane_marl_twt.tif`: two-way time in ms (average velocity 3200 m/s) on a survey grid
//!   rotated 25 degrees with 25 m x 12.5 m bins, with 0.25 ms of noise.
//! - `kelvane_marl_sectors.tif`: the Kelvane Marl picked on eight azimuth sectors (one band per
//!   sector, 2 x 2 superbins of the survey grid), carrying an invented cos 2phi anisotropy: a
//!   regional fast azimuth of 50 degrees that rotates to 95 degrees in a zone around the
//!   anticline, magnitudes of 2 to 4.5 ms, 0.3 ms of picking noise, the fault gap in every
//!   sector, two sectors missing along the low-fold south-west edge and only three sectors in
//!   one corner.
//! - `kelvane_sector_NNN.sgy`: six azimuth-sector SEG-Y volumes (rev 1, IBM floats, 4 ms) over
//!   a 44 x 36 bin part of the Kelvane survey (inline = 1200 + row, crossline = 3400 + 2 col),
//!   each trace three Ricker reflections (30 Hz) around the Kelvane Marl, shifted by the same
//!   anisotropy field as the sector picks, with white noise of 10% of the peak amplitude.

use flexure_engine::error::{FlexureError, Result};
use flexure_engine::grid::GridGeometry;
use flexure_engine::io::segy::{
    write_segy, ByteOrder, SampleFormat, SegyHeaderBytes, SegyTrace, SegyWriteSpec, TextEncoding,
};
use flexure_engine::io::{write_float_geotiff, BandOut};
use flexure_engine::jobs::{
    AnisotropyJob, AnisotropyReport, CurvatureJob, CurvatureReport, PlanJob, PlanReport, Progress,
    RenderJob, RenderReport, SectorTimesJob, SectorTimesReport, StagesJob, StagesReport,
    WeightSource, WellInput, WindowStudyJob, WindowStudyReport,
};
use flexure_engine::stats::circular::axial_angle;
use flexure_engine::stats::SeededNoise;
use flexure_engine::surface::curvature::attribute_by_id;
use flexure_engine::surface::horizon::{Domain, VelocitySource};
use flexure_engine::synthetic::{ricker_samples, Shape, Surface};
use flexure_engine::wells::trajectory::MdUnit;
use gdal::spatial_ref::SpatialRef;
use ndarray::Array2;
use std::path::{Path, PathBuf};

/// EPSG code of the demo CRS (WGS 84 / UTM zone 25N).
pub const DEMO_EPSG: u32 = 32625;

/// The demo's job file in the demo folder (run by `flexure demo`).
pub const DEMO_JOB_FILE: &str = "tessary_demo.toml";

/// Windows the demo runs.
pub const DEMO_WINDOWS: [usize; 4] = [3, 5, 9, 17];

/// One demo horizon: its file, truth and how it was picked.
#[derive(Clone, Debug)]
pub struct DemoHorizon {
    /// File name in the demo folder.
    pub file: &'static str,
    /// Invented horizon name.
    pub name: &'static str,
    /// Domain of the stored values.
    pub domain: Domain,
    /// Grid the horizon is picked on.
    pub geometry: GridGeometry,
    /// True depth surface in metres, positive down.
    pub surface: Surface,
    /// Average velocity (m/s) of a time horizon.
    pub velocity: Option<f64>,
    /// Standard deviation of the picking noise, in the stored unit.
    pub noise_sd: f64,
    /// Cells closer than this (m) to a fault trace are null (the fault gap).
    pub fault_gap: f64,
    /// Rectangles of missing picks, (col0, row0, col1, row1) exclusive ends.
    pub gaps: Vec<(usize, usize, usize, usize)>,
    /// Acquisition footprint of the noisy version: stripes along the rows, (amplitude in the
    /// stored unit, period in columns).
    pub footprint: Option<(f64, f64)>,
    /// Picking busts of the noisy version: (count, least and largest offset in the stored
    /// unit, either sign), at seeded cells.
    pub busts: (usize, f64, f64),
    /// Seed of the noise.
    pub seed: u64,
}

/// A survey grid of the demo ([`GridGeometry::survey`]) in the demo CRS ([`DEMO_EPSG`]).
pub fn demo_grid(
    origin: (f64, f64),
    column_azimuth: f64,
    bins: (f64, f64),
    size: (usize, usize),
) -> GridGeometry {
    let crs_wkt = SpatialRef::from_epsg(DEMO_EPSG)
        .and_then(|s| s.to_wkt())
        .unwrap_or_default();
    GridGeometry::survey(origin, column_azimuth, bins, size, crs_wkt)
}

/// The demo horizons of the Tessary Basin.
pub fn demo_horizons() -> Vec<DemoHorizon> {
    let fault = Shape::Step {
        origin: (483_500.0, 3_902_500.0),
        azimuth: 160.0,
        throw: 35.0,
    };
    let structures = |shift: (f64, f64)| {
        let at = |x: f64, y: f64| (x + shift.0, y + shift.1);
        vec![
            Shape::Quadratic {
                origin: at(483_000.0, 3_902_500.0),
                coeffs: [0.0, 0.0, 0.0, 0.015, -0.01, 0.0],
            },
            Shape::GaussianDome {
                centre: at(482_000.0, 3_903_200.0),
                amplitude: 55.0,
                sigma: 550.0,
            },
            Shape::GaussianDome {
                centre: at(481_200.0, 3_901_200.0),
                amplitude: 12.0,
                sigma: 180.0,
            },
            Shape::Fold {
                origin: at(484_300.0, 3_901_500.0),
                axis_azimuth: 35.0,
                amplitude: 30.0,
                sigma: 350.0,
            },
            Shape::Fold {
                origin: at(485_300.0, 3_900_700.0),
                axis_azimuth: 35.0,
                amplitude: -22.0,
                sigma: 300.0,
            },
        ]
    };
    let mut upper = structures((0.0, 0.0));
    upper.push(fault.clone());
    let mut lower = structures((150.0, -100.0));
    lower.push(fault);
    vec![
        DemoHorizon {
            file: "orrimund_shale_top_depth.tif",
            name: "Orrimund Shale top",
            domain: Domain::Depth,
            geometry: demo_grid((480_000.0, 3_905_000.0), 90.0, (25.0, 25.0), (240, 200)),
            surface: Surface {
                datum: 2450.0,
                shapes: upper,
            },
            velocity: None,
            noise_sd: 0.4,
            fault_gap: 30.0,
            gaps: vec![(20, 150, 36, 166)],
            footprint: Some((0.2, 4.0)),
            busts: (40, 5.0, 8.0),
            seed: 11,
        },
        DemoHorizon {
            file: "kelvane_marl_twt.tif",
            name: "Kelvane Marl",
            domain: Domain::Time,
            geometry: demo_grid((480_300.0, 3_903_800.0), 115.0, (25.0, 12.5), (180, 300)),
            surface: Surface {
                datum: 3150.0,
                shapes: lower,
            },
            velocity: Some(3200.0),
            noise_sd: 0.25,
            fault_gap: 30.0,
            gaps: vec![],
            footprint: None,
            busts: (0, 0.0, 0.0),
            seed: 12,
        },
    ]
}

impl DemoHorizon {
    /// Stored values (depth m or two-way time ms), with nulls in fault gaps and pick gaps and,
    /// if `noise`, the seeded picking noise, the footprint stripes and the busts.
    pub fn values(&self, noise: bool) -> Array2<f64> {
        let g = &self.geometry;
        let mut rng = SeededNoise::new(self.seed);
        let to_stored = |z: f64| match self.velocity {
            Some(v) => 2000.0 * z / v,
            None => z,
        };
        let mut values = Array2::from_shape_fn((g.rows, g.cols), |(r, c)| {
            let (x, y) = g.cell_centre(c, r);
            let jitter = rng.gaussian() * self.noise_sd;
            let in_gap = self
                .gaps
                .iter()
                .any(|&(c0, r0, c1, r1)| (c0..c1).contains(&c) && (r0..r1).contains(&r));
            if in_gap || self.surface.fault_distance(x, y) < self.fault_gap {
                f64::NAN
            } else {
                let stripes = self.footprint.map_or(0.0, |(amplitude, period)| {
                    amplitude * (2.0 * std::f64::consts::PI * c as f64 / period).cos()
                });
                to_stored(self.surface.eval(x, y).z) + if noise { jitter + stripes } else { 0.0 }
            }
        });
        if noise {
            for (r, c, offset) in self.bust_cells() {
                if values[(r, c)].is_finite() {
                    values[(r, c)] += offset;
                }
            }
        }
        values
    }

    /// The busts of the noisy version: (row, column, offset), seeded apart from the noise.
    pub fn bust_cells(&self) -> Vec<(usize, usize, f64)> {
        let g = &self.geometry;
        let mut rng = SeededNoise::new(self.seed + 1000);
        let (count, least, largest) = self.busts;
        (0..count)
            .map(|_| {
                let r = ((rng.uniform() * g.rows as f64) as usize).min(g.rows - 1);
                let c = ((rng.uniform() * g.cols as f64) as usize).min(g.cols - 1);
                let size = least + (largest - least) * rng.uniform();
                let sign = if rng.uniform() < 0.5 { -1.0 } else { 1.0 };
                (r, c, sign * size)
            })
            .collect()
    }
}

/// The demo's azimuth-sector picks: one horizon picked on each sector, with a known
/// anisotropy field.
#[derive(Clone, Debug)]
pub struct DemoSectors {
    /// File name in the demo folder (one band per sector).
    pub file: &'static str,
    /// The horizon the sectors pick.
    pub horizon: DemoHorizon,
    /// Superbin grid of the sector picks.
    pub geometry: GridGeometry,
    /// Sector-centre azimuths, degrees from grid north.
    pub azimuths: Vec<f64>,
    /// Standard deviation of the picking noise, ms.
    pub noise_sd: f64,
    /// Seed of the noise.
    pub seed: u64,
}

/// The sector picks of the Kelvane Marl.
pub fn demo_sectors() -> DemoSectors {
    let horizon = demo_horizons().remove(1);
    DemoSectors {
        file: "kelvane_marl_sectors.tif",
        geometry: demo_grid((480_300.0, 3_903_800.0), 115.0, (50.0, 25.0), (90, 150)),
        horizon,
        azimuths: (0..8).map(|k| 11.25 + 22.5 * k as f64).collect(),
        noise_sd: 0.3,
        seed: 13,
    }
}

impl DemoSectors {
    /// True anisotropy at map point (x, y): (magnitude B in ms, fast azimuth in degrees from
    /// grid north, 0..180).
    pub fn truth(&self, x: f64, y: f64) -> (f64, f64) {
        let near = |cx: f64, cy: f64, sigma: f64| {
            (-((x - cx).powi(2) + (y - cy).powi(2)) / (2.0 * sigma * sigma)).exp()
        };
        let rotation = 45.0 * near(484_450.0, 3_901_400.0, 700.0);
        let magnitude = 2.0 + 2.5 * near(483_000.0, 3_902_000.0, 1200.0);
        (magnitude, (50.0 + rotation).rem_euclid(180.0))
    }

    /// Sector `k` is missing at bin (`col`, `row`): two sectors along the first columns (low
    /// fold) and all but three in a corner.
    fn missing(&self, k: usize, col: usize, row: usize) -> bool {
        let edge = col < 8 && (k == 0 || k == 7);
        let corner = col >= self.geometry.cols - 10 && row < 12 && !k.is_multiple_of(3);
        edge || corner
    }

    /// Times (ms) of every sector, in sector order; with `noise`, the seeded picking noise.
    pub fn values(&self, noise: bool) -> Vec<Array2<f64>> {
        let g = &self.geometry;
        let h = &self.horizon;
        let mut rng = SeededNoise::new(self.seed);
        let velocity = h.velocity.unwrap_or(1.0);
        self.azimuths
            .iter()
            .enumerate()
            .map(|(k, &phi)| {
                Array2::from_shape_fn((g.rows, g.cols), |(r, c)| {
                    let (x, y) = g.cell_centre(c, r);
                    let jitter = rng.gaussian() * self.noise_sd;
                    if self.missing(k, c, r) || h.surface.fault_distance(x, y) < 2.0 * h.fault_gap {
                        return f64::NAN;
                    }
                    let (b, fast) = self.truth(x, y);
                    let slow = fast + 90.0;
                    let t0 = 2000.0 * h.surface.eval(x, y).z / velocity;
                    let t = t0 + b * (2.0 * (phi - slow).to_radians()).cos();
                    t + if noise { jitter } else { 0.0 }
                })
            })
            .collect()
    }

    /// Writes the sector raster into `dir`.
    fn write(&self, dir: &Path) -> Result<PathBuf> {
        let path = dir.join(self.file);
        let names: Vec<String> = self
            .azimuths
            .iter()
            .map(|a| format!("sector {a:06.2} deg"))
            .collect();
        let bands: Vec<BandOut> = self
            .values(true)
            .into_iter()
            .zip(&names)
            .map(|(v, name)| BandOut {
                description: name,
                unit: "ms",
                values: v.mapv(|t| t as f32),
            })
            .collect();
        write_float_geotiff(&path, &self.geometry, &bands, &demo_metadata())?;
        Ok(path)
    }
}

/// The demo's azimuth-sectored seismic: one SEG-Y volume per sector over part of the Kelvane
/// Marl survey, whose reflections carry the anisotropy field of [`DemoSectors::truth`].
#[derive(Clone, Debug)]
pub struct DemoSeismic {
    /// The horizon the volumes image (its lattice, and its surface for the event times).
    pub horizon: DemoHorizon,
    /// The anisotropy field ([`DemoSectors::truth`]).
    pub field: DemoSectors,
    /// Sector-centre azimuths, degrees from grid north.
    pub azimuths: Vec<f64>,
    /// First column and row of the horizon grid the volumes cover, and their size.
    pub area: (usize, usize, usize, usize),
    /// Sample interval, microseconds.
    pub interval_us: u16,
    /// Peak frequency of the Ricker wavelets, Hz.
    pub peak_hz: f64,
    /// Standard deviation of the white noise, as a share of the peak amplitude.
    pub noise: f64,
    /// Seed of the noise.
    pub seed: u64,
}

/// The Kelvane Marl's sector volumes.
pub fn demo_seismic() -> DemoSeismic {
    DemoSeismic {
        horizon: demo_horizons().remove(1),
        field: demo_sectors(),
        azimuths: (0..6).map(|k| 15.0 + 30.0 * k as f64).collect(),
        area: (110, 14, 44, 36),
        interval_us: 4000,
        peak_hz: 30.0,
        noise: 0.1,
        seed: 14,
    }
}

impl DemoSeismic {
    /// File name of sector `k`'s volume.
    pub fn file(&self, k: usize) -> String {
        format!("kelvane_sector_{:03.0}.sgy", self.azimuths[k])
    }

    /// Every volume's file name, in sector order.
    pub fn files(&self) -> Vec<String> {
        (0..self.azimuths.len()).map(|k| self.file(k)).collect()
    }

    /// Two-way time (ms) of the noise-free Kelvane Marl at (x, y).
    fn twt(&self, x: f64, y: f64) -> f64 {
        2000.0 * self.horizon.surface.eval(x, y).z / self.horizon.velocity.unwrap_or(1.0)
    }

    /// The horizon cells of the volumes, row by row.
    fn cells(&self) -> impl Iterator<Item = (usize, usize)> {
        let (c0, r0, cols, rows) = self.area;
        (r0..r0 + rows).flat_map(move |r| (c0..c0 + cols).map(move |c| (c, r)))
    }

    /// First sample time (ms) and sample count covering the area's reflections with 160 ms to
    /// spare on both sides.
    fn time_axis(&self) -> (i16, usize) {
        let g = &self.horizon.geometry;
        let times = self.cells().map(|(c, r)| {
            let (x, y) = g.cell_centre(c, r);
            self.twt(x, y)
        });
        let (lo, hi) = times.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), t| {
            (lo.min(t), hi.max(t))
        });
        let dt = f64::from(self.interval_us) / 1000.0;
        let first = ((lo - 160.0) / 100.0).floor() * 100.0;
        (first as i16, ((hi + 160.0 - first) / dt).ceil() as usize)
    }

    /// Writes every sector volume into `dir`: at each bin reflections 40 ms above (0.5), at
    /// (1.0) and 50 ms below (-0.7) the Kelvane Marl, all shifted by `B cos 2(phi - slow)`.
    fn write(&self, dir: &Path) -> Result<Vec<PathBuf>> {
        let g = &self.horizon.geometry;
        let (delay, samples) = self.time_axis();
        let dt = f64::from(self.interval_us) / 1000.0;
        let first = (f64::from(delay) / dt).round() as isize;
        let mut rng = SeededNoise::new(self.seed);
        self.azimuths
            .iter()
            .enumerate()
            .map(|(k, &phi)| {
                let spec = SegyWriteSpec {
                    revision: 1,
                    byte_order: ByteOrder::Big,
                    format: SampleFormat::Ibm,
                    text_encoding: TextEncoding::Ebcdic,
                    text: vec![
                        format!("C 1 TESSARY 3D (INVENTED DEMO) AZIMUTH SECTOR {phi:.0} DEG"),
                        "C 2 KELVANE MARL WINDOW, SYNTHETIC RICKER REFLECTIONS, NOT REAL DATA"
                            .into(),
                        "C 3 INLINE BYTE 189, CROSSLINE 193, CDP X 181, CDP Y 185, SCALAR -100"
                            .into(),
                    ],
                    sample_interval_us: self.interval_us,
                    samples,
                    delay_ms: delay,
                    header_bytes: SegyHeaderBytes::default(),
                    coordinate_scalar: -100,
                };
                let traces: Vec<(i32, i32, f64, f64, Vec<f32>)> = self
                    .cells()
                    .map(|(c, r)| {
                        let (x, y) = g.cell_centre(c, r);
                        let (b, fast) = self.field.truth(x, y);
                        let shift = b * (2.0 * (phi - fast - 90.0).to_radians()).cos();
                        let t = self.twt(x, y) + shift;
                        let events = [(t - 40.0, 0.5), (t, 1.0), (t + 50.0, -0.7)];
                        let mut v = ricker_samples(first, samples, dt, self.peak_hz, &events);
                        for s in &mut v {
                            *s += (self.noise * rng.gaussian()) as f32;
                        }
                        (1200 + r as i32, 3400 + 2 * c as i32, x, y, v)
                    })
                    .collect();
                let path = dir.join(self.file(k));
                let traces = traces.iter().map(|(il, xl, x, y, v)| SegyTrace {
                    inline: *il,
                    crossline: *xl,
                    x: *x,
                    y: *y,
                    samples: v,
                });
                write_segy(&path, &spec, traces)?;
                Ok(path)
            })
            .collect()
    }
}

fn demo_metadata() -> Vec<(String, String)> {
    vec![(
        "FLEXURE_DEMO".to_string(),
        "invented Tessary Basin scenario".to_string(),
    )]
}

/// The Kelvane Marl as an interpretation package would export it: one line per bin with the
/// invented Tessary 3D survey's inline and crossline numbers (inline = 1200 + row, crossline =
/// 3400 + 2 col: rows are inlines), CDP coordinates to the centimetre and two-way time in ms
/// to 0.1 microsecond; the fault gap is written as the sentinel -999.25 (declared to flexure
/// with `--nodata -999.25`).
pub const DEMO_POINT_EXPORT: &str = "kelvane_marl_twt_points.txt";

/// Null sentinel of the demo point export.
pub const DEMO_POINT_NODATA: f64 = -999.25;

/// Text of [`DEMO_POINT_EXPORT`], from the stored float32 times of the Kelvane Marl.
pub fn demo_point_export() -> String {
    let h = demo_horizons().remove(1);
    let g = &h.geometry;
    let values = h.values(true).mapv(|v| v as f32);
    let mut text = String::from(
        "# Tessary 3D (invented survey), horizon Kelvane Marl, two-way time\n\
         # CRS: WGS 84 / UTM zone 25N (EPSG:32625); fault gap written as -999.25\n\
         Inline  Xline  CDP_X  CDP_Y  TWT(ms)\n",
    );
    for ((r, c), &t) in values.indexed_iter() {
        let (x, y) = g.cell_centre(c, r);
        let t = if t.is_finite() {
            format!("{t:.4}")
        } else {
            format!("{DEMO_POINT_NODATA}")
        };
        text += &format!("{} {} {x:.2} {y:.2} {t}\n", 1200 + r, 3400 + 2 * c);
    }
    text
}

/// Writes the demo horizons and sector picks into `dir` (the shipped `demo_horizons/` is made
/// this way).
pub fn write_demo_data(dir: &Path) -> Result<Vec<PathBuf>> {
    std::fs::create_dir_all(dir).map_err(|e| FlexureError::write(dir, e))?;
    let mut written = demo_horizons()
        .iter()
        .map(|h| {
            let path = dir.join(h.file);
            let unit = if h.domain == Domain::Time { "ms" } else { "m" };
            let band = BandOut {
                description: h.name,
                unit,
                values: h.values(true).mapv(|v| v as f32),
            };
            write_float_geotiff(&path, &h.geometry, &[band], &demo_metadata())?;
            Ok(path)
        })
        .collect::<Result<Vec<_>>>()?;
    written.push(demo_sectors().write(dir)?);
    written.extend(demo_seismic().write(dir)?);
    let points = dir.join(DEMO_POINT_EXPORT);
    std::fs::write(&points, demo_point_export()).map_err(|e| FlexureError::write(&points, e))?;
    written.push(points);
    let tables = [
        (DEMO_COMPLETIONS.to_string(), demo_completions()),
        (DEMO_PRODUCTION.to_string(), demo_production()),
    ];
    for (name, text) in demo_wells()
        .iter()
        .flat_map(|w| {
            [
                (w.well_file(), w.well_csv()),
                (w.stages_file(), w.stages_csv()),
            ]
        })
        .chain(tables)
    {
        let path = dir.join(name);
        std::fs::write(&path, text).map_err(|e| FlexureError::write(&path, e))?;
        written.push(path);
    }
    Ok(written)
}

/// The curvature job the demo runs on one horizon in `data_dir`, writing into `out_dir`.
pub fn demo_curvature_job(h: &DemoHorizon, data_dir: &Path, out_dir: &Path) -> CurvatureJob {
    let mut job = CurvatureJob::new(
        data_dir.join(h.file),
        out_dir.join("curvature"),
        DEMO_WINDOWS.to_vec(),
    );
    // The domain (depth or time) comes from the unit each demo file declares.
    if let Some(v) = h.velocity {
        job.horizon.velocity = VelocitySource::Constant(v);
    }
    job
}

/// The curvature job the demo runs on the Kelvane Marl point export ([`DEMO_POINT_EXPORT`]):
/// read onto its inline/crossline lattice with the demo CRS and the export's null sentinel.
pub fn demo_point_curvature_job(data_dir: &Path, out_dir: &Path) -> CurvatureJob {
    let h = demo_horizons().remove(1);
    let mut job = demo_curvature_job(&h, data_dir, out_dir);
    job.horizon.path = data_dir.join(DEMO_POINT_EXPORT);
    job.read.crs = Some(format!("EPSG:{DEMO_EPSG}"));
    job.read.nodata = vec![DEMO_POINT_NODATA];
    job
}

/// The anisotropy job the demo runs on the sector picks in `data_dir`: vectors on every third
/// superbin.
pub fn demo_anisotropy_job(
    sectors: &DemoSectors,
    data_dir: &Path,
    out_dir: &Path,
) -> AnisotropyJob {
    let mut job = AnisotropyJob::new(
        vec![data_dir.join(sectors.file)],
        sectors.azimuths.clone(),
        out_dir.join("anisotropy"),
    );
    job.every = 3;
    job
}

/// The sector-times job the demo runs: the Kelvane sector volumes measured along the
/// Kelvane Marl picks, into `out_dir/sector_times`.
pub fn demo_sector_times_job(
    seismic: &DemoSeismic,
    data_dir: &Path,
    out_dir: &Path,
) -> SectorTimesJob {
    SectorTimesJob::new(
        seismic.files().iter().map(|f| data_dir.join(f)).collect(),
        seismic.azimuths.clone(),
        data_dir.join(seismic.horizon.file),
        out_dir.join("sector_times"),
    )
}

/// The anisotropy job on the measured sector shifts, into `out_dir/anisotropy_seismic`: the
/// azimuths from the shift raster's band metadata, the sectors weighted by their correlation
/// quality.
pub fn demo_seismic_anisotropy_job(sector_times: &SectorTimesJob, out_dir: &Path) -> AnisotropyJob {
    let mut job = AnisotropyJob::new(
        vec![sector_times.times_path()],
        Vec::new(),
        out_dir.join("anisotropy_seismic"),
    );
    job.weights = WeightSource::Quality;
    job.every = 2;
    job
}

/// How a demo well's geometry is given.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum DemoWellShape {
    /// A deviation survey: vertical to the kick-off depth, a 90-degree build over
    /// `build_length`, then the lateral; from `wellhead`.
    Survey {
        /// Wellhead (x, y).
        wellhead: (f64, f64),
        /// Kick-off measured depth.
        kick_off: f64,
        /// Measured length of the build.
        build_length: f64,
    },
    /// A path of the lateral only (`md,x,y,tvd`), starting at `heel` with measured depth
    /// `heel_md`, TVD below KB going linearly from `tvd.0` at the heel to `tvd.1` at the toe.
    Path {
        /// Heel (x, y).
        heel: (f64, f64),
        /// Measured depth at the heel.
        heel_md: f64,
        /// TVD below KB at the heel and at the toe.
        tvd: (f64, f64),
    },
}

/// An invented lateral of the demo scenario.
#[derive(Clone, Debug, PartialEq)]
pub struct DemoWell {
    /// Invented well name (also its file stem).
    pub name: &'static str,
    /// Geometry.
    pub shape: DemoWellShape,
    /// Lateral azimuth, degrees from grid north.
    pub azimuth: f64,
    /// Lateral length (m).
    pub lateral: f64,
    /// Stage length (m).
    pub stage_length: f64,
    /// Elevation of the kelly bushing above the depth datum (m).
    pub kb: f64,
}

/// The demo laterals landed near the Kelvane Marl (about 3150 to 3200 m below the datum
/// there): two surveys and one path in different directions.
pub fn demo_wells() -> Vec<DemoWell> {
    vec![
        DemoWell {
            name: "tessary_3h",
            shape: DemoWellShape::Survey {
                wellhead: (480_900.0, 3_902_600.0),
                kick_off: 2800.0,
                build_length: 600.0,
            },
            azimuth: 140.0,
            lateral: 1950.0,
            stage_length: 150.0,
            kb: 28.0,
        },
        DemoWell {
            name: "tessary_5h",
            shape: DemoWellShape::Path {
                heel: (481_000.0, 3_900_900.0),
                heel_md: 3600.0,
                tvd: (3195.0, 3212.0),
            },
            azimuth: 80.0,
            lateral: 1800.0,
            stage_length: 150.0,
            kb: 25.0,
        },
        DemoWell {
            name: "tessary_7h",
            shape: DemoWellShape::Survey {
                wellhead: (483_200.0, 3_901_700.0),
                kick_off: 2900.0,
                build_length: 500.0,
            },
            azimuth: 200.0,
            lateral: 1500.0,
            stage_length: 150.0,
            kb: 31.0,
        },
    ]
}

impl DemoWell {
    /// File name of the well CSV.
    pub fn well_file(&self) -> String {
        format!("{}.csv", self.name)
    }

    /// File name of the stage CSV.
    pub fn stages_file(&self) -> String {
        format!("{}_stages.csv", self.name)
    }

    /// Measured depth at the heel.
    fn heel_md(&self) -> f64 {
        match self.shape {
            DemoWellShape::Survey {
                kick_off,
                build_length,
                ..
            } => kick_off + build_length,
            DemoWellShape::Path { heel_md, .. } => heel_md,
        }
    }

    /// The well CSV text: a survey every 30 m (`md,inc,azi`), or the lateral path every 50 m
    /// (`md,x,y,tvd`, TVD below KB).
    pub fn well_csv(&self) -> String {
        let heel = self.heel_md();
        let total = heel + self.lateral;
        match self.shape {
            DemoWellShape::Survey {
                kick_off,
                build_length,
                ..
            } => {
                let mut text = String::from("md,inc,azi\n");
                let n = (total / 30.0).ceil() as usize;
                for k in 0..=n {
                    let md = (30.0 * k as f64).min(total);
                    let inc = (90.0 * (md - kick_off) / build_length).clamp(0.0, 90.0);
                    text += &format!("{md:.2},{inc:.4},{:.4}\n", self.azimuth);
                }
                text
            }
            DemoWellShape::Path {
                heel: (x0, y0),
                heel_md,
                tvd: (tvd0, tvd1),
            } => {
                let (s, c) = self.azimuth.to_radians().sin_cos();
                let mut text = String::from("md,x,y,tvd\n");
                let n = (self.lateral / 50.0).ceil() as usize;
                for k in 0..=n {
                    let d = (50.0 * k as f64).min(self.lateral);
                    let tvd = tvd0 + (tvd1 - tvd0) * d / self.lateral;
                    text += &format!(
                        "{:.2},{:.3},{:.3},{tvd:.2}\n",
                        heel_md + d,
                        x0 + d * s,
                        y0 + d * c
                    );
                }
                text
            }
        }
    }

    /// The stage CSV text: stages of `stage_length` from 30 m past the heel to the toe.
    pub fn stages_csv(&self) -> String {
        let start = self.heel_md() + 30.0;
        let n = ((self.lateral - 30.0) / self.stage_length).floor() as usize;
        let mut text = String::from("stage,md_top,md_base\n");
        for k in 0..n {
            let top = start + self.stage_length * k as f64;
            text += &format!("{},{top:.2},{:.2}\n", k + 1, top + self.stage_length);
        }
        text
    }
}

/// The demo's completion table: one row per stage of every demo well (invented figures).
pub const DEMO_COMPLETIONS: &str = "tessary_completions.csv";
/// The demo's production table: one row per demo well (invented figures).
pub const DEMO_PRODUCTION: &str = "tessary_production.csv";

/// Text of [`DEMO_COMPLETIONS`]: per stage an invented breakdown pressure, average treating
/// pressure, maximum slurry rate, proppant per metre and shut-in pressure, the rate rising
/// and the pressures falling with the lateral's angle to the regional fast azimuth, plus
/// seeded noise; written as a service company might (semicolons, units in brackets).
pub fn demo_completions() -> String {
    let mut rng = SeededNoise::new(21);
    let mut text = String::from(
        "Well;Stage;Breakdown pressure [MPa];Avg treating pressure [MPa];Max slurry rate [m3/min];Proppant [t/m];ISIP [MPa]\n",
    );
    for w in demo_wells() {
        // The invented completion figures lean on the lateral's acute angle to the invented
        // regional fast azimuth of 50 degrees.
        let angle = axial_angle(w.azimuth, 50.0);
        let stages = w.stages_csv().lines().count() - 1;
        for k in 1..=stages {
            text += &format!(
                "{};{k};{:.1};{:.1};{:.2};{:.2};{:.1}\n",
                w.name,
                66.0 - 0.08 * angle + 2.0 * rng.gaussian(),
                52.0 - 0.05 * angle + 1.5 * rng.gaussian(),
                9.0 + 0.025 * angle + 0.4 * rng.gaussian(),
                1.6 + 0.15 * rng.gaussian(),
                47.0 + 1.5 * rng.gaussian()
            );
        }
    }
    text
}

/// Text of [`DEMO_PRODUCTION`]: an invented 180-day cumulative oil volume per well.
pub fn demo_production() -> String {
    let mut text = String::from("well,cum oil 180 d (m3)\n");
    for (w, volume) in demo_wells().iter().zip([41_500.0, 23_800.0, 19_200.0]) {
        text += &format!("{},{volume:.0}\n", w.name);
    }
    text
}

/// Pad and lateral length of the demo drilling-azimuth scan.
pub const DEMO_PAD: (f64, f64) = (481_600.0, 3_901_700.0);
/// Lateral length of the demo scan (m).
pub const DEMO_PLAN_LATERAL: f64 = 1500.0;

/// The stages job of the demo: every demo well with its KB (metres, as declared), anisotropy
/// of the sector picks, the Kelvane Marl curvature at the map window, and the stand-off from
/// the Kelvane Marl (two-way time with its 3200 m/s velocity).
pub fn demo_stages_job(data_dir: &Path, out_dir: &Path) -> StagesJob {
    let wells = demo_wells()
        .iter()
        .map(|w| {
            let mut input =
                WellInput::new(data_dir.join(w.well_file()), data_dir.join(w.stages_file()));
            input.name = w.name.to_string();
            input.kb = Some(w.kb);
            if let DemoWellShape::Survey { wellhead, .. } = w.shape {
                input.wellhead = Some(wellhead);
            }
            input
        })
        .collect();
    let mut job = StagesJob::new(out_dir.join("anisotropy"), wells, out_dir.join("stages"));
    job.curvature = Some(kelvane_curvature(data_dir, out_dir));
    job.md_unit = Some(MdUnit::Metre);
    job.completions = Some(data_dir.join(DEMO_COMPLETIONS));
    job.production = Some(data_dir.join(DEMO_PRODUCTION));
    job.per_length = true;
    job.horizon = Some(demo_curvature_job(&demo_sectors().horizon, data_dir, out_dir).horizon);
    job
}

/// The drilling-azimuth scan of the demo.
pub fn demo_plan_job(data_dir: &Path, out_dir: &Path) -> PlanJob {
    let mut job = PlanJob::new(
        out_dir.join("anisotropy"),
        DEMO_PAD,
        DEMO_PLAN_LATERAL,
        out_dir.join("plan"),
    );
    job.curvature = Some(kelvane_curvature(data_dir, out_dir));
    job
}

fn kelvane_curvature(data_dir: &Path, out_dir: &Path) -> PathBuf {
    demo_curvature_job(&demo_sectors().horizon, data_dir, out_dir).output_path(DEMO_MAP_WINDOW)
}

/// Windows of the demo's window study.
pub const DEMO_STUDY_WINDOWS: [usize; 8] = [3, 5, 7, 9, 11, 15, 21, 31];

/// The window study of the demo: k_pos of the Orrimund Shale top, with the adaptive map.
pub fn demo_window_study_job(data_dir: &Path, out_dir: &Path) -> WindowStudyJob {
    let h = demo_horizons().remove(0);
    let mut fit = demo_curvature_job(&h, data_dir, out_dir);
    fit.windows = DEMO_STUDY_WINDOWS.to_vec();
    fit.out_dir = out_dir.join("window_study");
    WindowStudyJob {
        fit,
        attribute: attribute_by_id("k_pos").expect("k_pos is an attribute"),
        adaptive: true,
    }
}

/// Attributes the demo draws as quicklooks for every horizon (window [`DEMO_MAP_WINDOW`]).
pub const DEMO_QUICKLOOKS: [&str; 4] = ["k_pos", "k_neg", "shape_index", "dip"];

/// Window of the demo maps.
pub const DEMO_MAP_WINDOW: usize = 9;

/// Contour interval of the demo maps in the horizon's unit: 20 m on the depth horizon, 10 ms
/// on the time horizon.
fn demo_contour_interval(h: &DemoHorizon) -> f64 {
    if h.domain == Domain::Time {
        10.0
    } else {
        20.0
    }
}

/// The render jobs of the demo: north-up quicklooks of the main attributes of every horizon
/// shaded by the horizon itself, with its contours and the demo wells and stage corridors,
/// k_pos of the Kelvane Marl with its anisotropy vectors instead of contours, and the
/// anisotropy magnitude with its vectors; all into `out_dir/maps` (after the stages job).
pub fn demo_render_jobs(data_dir: &Path, out_dir: &Path) -> Vec<RenderJob> {
    let maps = out_dir.join("maps");
    let anisotropy = out_dir.join("anisotropy");
    let stages = out_dir.join("stages");
    let sectors = demo_sectors();
    let mut jobs = Vec::new();
    for h in demo_horizons() {
        let curvature = demo_curvature_job(&h, data_dir, out_dir).output_path(DEMO_MAP_WINDOW);
        let stem = h.file.trim_end_matches(".tif");
        for band in DEMO_QUICKLOOKS {
            let name = format!("{stem}_{band}_w{DEMO_MAP_WINDOW:02}");
            let mut job = RenderJob::new(&curvature, maps.join(format!("{name}.tif")));
            job.band = Some(band.to_string());
            job.shade = Some(data_dir.join(h.file));
            job.png = Some(maps.join(format!("{name}.png")));
            job.north_up = true;
            job.wells = vec![stages.clone()];
            if h.file == sectors.horizon.file && band == "k_pos" {
                job.anisotropy = Some(anisotropy.clone());
            } else {
                job.contour_interval = Some(demo_contour_interval(&h));
            }
            jobs.push(job);
        }
    }
    let mut magnitude = RenderJob::new(
        anisotropy.join("anisotropy.tif"),
        maps.join("kelvane_marl_anisotropy_magnitude.tif"),
    );
    magnitude.band = Some("magnitude".into());
    magnitude.anisotropy = Some(anisotropy);
    magnitude.png = Some(maps.join("kelvane_marl_anisotropy_magnitude.png"));
    magnitude.north_up = true;
    magnitude.wells = vec![stages];
    jobs.push(magnitude);
    jobs
}

/// What the demo wrote.
#[derive(Clone, Debug)]
pub struct DemoReport {
    /// One curvature report per demo horizon.
    pub curvature: Vec<CurvatureReport>,
    /// The anisotropy of the sector picks.
    pub anisotropy: AnisotropyReport,
    /// The sector shifts measured on the demo's sector volumes.
    pub sector_times: SectorTimesReport,
    /// The anisotropy of the measured sector shifts.
    pub seismic_anisotropy: AnisotropyReport,
    /// The maps drawn.
    pub maps: Vec<RenderReport>,
    /// The stage analysis of the demo wells.
    pub stages: StagesReport,
    /// The drilling-azimuth scan.
    pub plan: PlanReport,
    /// The window study.
    pub window_study: WindowStudyReport,
}

/// Runs the demo: curvature at the demo windows on every demo horizon, anisotropy of the
/// sector picks, the demo maps, the stage analysis of the demo wells, one azimuth scan and a
/// window study.
pub fn run_demo(data_dir: &Path, out_dir: &Path, progress: &dyn Progress) -> Result<DemoReport> {
    let horizons = demo_horizons();
    let sectors = demo_sectors();
    let seismic = demo_seismic();
    let seismic_files = seismic.files();
    let well_files: Vec<String> = demo_wells()
        .iter()
        .flat_map(|w| [w.well_file(), w.stages_file()])
        .collect();
    let files = horizons
        .iter()
        .map(|h| h.file)
        .chain([
            sectors.file,
            DEMO_POINT_EXPORT,
            DEMO_COMPLETIONS,
            DEMO_PRODUCTION,
        ])
        .chain(well_files.iter().map(String::as_str))
        .chain(seismic_files.iter().map(String::as_str));
    for file in files {
        if !data_dir.join(file).is_file() {
            return Err(FlexureError::input(
                data_dir.join(file),
                "demo data not found: run from the repository root or give --data DIR",
            ));
        }
    }
    let curvature = horizons
        .iter()
        .map(|h| demo_curvature_job(h, data_dir, out_dir))
        .chain([demo_point_curvature_job(data_dir, out_dir)])
        .map(|job| job.run(progress))
        .collect::<Result<Vec<_>>>()?;
    let anisotropy = demo_anisotropy_job(&sectors, data_dir, out_dir).run()?;
    let sector_times_job = demo_sector_times_job(&seismic, data_dir, out_dir);
    let sector_times = sector_times_job.run(progress)?;
    let seismic_anisotropy = demo_seismic_anisotropy_job(&sector_times_job, out_dir).run()?;
    let window_study = demo_window_study_job(data_dir, out_dir).run()?;
    let stages = demo_stages_job(data_dir, out_dir).run()?;
    let plan = demo_plan_job(data_dir, out_dir).run()?;
    let maps = demo_render_jobs(data_dir, out_dir)
        .iter()
        .map(RenderJob::run)
        .collect::<Result<Vec<_>>>()?;
    Ok(DemoReport {
        window_study,
        curvature,
        anisotropy,
        sector_times,
        seismic_anisotropy,
        maps,
        stages,
        plan,
    })
}
