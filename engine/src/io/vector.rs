//! Vector layers through GDAL's OGR drivers: output line or polygon features with numeric properties, written
//! as an OGC GeoPackage in the grid's own CRS or as RFC 7946 GeoJSON (WGS84 longitude /
//! latitude, reprojected by GDAL/PROJ). Files are staged under a temporary name, read back
//! (feature count) and committed by the caller, as for rasters. Input layers (wells drawn on maps)
//! are read by [`read_features`], reprojected into the grid's CRS.

use crate::error::{FlexureError, Result};
use crate::io::{
    capture_gdal_messages, gdal_failure, gdal_outcome, take_gdal_messages, StagedFile,
};
use gdal::spatial_ref::{AxisMappingStrategy, CoordTransform, SpatialRef};
use gdal::vector::{
    geometry_type_flatten, Feature, Geometry, LayerAccess, LayerOptions, OGRFieldType,
    OGRwkbGeometryType,
};
use gdal::{Dataset, DriverManager};
use std::path::Path;

/// Output encodings of a line layer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum VectorFormat {
    /// OGC GeoPackage, coordinates in the grid's CRS.
    GeoPackage,
    /// RFC 7946 GeoJSON, coordinates reprojected to WGS84 longitude/latitude.
    GeoJson,
}

impl VectorFormat {
    fn driver(self) -> &'static str {
        match self {
            VectorFormat::GeoPackage => "GPKG",
            VectorFormat::GeoJson => "GeoJSON",
        }
    }

    fn layer_options(self) -> &'static [&'static str] {
        match self {
            VectorFormat::GeoPackage => &[],
            VectorFormat::GeoJson => &["RFC7946=YES", "COORDINATE_PRECISION=7"],
        }
    }
}

/// Kind of a numeric property.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FieldKind {
    /// Floating point; NaN is written as null.
    Real,
    /// Integer (the value is rounded).
    Integer,
    /// Text.
    Text,
}

/// One property value of a feature.
#[derive(Clone, Debug, PartialEq)]
pub enum Property {
    /// A number (for real and integer fields; NaN is null).
    Number(f64),
    /// A text (for text fields).
    Text(String),
}

/// Geometry type of a layer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum GeometryKind {
    /// Each feature's points are a line string.
    Line,
    /// Each feature's points are the closed outer ring of a polygon.
    Polygon,
    /// Each feature is the point of its first vertex (written only; the readers take lines
    /// and polygons).
    Point,
}

impl GeometryKind {
    fn ogr(self) -> u32 {
        match self {
            GeometryKind::Line => OGRwkbGeometryType::wkbLineString,
            GeometryKind::Polygon => OGRwkbGeometryType::wkbPolygon,
            GeometryKind::Point => OGRwkbGeometryType::wkbPoint,
        }
    }
}

/// A feature in grid CRS coordinates with one value per layer field.
#[derive(Clone, Debug, PartialEq)]
pub struct VectorFeature {
    /// Vertices (x, y), CRS units: a line, or a closed ring (first point repeated last).
    pub points: Vec<(f64, f64)>,
    /// Property values in the order of the layer's fields.
    pub values: Vec<Property>,
}

/// A layer to write: name, geometry type, fields and features.
pub struct Layer<'a> {
    /// Layer name.
    pub name: &'a str,
    /// Geometry type of every feature.
    pub kind: GeometryKind,
    /// (name, kind) of each property.
    pub fields: &'a [(&'a str, FieldKind)],
    /// The features.
    pub features: &'a [VectorFeature],
}

/// Writes `layer` into a new file at `path` (temporary name; see [`StagedFile`]). `crs_wkt`
/// is the CRS of the feature coordinates.
pub fn stage_features(
    path: &Path,
    format: VectorFormat,
    crs_wkt: &str,
    layer: &Layer,
) -> Result<StagedFile> {
    capture_gdal_messages();
    take_gdal_messages();
    let staged = StagedFile::new(path);
    write_layer(staged.temp(), format, crs_wkt, layer)
        .and_then(|_| verify(staged.temp(), layer.features.len()))
        .map_err(|reason| FlexureError::write(path, reason))?;
    Ok(staged)
}

/// Writes `layer` as `DIR/<layer name>.gpkg` (grid CRS) and `DIR/<layer name>.geojson`
/// (RFC 7946, WGS84), staged.
pub fn stage_both_formats(dir: &Path, crs_wkt: &str, layer: &Layer) -> Result<Vec<StagedFile>> {
    [
        ("gpkg", VectorFormat::GeoPackage),
        ("geojson", VectorFormat::GeoJson),
    ]
    .iter()
    .map(|(ext, f)| {
        stage_features(
            &dir.join(format!("{}.{ext}", layer.name)),
            *f,
            crs_wkt,
            layer,
        )
    })
    .collect()
}

