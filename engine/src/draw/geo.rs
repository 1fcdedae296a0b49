//! Picture work done by GDAL in memory (MEM rasters, OGR Memory layers; no files): a map's cell
//! colours warped onto a north-up picture grid for display (`GDALReprojectImage`, nearest
//! neighbour, so colours are never mixed), and contour lines of a horizon
//! (`GDALContourGenerateEx`, GDAL's marching-squares contour generator).

use crate::error::{FlexureError, Result};
use crate::grid::GridGeometry;
use crate::io::{capture_gdal_messages, gdal_failure, gdal_outcome, take_gdal_messages};
use gdal::cpl::CslStringList;
use gdal::raster::{Buffer, GdalType};
use gdal::vector::{Geometry, LayerAccess, LayerOptions, OGRFieldType, OGRwkbGeometryType};
use gdal::{Dataset, DriverManager};
use ndarray::Array2;

/// The north-up picture grid of `geometry`'s map area: square pixels, axes east and north,
/// covering the bounding box of the grid's four corners with about `long_side` pixels along
/// its longer side.
pub fn north_up_geometry(geometry: &GridGeometry, long_side: f64) -> GridGeometry {
    let g = &geometry.geo_transform;
    let corners = [(0.0, 0.0), (1.0, 0.0), (0.0, 1.0), (1.0, 1.0)].map(|(i, j)| {
        let (c, r) = (i * geometry.cols as f64, j * geometry.rows as f64);
        (g[0] + c * g[1] + r * g[2], g[3] + c * g[4] + r * g[5])
    });
    let (xs, ys) = (corners.map(|p| p.0), corners.map(|p| p.1));
    let min = |v: [f64; 4]| v.iter().copied().fold(f64::INFINITY, f64::min);
    let max = |v: [f64; 4]| v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let (x0, x1, y0, y1) = (min(xs), max(xs), min(ys), max(ys));
    let pixel = (x1 - x0).max(y1 - y0) / long_side;
    GridGeometry {
        cols: (((x1 - x0) / pixel).ceil() as usize).max(1),
        rows: (((y1 - y0) / pixel).ceil() as usize).max(1),
        geo_transform: [x0, pixel, 0.0, y1, 0.0, -pixel],
        ..geometry.clone()
    }
}

/// Straight RGBA `cells` on `geometry` warped by GDAL onto the north-up picture grid `target`
/// (nearest neighbour: each pixel takes the colour of the cell under its centre; outside the
/// grid transparent). Display only: map outputs stay on the survey grid.
pub fn warp_cells(
    cells: &Array2<[u8; 4]>,
    geometry: &GridGeometry,
    target: &GridGeometry,
) -> Result<Array2<[u8; 4]>> {
    capture_gdal_messages();
    take_gdal_messages();
    warp(cells, geometry, target)
        .map_err(|reason| FlexureError::Parameter(format!("north-up picture: {reason}")))
}

fn warp(
    cells: &Array2<[u8; 4]>,
    geometry: &GridGeometry,
    target: &GridGeometry,
) -> std::result::Result<Array2<[u8; 4]>, String> {
    let (rows, cols) = cells.dim();
    let source = mem_raster::<u8>(geometry, 4)?;
    for k in 0..4 {
        let values: Vec<u8> = cells.iter().map(|c| c[k]).collect();
        write_band(&source, k, (cols, rows), values)?;
    }
    let destination = mem_raster::<u8>(target, 4)?;
    // Both datasets without a CRS: GDAL maps pixels through the two geotransforms alone.
    let status = unsafe {
        gdal_sys::GDALReprojectImage(
            source.c_dataset(),
            std::ptr::null(),
            destination.c_dataset(),
            std::ptr::null(),
            gdal_sys::GDALResampleAlg::GRA_NearestNeighbour,
            0.0,
            0.0,
            None,
            std::ptr::null_mut(),
            std::ptr::null_mut(),
        )
    };
    if status != gdal_sys::CPLErr::CE_None {
        return Err(gdal_failure("warp", "GDALReprojectImage failed"));
    }
    let size = (target.cols, target.rows);
    let bands: Vec<Vec<u8>> = (0..4)
        .map(|k| {
            let band = destination
                .rasterband(k + 1)
                .map_err(|e| gdal_failure("band", e))?;
            let buffer = band
                .read_as::<u8>((0, 0), size, size, None)
                .map_err(|e| gdal_failure("read", e))?;
            Ok(buffer.into_shape_and_vec().1)
        })
        .collect::<std::result::Result<_, String>>()?;
    gdal_outcome()?;
    Ok(Array2::from_shape_fn(
        (target.rows, target.cols),
        |(r, c)| {
            let i = r * target.cols + c;
            [bands[0][i], bands[1][i], bands[2][i], bands[3][i]]
        },
    ))
}

