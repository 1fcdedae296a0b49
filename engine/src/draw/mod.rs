//! The one drawing system: [`axis`] (linear axes with round ticks), [`colour`] scales, [`map`]
//! pictures (hillshade, cell colours, the quicklook frame), [`overlay`] (vectors, wells, stage
//! corridors, contours and labels drawn over a map), [`geo`] (north-up warp and contour lines
//! by GDAL in memory), [`figure`] (rose diagrams, sheets, polar charts as SVG and PNG) and
//! [`scatter`] panels, with [`ticks`] at round values. No file I/O.

pub mod axis;
pub mod colour;
pub mod figure;
pub mod geo;
pub mod map;
pub mod overlay;
pub mod scatter;
pub mod ticks;