fn write_layer(
    temp: &Path,
    format: VectorFormat,
    crs_wkt: &str,
    layer: &Layer,
) -> std::result::Result<(), String> {
    let mut grid_srs = SpatialRef::from_wkt(crs_wkt).map_err(|e| gdal_failure("CRS", e))?;
    grid_srs.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
    let (srs, transform) = match format {
        VectorFormat::GeoPackage => (grid_srs, None),
        VectorFormat::GeoJson => {
            let mut wgs84 = SpatialRef::from_epsg(4326).map_err(|e| gdal_failure("WGS84", e))?;
            wgs84.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
            let t = CoordTransform::new(&grid_srs, &wgs84)
                .map_err(|e| gdal_failure("reprojection to WGS84", e))?;
            (wgs84, Some(t))
        }
    };
    let driver = DriverManager::get_driver_by_name(format.driver())
        .map_err(|e| gdal_failure("vector driver", e))?;
    let mut ds = driver
        .create_vector_only(temp)
        .map_err(|e| gdal_failure("create", e))?;
    let fill = |ds: &mut Dataset| fill_layer(ds, &srs, transform.as_ref(), format, layer);
    if format == VectorFormat::GeoPackage {
        // One SQLite transaction instead of one per feature.
        let mut txn = ds
            .start_transaction()
            .map_err(|e| gdal_failure("transaction", e))?;
        fill(&mut txn)?;
        txn.commit().map_err(|e| gdal_failure("commit", e))?;
    } else {
        fill(&mut ds)?;
    }
    drop(ds);
    gdal_outcome()
}

fn fill_layer(
    ds: &mut Dataset,
    srs: &SpatialRef,
    transform: Option<&CoordTransform>,
    format: VectorFormat,
    layer: &Layer,
) -> std::result::Result<(), String> {
    let fields = layer.fields;
    let lyr = ds
        .create_layer(LayerOptions {
            name: layer.name,
            srs: Some(srs),
            ty: layer.kind.ogr(),
            options: Some(format.layer_options()),
        })
        .map_err(|e| gdal_failure("layer", e))?;
    let defs: Vec<(&str, u32)> = fields
        .iter()
        .map(|&(name, kind)| {
            let ty = match kind {
                FieldKind::Real => OGRFieldType::OFTReal,
                FieldKind::Integer => OGRFieldType::OFTInteger64,
                FieldKind::Text => OGRFieldType::OFTString,
            };
            (name, ty)
        })
        .collect();
    lyr.create_defn_fields(&defs)
        .map_err(|e| gdal_failure("fields", e))?;
    for f in layer.features {
        let mut line = geometry(layer.kind, &f.points).map_err(|e| gdal_failure("geometry", e))?;
        if let Some(t) = transform {
            line = line
                .transform(t)
                .map_err(|e| gdal_failure("reprojection", e))?;
        }
        let mut feature = Feature::new(lyr.defn()).map_err(|e| gdal_failure("feature", e))?;
        feature
            .set_geometry(line)
            .map_err(|e| gdal_failure("geometry", e))?;
        for (i, (&(_, kind), v)) in fields.iter().zip(&f.values).enumerate() {
            let set = match (kind, v) {
                (_, Property::Number(v)) if !v.is_finite() => feature.set_field_null(i),
                (FieldKind::Integer, Property::Number(v)) => {
                    feature.set_field_integer64(i, v.round() as i64)
                }
                (_, Property::Number(v)) => feature.set_field_double(i, *v),
                (_, Property::Text(t)) => feature.set_field_string(i, t),
            };
            set.map_err(|e| gdal_failure("property", e))?;
        }
        feature
            .create(&lyr)
            .map_err(|e| gdal_failure("feature", e))?;
    }
    Ok(())
}

/// An OGR line string or single-ring polygon through `points`, or the point of the first.
fn geometry(kind: GeometryKind, points: &[(f64, f64)]) -> gdal::errors::Result<Geometry> {
    let ring_kind = match kind {
        GeometryKind::Line => OGRwkbGeometryType::wkbLineString,
        GeometryKind::Polygon => OGRwkbGeometryType::wkbLinearRing,
        GeometryKind::Point => {
            let mut point = Geometry::empty(OGRwkbGeometryType::wkbPoint)?;
            if let Some(&p) = points.first() {
                point.add_point_2d(p);
            }
            return Ok(point);
        }
    };
    let mut ring = Geometry::empty(ring_kind)?;
    for &p in points {
        ring.add_point_2d(p);
    }
    match kind {
        GeometryKind::Line | GeometryKind::Point => Ok(ring),
        GeometryKind::Polygon => {
            let mut polygon = Geometry::empty(OGRwkbGeometryType::wkbPolygon)?;
            polygon.add_geometry(ring)?;
            Ok(polygon)
        }
    }
}