/// One contour line: its level (z units) and vertices (CRS units).
#[derive(Clone, Debug, PartialEq)]
pub struct ContourLine {
    /// The value along the line.
    pub level: f64,
    /// Vertices (x, y), CRS units.
    pub points: Vec<(f64, f64)>,
}

/// Contour lines of `z` (NaN nulls) on `geometry` at every multiple of `interval` (z units),
/// from GDAL's contour generator (linear interpolation between cell centres; lines reaching
/// the grid's border are closed at it).
pub fn contour_lines(
    z: &Array2<f64>,
    geometry: &GridGeometry,
    interval: f64,
) -> Result<Vec<ContourLine>> {
    capture_gdal_messages();
    take_gdal_messages();
    contours(z, geometry, interval)
        .map_err(|reason| FlexureError::Parameter(format!("contours: {reason}")))
}

fn contours(
    z: &Array2<f64>,
    geometry: &GridGeometry,
    interval: f64,
) -> std::result::Result<Vec<ContourLine>, String> {
    /// Stands for a null cell in the in-memory raster GDAL contours.
    const NULL: f64 = -1.0e30;
    let (rows, cols) = z.dim();
    let raster = mem_raster::<f64>(geometry, 1)?;
    let values = z
        .iter()
        .map(|v| if v.is_finite() { *v } else { NULL })
        .collect();
    write_band(&raster, 0, (cols, rows), values)?;
    let mut lines_ds = DriverManager::get_driver_by_name("Memory")
        .map_err(|e| gdal_failure("Memory driver", e))?
        .create_vector_only("")
        .map_err(|e| gdal_failure("layer", e))?;
    let layer = lines_ds
        .create_layer(LayerOptions {
            name: "contours",
            ty: OGRwkbGeometryType::wkbLineString,
            ..Default::default()
        })
        .map_err(|e| gdal_failure("layer", e))?;
    layer
        .create_defn_fields(&[
            ("id", OGRFieldType::OFTInteger),
            ("level", OGRFieldType::OFTReal),
        ])
        .map_err(|e| gdal_failure("fields", e))?;
    let mut options = CslStringList::new();
    for (k, v) in [
        ("LEVEL_INTERVAL", interval.to_string()),
        ("NODATA", NULL.to_string()),
        ("ID_FIELD", "0".into()),
        ("ELEV_FIELD", "1".into()),
    ] {
        options
            .set_name_value(k, &v)
            .map_err(|e| gdal_failure("options", e))?;
    }
    let band = raster.rasterband(1).map_err(|e| gdal_failure("band", e))?;
    let status = unsafe {
        gdal_sys::GDALContourGenerateEx(
            band.c_rasterband(),
            layer.c_layer(),
            options.as_ptr(),
            None,
            std::ptr::null_mut(),
        )
    };
    if status != gdal_sys::CPLErr::CE_None {
        return Err(gdal_failure(
            "contour generator",
            "GDALContourGenerateEx failed",
        ));
    }
    let mut layer = lines_ds.layer(0).map_err(|e| gdal_failure("layer", e))?;
    let mut lines = Vec::new();
    for feature in layer.features() {
        let level = feature
            .field_as_double(1)
            .map_err(|e| gdal_failure("level", e))?
            .unwrap_or(f64::NAN);
        if let Some(g) = feature.geometry() {
            lines.push(ContourLine {
                level,
                points: vertices(g),
            });
        }
    }
    gdal_outcome()?;
    Ok(lines)
}

fn vertices(g: &Geometry) -> Vec<(f64, f64)> {
    let mut points = Vec::new();
    g.get_points(&mut points);
    points.into_iter().map(|(x, y, _)| (x, y)).collect()
}

