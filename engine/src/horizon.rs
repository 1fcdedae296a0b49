//! Horizon domains: turns an interpreted grid into a positive-down depth in CRS length units,
//! the form the window fit and the curvature signs expect.
//!
//! - depth: positive down, in `z_unit` (metres or feet);
//! - time: two-way time in ms, positive down; depth = V t / 2000 with V an average velocity in
//!   m/s (constant or a grid on the same cells) — the standard vertical time-depth conversion
//!   (common practice). Without the conversion, slope-dependent attributes mix ms and metres and
//!   are meaningless;
//! - elevation: positive up, in `z_unit`; negated so that antiforms stay positive.

use crate::error::{FlexureError, Result};
use crate::grid::Grid;
use ndarray::{Array2, Zip};
use std::path::Path;

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

/// Unit of depth or elevation values.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ZUnit {
    /// Metres.
    Metre,
    /// International feet (0.3048 m).
    Foot,
}

impl ZUnit {
    /// Metres per unit.
    pub fn metres(self) -> f64 {
        match self {
            ZUnit::Metre => 1.0,
            ZUnit::Foot => 0.3048,
        }
    }
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

/// Converts `grid` to positive-down depth in its CRS length unit (NaN stays null).
pub fn positive_down_depth(
    grid: &Grid,
    source: &Path,
    domain: Domain,
    z_unit: ZUnit,
    velocity: &Velocity,
) -> Result<Array2<f64>> {
    let per_unit = 1.0 / grid.geometry.metres_per_unit;
    match domain {
        Domain::Depth => Ok(grid.values.mapv(|z| z * z_unit.metres() * per_unit)),
        Domain::Elevation => Ok(grid.values.mapv(|z| -z * z_unit.metres() * per_unit)),
        Domain::Time => time_to_depth(grid, source, velocity, per_unit),
    }
}

fn time_to_depth(
    grid: &Grid,
    source: &Path,
    velocity: &Velocity,
    per_unit: f64,
) -> Result<Array2<f64>> {
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
            Ok(grid.values.mapv(|t| depth(t, *v)))
        }
        Velocity::Grid(vgrid, vpath) => {
            if !vgrid.geometry.same_grid(&grid.geometry) {
                return Err(FlexureError::input(
                    vpath,
                    format!(
                        "velocity grid is not on the horizon's grid ({} vs {}): resample it onto the horizon's cells first",
                        vgrid.geometry.describe(),
                        grid.geometry.describe()
                    ),
                ));
            }
            Ok(Zip::from(&grid.values)
                .and(&vgrid.values)
                .map_collect(|&t, &v| depth(t, v)))
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
            &g,
            Path::new("t.tif"),
            Domain::Time,
            ZUnit::Metre,
            &Velocity::Constant(3000.0),
        )
        .unwrap();
        assert!((d[(0, 0)] - 3000.0 / 0.3048).abs() < 1e-9);
        let err = positive_down_depth(
            &g,
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
        let g = grid(Array2::from_elem((1, 1), 100.0), 1.0);
        let d = positive_down_depth(
            &g,
            Path::new("e.tif"),
            Domain::Elevation,
            ZUnit::Foot,
            &Velocity::None,
        )
        .unwrap();
        assert!((d[(0, 0)] + 30.48).abs() < 1e-12);
    }

    #[test]
    fn velocity_grid_must_share_the_grid() {
        let g = grid(Array2::from_elem((2, 2), 1000.0), 1.0);
        let v = grid(Array2::from_elem((2, 3), 2500.0), 1.0);
        let err = positive_down_depth(
            &g,
            Path::new("t.tif"),
            Domain::Time,
            ZUnit::Metre,
            &Velocity::Grid(v, "v.tif".into()),
        )
        .unwrap_err();
        assert!(err.to_string().starts_with("v.tif:"), "{err}");
    }
}