/// A line or polygon feature read from a vector file: its lines (a line string's vertices, or
/// each ring of a polygon, closed) in the requested CRS, and its fields as text.
#[derive(Clone, Debug, PartialEq)]
pub struct ReadFeature {
    /// Whether the feature is a line (or lines) or a polygon (or polygons).
    pub kind: GeometryKind,
    /// Vertices (x, y) of each line or ring, CRS units.
    pub lines: Vec<Vec<(f64, f64)>>,
    /// (field name, value as text) of every non-null field.
    pub fields: Vec<(String, String)>,
}

impl ReadFeature {
    /// The text of field `name`, if set.
    pub fn field(&self, name: &str) -> Option<&str> {
        self.fields
            .iter()
            .find(|(n, _)| n == name)
            .map(|(_, v)| v.as_str())
    }
}

/// Reads every line and polygon feature of every layer of the vector file at `path` (any
/// format OGR opens: GeoPackage, GeoJSON, shapefile, ...), reprojected by GDAL/PROJ from the
/// layer's CRS into `crs_wkt` (a layer without a CRS, or an empty `crs_wkt`, keeps its
/// coordinates as they are).
/// Point features are skipped; a file with no line or polygon is refused.
pub fn read_features(path: &Path, crs_wkt: &str) -> Result<Vec<ReadFeature>> {
    capture_gdal_messages();
    take_gdal_messages();
    read_all(path, crs_wkt).map_err(|reason| FlexureError::input(path, reason))
}

fn read_all(path: &Path, crs_wkt: &str) -> std::result::Result<Vec<ReadFeature>, String> {
    let ds = Dataset::open_ex(
        path,
        gdal::DatasetOptions {
            open_flags: gdal::GdalOpenFlags::GDAL_OF_VECTOR,
            ..Default::default()
        },
    )
    .map_err(|e| {
        gdal_failure(
            "cannot be opened as a vector file (GeoPackage, GeoJSON, ...)",
            e,
        )
    })?;
    // A grid without a CRS takes the coordinates as they are.
    let target = if crs_wkt.trim().is_empty() {
        None
    } else {
        let mut t = SpatialRef::from_wkt(crs_wkt).map_err(|e| gdal_failure("grid CRS", e))?;
        t.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
        Some(t)
    };
    let mut out = Vec::new();
    for mut layer in ds.layers() {
        let transform = match (layer.spatial_ref(), &target) {
            (Some(mut srs), Some(target)) => {
                srs.set_axis_mapping_strategy(AxisMappingStrategy::TraditionalGisOrder);
                Some(CoordTransform::new(&srs, target).map_err(|e| {
                    gdal_failure(
                        &format!("layer {}: no transformation to the grid CRS", layer.name()),
                        e,
                    )
                })?)
            }
            _ => None,
        };
        let names: Vec<String> = layer.defn().fields().map(|f| f.name()).collect();
        for feature in layer.features() {
            let Some(geometry) = feature.geometry() else {
                continue;
            };
            let geometry = match &transform {
                Some(t) => geometry
                    .transform(t)
                    .map_err(|e| gdal_failure("reprojection to the grid CRS", e))?,
                None => geometry.clone(),
            };
            let mut lines = Vec::new();
            let Some(kind) = collect_lines(&geometry, &mut lines) else {
                continue;
            };
            let fields = names
                .iter()
                .enumerate()
                .filter_map(|(i, n)| {
                    feature
                        .field_as_string(i)
                        .ok()
                        .flatten()
                        .map(|v| (n.clone(), v))
                })
                .collect();
            out.push(ReadFeature {
                kind,
                lines,
                fields,
            });
        }
    }
    gdal_outcome()?;
    if out.is_empty() {
        return Err("holds no line or polygon feature to draw".into());
    }
    Ok(out)
}

/// Appends the lines of a (multi) line string or the rings of a (multi) polygon to `lines`;
/// `None` for other geometry types.
fn collect_lines(g: &Geometry, lines: &mut Vec<Vec<(f64, f64)>>) -> Option<GeometryKind> {
    let vertices = |g: &Geometry| -> Vec<(f64, f64)> {
        let mut points = Vec::new();
        g.get_points(&mut points);
        points.into_iter().map(|(x, y, _)| (x, y)).collect()
    };
    match geometry_type_flatten(g.geometry_type()) {
        OGRwkbGeometryType::wkbLineString => {
            lines.push(vertices(g));
            Some(GeometryKind::Line)
        }
        OGRwkbGeometryType::wkbPolygon => {
            lines.extend((0..g.geometry_count()).map(|i| vertices(&g.get_geometry(i))));
            Some(GeometryKind::Polygon)
        }
        OGRwkbGeometryType::wkbMultiLineString
        | OGRwkbGeometryType::wkbMultiPolygon
        | OGRwkbGeometryType::wkbGeometryCollection => {
            let kinds: Vec<GeometryKind> = (0..g.geometry_count())
                .filter_map(|i| collect_lines(&g.get_geometry(i), lines))
                .collect();
            kinds.first().copied()
        }
        _ => None,
    }
}