/// An in-memory raster of `bands` bands of `T` on `geometry` (geotransform only, no CRS).
fn mem_raster<T: GdalType>(
    geometry: &GridGeometry,
    bands: usize,
) -> std::result::Result<Dataset, String> {
    let mut ds = DriverManager::get_driver_by_name("MEM")
        .map_err(|e| gdal_failure("MEM driver", e))?
        .create_with_band_type::<T, _>("", geometry.cols, geometry.rows, bands)
        .map_err(|e| gdal_failure("in-memory raster", e))?;
    ds.set_geo_transform(&geometry.geo_transform)
        .map_err(|e| gdal_failure("geotransform", e))?;
    Ok(ds)
}

fn write_band<T: GdalType + Copy>(
    ds: &Dataset,
    index: usize,
    size: (usize, usize),
    values: Vec<T>,
) -> std::result::Result<(), String> {
    let mut band = ds
        .rasterband(index + 1)
        .map_err(|e| gdal_failure("band", e))?;
    band.write((0, 0), size, &mut Buffer::new(size, values))
        .map_err(|e| gdal_failure("write", e))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rotated() -> GridGeometry {
        GridGeometry::survey(
            (1000.0, 5000.0),
            115.0,
            (25.0, 12.5),
            (30, 20),
            String::new(),
        )
    }

    #[test]
    fn north_up_pixels_take_the_cell_under_their_centre() {
        // Each warped pixel must carry the colour of the grid cell its centre falls in,
        // located independently through the inverse geotransform (elementary geometry);
        // pixels within 2% of a cell edge are not checked (either neighbour is right there).
        let g = rotated();
        let cells = Array2::from_shape_fn((g.rows, g.cols), |(r, c)| [r as u8, c as u8, 7, 255]);
        let target = north_up_geometry(&g, 400.0);
        assert_eq!(target.geo_transform[2], 0.0);
        assert_eq!(target.geo_transform[4], 0.0);
        let warped = warp_cells(&cells, &g, &target).unwrap();
        let (mut inside, mut outside) = (0, 0);
        for ((r, c), px) in warped.indexed_iter() {
            let (x, y) = target.cell_centre(c, r);
            let (col, row) = g.map_to_grid(x, y);
            let near_edge = |v: f64| (v - v.round()).abs() < 0.02;
            if near_edge(col) || near_edge(row) {
                continue;
            }
            if col < 0.0 || row < 0.0 || col >= g.cols as f64 || row >= g.rows as f64 {
                assert_eq!(px[3], 0, "pixel ({r}, {c}) outside the grid is transparent");
                outside += 1;
            } else {
                assert_eq!(*px, [row as u8, col as u8, 7, 255], "pixel ({r}, {c})");
                inside += 1;
            }
        }
        assert!(
            inside > 1000 && outside > 1000,
            "{inside} inside, {outside} outside"
        );
    }

    #[test]
    fn contours_of_a_plane_lie_on_its_level_lines() {
        // z = 0.5 x + 0.25 y on a rotated grid: the contour at level L is the straight line
        // 0.5 x + 0.25 y = L (analytic); GDAL interpolates linearly between cell centres, which
        // is exact on a plane. Vertices in the outer half cell (beyond the cell centres) are
        // GDAL's closure of lines at the raster border, not interpolations, and are not checked.
        let g = rotated();
        let z = Array2::from_shape_fn((g.rows, g.cols), |(r, c)| {
            let (x, y) = g.cell_centre(c, r);
            0.5 * (x - 1000.0) + 0.25 * (y - 5000.0)
        });
        let lines = contour_lines(&z, &g, 20.0).unwrap();
        assert!(lines.len() > 5);
        let mut checked = 0;
        for ContourLine { level, points } in &lines {
            assert_eq!(level.rem_euclid(20.0), 0.0, "level {level}");
            for &(x, y) in points {
                let (col, row) = g.map_to_grid(x, y);
                let inside = |v: f64, n: usize| v >= 0.5 - 1e-9 && v <= n as f64 - 0.5 + 1e-9;
                if !(inside(col, g.cols) && inside(row, g.rows)) {
                    continue;
                }
                let v = 0.5 * (x - 1000.0) + 0.25 * (y - 5000.0);
                assert!(
                    (v - level).abs() < 1e-6,
                    "vertex value {v} on contour {level}"
                );
                checked += 1;
            }
        }
        assert!(checked > 100, "{checked} vertices checked");
    }
}