/// Reopens a written file and checks it holds one layer with the expected feature count.
fn verify(temp: &Path, count: usize) -> std::result::Result<(), String> {
    let ds = Dataset::open(temp).map_err(|e| gdal_failure("read-back", e))?;
    let layer = ds.layer(0).map_err(|e| gdal_failure("read-back", e))?;
    if layer.feature_count() != count as u64 {
        return Err(format!(
            "read-back found {} features, {count} written",
            layer.feature_count()
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn utm25() -> String {
        SpatialRef::from_epsg(32625).unwrap().to_wkt().unwrap()
    }

    fn one_line() -> Vec<VectorFeature> {
        vec![VectorFeature {
            points: vec![(500000.0, 0.0), (500000.0, 1000.0)],
            values: [2.5, f64::NAN, 7.0].map(Property::Number).to_vec(),
        }]
    }

    const FIELDS: [(&str, FieldKind); 3] = [
        ("magnitude", FieldKind::Real),
        ("missing", FieldKind::Real),
        ("count", FieldKind::Integer),
    ];

    fn layer(features: &[VectorFeature]) -> Layer<'_> {
        Layer {
            name: "v",
            kind: GeometryKind::Line,
            fields: &FIELDS,
            features,
        }
    }

    #[test]
    fn polygons_are_written_as_polygons() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("p.geojson");
        let square = vec![VectorFeature {
            points: vec![
                (500000.0, 0.0),
                (500100.0, 0.0),
                (500100.0, 100.0),
                (500000.0, 0.0),
            ],
            values: [1.0, 2.0, 3.0].map(Property::Number).to_vec(),
        }];
        let l = Layer {
            kind: GeometryKind::Polygon,
            ..layer(&square)
        };
        stage_features(&path, VectorFormat::GeoJson, &utm25(), &l)
            .unwrap()
            .commit()
            .unwrap();
        let json: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
        assert_eq!(json["features"][0]["geometry"]["type"], "Polygon");
    }

    /// Writes the test line as `name` in `format` and returns its path.
    fn write(dir: &Path, name: &str, format: VectorFormat) -> std::path::PathBuf {
        let path = dir.join(name);
        stage_features(&path, format, &utm25(), &layer(&one_line()))
            .unwrap()
            .commit()
            .unwrap();
        path
    }

    #[test]
    fn geojson_is_wgs84_lon_lat_with_properties() {
        // UTM zone 25N: central meridian 33 W, false easting 500000 m, false northing 0 on the
        // equator (common practice), so (500000, 0) is longitude -33, latitude 0 exactly.
        let dir = tempfile::tempdir().unwrap();
        let path = write(dir.path(), "v.geojson", VectorFormat::GeoJson);
        let text = std::fs::read_to_string(&path).unwrap();
        let json: serde_json::Value = serde_json::from_str(&text).unwrap();
        let feature = &json["features"][0];
        let start = &feature["geometry"]["coordinates"][0];
        assert!((start[0].as_f64().unwrap() + 33.0).abs() < 1e-7, "{start}");
        assert!(start[1].as_f64().unwrap().abs() < 1e-7, "{start}");
        let end_lat = feature["geometry"]["coordinates"][1][1].as_f64().unwrap();
        // 1 km north on the central meridian is about 1/111 degree of latitude.
        assert!((end_lat - 1000.0 / 110_574.0).abs() < 1e-4, "{end_lat}");
        assert_eq!(feature["properties"]["magnitude"], 2.5);
        assert!(feature["properties"]["missing"].is_null());
        assert_eq!(feature["properties"]["count"], 7);
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn geopackage_keeps_the_grid_crs() {
        let dir = tempfile::tempdir().unwrap();
        let path = write(dir.path(), "v.gpkg", VectorFormat::GeoPackage);
        let ds = Dataset::open(&path).unwrap();
        let layer = ds.layer(0).unwrap();
        assert_eq!(layer.spatial_ref().unwrap().auth_code().unwrap(), 32625);
        assert_eq!(layer.feature_count(), 1);
    }

    #[test]
    fn uncommitted_output_leaves_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("v.gpkg");
        let staged = stage_features(
            &path,
            VectorFormat::GeoPackage,
            &utm25(),
            &layer(&one_line()),
        )
        .unwrap();
        drop(staged);
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
    }
}
